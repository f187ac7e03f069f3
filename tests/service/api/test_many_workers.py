"""Four worker processes drain one queue of 200 runs, one of them killed (SIGKILL) while it holds a job.

Runs on the test database of the session: SQLite, or PostgreSQL with EPOCH_ASSAY_TEST_DATABASE=postgresql
(where the claim locks its candidate with FOR UPDATE SKIP LOCKED). What is checked: every run succeeds;
each job was claimed once, except the killed worker's, which another worker took over once its lease ran
out (``jobs.attempts`` counts the claims, ``service.storage.queue``); one result per run; and the results
equal those of the same spec on the other runs that were never interrupted.
"""

import os
import signal
import socket
import subprocess
import time
from collections import Counter, defaultdict
from pathlib import Path

import pytest

from tests.service.api.helpers import SCORING, upload, without_timing
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import LiveService, start_service

N_WORKERS = 4
N_RUNS = 200
# 4 epoch sets × 5 pipelines = 20 specs, each queued 10 times; a run is one small unit (1 epoch set of
# 20 trials × 8 channels, 1 pipeline, 50 bootstrap resamples), so the workers run it in their own process.
EPOCH_SET_SEEDS = (301, 302, 303, 304)
PIPELINES = [{"name": "raw", "steps": []}] + [
    {"name": f"lp{cutoff}", "steps": [{"step": "lowpass", "cutoff_hz": float(cutoff)}]} for cutoff in (15, 20, 25, 30)
]
CHEAP_SCORING = SCORING | {"bootstrap": {"trials_per_condition": 5, "resamples": 50, "seed": 11}}
LEASE_SECONDS = "3"
KILL_AFTER_SUCCEEDED = 40
DRAIN_TIMEOUT_S = 300.0


@pytest.fixture()
def drained(tmp_path) -> LiveService:
    """An API with a 3 s lease and no worker yet; the test starts the workers, all stopped after it."""
    live = start_service(tmp_path, n_workers=0, lease_seconds=LEASE_SECONDS)
    yield live
    live.stop()


def _queue_runs(service: LiveService) -> dict[str, tuple[str, str]]:
    """Queue the 200 runs; each run's id → (epoch set id, pipeline name)."""
    specs = {}
    with service.client() as http:
        assert http.post("/v1/studies", json={"code": "DRAIN", "title": "many workers"}).status_code == 201
        epoch_sets = [
            upload(http, "DRAIN", npz_bytes(small_epochs(seed=seed, n_per_condition=10)), subject=f"sub-{seed}").json()[
                "id"
            ]
            for seed in EPOCH_SET_SEEDS
        ]
        for index in range(N_RUNS):
            epoch_set, pipeline = (
                epoch_sets[index % len(epoch_sets)],
                PIPELINES[index // len(epoch_sets) % len(PIPELINES)],
            )
            answer = http.post(
                "/v1/runs",
                json={"study": "DRAIN", "epoch_sets": [epoch_set], "scoring": CHEAP_SCORING, "pipelines": [pipeline]},
            )
            assert answer.status_code == 202, answer.text
            specs[answer.json()["id"]] = (epoch_set, pipeline["name"])
    return specs


def _count_succeeded(service: LiveService) -> int:
    [(succeeded,)] = service.query("SELECT count(*) FROM jobs WHERE status = 'succeeded'")
    return succeeded


def _wait_for_succeeded(service: LiveService, at_least: int, timeout_s: float) -> None:
    deadline = time.monotonic() + timeout_s
    while _count_succeeded(service) < at_least:
        if time.monotonic() > deadline:
            raise TimeoutError(f"fewer than {at_least} jobs succeeded within {timeout_s} s")
        time.sleep(0.1)


def _descendants(pid: int) -> list[int]:
    """The process ids of every descendant of ``pid`` (from /proc), e.g. a fork server and its pool."""
    parents = {}
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        parents[int(stat.parent.name)] = int(fields[1])
    found, frontier = [], [pid]
    while frontier:
        children = [child for child, parent in parents.items() if parent in frontier]
        found += children
        frontier = children
    return found


def _worker_id(worker: subprocess.Popen) -> str:
    return f"{socket.gethostname()}:{worker.pid}"  # as worker.runner.Worker names itself


def _running_jobs_of(service: LiveService, worker: subprocess.Popen) -> list[str]:
    rows = service.query(
        "SELECT id FROM jobs WHERE worker_id = :worker AND status = 'running'", {"worker": _worker_id(worker)}
    )
    return [row.id for row in rows]


def _kill_one_holding_a_job(
    service: LiveService, workers: list[subprocess.Popen], timeout_s: float = 60.0
) -> tuple[subprocess.Popen, str]:
    """SIGKILL a worker (and its children) at a moment it holds a running job; the worker and that job's id.

    A worker is frozen (SIGSTOP) so the database can be read at a moment it cannot move on: if it holds
    no job right then (it is between two jobs), it is let go (SIGCONT) and one is caught again a little later.
    """
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        for worker in workers:
            os.kill(worker.pid, signal.SIGSTOP)
            if held := _running_jobs_of(service, worker):
                for pid in [worker.pid, *_descendants(worker.pid)]:
                    os.kill(pid, signal.SIGKILL)
                worker.wait()
                return worker, held[0]
            os.kill(worker.pid, signal.SIGCONT)
        time.sleep(0.02)
    raise AssertionError(f"no worker was caught holding a job within {timeout_s} s")


def test_four_workers_drain_200_runs_once_each_though_one_is_killed_holding_a_job(drained):
    workers = [drained.start_worker() for _ in range(N_WORKERS)]
    specs = _queue_runs(drained)  # while the workers start
    _wait_for_succeeded(drained, KILL_AFTER_SUCCEEDED, DRAIN_TIMEOUT_S)
    victim, killed_job = _kill_one_holding_a_job(drained, workers)
    _wait_for_succeeded(drained, N_RUNS, DRAIN_TIMEOUT_S)

    jobs = {row.id: row for row in drained.query("SELECT id, run_id, status, attempts, worker_id FROM jobs")}
    assert Counter(job.status for job in jobs.values()) == {"succeeded": N_RUNS}
    # One claim per job (jobs.attempts), two for the killed worker's: its own and the takeover by another.
    assert {job_id: job.attempts for job_id, job in jobs.items() if job.attempts != 1} == {killed_job: 2}
    assert jobs[killed_job].worker_id not in (None, _worker_id(victim))
    stored = Counter(row.run_id for row in drained.query("SELECT run_id FROM run_results"))
    assert stored == Counter(specs.keys())

    results = {}
    with drained.client() as http:
        listed = http.get("/v1/runs", params={"study": "DRAIN", "limit": 500}).json()["runs"]
        assert sorted((run["id"], run["status"]) for run in listed) == sorted((run_id, "succeeded") for run_id in specs)
        for run_id in specs:
            answer = http.get(f"/v1/runs/{run_id}/result")
            assert answer.status_code == 200, answer.text
            results[run_id] = without_timing(answer.json())
    by_spec = defaultdict(list)
    for run_id, spec in specs.items():
        by_spec[spec].append(results[run_id])
    # The bootstrap is seeded, so one spec gives one result wherever and however often it runs.
    assert len(by_spec) == len(EPOCH_SET_SEEDS) * len(PIPELINES)
    for spec, same in by_spec.items():
        assert all(result == same[0] for result in same[1:]), spec
