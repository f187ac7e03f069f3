"""Bring a database to the newest schema with Alembic."""

import importlib.util
from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Engine


def _migrations_dir() -> Path:
    """The installed folder of the epoch_assay.migrations package (the Alembic environment)."""
    spec = importlib.util.find_spec("epoch_assay.migrations")
    if spec is None or not spec.submodule_search_locations:
        raise RuntimeError("epoch_assay.migrations is not installed; reinstall epoch-assay")
    return Path(spec.submodule_search_locations[0])


MIGRATIONS_DIR = _migrations_dir()


def alembic_config(database_url: str) -> Config:
    config = Config()
    config.set_main_option("script_location", str(MIGRATIONS_DIR))
    config.set_main_option("sqlalchemy.url", database_url)
    return config


def upgrade_to_head(database_url: str) -> None:
    """Apply every migration not yet applied (``alembic upgrade heads``)."""
    command.upgrade(alembic_config(database_url), "heads")


def is_at_head(engine: Engine, database_url: str) -> bool:
    """True when the database has every migration applied."""
    heads = set(ScriptDirectory.from_config(alembic_config(database_url)).get_heads())
    with engine.connect() as connection:
        return set(MigrationContext.configure(connection).get_current_heads()) == heads
