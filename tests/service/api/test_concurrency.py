"""Many clients at once over loopback: every upload stored once, every run finished once, no 5xx."""

import threading
from collections import Counter
from concurrent.futures import ThreadPoolExecutor

import pytest

from tests.service.api.helpers import SCORING
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import LiveService, start_service, wait_for_run

N_FILES = 25  # each uploaded twice at once: 50 uploads
N_RUNS = 20


@pytest.fixture(scope="module")
def busy(tmp_path_factory) -> LiveService:
    live = start_service(tmp_path_factory.mktemp("busy"), n_workers=2)
    yield live
    live.stop()


def _in_parallel(service: LiveService, calls: list, threads: int = 16) -> list:
    """Run ``call(client)`` for each call from ``threads`` threads, each with its own client; the answers."""
    local, clients = threading.local(), []

    def run(call):
        if not hasattr(local, "client"):
            local.client = service.client()
            clients.append(local.client)
        return call(local.client)

    try:
        with ThreadPoolExecutor(max_workers=threads) as pool:
            return list(pool.map(run, calls))
    finally:
        for client in clients:
            client.close()


@pytest.fixture(scope="module")
def uploads(busy) -> list:
    """The answers to 50 uploads at once: 25 files, each sent twice."""
    with busy.client() as admin:
        assert admin.post("/v1/studies", json={"code": "BUSY", "title": "load"}).status_code == 201
    files = [npz_bytes(small_epochs(seed=200 + i)) for i in range(N_FILES)]

    def uploader(index: int):
        return lambda http: http.post(
            "/v1/studies/BUSY/epoch-sets", data={"subject": f"sub-{index:02d}"}, files={"file": ("e.npz", files[index])}
        )

    return _in_parallel(busy, [uploader(i % N_FILES) for i in range(2 * N_FILES)])


def test_fifty_concurrent_uploads_store_each_file_once_without_5xx(busy, uploads):
    assert all(answer.status_code < 500 for answer in uploads), [a.text for a in uploads if a.status_code >= 500]
    for index in range(N_FILES):
        pair = uploads[index::N_FILES]
        assert sorted(answer.status_code for answer in pair) == [200, 201]
        assert len({answer.json()["id"] for answer in pair}) == 1
    with busy.client() as admin:
        stored = admin.get("/v1/studies/BUSY/epoch-sets").json()
    assert len(stored) == N_FILES and len({row["sha256"] for row in stored}) == N_FILES


def test_twenty_concurrent_runs_all_finish_each_claimed_once(busy, uploads):
    epoch_set_ids = sorted({answer.json()["id"] for answer in uploads})

    def runner(index: int):
        body = {
            "study": "BUSY",
            "epoch_sets": [epoch_set_ids[index % N_FILES]],
            "scoring": SCORING,
            "pipelines": [{"name": "raw", "steps": []}],
        }
        return lambda http: http.post("/v1/runs", json=body)

    created = _in_parallel(busy, [runner(i) for i in range(N_RUNS)])
    assert Counter(answer.status_code for answer in created) == {202: N_RUNS}
    with busy.client() as admin:
        states = [wait_for_run(admin, answer.json()["id"]) for answer in created]
    assert Counter(state["status"] for state in states) == {"succeeded": N_RUNS}
    attempts = [row.attempts for row in busy.query("SELECT attempts FROM jobs")]
    [(results,)] = busy.query("SELECT count(*) FROM run_results")
    assert attempts == [1] * N_RUNS and results == N_RUNS
