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


def run_migrations_offline() -> None:
    context.configure(url=config.get_main_option("sqlalchemy.url"), target_metadata=target_metadata, literal_binds=True)
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    engine = make_engine(config.get_main_option("sqlalchemy.url"))
    with engine.connect() as connection:
        context.configure(
            connection=connection,
            target_metadata=target_metadata,
            render_as_batch=connection.dialect.name == "sqlite",
        )
        with context.begin_transaction():
            if connection.dialect.name == "postgresql":
                connection.execute(text("SELECT pg_advisory_xact_lock(:key)"), {"key": MIGRATION_LOCK_KEY})
            context.run_migrations()
    engine.dispose()


if context.is_offline_mode():
    run_migrations_offline()
else:
    run_migrations_online()
