"""The worker's one door into the service's storage: jobs, epoch sets, blobs, results, webhook deliveries.

``worker/`` imports nothing else of ``service.storage`` (checked by the layering contract in
pyproject.toml), so what a worker may do to the database is listed here and nowhere else. Each
method opens and commits its own short transaction; no session is handed out.
"""

from collections.abc import Collection
from contextlib import AbstractContextManager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sqlalchemy.exc import SQLAlchemyError

from service.settings import Settings
from service.storage import outbox, queue
from service.storage.blobs import BlobCorruptError, open_blob_store
from service.storage.db import Database
from service.storage.epoch_sets import epoch_sets_of_run
from service.storage.migrate import is_at_head
from service.storage.models import EpochSet, Run, RunResult, Study
from service.storage.outbox import AttemptOutcome, DueDelivery
from service.storage.queue import ClaimedJob

__all__ = [
    "FAILED",
    "AttemptOutcome",
    "BlobCorruptError",
    "ClaimedJob",
    "DueDelivery",
    "RunToExecute",
    "StoreError",
    "StoredEpochSet",
    "WorkerStore",
]

FAILED = queue.FAILED


#: What the store raises when the database fails (locked, unreachable, connection dropped).
StoreError = SQLAlchemyError


@dataclass(frozen=True)
class StoredEpochSet:
    """An epoch set as the worker reads it: an upload (its blob ``sha256``) or a recording (its file,
    events and epoching, epoched by the worker)."""

    id: str
    subject: str
    session: str | None
    sha256: str
    source: str
    file_sha256: str | None
    events_sha256: str | None
    epoching: dict[str, Any] | None
    channels: dict[str, Any] | None


@dataclass(frozen=True)
class RunToExecute:
    """What a claimed job's run needs: its study's code, its spec as stored and its epoch sets in order."""

    study_code: str
    spec: dict[str, Any]
    epoch_sets: list[StoredEpochSet]


def _stored(row: EpochSet) -> StoredEpochSet:
    return StoredEpochSet(
        id=row.id,
        subject=row.subject,
        session=row.session,
        sha256=row.sha256,
        source=row.source,
        file_sha256=row.file_sha256,
        events_sha256=row.events_sha256,
        epoching=row.epoching,
        channels=row.channels,
    )


class WorkerStore:
    """The database and blob store of ``settings``, as a worker uses them."""

    def __init__(self, settings: Settings) -> None:
        self._database = Database(settings.resolved_database_url)
        self._blobs = open_blob_store(settings)

    def close(self) -> None:
        """Close the database connections (the worker stops)."""
        self._database.dispose()

    def schema_is_current(self) -> bool:
        """Whether the database has the schema this code expects (migrated to head)."""
        return is_at_head(self._database.engine, self._database.url)

    # Jobs

    def claim(self, worker_id: str, lease_seconds: float) -> ClaimedJob | None:
        """The next due job, leased to this worker; None when the queue is empty."""
        with self._database.session() as session:
            return queue.claim(session, worker_id, lease_seconds)

    def heartbeat(
        self,
        job: ClaimedJob,
        worker_id: str,
        lease_seconds: float,
        progress: float,
        detail: dict[str, float | int | None] | None,
    ) -> bool:
        """Renew the lease and store progress; False when the job is no longer this worker's."""
        with self._database.session() as session:
            held = queue.heartbeat(session, job, worker_id, lease_seconds, progress, detail)
            queue.record_worker_seen(session, worker_id)
        return held

    def record_worker_seen(self, worker_id: str) -> None:
        """Note that the worker is alive (what /readyz counts)."""
        with self._database.session() as session:
            queue.record_worker_seen(session, worker_id)

    def forget_worker(self, worker_id: str) -> None:
        """Remove the worker from those seen (it stops)."""
        with self._database.session() as session:
            queue.forget_worker(session, worker_id)

    def release(self, job: ClaimedJob, worker_id: str) -> bool:
        """Hand the job back to the queue without counting the attempt."""
        with self._database.session() as session:
            return queue.release(session, job, worker_id)

    def store_result(self, job: ClaimedJob, worker_id: str, document_json: str) -> bool:
        """Mark the job succeeded and store the run's result document, as JSON text (with its webhook events, in
        one transaction); False when the job was no longer this worker's (nothing stored). Raises
        :data:`StoreError` when the database fails; nothing is then stored and the call may be repeated."""
        with self._database.session() as session:
            if not queue.complete(session, job, worker_id):
                return False
            session.add(RunResult(run_id=job.run_id, document=document_json))
            return True

    def record_failure(
        self, job: ClaimedJob, worker_id: str, reason: str, *, permanent: bool, backoff_seconds: float
    ) -> str | None:
        """Record a failed attempt: failed for good when ``permanent``, else retried with backoff while attempts
        remain. The run's new status (None when the job was no longer this worker's)."""
        with self._database.session() as session:
            if permanent:
                return FAILED if queue.fail(session, job, worker_id, reason) else None
            return queue.retry_or_fail(session, job, worker_id, reason, backoff_seconds)

    # Runs and their inputs

    def run_to_execute(self, job: ClaimedJob) -> RunToExecute | None:
        """The job's run with its epoch sets; None when the run has been deleted."""
        with self._database.session() as session:
            run = session.get(Run, job.run_id)
            if run is None:
                return None
            study = session.get(Study, run.study_id)
            code = study.code if study is not None else run.study_id
            epoch_sets = [_stored(row) for row in epoch_sets_of_run(session, run.id)]
            return RunToExecute(study_code=code, spec=run.spec, epoch_sets=epoch_sets)

    def epoch_set(self, epoch_set_id: str) -> StoredEpochSet | None:
        """The epoch set as stored now; None when it has been deleted."""
        with self._database.session() as session:
            row = session.get(EpochSet, epoch_set_id)
            return None if row is None else _stored(row)

    def local_copy(self, sha256: str) -> AbstractContextManager[Path]:
        """A local file holding the blob, verified by its SHA-256 (BlobCorruptError when it is damaged)."""
        return self._blobs.local_copy(sha256)

    # Webhook deliveries

    def claim_delivery(self, lease_seconds: float, busy_studies: Collection[str] = ()) -> DueDelivery | None:
        """The next due webhook delivery of a study not in ``busy_studies``, leased; None when none is due."""
        with self._database.session() as session:
            return outbox.claim_delivery(session, lease_seconds, busy_studies)

    def record_attempt(
        self,
        delivery: DueDelivery,
        outcome: AttemptOutcome,
        *,
        max_attempts: int,
        backoff_seconds: float,
        backoff_max_seconds: float,
    ) -> str:
        """Log one delivery attempt and move the delivery on; its new status."""
        with self._database.session() as session:
            return outbox.record_attempt(
                session,
                delivery,
                outcome,
                max_attempts=max_attempts,
                backoff_seconds=backoff_seconds,
                backoff_max_seconds=backoff_max_seconds,
            )
