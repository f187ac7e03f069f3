import pytest

from service.storage.db import Database
from service.storage.migrate import upgrade_to_head
from tests.support.postgres import fresh_database_url


@pytest.fixture()
def empty_database_url(tmp_path) -> str:
    """The URL of an empty database: a SQLite file in a temporary folder, or (EPOCH_ASSAY_TEST_DATABASE=postgresql)
    a fresh database of the session's PostgreSQL server."""
    return fresh_database_url("storage") or f"sqlite:///{tmp_path / 'storage.sqlite3'}"


@pytest.fixture()
def database(empty_database_url) -> Database:
    """A migrated database (see ``empty_database_url``)."""
    upgrade_to_head(empty_database_url)
    db = Database(empty_database_url)
    yield db
    db.dispose()
