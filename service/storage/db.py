"""Database engine and short-lived sessions."""

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from sqlalchemy import Engine, create_engine, event, text
from sqlalchemy.orm import Session, sessionmaker

SQLITE_BUSY_TIMEOUT_MS = 30_000


def make_engine(url: str) -> Engine:
    """An engine for ``url``; SQLite gets WAL mode, a busy timeout and foreign keys."""
    if url.startswith("sqlite"):
        engine = create_engine(url, connect_args={"check_same_thread": False, "timeout": SQLITE_BUSY_TIMEOUT_MS / 1000})
        event.listen(engine, "connect", _configure_sqlite_connection)
        return engine
    return create_engine(url, pool_pre_ping=True)


def _configure_sqlite_connection(dbapi_connection: Any, _record: Any) -> None:
    # WAL lets readers go on while a worker writes; the busy timeout makes concurrent
    # writers wait for the lock instead of failing with "database is locked".
    cursor = dbapi_connection.cursor()
    cursor.execute("PRAGMA journal_mode=WAL")
    cursor.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
    cursor.execute("PRAGMA foreign_keys=ON")
    cursor.execute("PRAGMA synchronous=NORMAL")
    cursor.close()


class Database:
    """An engine and its session factory."""

    def __init__(self, url: str) -> None:
        self.url = url
        self.engine = make_engine(url)
        self._sessions = sessionmaker(self.engine, expire_on_commit=False)

    @contextmanager
    def session(self) -> Iterator[Session]:
        """A session committed on success and rolled back on error."""
        with self._sessions() as session:
            try:
                yield session
                session.commit()
            except BaseException:
                session.rollback()
                raise

    def dispose(self) -> None:
        self.engine.dispose()


def ping(session: Session) -> None:
    """Ask the database a trivial question; SQLAlchemyError when it does not answer."""
    session.execute(text("SELECT 1"))
