"""The job state machine of service.storage.queue, on a real SQLite file."""

import threading
import time
from concurrent.futures import ThreadPoolExecutor

import pytest
from sqlalchemy import select, update

from service.storage import queue
from service.storage.db import Database
from service.storage.ids import new_id, utc_now
from service.storage.models import Job, Run, Study, Webhook, WebhookDelivery


def _queue_runs(database: Database, n: int, max_attempts: int = 3) -> list[str]:
    with database.session() as session:
        study = Study(id=new_id("st"), code=new_id("code"), title="t")
        session.add(study)
        session.flush()
        run_ids = []
        for _ in range(n):
            run = Run(id=new_id("run"), study_id=study.id, spec={}, status="queued")
            session.add(run)
            session.flush()
            queue.enqueue(session, run.id, max_attempts=max_attempts)
            run_ids.append(run.id)
    return run_ids


def _claim(database: Database, worker: str, lease_seconds: float = 60.0) -> queue.ClaimedJob | None:
    with database.session() as session:
        return queue.claim(session, worker, lease_seconds)


def test_claim_moves_the_oldest_queued_job_and_its_run_to_running(database):
    first, _second = _queue_runs(database, 2)
    job = _claim(database, "w1")
    assert job is not None and job.run_id == first and job.attempt == 1
    with database.session() as session:
        assert session.get(Run, first).status == "running"


def test_claim_on_an_empty_queue_returns_none(database):
    assert _claim(database, "w1") is None


def test_concurrent_workers_never_claim_the_same_job(database):
    run_ids = _queue_runs(database, 60)
    claimed: list[str] = []
    lock = threading.Lock()

    def drain(worker: str) -> None:
        while (job := _claim(database, worker)) is not None:
            with lock:
                claimed.append(job.run_id)

    with ThreadPoolExecutor(max_workers=4) as pool:
        list(pool.map(drain, ["w1", "w2", "w3", "w4"]))
    assert sorted(claimed) == sorted(run_ids)


def test_complete_marks_job_and_run_succeeded(database):
    _queue_runs(database, 1)
    job = _claim(database, "w1")
    with database.session() as session:
        assert queue.complete(session, job, "w1")
    with database.session() as session:
        assert session.get(Run, job.run_id).status == "succeeded"
        assert session.get(Run, job.run_id).progress == 1.0
        assert session.get(Job, job.id).status == "succeeded"


def test_fail_keeps_the_reason_on_the_run(database):
    _queue_runs(database, 1)
    job = _claim(database, "w1")
    with database.session() as session:
        assert queue.fail(session, job, "w1", "ValueError: broken")
    with database.session() as session:
        run = session.get(Run, job.run_id)
        assert (run.status, run.error) == ("failed", "ValueError: broken")


def test_a_job_whose_lease_expired_is_taken_again_and_the_first_worker_can_no_longer_finish_it(database):
    _queue_runs(database, 1)
    lost = _claim(database, "w1", lease_seconds=0.05)
    time.sleep(0.1)
    retaken = _claim(database, "w2")
    assert retaken is not None and retaken.id == lost.id and retaken.attempt == 2
    with database.session() as session:
        assert not queue.complete(session, lost, "w1")
        assert not queue.heartbeat(session, lost, "w1", 60.0)
    with database.session() as session:
        assert queue.complete(session, retaken, "w2")


def test_a_job_whose_worker_keeps_dying_fails_after_max_attempts(database):
    (run_id,) = _queue_runs(database, 1, max_attempts=2)
    for worker in ("w1", "w2"):
        assert _claim(database, worker, lease_seconds=0.05) is not None
        time.sleep(0.1)
    assert _claim(database, "w3") is None
    with database.session() as session:
        run = session.get(Run, run_id)
        assert run.status == "failed" and "2 attempts" in run.error


def test_release_hands_the_job_back_without_counting_the_attempt(database):
    _queue_runs(database, 1)
    job = _claim(database, "w1")
    with database.session() as session:
        assert queue.release(session, job, "w1")
    again = _claim(database, "w2")
    assert again.id == job.id and again.attempt == 1


def test_queue_depth_counts_waiting_jobs(database):
    _queue_runs(database, 3)
    _claim(database, "w1")
    with database.session() as session:
        assert queue.queue_depth(session) == 2


def test_a_failed_attempt_is_queued_again_but_not_claimable_before_its_backoff(database):
    (run_id,) = _queue_runs(database, 1)
    job = _claim(database, "w1")
    with database.session() as session:
        assert queue.retry_or_fail(session, job, "w1", "OSError: disk hiccup", backoff_seconds=60.0) == queue.QUEUED
    assert _claim(database, "w2") is None
    with database.session() as session:
        run = session.get(Run, run_id)
        assert run.status == "queued" and "disk hiccup" in run.error and "60 s" in run.error


def test_a_failed_attempt_is_claimable_again_once_its_backoff_has_passed(database):
    _queue_runs(database, 1)
    job = _claim(database, "w1")
    with database.session() as session:
        queue.retry_or_fail(session, job, "w1", "OSError: disk hiccup", backoff_seconds=0.05)
    time.sleep(0.1)
    again = _claim(database, "w2")
    assert again is not None and again.id == job.id and again.attempt == 2


def test_the_backoff_doubles_with_each_attempt(database):
    _queue_runs(database, 1, max_attempts=5)
    waits = []
    for worker in ("w1", "w2", "w3"):
        job = _claim(database, worker)
        with database.session() as session:
            queue.retry_or_fail(session, job, worker, "OSError: again", backoff_seconds=0.01)
            row = session.get(Job, job.id)
            waits.append((row.available_at - utc_now()).total_seconds())
        time.sleep(0.1)
    assert waits[0] < waits[1] < waits[2] <= 0.04


def test_a_job_failing_on_its_last_attempt_is_failed_with_the_last_reason(database):
    (run_id,) = _queue_runs(database, 1, max_attempts=2)
    for worker, reason in (("w1", "OSError: first"), ("w2", "OSError: second")):
        job = _claim(database, worker)
        with database.session() as session:
            queue.retry_or_fail(session, job, worker, reason, backoff_seconds=0.0)
    with database.session() as session:
        run = session.get(Run, run_id)
        assert (run.status, run.error) == ("failed", "failed 2 times; last error: OSError: second")


def _webhook(database: Database, run_id: str, events: list[str]) -> str:
    with database.session() as session:
        hook = Webhook(
            id=new_id("wh"),
            study_id=session.get(Run, run_id).study_id,
            url="http://127.0.0.1:9/",
            secret="s",
            events=events,
        )
        session.add(hook)
    return hook.id


def _events(database: Database) -> list[tuple[str, str]]:
    with database.session() as session:
        return [(row.run_id, row.event_type) for row in session.scalars(select(WebhookDelivery))]


def test_completing_a_run_queues_its_event_in_the_same_transaction(database):
    (run_id,) = _queue_runs(database, 1)
    _webhook(database, run_id, ["run.succeeded", "run.failed"])
    job = _claim(database, "w1")
    with pytest.raises(RuntimeError), database.session() as session:
        queue.complete(session, job, "w1")
        raise RuntimeError("the transaction is rolled back")
    assert _events(database) == []
    with database.session() as session:
        queue.complete(session, job, "w1")
    assert _events(database) == [(run_id, "run.succeeded")]


def test_failing_a_run_queues_run_failed_only_for_webhooks_that_want_it(database):
    (run_id,) = _queue_runs(database, 1)
    _webhook(database, run_id, ["run.succeeded"])
    _webhook(database, run_id, ["run.failed"])
    job = _claim(database, "w1")
    with database.session() as session:
        queue.fail(session, job, "w1", "ValueError: broken")
    assert _events(database) == [(run_id, "run.failed")]


def test_handing_a_job_back_or_retrying_it_queues_no_event(database):
    (run_id,) = _queue_runs(database, 1)
    _webhook(database, run_id, ["run.succeeded", "run.failed"])
    job = _claim(database, "w1")
    with database.session() as session:
        queue.release(session, job, "w1")
    job = _claim(database, "w2")
    with database.session() as session:
        queue.retry_or_fail(session, job, "w2", "OSError: again", backoff_seconds=0.0)
    assert _events(database) == []


def test_two_workers_failing_the_same_exhausted_job_at_once_fail_it_and_queue_its_event_once(database):
    (run_id,) = _queue_runs(database, 1, max_attempts=1)
    _webhook(database, run_id, ["run.failed"])
    assert _claim(database, "w1", lease_seconds=0.05) is not None
    time.sleep(0.1)
    with database.session() as first, ThreadPoolExecutor(max_workers=1) as pool:
        assert queue.claim(first, "w2", 60.0) is None  # fails the exhausted job; not committed yet
        second = pool.submit(_claim, database, "w3")  # finds the job still running, waits for the row
        time.sleep(0.5)
        first.commit()
        assert second.result(timeout=60) is None
    assert _events(database) == [(run_id, "run.failed")]


def test_deleting_a_run_while_its_worker_renews_the_lease_waits_for_the_worker_instead_of_deadlocking(database):
    (run_id,) = _queue_runs(database, 1)
    job = _claim(database, "w1")
    with database.session() as worker, ThreadPoolExecutor(max_workers=1) as pool:
        # The order of queue.heartbeat: the job row, then its run.
        worker.execute(update(Job).where(Job.id == job.id).values(heartbeat_at=utc_now()))
        deleting = pool.submit(_delete_run, database, run_id)  # waits for the job row
        time.sleep(0.5)
        worker.execute(update(Run).where(Run.id == run_id).values(progress=0.5))
        worker.commit()
        deleting.result(timeout=60)
    with database.session() as session:
        assert session.get(Run, run_id) is None and session.get(Job, job.id) is None


def _delete_run(database: Database, run_id: str) -> None:
    with database.session() as session:
        queue.delete_run(session, run_id)
