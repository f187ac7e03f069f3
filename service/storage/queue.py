"""The job queue and its state machine.

    queued ──claim──▶ running ──complete──▶ succeeded
       ▲                 │  └────fail────▶ failed
       └── lease expires ┘ (taken again while attempts < max_attempts, else failed)

A claim is one atomic UPDATE, so two workers never hold the same job; on PostgreSQL the
candidate row is locked with ``FOR UPDATE SKIP LOCKED``. A worker renews its lease with
heartbeats; completion and failure only count while the worker still holds the lease,
so a job taken over after a lost lease is finished exactly once.
"""

from dataclasses import dataclass
from datetime import datetime, timedelta

from sqlalchemy import and_, func, or_, select, update
from sqlalchemy.orm import Session

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


def _claimable(now: datetime):  # type: ignore[no-untyped-def]
    return and_(
        Job.attempts < Job.max_attempts,
        or_(Job.status == QUEUED, and_(Job.status == RUNNING, Job.lease_expires_at < now)),
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
        select(Job.id, Job.run_id, Job.attempts).where(
            Job.status == RUNNING, Job.lease_expires_at < now, Job.attempts >= Job.max_attempts
        )
    ).all()
    for job_id, run_id, attempts in exhausted:
        reason = f"the worker running this job stopped answering {attempts} times; giving up"
        _finish(session, job_id, run_id, FAILED, reason, now)


def heartbeat(session: Session, job: ClaimedJob, worker_id: str, lease_seconds: float, progress: float | None = None) -> bool:
    """Renew the lease (and record progress). False when the job is no longer this worker's."""
    now = utc_now()
    renewed = session.execute(
        update(Job)
        .where(Job.id == job.id, Job.worker_id == worker_id, Job.status == RUNNING)
        .values(lease_expires_at=now + timedelta(seconds=lease_seconds), heartbeat_at=now)
    ).rowcount
    if renewed and progress is not None:
        session.execute(update(Run).where(Run.id == job.run_id).values(progress=progress))
    return bool(renewed)


def complete(session: Session, job: ClaimedJob, worker_id: str) -> bool:
    """Mark the job and its run succeeded; False (and nothing changed) if the lease was lost."""
    return _finish_held(session, job, worker_id, SUCCEEDED, None)


def fail(session: Session, job: ClaimedJob, worker_id: str, error: str) -> bool:
    """Mark the job and its run failed with ``error``; False if the lease was lost."""
    return _finish_held(session, job, worker_id, FAILED, error)


def release(session: Session, job: ClaimedJob, worker_id: str) -> bool:
    """Hand a job back to the queue (a worker shutting down); the attempt is not counted."""
    released = session.execute(
        update(Job)
        .where(Job.id == job.id, Job.worker_id == worker_id, Job.status == RUNNING)
        .values(status=QUEUED, worker_id=None, lease_expires_at=None, attempts=Job.attempts - 1)
    ).rowcount
    if released:
        session.execute(update(Run).where(Run.id == job.run_id).values(status=QUEUED, progress=0.0))
    return bool(released)


def _finish_held(session: Session, job: ClaimedJob, worker_id: str, status: str, error: str | None) -> bool:
    held = session.execute(
        select(Job.id).where(Job.id == job.id, Job.worker_id == worker_id, Job.status == RUNNING)
    ).first()
    if held is None:
        return False
    _finish(session, job.id, job.run_id, status, error, utc_now())
    return True


def _finish(session: Session, job_id: str, run_id: str, status: str, error: str | None, now: datetime) -> None:
    session.execute(
        update(Job).where(Job.id == job_id).values(status=status, error=error, finished_at=now, lease_expires_at=None)
    )
    progress = 1.0 if status == SUCCEEDED else Run.progress
    session.execute(
        update(Run).where(Run.id == run_id).values(status=status, error=error, finished_at=now, progress=progress)
    )


def record_worker_seen(session: Session, worker_id: str) -> None:
    """Note that ``worker_id`` is alive (for /readyz)."""
    now = utc_now()
    beat = session.get(WorkerBeat, worker_id)
    if beat is None:
        session.add(WorkerBeat(worker_id=worker_id, seen_at=now))
    else:
        beat.seen_at = now


def queue_depth(session: Session) -> int:
    """Number of jobs waiting to be claimed."""
    return int(session.scalar(select(func.count()).select_from(Job).where(Job.status == QUEUED)) or 0)
