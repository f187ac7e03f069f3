"""Copy every row of one epoch-assay database into another, empty one (e.g. SQLite to PostgreSQL).

The target is first brought to the newest schema with the project's migrations; the source must be
there already, so both have the same tables and columns. Tables are copied parent before child
(foreign-key order), in batches, inside one transaction on the target: a copy that fails part-way
leaves the target empty. The source is read inside one transaction, which on SQLite (WAL) and on
PostgreSQL is a consistent snapshot; stop the workers first all the same, or jobs they finish after
the snapshot stay unfinished in the copy. Blobs are not in the database and are copied apart.
"""

from dataclasses import dataclass

from sqlalchemy import Connection, Engine, Table, func, insert, make_url, select

from service.storage.db import make_engine
from service.storage.migrate import is_at_head, upgrade_to_head
from service.storage.models import Base

BATCH_ROWS = 500


class CopyRefused(Exception):
    """The copy cannot start: the message says why and what to do."""


@dataclass(frozen=True)
class CopiedTable:
    """How many rows of one table were copied."""

    name: str
    rows: int


def copy_database(source_url: str, target_url: str, batch_rows: int = BATCH_ROWS) -> list[CopiedTable]:
    """Copy every row from the database at ``source_url`` into the empty one at ``target_url``.

    Returns the row count of each table in the order copied. Raises :class:`CopyRefused` when the
    source is behind the newest schema, the two URLs name the same database, or the target already
    holds rows.
    """
    if make_url(source_url) == make_url(target_url):
        raise CopyRefused("the source and the target are the same database; name another target with --to")
    source = make_engine(source_url)
    try:
        if not is_at_head(source, source_url):
            raise CopyRefused("the source database is behind the newest schema; run 'epoch-assay migrate' on it first")
        upgrade_to_head(target_url)
        target = make_engine(target_url)
        try:
            return _copy_tables(source, target, batch_rows)
        finally:
            target.dispose()
    finally:
        source.dispose()


def _copy_tables(source: Engine, target: Engine, batch_rows: int) -> list[CopiedTable]:
    tables = Base.metadata.sorted_tables
    with source.connect() as reading, reading.begin(), target.begin() as writing:
        _refuse_non_empty(writing, tables)
        copied = [CopiedTable(table.name, _copy_table(reading, writing, table, batch_rows)) for table in tables]
    return copied


def _refuse_non_empty(connection: Connection, tables: list[Table]) -> None:
    for table in tables:
        rows = connection.scalar(select(func.count()).select_from(table))
        if rows:
            raise CopyRefused(
                f"the target database already holds {rows} rows in table {table.name}; copy into a new, empty database"
            )


def _copy_table(reading: Connection, writing: Connection, table: Table, batch_rows: int) -> int:
    """Copy ``table`` in primary-key order, ``batch_rows`` rows at a time; returns the row count."""
    rows = 0
    result = reading.execution_options(yield_per=batch_rows).execute(select(table).order_by(*table.primary_key))
    for batch in result.mappings().partitions():
        writing.execute(insert(table), [dict(row) for row in batch])
        rows += len(batch)
    return rows
