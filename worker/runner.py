"""The worker process: claim a job, run it with heartbeats, store the outcome. Nothing scientific.

SIGTERM (or SIGINT) hands the current job back at the next unit boundary (one epoch set × the
pipelines sharing a first step) and stops: the job goes back to the queue without counting the
attempt, so a deploy does not wait for a long run and loses nothing but the units in progress. A job whose
attempt raises is retried with backoff up to ``max_attempts``, except when retrying cannot
help (the stored file is gone or malformed, the spec cannot run). Each worker also sends the
webhook events in a thread (``worker.delivery``).

A database error (SQLite "locked" after its wait, a dropped PostgreSQL connection) does not end
the worker: the loop waits with backoff and goes on, and a computed result whose storing fails is
kept and stored again (the lease is renewed meanwhile), so the run is not computed twice.
"""

import json
import logging
import os
import signal
import socket
import threading
import time
from contextlib import nullcontext
from types import FrameType

from pydantic import ValidationError

from epoch_assay.engine.document import RunResultDocument
from epoch_assay.engine.epochs import EpochSet as EngineEpochSet
from epoch_assay.engine.errors import EpochSetFormatError, EpochSetTooLargeError, SpecError
from epoch_assay.engine.io import read_epoch_set_file
from epoch_assay.engine.recording import ChannelSpec, ContinuousInput, EpochingSpec, load_recording
from service.settings import Settings
from service.storage.worker_port import BlobCorruptError, ClaimedJob, StoreError, WorkerStore
from worker.delivery import Deliverer
from worker.execution.multiverse import ExecutionSettings
from worker.execution.parallel import Progress
from worker.run_job import EpochSetRef, execute_run

log = logging.getLogger("epoch_assay.worker")
# Errors that will happen again on every attempt: the stored file is gone, damaged or malformed, the spec cannot run.
PERMANENT_ERRORS = (
    FileNotFoundError,
    BlobCorruptError,
    EpochSetFormatError,
    EpochSetTooLargeError,
    SpecError,
    ValidationError,
)


# Waits after consecutive database errors: 0.5 s doubled each time, at most 30 s (common practice for
# retrying a shared resource: exponential backoff with a cap). A result is stored up to this many times.
DATABASE_BACKOFF_SECONDS = (0.5, 30.0)
STORE_ATTEMPTS = 20


def database_backoff(failures: int) -> float:
    """The wait after ``failures`` consecutive database errors, in s."""
    first, longest = DATABASE_BACKOFF_SECONDS
    return min(first * 2 ** (failures - 1), longest)


def failure_reason(error: Exception) -> str:
    """A failed attempt in our own words for the run's ``error``: no server paths, no library text."""
    if isinstance(error, EpochSetFormatError | EpochSetTooLargeError | SpecError):
        return str(error)  # written by the engine, about the user's input
    if isinstance(error, FileNotFoundError):
        return "a file of this run is no longer stored; upload the epoch set again and start a new run"
    if isinstance(error, BlobCorruptError):
        return (
            f"the stored file {error.sha256} failed its integrity check (it is damaged); restore it from a backup "
            "of the blob store, or delete the runs that use its epoch set, delete the epoch set and upload the "
            "file again"
        )
    if isinstance(error, ValidationError):
        return "the run's stored spec is not valid for this version of the service; start a new run"
    return (
        f"the worker hit an internal error ({type(error).__name__}); the operator finds the details in the "
        "worker's log under this run's id"
    )


class LeaseLost(Exception):
    """Another worker took the job over (or the run was deleted); this one must drop its work."""


class HandBack(Exception):
    """The worker was asked to stop; the job goes back to the queue."""


class Heartbeat:
    """Renews a job's lease in a background thread and carries the latest progress."""

    def __init__(
        self, store: WorkerStore, job: ClaimedJob, worker_id: str, settings: Settings, stopping: threading.Event
    ) -> None:
        self._store, self._job, self._worker_id, self._settings = store, job, worker_id, settings
        self._stopping = stopping
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._beat, name=f"heartbeat-{job.id}", daemon=True)
        self.progress = 0.0
        self.detail: dict[str, float | int | None] | None = None
        self.lost = False

    def __enter__(self) -> "Heartbeat":
        self._thread.start()
        return self

    def __exit__(self, *_exc: object) -> None:
        self._stop.set()
        self._thread.join()

    def report(self, progress: float) -> None:
        """Record progress (called after each unit); raise LeaseLost or HandBack when the work must stop."""
        self.progress = progress
        if self.lost:
            raise LeaseLost(self._job.id)
        if self._stopping.is_set() and progress < 1.0:
            raise HandBack(self._job.id)

    def note_detail(self, progress: Progress) -> None:
        """Record the units done, their total and the ETA, sent with the next heartbeat."""
        self.detail = {
            "units_done": progress.done,
            "units_total": progress.total,
            "elapsed_s": round(progress.elapsed_s, 3),
            "eta_s": None if progress.eta_s is None else round(progress.eta_s, 3),
        }

    def _beat(self) -> None:
        while not self._stop.wait(self._settings.heartbeat_seconds):
            try:
                held = self._store.heartbeat(
                    self._job, self._worker_id, self._settings.lease_seconds, self.progress, self.detail
                )
            except Exception:
                log.exception("heartbeat failed; trying again", extra={"job": self._job.id})
                continue
            if not held:
                self.lost = True
                return


class Worker:
    def __init__(self, settings: Settings) -> None:
        self.settings = settings
        self.store = WorkerStore(settings)
        self.worker_id = f"{socket.gethostname()}:{os.getpid()}"
        self._stopping = threading.Event()
        self._last_seen_recorded = 0.0

    def request_stop(self, *_signal: int | FrameType | None) -> None:
        """Hand the current job back at the next unit boundary, then stop (SIGTERM, SIGINT)."""
        self._stopping.set()

    def wait_for_schema(self, timeout_s: float = 60.0) -> None:
        deadline = time.monotonic() + timeout_s
        while not self.store.schema_is_current():
            if time.monotonic() > deadline:
                raise SystemExit("the database has no current schema; run `epoch-assay migrate` or start the API first")
            time.sleep(0.5)

    def run_forever(self) -> None:
        signal.signal(signal.SIGTERM, self.request_stop)
        signal.signal(signal.SIGINT, self.request_stop)
        self.wait_for_schema()
        stop_delivery = threading.Event()
        delivery = threading.Thread(
            target=Deliverer(self.store, self.settings).run_until,
            args=(stop_delivery,),
            name="webhook-delivery",
            daemon=True,
        )
        delivery.start()
        log.info("worker %s ready", self.worker_id)
        try:
            failures = 0
            while not self._stopping.is_set():
                try:
                    busy = self.run_one()
                    failures = 0
                except Exception:  # a database error most often; whatever it was, the loop goes on
                    failures += 1
                    log.exception(
                        "the worker loop hit an error; waiting before the next try", extra={"failures": failures}
                    )
                    self._stopping.wait(database_backoff(failures))
                    continue
                if not busy:
                    self._stopping.wait(self.settings.poll_seconds)
        finally:
            stop_delivery.set()
            delivery.join(timeout=self.settings.webhook_timeout_seconds + 5)
            try:
                self.store.forget_worker(self.worker_id)
            except StoreError:
                log.warning("could not remove this worker from the list of live workers; it ages out")
            self.store.close()
            log.info("worker %s stopped", self.worker_id)

    def run_one(self) -> bool:
        """Claim and run one job; False when the queue was empty."""
        self._note_alive()
        job = self.store.claim(self.worker_id, self.settings.lease_seconds)
        if job is None:
            return False
        context = {"job": job.id, "run": job.run_id, "attempt": job.attempt}
        log.info("claimed a job", extra=context)
        with Heartbeat(self.store, job, self.worker_id, self.settings, self._stopping) as beat:
            try:
                document = json.dumps(self._execute(job, beat).model_dump(mode="json"), allow_nan=False)
            except LeaseLost:
                log.warning("lost the lease (or the run was deleted); dropping the work", extra=context)
                return True
            except HandBack:
                self.store.release(job, self.worker_id)
                log.info("stopping: handed the job back to the queue", extra=context)
                return True
            except Exception as error:
                self._record_failure(job, error, context)
                return True
            self._store_result(job, document, beat, context)
        return True

    def _store_result(self, job: ClaimedJob, document: str, beat: Heartbeat, context: dict[str, object]) -> None:
        """Store a computed result (JSON text), trying again with backoff on database errors while the lease is held."""
        for attempt in range(1, STORE_ATTEMPTS + 1):
            try:
                if self.store.store_result(job, self.worker_id, document):
                    log.info("job succeeded", extra=context)
                return
            except StoreError:
                log.warning(
                    "storing the result failed; keeping it and trying again",
                    exc_info=True,
                    extra=context | {"store_attempt": attempt},
                )
                if beat.lost or self._stopping.wait(database_backoff(attempt)):
                    break
        log.error("the result could not be stored; the job is left to be taken up again", extra=context)

    def _record_failure(self, job: ClaimedJob, error: Exception, context: dict[str, object]) -> None:
        reason = failure_reason(error)
        outcome = self.store.record_failure(
            job,
            self.worker_id,
            reason,
            permanent=isinstance(error, PERMANENT_ERRORS),
            backoff_seconds=self.settings.retry_backoff_seconds,
        )
        log.error("job attempt failed", exc_info=error, extra=context | {"outcome": outcome})

    def _note_alive(self) -> None:
        """Record that this worker is alive, at most about once a second (an idle worker polls more often)."""
        now = time.monotonic()
        if now - self._last_seen_recorded >= min(1.0, self.settings.heartbeat_seconds):
            self.store.record_worker_seen(self.worker_id)
            self._last_seen_recorded = now

    def _execute(self, job: ClaimedJob, beat: Heartbeat) -> RunResultDocument:
        run = self.store.run_to_execute(job)
        if run is None:
            raise LeaseLost(job.id)
        refs = [EpochSetRef(id=r.id, subject=r.subject, session=r.session, sha256=r.sha256) for r in run.epoch_sets]
        execution = ExecutionSettings(
            workers=self.settings.parallel_workers,
            cache_dir=self.settings.step_cache_dir,
            cache_max_bytes=self.settings.cache_max_bytes,
            cache_min_step_seconds=self.settings.cache_min_step_seconds,
            dask_scheduler=self.settings.dask_scheduler,
        )
        return execute_run(
            job.run_id,
            run.study_code,
            run.spec,
            refs,
            self._load,
            beat.report,
            execution=execution,
            on_detail=beat.note_detail,
        )

    def _load(self, ref: EpochSetRef) -> EngineEpochSet | ContinuousInput:
        """The epoch set, or for a recording its file, events and epoching (epoched per pipeline by run_job)."""
        stored = self.store.epoch_set(ref.id)
        if stored is None:
            raise FileNotFoundError(f"epoch set {ref.id} is no longer stored")
        if stored.source == "recording":
            if stored.file_sha256 is None:
                raise FileNotFoundError(f"recording {ref.id} names no recording file")
            events_copy = self.store.local_copy(stored.events_sha256) if stored.events_sha256 else nullcontext(None)
            with self.store.local_copy(stored.file_sha256) as path, events_copy as events_path:
                return load_recording(
                    path,
                    events_path,
                    EpochingSpec.model_validate(stored.epoching),
                    ChannelSpec.model_validate(stored.channels or {}),
                    max_array_bytes=self.settings.max_array_bytes,
                )
        with self.store.local_copy(ref.sha256) as path:
            return read_epoch_set_file(
                path,
                max_array_bytes=self.settings.max_array_bytes,
                max_compression_ratio=self.settings.max_compression_ratio,
            )[0]
