"""Real server and worker processes for tests, on loopback, stopped by the test that starts them.

Access control is on, as in production: :func:`start_service` makes an admin key with the real
command line (``epoch-assay keys create --role admin``) and :meth:`LiveService.client` sends it.
With EPOCH_ASSAY_TEST_DATABASE=postgresql each service gets a fresh database of the session's
PostgreSQL server (``tests.support.postgres``), named by EPOCH_ASSAY_DATABASE_URL in the env of
its API, worker and command-line processes alike.
"""

import os
import subprocess
import sys
import time
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import httpx
from sqlalchemy import Row, create_engine, text

from tests.support.ports import free_port
from tests.support.postgres import fresh_database_url

REPO_ROOT = Path(__file__).resolve().parents[2]


def _spawn(args: list[str], env: dict[str, str], log_path: Path) -> subprocess.Popen:
    log = open(log_path, "ab")
    return subprocess.Popen(
        [sys.executable, "-m", "epoch_assay", *args], cwd=REPO_ROOT, env=env, stdout=log, stderr=subprocess.STDOUT
    )


def run_cli(args: list[str], env: dict[str, str], timeout_s: float = 120.0) -> subprocess.CompletedProcess:
    """``python -m epoch_assay ARGS``; the finished process, whatever its exit code."""
    return subprocess.run(
        [sys.executable, "-m", "epoch_assay", *args],
        cwd=REPO_ROOT,
        env=env,
        capture_output=True,
        text=True,
        timeout=timeout_s,
    )


def stop(process: subprocess.Popen, timeout_s: float = 30.0) -> None:
    if process.poll() is None:
        process.terminate()
        try:
            process.wait(timeout=timeout_s)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait()


@dataclass
class LiveService:
    """An API process and its worker processes sharing one data folder."""

    data_dir: Path
    env: dict[str, str]
    port: int = field(default_factory=free_port)
    api: subprocess.Popen | None = None
    workers: list[subprocess.Popen] = field(default_factory=list)
    admin_token: str | None = None

    @property
    def base_url(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def client(self, token: str | None = "admin", **options: object) -> httpx.Client:
        """An HTTP client for the API, sending ``token`` (default: the admin key; None: no key)."""
        token = self.admin_token if token == "admin" else token
        headers = {"Authorization": f"Bearer {token}"} if token else {}
        return httpx.Client(base_url=self.base_url, headers=headers, **({"timeout": 30.0} | options))

    def create_key(self, role: str, study: str | None = None) -> str:
        """A new key made with ``epoch-assay keys create``; returns its token."""
        args = [
            "keys",
            "create",
            "--role",
            role,
            *(["--study", study] if study else []),
            "--data-dir",
            str(self.data_dir),
        ]
        finished = run_cli(args, self.env)
        if finished.returncode != 0:
            raise RuntimeError(f"keys create failed: {finished.stderr[-2000:]}")
        return finished.stdout.strip().splitlines()[-1]

    def revoke_key(self, token_or_id: str) -> None:
        finished = run_cli(["keys", "revoke", token_or_id, "--data-dir", str(self.data_dir)], self.env)
        if finished.returncode != 0:
            raise RuntimeError(f"keys revoke failed: {finished.stderr[-2000:]}")

    @property
    def database_url(self) -> str:
        """The SQLAlchemy URL of the service's database (its SQLite file, or its PostgreSQL database)."""
        return (
            self.env.get("EPOCH_ASSAY_DATABASE_URL") or f"sqlite:///{(self.data_dir / 'epoch-assay.sqlite3').resolve()}"
        )

    def query(self, statement: str, parameters: Mapping[str, Any] | None = None) -> list[Row]:
        """The rows of one SQL statement run on the service's database (for checks of what is stored)."""
        engine = create_engine(self.database_url)
        try:
            with engine.connect() as connection:
                return list(connection.execute(text(statement), dict(parameters or {})))
        finally:
            engine.dispose()

    @property
    def log_path(self) -> Path:
        return self.data_dir / "processes.log"

    def start_api(self) -> None:
        self.api = _spawn(
            ["api", "--host", "127.0.0.1", "--port", str(self.port), "--data-dir", str(self.data_dir)],
            self.env,
            self.log_path,
        )
        self._wait_healthy()

    def start_worker(self, data_dir: Path | None = None) -> subprocess.Popen:
        """A worker on the service's data folder, or on ``data_dir`` (another host's; share the database URL)."""
        worker = _spawn(["worker", "--data-dir", str(data_dir or self.data_dir)], self.env, self.log_path)
        self.workers.append(worker)
        return worker

    def _wait_healthy(self, timeout_s: float = 60.0) -> None:
        self._wait_for("/healthz", timeout_s)

    def wait_ready(self, timeout_s: float = 60.0) -> None:
        """Wait until /readyz answers 200: the database answers and a worker has been heard from."""
        self._wait_for("/readyz", timeout_s)

    def _wait_for(self, path: str, timeout_s: float) -> None:
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            if self.api.poll() is not None:
                raise RuntimeError(f"the API exited early:\n{self.log_path.read_text()[-4000:]}")
            try:
                if httpx.get(f"{self.base_url}{path}", timeout=1.0).status_code == 200:
                    return
            except httpx.HTTPError:
                pass
            time.sleep(0.1)
        raise RuntimeError(f"{path} did not answer 200 in time:\n{self.log_path.read_text()[-4000:]}")

    def stop(self) -> None:
        for worker in self.workers:
            stop(worker)
        if self.api is not None:
            stop(self.api)


# For servers whose webhooks go to a receiver on this machine (tests/support/receiver.py).
LOOPBACK_NETWORK = "127.0.0.0/8"
# Short waits so retries and redeliveries happen within a test.
TEST_SETTINGS = {
    "LOG_LEVEL": "WARNING",
    "POLL_SECONDS": "0.1",
    "HEARTBEAT_SECONDS": "0.5",
    "RETRY_BACKOFF_SECONDS": "0.1",
    "WEBHOOK_BACKOFF_SECONDS": "0.2",
    "WEBHOOK_MAX_ATTEMPTS": "5",
    "WEBHOOK_TIMEOUT_SECONDS": "5",
}


def start_service(data_dir: Path, n_workers: int = 1, **settings: str) -> LiveService:
    """Start an API and ``n_workers`` workers; settings become EPOCH_ASSAY_* variables.

    Unless ``open="1"`` is among the settings, an admin key is made and kept as ``admin_token``.
    """
    env = {**os.environ, **{f"EPOCH_ASSAY_{key}": value for key, value in TEST_SETTINGS.items()}}
    env.update({f"EPOCH_ASSAY_{key.upper()}": value for key, value in settings.items()})
    if "EPOCH_ASSAY_DATABASE_URL" not in env:
        env.update({"EPOCH_ASSAY_DATABASE_URL": url} if (url := fresh_database_url()) else {})
    service = LiveService(data_dir=data_dir, env=env)
    try:
        service.start_api()
        if env.get("EPOCH_ASSAY_OPEN") != "1":
            service.admin_token = service.create_key("admin")
        for _ in range(n_workers):
            service.start_worker()
        if n_workers:
            service.wait_ready()
    except BaseException:
        service.stop()
        raise
    return service


def wait_for_run(client: httpx.Client, run_id: str, timeout_s: float = 120.0) -> dict:
    """Poll a run until it has succeeded or failed; return its last state."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        state = client.get(f"/v1/runs/{run_id}").json()
        if state["status"] in ("succeeded", "failed"):
            return state
        time.sleep(0.2)
    raise TimeoutError(f"run {run_id} did not finish within {timeout_s} s")
