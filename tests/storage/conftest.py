import os

import pytest
from sqlalchemy import text

from service.storage.db import Database, make_engine
from service.storage.migrate import upgrade_to_head

# The storage tests run on SQLite, and also on PostgreSQL when this names an empty database
# (e.g. postgresql+psycopg://user@/db?host=/tmp/pg); its public schema is recreated for each test.
POSTGRES_URL = os.environ.get("EPOCH_ASSAY_TEST_POSTGRES_URL")


def _fresh_postgres(url: str) -> None:
    engine = make_engine(url)
    with engine.begin() as connection:
        connection.execute(text("DROP SCHEMA public CASCADE"))
        connection.execute(text("CREATE SCHEMA public"))
    engine.dispose()


@pytest.fixture(params=["sqlite", "postgresql"] if POSTGRES_URL else ["sqlite"])
def database(request, tmp_path) -> Database:
    """A migrated database: a SQLite file in a temporary folder, or the PostgreSQL one named above."""
    if request.param == "sqlite":
        url = f"sqlite:///{tmp_path / 'storage.sqlite3'}"
    else:
        url = POSTGRES_URL
        _fresh_postgres(url)
    upgrade_to_head(url)
    db = Database(url)
    yield db
    db.dispose()
