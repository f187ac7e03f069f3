"""Worker faults: a worker killed mid-job, a worker told to stop, a job that keeps failing."""

import json
import os
import signal
import time

import pytest

from tests.service.api.helpers import upload, without_timing
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import LOOPBACK_NETWORK, LiveService, start_service, stop, wait_for_run
from tests.support.receiver import Receiver
from worker.execution.multiverse import SMALL_SOURCE_BYTES

LEASE_SECONDS = "3"
# Slow on purpose (14 units per epoch set, each 40,000 resamples: seconds in all), so a worker can be stopped
# after its first unit is reported (heartbeats come every 0.5 s here) and well before its last. The epoch sets
# are above the worker's small-source size (``SMALL_SOURCE_BYTES``), so each pipeline is a unit of its own and
# progress moves in fourteen steps rather than one.
SLOW_SCORING = {
    "conditions": ["a", "b"],
    "window_s": [0.3, 0.5],
    "alpha": 0.05,
    "correction": "fdr_bh",
    "bootstrap": {"trials_per_condition": 20, "resamples": 40_000, "seed": 5},
}
SLOW_PIPELINES = [
    {"name": f"lp{cutoff}", "steps": [{"step": "lowpass", "cutoff_hz": float(cutoff)}]} for cutoff in range(20, 34)
]


@pytest.fixture(scope="module")
def faults(tmp_path_factory) -> LiveService:
    """An API with a short lease and no worker: each test starts and stops its own."""
    live = start_service(
        tmp_path_factory.mktemp("faults"),
        n_workers=0,
        lease_seconds=LEASE_SECONDS,
        webhook_allowed_networks=LOOPBACK_NETWORK,
    )
    yield live
    live.stop()


@pytest.fixture()
def http(faults):
    """A client of the fault-test API; every worker a test started is stopped after it, pass or fail."""
    with faults.client() as client:
        yield client
    for worker in faults.workers:
        stop(worker)


def _slow_run(http, study: str, epoch_sets: list[str]) -> str:
    answer = http.post(
        "/v1/runs",
        json={"study": study, "epoch_sets": epoch_sets, "pipelines": SLOW_PIPELINES, "scoring": SLOW_SCORING},
    )
    assert answer.status_code == 202, answer.text
    return answer.json()["id"]


def _study_with_epoch_sets(http, code: str, seeds: tuple[int, ...]) -> list[str]:
    assert http.post("/v1/studies", json={"code": code, "title": "faults"}).status_code == 201
    sets = [small_epochs(seed=seed, n_per_condition=50, sfreq=1000.0) for seed in seeds]
    assert all(epochs.data.nbytes > SMALL_SOURCE_BYTES for epochs in sets)
    return [
        upload(http, code, npz_bytes(epochs), subject=f"sub-{seed}").json()["id"]
        for seed, epochs in zip(seeds, sets, strict=True)
    ]


def _wait_until_midway(http, run_id: str, timeout_s: float = 120.0) -> dict:
    """The run's state once a worker has reported progress on it but not finished it."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        state = http.get(f"/v1/runs/{run_id}").json()
        if state["status"] == "running" and 0.0 < state["progress"] < 1.0:
            return state
        assert state["status"] in ("queued", "running"), state
        time.sleep(0.05)
    raise TimeoutError(f"run {run_id} made no progress within {timeout_s} s")


def _job_attempts(service: LiveService, run_id: str) -> int:
    [(attempts,)] = service.query("SELECT attempts FROM jobs WHERE run_id = :run_id", {"run_id": run_id})
    return attempts


def test_a_job_whose_worker_is_killed_is_finished_once_by_another_with_the_same_result(faults, http):
    epoch_sets = _study_with_epoch_sets(http, "KILL-1", (90, 91))
    with Receiver() as receiver:
        assert http.post("/v1/studies/KILL-1/webhooks", json={"url": receiver.url}).status_code == 201
        victim = _slow_run(http, "KILL-1", epoch_sets)
        undisturbed = _slow_run(http, "KILL-1", epoch_sets)
        first = faults.start_worker()
        _wait_until_midway(http, victim)
        os.kill(first.pid, signal.SIGKILL)
        first.wait()
        faults.start_worker()
        assert wait_for_run(http, victim, timeout_s=300)["status"] == "succeeded"
        assert wait_for_run(http, undisturbed, timeout_s=300)["status"] == "succeeded"
        events = [json.loads(request.body) for request in receiver.wait_for(2)]
        time.sleep(1.0)  # room for a duplicate event to show up, were there one
        late = receiver.received[2:]
    assert sorted(event["data"]["run"]["id"] for event in events) == sorted([victim, undisturbed]) and late == []
    assert _job_attempts(faults, victim) == 2
    results = [http.get(f"/v1/runs/{run}/result").json() for run in (victim, undisturbed)]
    assert without_timing(results[0]) == without_timing(results[1])


def test_sigterm_hands_the_job_back_and_another_worker_finishes_it(faults, http):
    epoch_sets = _study_with_epoch_sets(http, "TERM-1", (92,))
    run_id = _slow_run(http, "TERM-1", epoch_sets)
    worker = faults.start_worker()
    _wait_until_midway(http, run_id)
    worker.send_signal(signal.SIGTERM)
    assert worker.wait(timeout=60) == 0
    handed_back = http.get(f"/v1/runs/{run_id}").json()
    assert (handed_back["status"], handed_back["progress"]) == ("queued", 0.0)
    assert _job_attempts(faults, run_id) == 0
    faults.start_worker()
    assert wait_for_run(http, run_id, timeout_s=300)["status"] == "succeeded"
    assert _job_attempts(faults, run_id) == 1


def test_a_job_that_keeps_failing_stops_after_max_attempts_with_its_reason(faults, http):
    (epoch_set,) = _study_with_epoch_sets(http, "FAIL-1", (93,))
    sha256 = http.get(f"/v1/studies/FAIL-1/epoch-sets/{epoch_set}").json()["sha256"]
    blob = faults.data_dir / "blobs" / sha256[:2] / sha256
    blob.unlink()
    blob.mkdir()  # reading it fails with an error that might pass, so every attempt is made
    answer = http.post(
        "/v1/runs",
        json={
            "study": "FAIL-1",
            "epoch_sets": [epoch_set],
            "scoring": SLOW_SCORING,
            "pipelines": [{"name": "raw", "steps": []}],
        },
    )
    faults.start_worker()
    state = wait_for_run(http, answer.json()["id"])
    assert state["status"] == "failed"
    # In our own words, naming only the class of the error (its text would name a server path).
    assert state["error"].startswith("failed 3 times; last error: the worker hit an internal error (IsADirectoryError)")
    assert str(faults.data_dir) not in state["error"]
    assert _job_attempts(faults, answer.json()["id"]) == 3
