"""A service whose worker sends a run's units to a Dask cluster (EPOCH_ASSAY_DASK_SCHEDULER) gives the same
result as the service without one.

Everything is a real process on 127.0.0.1: a ``dask scheduler``, two ``dask worker`` processes (one thread
each) started with Dask's own command line, and an ``epoch-assay api`` with an ``epoch-assay worker``. The
reference is the session's service without Dask (the project's local process pool).
"""

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest
from distributed import Client

from tests.service.api.helpers import SCORING, run_and_wait, upload, without_timing
from tests.support.dask_tasks import state_counts
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import REPO_ROOT, LiveService, free_port, run_cli, start_service, stop

GRID = {
    "factors": {
        "highpass": {"none": [], "1": [{"step": "highpass", "cutoff_hz": 1.0, "allow_short_epochs": True}]},
        "reference": {
            "average": [{"step": "reference", "kind": "average"}],
            "cz": [{"step": "reference", "kind": "channels", "channels": ["Cz"]}],
        },
        "baseline": {"none": [], "pre": [{"step": "baseline", "window_s": [-0.2, 0.0]}]},
    }
}
SUBJECTS = 3
BRANCHES = 3  # first steps: highpass, reference average, reference Cz
DASK = str(Path(sys.executable).parent / "dask")
STUDY = "DASK-E2E"
# Without a dashboard Dask still serves its HTTP routes, on every interface unless told an address.
LOOPBACK_ONLY = ["--host", "127.0.0.1", "--no-dashboard", "--dashboard-address", "127.0.0.1:0"]


def _spawn_dask(args: list[str], log_path: Path) -> subprocess.Popen:
    # The Dask workers unpickle the units' functions, so they import the project from the repository.
    env = {**os.environ, "PYTHONPATH": str(REPO_ROOT)}
    with open(log_path, "ab") as log:
        return subprocess.Popen([DASK, *args], cwd=REPO_ROOT, env=env, stdout=log, stderr=subprocess.STDOUT)


@pytest.fixture(scope="module")
def dask_scheduler(tmp_path_factory: pytest.TempPathFactory) -> str:
    """The address of a real Dask scheduler with two real workers of one thread each."""
    log_path = tmp_path_factory.mktemp("dask") / "dask.log"
    address = f"tcp://127.0.0.1:{free_port()}"
    processes = [_spawn_dask(["scheduler", "--port", address.rsplit(":", 1)[1], *LOOPBACK_ONLY], log_path)]
    try:
        processes += [_spawn_dask(["worker", address, "--nthreads", "1", *LOOPBACK_ONLY], log_path) for _ in range(2)]
        with Client(address, timeout="60s", set_as_default=False) as client:
            client.wait_for_workers(2, timeout=60)
        yield address
    finally:
        for process in reversed(processes):
            stop(process)


@pytest.fixture(scope="module")
def dask_service(tmp_path_factory: pytest.TempPathFactory, dask_scheduler: str) -> LiveService:
    live = start_service(tmp_path_factory.mktemp("dask-service"), dask_scheduler=dask_scheduler)
    yield live
    live.stop()


def grid_result(service: LiveService) -> dict:
    """The grid run on SUBJECTS uploaded epoch sets, with epoch set ids replaced by their upload order."""
    with service.client() as client:
        if client.get(f"/v1/studies/{STUDY}").status_code == 404:
            assert client.post("/v1/studies", json={"code": STUDY, "title": "Dask end to end"}).status_code == 201
        ids = [
            upload(client, STUDY, npz_bytes(small_epochs(40 + i)), subject=f"sub-{i + 1:02d}").json()["id"]
            for i in range(SUBJECTS)
        ]
        document = run_and_wait(client, {"study": STUDY, "epoch_sets": ids, "grid": GRID, "scoring": SCORING})
    text = json.dumps(without_timing(document), sort_keys=True)
    for position, epoch_set_id in enumerate(ids):
        text = text.replace(epoch_set_id, f"epoch-set-{position}")
    return json.loads(text)


def test_a_grid_run_on_dask_has_the_result_of_the_local_pool(service, dask_service, dask_scheduler):
    on_dask = grid_result(dask_service)
    with Client(dask_scheduler, set_as_default=False) as client:
        assert state_counts(client).get("memory", 0) == SUBJECTS * BRANCHES  # every unit ran on the cluster
    assert len(on_dask["results"]) == SUBJECTS * 8
    assert on_dask == grid_result(service)


def test_a_malformed_scheduler_address_stops_the_worker_with_one_line(tmp_path):
    finished = run_cli(["worker", "--data-dir", str(tmp_path)], {**os.environ, "EPOCH_ASSAY_DASK_SCHEDULER": "8786"})
    assert finished.returncode != 0
    lines = finished.stderr.strip().splitlines()
    assert len(lines) == 1 and "'8786' is not a Dask scheduler address" in lines[0] and "tcp://" in lines[0]
