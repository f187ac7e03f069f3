"""SQLite migrations keep every row: batch rebuilds run with foreign keys off, checked after."""

from datetime import UTC, datetime

import pytest
from alembic import command
from alembic.script import ScriptDirectory
from sqlalchemy import JSON, Boolean, DateTime, Float, Integer, LargeBinary, create_engine, func, inspect, select

from service.storage.migrate import alembic_config, upgrade_to_head
from service.storage.models import Base, UTCDateTime


def _value(table_name: str, column) -> object:
    kind = column.type
    if isinstance(kind, JSON):
        return [] if column.name in ("ch_names", "ch_types", "events", "log") else {}
    if isinstance(kind, Boolean):
        return False
    if isinstance(kind, Integer):
        return 1
    if isinstance(kind, Float):
        return 1.0
    if isinstance(kind, UTCDateTime | DateTime):
        return datetime(2026, 1, 1, tzinfo=UTC)
    if isinstance(kind, LargeBinary):
        return b"\x89PNG"
    return f"{table_name}-{column.name}"[: getattr(kind, "length", None) or 200]


def _fill_every_table(url: str) -> None:
    """One row in every table, each foreign key pointing at the row of its parent table."""
    engine = create_engine(url)
    with engine.begin() as connection:
        for table in Base.metadata.sorted_tables:
            row = {}
            for column in table.columns:
                foreign = next(iter(column.foreign_keys), None)
                if foreign is not None:
                    parent = foreign.column
                    row[column.name] = _value(parent.table.name, parent)
                else:
                    row[column.name] = _value(table.name, column)
            connection.execute(table.insert().values(**row))
    engine.dispose()


def _counts(url: str) -> dict[str, int]:
    engine = create_engine(url)
    with engine.connect() as connection:
        names = [name for name in inspect(connection).get_table_names() if name != "alembic_version"]
        counts = {
            name: connection.execute(select(func.count()).select_from(Base.metadata.tables[name])).scalar_one()
            for name in names
            if name in Base.metadata.tables
        }
    engine.dispose()
    return counts


@pytest.fixture()
def filled(tmp_path) -> str:
    url = f"sqlite:///{tmp_path / 'roundtrip.sqlite3'}"
    upgrade_to_head(url)
    _fill_every_table(url)
    return url


def test_every_table_is_filled_at_head(filled):
    assert _counts(filled) == dict.fromkeys(Base.metadata.tables, 1)


def test_downgrade_to_the_first_revision_and_upgrade_to_head_keeps_every_row_of_the_first_schema(filled):
    config = alembic_config(filled)
    first = ScriptDirectory.from_config(config).get_base()
    command.downgrade(config, first)
    at_first = _counts(filled)
    assert at_first == dict.fromkeys(at_first, 1)  # nothing lost on the way down (cascades would delete rows)
    command.upgrade(config, "heads")
    after = _counts(filled)
    assert {name: after[name] for name in at_first} == at_first
