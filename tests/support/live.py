"""Real server and worker processes for tests, on loopback, stopped by the test that starts them."""

import os
import socket
import subprocess
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import httpx

REPO_ROOT = Path(__file__).resolve().parents[2]


def free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def _spawn(args: list[str], env: dict[str, str], log_path: Path) -> subprocess.Popen:
    log = open(log_path, "ab")
    return subprocess.Popen([sys.executable, "-m", "epoch_assay", *args], cwd=REPO_ROOT, env=env,
                            stdout=log, stderr=subprocess.STDOUT)


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

    @property
    def base_url(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    @property
    def log_path(self) -> Path:
        return self.data_dir / "processes.log"

    def start_api(self) -> None:
        self.api = _spawn(["api", "--host", "127.0.0.1", "--port", str(self.port), "--data-dir", str(self.data_dir)],
                          self.env, self.log_path)
        self._wait_healthy()

    def start_worker(self) -> subprocess.Popen:
        worker = _spawn(["worker", "--data-dir", str(self.data_dir)], self.env, self.log_path)
        self.workers.append(worker)
        return worker

    def _wait_healthy(self, timeout_s: float = 60.0) -> None:
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            if self.api.poll() is not None:
                raise RuntimeError(f"the API exited early:\n{self.log_path.read_text()[-4000:]}")
            try:
                if httpx.get(f"{self.base_url}/healthz", timeout=1.0).status_code == 200:
                    return
            except httpx.HTTPError:
                time.sleep(0.2)
        raise RuntimeError(f"the API did not become healthy:\n{self.log_path.read_text()[-4000:]}")

    def stop(self) -> None:
        for worker in self.workers:
            stop(worker)
        if self.api is not None:
            stop(self.api)


def start_service(data_dir: Path, n_workers: int = 1, **settings: str) -> LiveService:
    """Start an API and ``n_workers`` workers; settings become EPOCH_ASSAY_* variables."""
    env = {**os.environ, "EPOCH_ASSAY_LOG_LEVEL": "WARNING", "EPOCH_ASSAY_POLL_SECONDS": "0.1",
           "EPOCH_ASSAY_HEARTBEAT_SECONDS": "0.5"}
    env.update({f"EPOCH_ASSAY_{key.upper()}": value for key, value in settings.items()})
    service = LiveService(data_dir=data_dir, env=env)
    try:
        service.start_api()
        for _ in range(n_workers):
            service.start_worker()
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
