"""The worker survives database errors: a result whose storing fails is kept and stored again, once.

The fault is made in the database itself: a trigger refuses to insert into run_results while a row
is in the table ``fault_switch``; the test removes the row once the worker has hit the refusal.
"""

import time

import pytest
from sqlalchemy import create_engine, text

from tests.service.api.helpers import SCORING, upload, without_timing
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import LiveService, start_service, wait_for_run

REFUSAL = "storing the result failed"
TRIGGERS = {
    "sqlite": [
        "CREATE TABLE fault_switch (on_ INTEGER)",
        "CREATE TRIGGER refuse_result BEFORE INSERT ON run_results WHEN EXISTS (SELECT 1 FROM fault_switch) "
        "BEGIN SELECT RAISE(ABORT, 'injected fault'); END",
    ],
    "postgresql": [
        "CREATE TABLE fault_switch (on_ INTEGER)",
        "CREATE FUNCTION refuse_result() RETURNS trigger AS $$ BEGIN IF EXISTS (SELECT 1 FROM fault_switch) "
        "THEN RAISE EXCEPTION 'injected fault'; END IF; RETURN NEW; END $$ LANGUAGE plpgsql",
        "CREATE TRIGGER refuse_result BEFORE INSERT ON run_results FOR EACH ROW EXECUTE FUNCTION refuse_result()",
    ],
}


def _execute(service: LiveService, *statements: str) -> None:
    engine = create_engine(service.database_url)
    try:
        with engine.begin() as connection:
            for statement in statements:
                connection.execute(text(statement))
    finally:
        engine.dispose()


@pytest.fixture()
def faulty(tmp_path) -> LiveService:
    live = start_service(tmp_path, n_workers=0, log_level="WARNING")
    dialect = "postgresql" if live.database_url.startswith("postgresql") else "sqlite"
    _execute(live, *TRIGGERS[dialect])
    yield live
    live.stop()


def _wait_for_log(service: LiveService, words: str, timeout_s: float = 120.0) -> None:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if words in service.log_path.read_text(errors="replace"):
            return
        time.sleep(0.1)
    raise TimeoutError(f"{words!r} did not appear in the log")


def test_a_result_whose_storing_fails_is_stored_once_when_the_database_recovers(faulty):
    with faulty.client() as http:
        assert http.post("/v1/studies", json={"code": "DBF-1", "title": "faults"}).status_code == 201
        epoch_set = upload(http, "DBF-1", npz_bytes(small_epochs(seed=71))).json()["id"]
        body = {
            "study": "DBF-1",
            "epoch_sets": [epoch_set],
            "scoring": SCORING,
            "pipelines": [{"name": "raw", "steps": []}],
        }
        _execute(faulty, "INSERT INTO fault_switch VALUES (1)")
        faulty.start_worker()
        failed_run = http.post("/v1/runs", json=body).json()["id"]
        _wait_for_log(faulty, REFUSAL)
        _execute(faulty, "DELETE FROM fault_switch")
        assert wait_for_run(http, failed_run)["status"] == "succeeded"
        stored = http.get(f"/v1/runs/{failed_run}/result").json()
        # Same spec again with nothing failing: the kept result equals a fresh computation.
        fresh_run = http.post("/v1/runs", json=body).json()["id"]
        assert wait_for_run(http, fresh_run)["status"] == "succeeded"
        fresh = http.get(f"/v1/runs/{fresh_run}/result").json()
    assert without_timing(stored) == without_timing(fresh)
    rows = faulty.query("SELECT attempts FROM jobs WHERE run_id = :run", {"run": failed_run})
    assert [row.attempts for row in rows] == [1]  # computed once: the result was kept, not recomputed
    assert faulty.query("SELECT count(*) FROM run_results WHERE run_id = :run", {"run": failed_run})[0][0] == 1
    assert all(worker.poll() is None for worker in faulty.workers)  # the worker is still running
