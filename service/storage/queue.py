"""The job queue and its state machine.

    queued ──claim──▶ running ──complete──▶ succeeded
       ▲                 │  └────fail────▶ failed            (an error retrying cannot mend)
       │                 ├── retry ─────▶ queued, not before base·2^(n−1) s   (attempts left)
       │                 │           └──▶ failed, with the last error          (none left)
       ├── release ──────┤ (the worker shuts down; the attempt is not counted)
       └── lease expires ┘ (taken again while attempts < max_attempts, else failed)

A claim is one atomic UPDATE, so two workers never hold the same job; on PostgreSQL the
candidate row is locked with ``FOR UPDATE SKIP LOCKED``. A worker renews its lease with
heartbeats; completion and failure only count while the worker still holds the lease,
so a job taken over after a lost lease is finished exactly once. Finishing a run also
queues its webhook events, in the same transaction (``service.storage.outbox``).
"""

from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

from sqlalchemy import ColumnElement, CursorResult, Update, and_, delete, func, or_, select, update
from sqlalchemy.orm import Session

from service.storage import outbox
from service.storage.ids import new_id, utc_now
from service.storage.models import Job, Run, WorkerBeat

QUEUED, RUNNING, SUCCEEDED, FAILED = "queued", "running", "succeeded", "failed"


@dataclass(frozen=True)
class ClaimedJob:
    id: str
    run_id: str
    attempt: int


def enqueue(session: Session, run_id: str, *, max_attempts: int) -> Job:
    """Add a queued job for ``run_id``."""
    job = Job(id=new_id("job"), run_id=run_id, status=QUEUED, max_attempts=max_attempts)
    session.add(job)
    return job


def _claimable(now: datetime) -> ColumnElement[bool]:
    return and_(
        Job.attempts < Job.max_attempts,
        or_(
            and_(Job.status == QUEUED, or_(Job.available_at.is_(None), Job.available_at <= now)),
            and_(Job.status == RUNNING, Job.lease_expires_at < now),
        ),
    )


def claim(session: Session, worker_id: str, lease_seconds: float) -> ClaimedJob | None:
    """Take the oldest claimable job for ``worker_id``, or None when there is none."""
    now = utc_now()
    _fail_exhausted(session, now)
    candidate = select(Job.id).where(_claimable(now)).order_by(Job.created_at, Job.id).limit(1)
    if session.get_bind().dialect.name == "postgresql":
        candidate = candidate.with_for_update(skip_locked=True)
    row = session.execute(
        update(Job)
        .where(Job.id == candidate.scalar_subquery(), _claimable(now))
        .values(
            status=RUNNING,
            worker_id=worker_id,
            attempts=Job.attempts + 1,
            lease_expires_at=now + timedelta(seconds=lease_seconds),
            heartbeat_at=now,
        )
        .returning(Job.id, Job.run_id, Job.attempts)
    ).first()
    if row is None:
        return None
    session.execute(update(Run).where(Run.id == row.run_id).values(status=RUNNING, started_at=now, error=None))
    return ClaimedJob(id=row.id, run_id=row.run_id, attempt=row.attempts)


def _fail_exhausted(session: Session, now: datetime) -> None:
    """Fail the jobs whose lease ran out on their last allowed attempt."""
    exhausted = session.execute(
        select(Job.id, Job.run_id, Job.attempts, Job.error).where(
            Job.status == RUNNING, Job.lease_expires_at < now, Job.attempts >= Job.max_attempts
        )
    ).all()
    for job_id, run_id, attempts, earlier_error in exhausted:
        reason = f"gave up after {attempts} attempts; the worker running the last one stopped answering"
        if earlier_error:
            reason += f"; an earlier attempt failed with: {earlier_error}"
        _finish(session, job_id, run_id, FAILED, reason, now, Job.lease_expires_at < now)


def heartbeat(
    session: Session,
    job: ClaimedJob,
    worker_id: str,
    lease_seconds: float,
    progress: float | None = None,
    progress_detail: dict[str, Any] | None = None,
) -> bool:
    """Renew the lease (and record progress and its detail). False when the job is no longer this worker's."""
    now = utc_now()
    renewed = _rows_changed(
        session,
        update(Job)
        .where(Job.id == job.id, Job.worker_id == worker_id, Job.status == RUNNING)
        .values(lease_expires_at=now + timedelta(seconds=lease_seconds), heartbeat_at=now),
    )
    if renewed and progress is not None:
        detail = {} if progress_detail is None else {"progress_detail": progress_detail}
        session.execute(update(Run).where(Run.id == job.run_id).values(progress=progress, **detail))
    return bool(renewed)


def complete(session: Session, job: ClaimedJob, worker_id: str) -> bool:
    """Mark the job and its run succeeded; False (and nothing changed) if the lease was lost."""
    return _finish_held(session, job, worker_id, SUCCEEDED, None)


def fail(session: Session, job: ClaimedJob, worker_id: str, error: str) -> bool:
    """Mark the job and its run failed with ``error``; False if the lease was lost."""
    return _finish_held(session, job, worker_id, FAILED, error)


def retry_or_fail(session: Session, job: ClaimedJob, worker_id: str, error: str, backoff_seconds: float) -> str | None:
    """After a failed attempt: queue the job again after a backoff, or fail it when no attempt is left.

    Returns the job's new status (QUEUED or FAILED), or None if the lease was lost.
    """
    held = session.execute(
        select(Job.max_attempts).where(Job.id == job.id, Job.worker_id == worker_id, Job.status == RUNNING)
    ).first()
    if held is None:
        return None
    now = utc_now()
    if job.attempt >= held.max_attempts:
        reason = f"failed {job.attempt} times; last error: {error}"
        return FAILED if _finish(session, job.id, job.run_id, FAILED, reason, now, Job.worker_id == worker_id) else None
    wait = backoff_seconds * 2 ** (job.attempt - 1)
    requeued = _rows_changed(
        session,
        update(Job)
        .where(Job.id == job.id, Job.worker_id == worker_id, Job.status == RUNNING)
        .values(
            status=QUEUED,
            worker_id=None,
            lease_expires_at=None,
            error=error,
            available_at=now + timedelta(seconds=wait),
        ),
    )
    if not requeued:
        return None
    note = f"attempt {job.attempt} of {held.max_attempts} failed ({error}); trying again in {wait:g} s"
    session.execute(update(Run).where(Run.id == job.run_id).values(status=QUEUED, progress=0.0, error=note))
    return QUEUED


def release(session: Session, job: ClaimedJob, worker_id: str) -> bool:
    """Hand a job back to the queue (a worker shutting down); the attempt is not counted."""
    released = _rows_changed(
        session,
        update(Job)
        .where(Job.id == job.id, Job.worker_id == worker_id, Job.status == RUNNING)
        .values(status=QUEUED, worker_id=None, lease_expires_at=None, available_at=None, attempts=Job.attempts - 1),
    )
    if released:
        session.execute(update(Run).where(Run.id == job.run_id).values(status=QUEUED, progress=0.0))
    return bool(released)


def _finish_held(session: Session, job: ClaimedJob, worker_id: str, status: str, error: str | None) -> bool:
    return _finish(session, job.id, job.run_id, status, error, utc_now(), Job.worker_id == worker_id)


def _finish(
    session: Session,
    job_id: str,
    run_id: str,
    status: str,
    error: str | None,
    now: datetime,
    still: ColumnElement[bool],
) -> bool:
    """Finish the job and its run while the job is running and ``still`` holds of it; False (nothing changed) if not.

    The check is part of the UPDATE, so of two transactions finishing one job at once (two workers failing an
    exhausted job, a worker completing while its job is taken over) only the first changes it: on PostgreSQL
    the second waits for the row and finds it no longer running, on SQLite writers take turns.
    """
    finished = _rows_changed(
        session,
        update(Job)
        .where(Job.id == job_id, Job.status == RUNNING, still)
        .values(status=status, error=error, finished_at=now, lease_expires_at=None),
    )
    if not finished:
        return False
    progress = 1.0 if status == SUCCEEDED else Run.progress
    session.execute(
        update(Run).where(Run.id == run_id).values(status=status, error=error, finished_at=now, progress=progress)
    )
    outbox.record_run_event(session, run_id, status, error, now)
    return True


def delete_run(session: Session, run_id: str) -> None:
    """Delete a run, its job and (by cascade) its result, epoch set links and pipeline names.

    The job row goes first: workers lock a job and then its run (claim, heartbeat, finish), so
    deleting the run first (its job by cascade) would lock them the other way round, and on
    PostgreSQL a delete racing a worker's heartbeat would end in a deadlock instead of waiting.
    """
    session.execute(delete(Job).where(Job.run_id == run_id))
    session.execute(delete(Run).where(Run.id == run_id))


def record_worker_seen(session: Session, worker_id: str) -> None:
    """Note that ``worker_id`` is alive (for /readyz)."""
    now = utc_now()
    beat = session.get(WorkerBeat, worker_id)
    if beat is None:
        session.add(WorkerBeat(worker_id=worker_id, seen_at=now))
    else:
        beat.seen_at = now


def forget_worker(session: Session, worker_id: str) -> None:
    """A worker that stops cleanly is no longer counted as alive."""
    session.execute(delete(WorkerBeat).where(WorkerBeat.worker_id == worker_id))


def workers_seen_since(session: Session, since: datetime) -> int:
    return int(session.scalar(select(func.count()).select_from(WorkerBeat).where(WorkerBeat.seen_at >= since)) or 0)


def queue_depth(session: Session) -> int:
    """Number of jobs waiting to be claimed."""
    return int(session.scalar(select(func.count()).select_from(Job).where(Job.status == QUEUED)) or 0)


def _rows_changed(session: Session, statement: Update) -> int:
    """Run an UPDATE; how many rows it changed (the result of a DML statement is a CursorResult)."""
    result = session.execute(statement)
    assert isinstance(result, CursorResult)
    return result.rowcount
