"""`epoch-assay serve`: its embedded worker gets secrets through the environment and is started again when it dies."""

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pytest

from tests.service.api.helpers import SCORING, run_and_wait, upload
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import REPO_ROOT, TEST_SETTINGS, run_cli, stop
from tests.support.ports import free_port
from tests.support.postgres import fresh_database_url

RAW_ONLY = [{"name": "raw", "steps": []}]


def _children(pid: int) -> set[int]:
    found: set[int] = set()
    for task in Path(f"/proc/{pid}/task").iterdir():
        text = (task / "children").read_text().split()
        found.update(int(child) for child in text)
    return found


def _worker_child(pid: int, not_this: int | None = None, timeout_s: float = 60.0) -> int:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        workers = [
            child
            for child in _children(pid)
            if child != not_this and b"worker" in Path(f"/proc/{child}/cmdline").read_bytes().split(b"\0")
        ]
        if workers:
            return workers[0]
        time.sleep(0.1)
    raise TimeoutError("no worker process under serve")


@pytest.fixture()
def served(tmp_path):
    port = free_port()
    database_url = fresh_database_url() or f"sqlite:///{tmp_path / 'served.sqlite3'}"
    env = {
        **os.environ,
        **{f"EPOCH_ASSAY_{key}": value for key, value in TEST_SETTINGS.items()},
        "EPOCH_ASSAY_DATABASE_URL": database_url,
        "EPOCH_ASSAY_DATA_DIR": str(tmp_path),
    }
    log = open(tmp_path / "serve.log", "ab")
    process = subprocess.Popen(
        [sys.executable, "-m", "epoch_assay", "serve", "--host", "127.0.0.1", "--port", str(port)],
        cwd=REPO_ROOT,
        env=env,
        stdout=log,
        stderr=subprocess.STDOUT,
    )
    base_url = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            try:
                if httpx.get(f"{base_url}/healthz", timeout=1).status_code == 200:
                    break
            except httpx.HTTPError:
                time.sleep(0.2)
        token = run_cli(["keys", "create", "--role", "admin"], env).stdout.strip().splitlines()[-1]
        yield process, base_url, token, database_url
    finally:
        stop(process, timeout_s=60)
        log.close()


def test_the_worker_of_serve_gets_the_database_url_through_its_environment_not_its_arguments(served):
    process, _base_url, _token, database_url = served
    worker = _worker_child(process.pid)
    arguments = Path(f"/proc/{worker}/cmdline").read_bytes().decode()
    assert database_url not in arguments and "--database-url" not in arguments


def test_serve_starts_its_worker_again_when_it_dies(served):
    process, base_url, token, _ = served
    first = _worker_child(process.pid)
    os.kill(first, signal.SIGKILL)
    _worker_child(process.pid, not_this=first)
    with httpx.Client(base_url=base_url, headers={"Authorization": f"Bearer {token}"}, timeout=30) as http:
        assert http.post("/v1/studies", json={"code": "RESTART", "title": "restart"}).status_code == 201
        epoch_set = upload(http, "RESTART", npz_bytes(small_epochs(seed=81))).json()["id"]
        body = {"study": "RESTART", "epoch_sets": [epoch_set], "scoring": SCORING, "pipelines": RAW_ONLY}
        run_and_wait(http, body)  # the restarted worker runs it
