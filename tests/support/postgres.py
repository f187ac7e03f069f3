"""A real PostgreSQL server for one test session, from Debian's binaries, in a temporary folder.

The server listens on 127.0.0.1 only (its unix socket stays in the folder), trusts every local
connection, and is stopped and its folder removed at the end. initdb refuses to run as root, so
under root the server programs run as the ``postgres`` user and the folder is given to it.

The test database is chosen by ``EPOCH_ASSAY_TEST_DATABASE``: ``sqlite`` (the default) or
``postgresql``; in the latter mode every live service and every storage test gets a fresh
database of the session's server (``create_database``).
"""

import itertools
import os
import pwd
import shutil
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

import psycopg
from psycopg import sql

from tests.support.ports import free_port

MODE_VARIABLE = "EPOCH_ASSAY_TEST_DATABASE"
MODES = ("sqlite", "postgresql")
BIN_GLOB = "/usr/lib/postgresql/*/bin"
SERVER_USER = "postgres"
SUPERUSER = "postgres"
# Durability is pointless for a throw-away server; connections: many live services run at once.
SERVER_OPTIONS = (
    "-c fsync=off -c synchronous_commit=off -c full_page_writes=off -c max_connections=300 -c shared_buffers=64MB"
)
START_TIMEOUT_S = 60


class PostgresUnavailable(RuntimeError):
    """The tests were asked to run on PostgreSQL and no server could be started."""


def database_mode() -> str:
    """``sqlite`` or ``postgresql``, from EPOCH_ASSAY_TEST_DATABASE."""
    mode = os.environ.get(MODE_VARIABLE, "sqlite").strip().lower() or "sqlite"
    if mode not in MODES:
        raise PostgresUnavailable(f"{MODE_VARIABLE}={mode!r}: use one of {', '.join(MODES)}")
    return mode


def newest_bin_dir() -> Path:
    """The bin folder of the newest PostgreSQL under /usr/lib/postgresql that has initdb, pg_ctl and postgres."""
    candidates = [
        Path(folder)
        for folder in Path("/").glob(BIN_GLOB.lstrip("/"))
        if all((Path(folder) / program).is_file() for program in ("initdb", "pg_ctl", "postgres"))
    ]
    if not candidates:
        raise PostgresUnavailable(
            f"{MODE_VARIABLE}=postgresql but no PostgreSQL server programs in {BIN_GLOB}: "
            "install Debian's package (apt-get install -y postgresql) or run `make test`, which does"
        )
    return max(candidates, key=lambda folder: _version_key(folder.parent.name))


def _version_key(name: str) -> tuple[int, ...]:
    return tuple(int(part) for part in name.split(".") if part.isdigit())


@dataclass
class PostgresServer:
    """A running server: its folder, port and programs."""

    folder: Path
    port: int
    bin_dir: Path
    run_as: str | None
    _names = itertools.count(1)

    @property
    def data_dir(self) -> Path:
        return self.folder / "data"

    @property
    def log_path(self) -> Path:
        return self.folder / "server.log"

    def url(self, database: str) -> str:
        """The SQLAlchemy URL of ``database`` on this server."""
        return f"postgresql+psycopg://{SUPERUSER}@127.0.0.1:{self.port}/{database}"

    def create_database(self, prefix: str = "test") -> str:
        """A new empty database with a name unique in this session; its SQLAlchemy URL."""
        name = f"{prefix}_{os.getpid()}_{next(self._names)}"
        with psycopg.connect(
            host="127.0.0.1", port=self.port, user=SUPERUSER, dbname="postgres", autocommit=True
        ) as connection:
            connection.execute(sql.SQL("CREATE DATABASE {}").format(sql.Identifier(name)))
        return self.url(name)

    def _program(self, name: str, *args: str, timeout_s: float = START_TIMEOUT_S) -> None:
        finished = subprocess.run(
            [str(self.bin_dir / name), *args],
            cwd=self.folder,
            user=self.run_as,
            capture_output=True,
            text=True,
            timeout=timeout_s,
        )
        if finished.returncode != 0:
            log = self.log_path.read_text()[-2000:] if self.log_path.is_file() else ""
            raise PostgresUnavailable(f"{name} {' '.join(args)} failed:\n{finished.stdout}{finished.stderr}{log}")

    def stop(self) -> None:
        """Stop the server (fast shutdown, then immediate) and remove its folder."""
        try:
            if (self.data_dir / "postmaster.pid").exists():
                try:
                    self._program("pg_ctl", "stop", "-D", str(self.data_dir), "-m", "fast", "-w")
                except (PostgresUnavailable, subprocess.TimeoutExpired):
                    self._program("pg_ctl", "stop", "-D", str(self.data_dir), "-m", "immediate", "-w")
        finally:
            shutil.rmtree(self.folder, ignore_errors=True)


def start_server() -> PostgresServer:
    """initdb a cluster in a new folder under /tmp and start it on a free loopback port."""
    bin_dir = newest_bin_dir()
    run_as = _server_user()
    folder = Path(tempfile.mkdtemp(prefix="epoch-assay-pg-", dir="/tmp"))
    if run_as is not None:
        entry = pwd.getpwnam(run_as)
        os.chown(folder, entry.pw_uid, entry.pw_gid)
    server = PostgresServer(folder=folder, port=free_port(), bin_dir=bin_dir, run_as=run_as)
    try:
        server._program(
            "initdb",
            "-D",
            str(server.data_dir),
            "--auth=trust",
            f"--username={SUPERUSER}",
            "--encoding=UTF8",
            "--locale=C",
            "--no-sync",
        )
        server._program(
            "pg_ctl",
            "start",
            "-D",
            str(server.data_dir),
            "-l",
            str(server.log_path),
            "-w",
            "-t",
            str(START_TIMEOUT_S),
            "-o",
            f"-c listen_addresses=127.0.0.1 -p {server.port} -k {folder} {SERVER_OPTIONS}",
        )
    except BaseException:
        server.stop()
        raise
    return server


_session_server: PostgresServer | None = None


def start_session_server() -> PostgresServer:
    """Start the server that :func:`fresh_database_url` hands databases of (once per test session)."""
    global _session_server
    if _session_server is None:
        _session_server = start_server()
    return _session_server


def stop_session_server() -> None:
    global _session_server
    if _session_server is not None:
        _session_server.stop()
        _session_server = None


def fresh_database_url(prefix: str = "test") -> str | None:
    """A new empty database of the session's server in postgresql mode; None in sqlite mode."""
    if database_mode() == "sqlite":
        return None
    if _session_server is None:
        raise PostgresUnavailable(
            f"{MODE_VARIABLE}=postgresql but the session's server was not started (tests/conftest.py starts it)"
        )
    return _session_server.create_database(prefix)


def _server_user() -> str | None:
    """The user the server programs run as: ``postgres`` under root (initdb refuses root), else None (oneself)."""
    if os.geteuid() != 0:
        return None
    try:
        pwd.getpwnam(SERVER_USER)
    except KeyError:
        raise PostgresUnavailable(
            f"running as root, and there is no {SERVER_USER!r} user to run PostgreSQL as (initdb refuses root): "
            "Debian's postgresql package creates it"
        ) from None
    return SERVER_USER
