"""The database the tests run on: SQLite, or a PostgreSQL server started for the session.

EPOCH_ASSAY_TEST_DATABASE=postgresql starts one server (tests.support.postgres) before the first
test; every live service and storage test then gets a fresh database of it. A server that cannot be
started fails the tests with the reason, it never skips them.
"""

import pytest

from tests.support.postgres import PostgresServer, database_mode, start_session_server, stop_session_server


@pytest.fixture(scope="session", autouse=True)
def postgres_server() -> PostgresServer | None:
    """The session's PostgreSQL server in postgresql mode, None in sqlite mode."""
    if database_mode() == "sqlite":
        yield None
        return
    try:
        yield start_session_server()
    finally:
        stop_session_server()
