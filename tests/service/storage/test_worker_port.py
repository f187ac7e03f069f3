"""WorkerStore, the worker's one door into storage, on a real database (SQLite, or PostgreSQL in that mode)."""

import json

import pytest

from service.settings import Settings
from service.storage import queue
from service.storage.db import Database
from service.storage.ids import new_id
from service.storage.models import EpochSet, Run, RunEpochSet, RunResult, Study
from service.storage.worker_port import FAILED, WorkerStore


@pytest.fixture()
def store(tmp_path, database, empty_database_url) -> WorkerStore:
    """A worker's door to the migrated test database, closed after the test."""
    opened = WorkerStore(Settings(data_dir=tmp_path, database_url=empty_database_url))
    yield opened
    opened.close()


def _epoch_set(study_id: str, subject: str) -> EpochSet:
    return EpochSet(
        id=new_id("es"),
        study_id=study_id,
        subject=subject,
        session=None,
        sha256=new_id("sha"),
        size_bytes=1,
        n_trials=2,
        n_channels=1,
        n_times=3,
        sfreq=100.0,
        tmin=0.0,
        ch_names=["Cz"],
        ch_types=["eeg"],
        conditions={"a": 1, "b": 1},
    )


def _queue_run(database: Database, subjects: list[str], max_attempts: int = 3) -> tuple[str, list[str]]:
    """A queued run of a new study over one epoch set per subject, in that order; the run and epoch set ids."""
    with database.session() as session:
        study = Study(id=new_id("st"), code=new_id("code"), title="t")
        session.add(study)
        session.flush()
        rows = [_epoch_set(study.id, subject) for subject in subjects]
        session.add_all(rows)
        run = Run(id=new_id("run"), study_id=study.id, spec={"pipelines": []}, status=queue.QUEUED)
        session.add(run)
        session.flush()
        session.add_all(RunEpochSet(run_id=run.id, epoch_set_id=row.id, position=i) for i, row in enumerate(rows))
        queue.enqueue(session, run.id, max_attempts=max_attempts)
        return run.id, [row.id for row in rows]


def test_a_claimed_run_comes_with_its_spec_study_and_epoch_sets_in_run_order(store, database):
    run_id, epoch_set_ids = _queue_run(database, ["sub-02", "sub-01"])
    job = store.claim("w1", lease_seconds=60.0)
    assert job is not None and job.run_id == run_id
    run = store.run_to_execute(job)
    assert run is not None and run.spec == {"pipelines": []}
    assert [item.id for item in run.epoch_sets] == epoch_set_ids
    assert [item.subject for item in run.epoch_sets] == ["sub-02", "sub-01"]


def test_a_result_is_stored_only_by_the_worker_holding_the_job(store, database):
    run_id, _ = _queue_run(database, ["sub-01"])
    job = store.claim("w1", lease_seconds=60.0)
    assert job is not None
    assert not store.store_result(job, "w2", json.dumps({"schema_version": 1}))
    assert store.store_result(job, "w1", json.dumps({"schema_version": 1}))
    with database.session() as session:
        assert session.get(Run, run_id).status == queue.SUCCEEDED
        assert json.loads(session.get(RunResult, run_id).document) == {"schema_version": 1}


def test_a_permanent_failure_fails_the_run_although_attempts_are_left(store, database):
    run_id, _ = _queue_run(database, ["sub-01"], max_attempts=3)
    job = store.claim("w1", lease_seconds=60.0)
    assert job is not None
    outcome = store.record_failure(job, "w1", "SpecError: no", permanent=True, backoff_seconds=0.0)
    assert outcome == FAILED
    with database.session() as session:
        assert session.get(Run, run_id).status == queue.FAILED


def test_a_deleted_run_or_epoch_set_reads_as_none(store, database):
    run_id, (epoch_set_id,) = _queue_run(database, ["sub-01"])
    job = store.claim("w1", lease_seconds=60.0)
    assert job is not None
    with database.session() as session:
        queue.delete_run(session, run_id)
        session.delete(session.get(EpochSet, epoch_set_id))
    assert store.run_to_execute(job) is None
    assert store.epoch_set(epoch_set_id) is None
