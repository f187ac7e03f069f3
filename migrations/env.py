"""Alembic environment: runs migrations on the URL set in the Alembic config."""

from alembic import context
from sqlalchemy import text

from service.storage.db import make_engine
from service.storage.models import Base

config = context.config
target_metadata = Base.metadata
# Several API hosts may start at once on one PostgreSQL database: each takes this transaction-scoped
# advisory lock before reading the schema version, so they migrate one after another (the later ones
# find nothing left to do) instead of racing to create the same tables.
MIGRATION_LOCK_KEY = 0x45504F4348  # "EPOCH"


class ForeignKeyViolation(RuntimeError):
    """A migration left rows that refer to missing rows; the migration's transaction is rolled back."""


def run_migrations_offline() -> None:
    context.configure(url=config.get_main_option("sqlalchemy.url"), target_metadata=target_metadata, literal_binds=True)
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    engine = make_engine(config.get_main_option("sqlalchemy.url"))
    with engine.connect() as connection:
        sqlite = connection.dialect.name == "sqlite"
        if sqlite:
            # Alembic's batch mode rebuilds a SQLite table by copy, drop and rename; with foreign keys on,
            # the drop would cascade to (delete) every row referring to the table. SQLite ignores this
            # pragma inside a transaction (sqlite.org/foreignkeys.html, section 5), so it is set before one.
            connection.exec_driver_sql("PRAGMA foreign_keys=OFF")
            connection.commit()
        context.configure(connection=connection, target_metadata=target_metadata, render_as_batch=sqlite)
        with context.begin_transaction():
            if connection.dialect.name == "postgresql":
                connection.execute(text("SELECT pg_advisory_xact_lock(:key)"), {"key": MIGRATION_LOCK_KEY})
            context.run_migrations()
            if sqlite:
                _check_foreign_keys(connection)
        if sqlite:
            connection.exec_driver_sql("PRAGMA foreign_keys=ON")
    engine.dispose()


def _check_foreign_keys(connection) -> None:  # type: ignore[no-untyped-def]
    """Raise when any row refers to a missing row (``PRAGMA foreign_key_check``: table, rowid, parent, key)."""
    violations = connection.exec_driver_sql("PRAGMA foreign_key_check").fetchall()
    if violations:
        tables = sorted({f"{row[0]} → {row[2]}" for row in violations})
        raise ForeignKeyViolation(
            f"the migration left {len(violations)} row(s) referring to missing rows ({', '.join(tables)}); "
            "nothing was changed"
        )


if context.is_offline_mode():
    run_migrations_offline()
else:
    run_migrations_online()
