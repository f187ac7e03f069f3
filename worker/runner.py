"""The worker process: claim a job, run it with heartbeats, store the outcome. Nothing scientific."""

import json
import logging
import os
import signal
import socket
import threading
import time
from types import FrameType

from sqlalchemy import select

from service.settings import Settings
from service.storage import queue
from service.storage.blobs import BlobStore
from service.storage.db import Database
from service.storage.migrate import is_at_head
from service.storage.models import EpochSet, Run, RunEpochSet, RunResult, Study
from worker.engine.epochs import EpochSet as EngineEpochSet
from worker.engine.io.npz import read_npz
from worker.run_job import EpochSetRef, execute_run

log = logging.getLogger("epoch_assay.worker")


class LeaseLost(Exception):
    """Another worker took the job over; this one must drop its work."""


class Heartbeat:
    """Renews a job's lease in a background thread and carries the latest progress."""

    def __init__(self, database: Database, job: queue.ClaimedJob, worker_id: str, settings: Settings) -> None:
        self._database, self._job, self._worker_id, self._settings = database, job, worker_id, settings
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._beat, name=f"heartbeat-{job.id}", daemon=True)
        self.progress = 0.0
        self.lost = False

    def __enter__(self) -> "Heartbeat":
        self._thread.start()
        return self

    def __exit__(self, *_exc: object) -> None:
        self._stop.set()
        self._thread.join()

    def report(self, progress: float) -> None:
        """Record progress; raise LeaseLost once the lease is known to be gone."""
        self.progress = progress
        if self.lost:
            raise LeaseLost(self._job.id)

    def _beat(self) -> None:
        while not self._stop.wait(self._settings.heartbeat_seconds):
            with self._database.session() as session:
                held = queue.heartbeat(session, self._job, self._worker_id, self._settings.lease_seconds, self.progress)
                queue.record_worker_seen(session, self._worker_id)
            if not held:
                self.lost = True
                return


class Worker:
    def __init__(self, settings: Settings) -> None:
        self.settings = settings
        self.database = Database(settings.resolved_database_url)
        self.blobs = BlobStore(settings.blob_dir)
        self.worker_id = f"{socket.gethostname()}:{os.getpid()}"
        self._stopping = threading.Event()

    def request_stop(self, *_signal: int | FrameType | None) -> None:
        """Finish the current job, then stop (SIGTERM, SIGINT)."""
        self._stopping.set()

    def wait_for_schema(self, timeout_s: float = 60.0) -> None:
        deadline = time.monotonic() + timeout_s
        while not is_at_head(self.database.engine, self.database.url):
            if time.monotonic() > deadline:
                raise SystemExit("the database has no current schema; run `epoch-assay migrate` or start the API first")
            time.sleep(0.5)

    def run_forever(self) -> None:
        signal.signal(signal.SIGTERM, self.request_stop)
        signal.signal(signal.SIGINT, self.request_stop)
        self.wait_for_schema()
        log.info("worker %s ready", self.worker_id)
        while not self._stopping.is_set():
            if not self.run_one():
                self._stopping.wait(self.settings.poll_seconds)

    def run_one(self) -> bool:
        """Claim and run one job; False when the queue was empty."""
        with self.database.session() as session:
            queue.record_worker_seen(session, self.worker_id)
            job = queue.claim(session, self.worker_id, self.settings.lease_seconds)
        if job is None:
            return False
        log.info("claimed %s (run %s, attempt %d)", job.id, job.run_id, job.attempt)
        with Heartbeat(self.database, job, self.worker_id, self.settings) as beat:
            try:
                document = self._execute(job, beat)
            except LeaseLost:
                log.warning("lost the lease of %s; dropping its work", job.id)
                return True
            except Exception as error:  # noqa: BLE001 - any failure of a job ends that job, not the worker
                log.exception("job %s failed", job.id)
                with self.database.session() as session:
                    queue.fail(session, job, self.worker_id, f"{type(error).__name__}: {error}")
                return True
        with self.database.session() as session:
            if queue.complete(session, job, self.worker_id):
                session.add(RunResult(run_id=job.run_id, document=json.dumps(document, allow_nan=False)))
        return True

    def _execute(self, job: queue.ClaimedJob, beat: Heartbeat) -> dict:
        with self.database.session() as session:
            run = session.get(Run, job.run_id)
            study_code = session.scalar(select(Study.code).where(Study.id == run.study_id))
            rows = session.execute(
                select(EpochSet).join(RunEpochSet, RunEpochSet.epoch_set_id == EpochSet.id)
                .where(RunEpochSet.run_id == run.id).order_by(RunEpochSet.position)
            ).scalars().all()
            refs = [EpochSetRef(id=r.id, subject=r.subject, session=r.session, sha256=r.sha256) for r in rows]
            spec = run.spec
        return execute_run(job.run_id, study_code, spec, refs, self._load, beat.report)

    def _load(self, ref: EpochSetRef) -> EngineEpochSet:
        return read_npz(self.blobs.path(ref.sha256), max_array_bytes=self.settings.max_array_bytes)
