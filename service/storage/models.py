"""Storage models (SQLAlchemy 2.0 typed mappings). Wire schemas live in service.schemas."""

from datetime import UTC, datetime
from typing import Any

from sqlalchemy import (
    JSON,
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    String,
    Text,
    TypeDecorator,
    UniqueConstraint,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship

from service.storage.ids import utc_now


class UTCDateTime(TypeDecorator[datetime]):
    """A timestamp stored in UTC and always read back timezone-aware."""

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: datetime | None, dialect: Any) -> datetime | None:
        if value is None:
            return None
        return value.astimezone(UTC)

    def process_result_value(self, value: datetime | None, dialect: Any) -> datetime | None:
        if value is None:
            return None
        return value.replace(tzinfo=UTC) if value.tzinfo is None else value.astimezone(UTC)


# The API key label column is VARCHAR of this length: PostgreSQL refuses a longer value (SQLite would keep it).
API_KEY_LABEL_LENGTH = 200


class Base(DeclarativeBase):
    pass


class Study(Base):
    __tablename__ = "studies"

    id: Mapped[str] = mapped_column(String(40), primary_key=True)
    code: Mapped[str] = mapped_column(String(64), unique=True)
    title: Mapped[str] = mapped_column(String(200))
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utc_now)


#: ``EpochSet.source`` of an epoch set the worker cuts from an uploaded recording.
RECORDING_SOURCE = "recording"


class EpochSet(Base):
    """An uploaded epoch set; its bytes are the blob named by ``sha256``."""

    __tablename__ = "epoch_sets"
    __table_args__ = (
        UniqueConstraint("study_id", "sha256", name="uq_epoch_sets_study_sha256"),
        Index("ix_epoch_sets_study_subject_session", "study_id", "subject", "session"),
    )

    id: Mapped[str] = mapped_column(String(40), primary_key=True)
    study_id: Mapped[str] = mapped_column(ForeignKey("studies.id", ondelete="CASCADE"))
    subject: Mapped[str] = mapped_column(String(64))
    session: Mapped[str | None] = mapped_column(String(64), nullable=True)
    sha256: Mapped[str] = mapped_column(String(64))
    size_bytes: Mapped[int] = mapped_column(Integer)
    n_trials: Mapped[int] = mapped_column(Integer)
    n_channels: Mapped[int] = mapped_column(Integer)
    n_times: Mapped[int] = mapped_column(Integer)
    sfreq: Mapped[float] = mapped_column(Float)
    tmin: Mapped[float] = mapped_column(Float)
    ch_names: Mapped[list[str]] = mapped_column(JSON)
    ch_types: Mapped[list[str]] = mapped_column(JSON)
    conditions: Mapped[dict[str, int]] = mapped_column(JSON)
    has_positions: Mapped[bool] = mapped_column(default=False)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utc_now)
    # A "recording" is epoched by the worker: its file and events are the blobs named below, and
    # ``sha256`` is then the hash of file, events, epoching and channels together (see service.api.recordings).
    source: Mapped[str] = mapped_column(String(16), default="upload", server_default="upload")
    file_format: Mapped[str] = mapped_column(String(8), default="npz", server_default="npz")
    file_sha256: Mapped[str | None] = mapped_column(String(64), nullable=True)
    events_sha256: Mapped[str | None] = mapped_column(String(64), nullable=True)
    epoching: Mapped[dict[str, Any] | None] = mapped_column(JSON, nullable=True)
    channels: Mapped[dict[str, Any] | None] = mapped_column(JSON, nullable=True)
    events_found: Mapped[dict[str, Any] | None] = mapped_column(JSON, nullable=True)

    study: Mapped[Study] = relationship()


class LockedPipeline(Base):
    """The pipeline a study has settled on: every epoch set posted afterwards is scored with it."""

    __tablename__ = "locked_pipelines"

    study_id: Mapped[str] = mapped_column(ForeignKey("studies.id", ondelete="CASCADE"), primary_key=True)
    pipeline: Mapped[dict[str, Any]] = mapped_column(JSON)
    scoring: Mapped[dict[str, Any]] = mapped_column(JSON)
    pipeline_hash: Mapped[str] = mapped_column(String(64))
    source_run: Mapped[str | None] = mapped_column(String(40), nullable=True)
    locked_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utc_now)


class Run(Base):
    """A scoring run: its spec, its state as clients see it, and (once done) its result."""

    __tablename__ = "runs"
    __table_args__ = (
        Index("ix_runs_study_created", "study_id", "created_at", "id"),
        Index("ix_runs_created", "created_at", "id"),
        Index("ix_runs_finished", "finished_at"),
    )

    id: Mapped[str] = mapped_column(String(40), primary_key=True)
    study_id: Mapped[str] = mapped_column(ForeignKey("studies.id", ondelete="CASCADE"))
    spec: Mapped[dict[str, Any]] = mapped_column(JSON)
    status: Mapped[str] = mapped_column(String(16), default="queued")
    progress: Mapped[float] = mapped_column(Float, default=0.0)
    # units_done, units_total, elapsed_s, eta_s of the latest heartbeat (worker.execution.parallel.Progress)
    progress_detail: Mapped[dict[str, Any] | None] = mapped_column(JSON, nullable=True)
    error: Mapped[str | None] = mapped_column(Text, nullable=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utc_now)
    started_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    finished_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)

    study: Mapped[Study] = relationship()


class RunEpochSet(Base):
    """Which epoch sets a run scores, in the order given (for queries by subject and session)."""

    __tablename__ = "run_epoch_sets"

    run_id: Mapped[str] = mapped_column(ForeignKey("runs.id", ondelete="CASCADE"), primary_key=True)
    epoch_set_id: Mapped[str] = mapped_column(ForeignKey("epoch_sets.id", ondelete="RESTRICT"), primary_key=True)
    position: Mapped[int] = mapped_column(Integer)


class RunPipeline(Base):
    """The pipeline names of a run, so history can be searched by pipeline with plain SQL."""

    __tablename__ = "run_pipelines"
    __table_args__ = (Index("ix_run_pipelines_name", "name", "run_id"),)

    run_id: Mapped[str] = mapped_column(ForeignKey("runs.id", ondelete="CASCADE"), primary_key=True)
    position: Mapped[int] = mapped_column(Integer, primary_key=True)
    name: Mapped[str] = mapped_column(String(200))


class RunResult(Base):
    """The result document of a succeeded run: JSON text of epoch_assay.engine.document.RunResultDocument."""

    __tablename__ = "run_results"

    run_id: Mapped[str] = mapped_column(ForeignKey("runs.id", ondelete="CASCADE"), primary_key=True)
    document: Mapped[str] = mapped_column(Text)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utc_now)


class RunFigure(Base):
    """A figure of a succeeded run's report, drawn once and kept (PNG or SVG bytes).

    ``renderer`` names the drawing code and the plotting library's version that made it, so a
    figure drawn by older code is never served for newer code: it is drawn again under the new name.
    """

    __tablename__ = "run_figures"

    run_id: Mapped[str] = mapped_column(ForeignKey("runs.id", ondelete="CASCADE"), primary_key=True)
    name: Mapped[str] = mapped_column(String(300), primary_key=True)
    format: Mapped[str] = mapped_column(String(8), primary_key=True)
    renderer: Mapped[str] = mapped_column(String(64), primary_key=True)
    content: Mapped[bytes] = mapped_column(LargeBinary)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utc_now)


class Job(Base):
    """A unit of work in the queue; its life is the state machine in service.storage.queue."""

    __tablename__ = "jobs"
    __table_args__ = (Index("ix_jobs_status_created", "status", "created_at"),)

    id: Mapped[str] = mapped_column(String(40), primary_key=True)
    run_id: Mapped[str] = mapped_column(ForeignKey("runs.id", ondelete="CASCADE"))
    status: Mapped[str] = mapped_column(String(16), default="queued")
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    max_attempts: Mapped[int] = mapped_column(Integer, default=3)
    worker_id: Mapped[str | None] = mapped_column(String(80), nullable=True)
    lease_expires_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    heartbeat_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    error: Mapped[str | None] = mapped_column(Text, nullable=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utc_now)
    finished_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    available_at: Mapped[datetime | None] = mapped_column(
        UTCDateTime, nullable=True, doc="Not claimable before this time (the backoff after a failed attempt)."
    )


class WorkerBeat(Base):
    """The last time each worker process was heard from (for readiness checks)."""

    __tablename__ = "worker_beats"

    worker_id: Mapped[str] = mapped_column(String(80), primary_key=True)
    seen_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utc_now)


class ApiKey(Base):
    """An API key: only the SHA-256 of its token is kept; ``study_id`` is None for admin keys."""

    __tablename__ = "api_keys"

    id: Mapped[str] = mapped_column(String(40), primary_key=True)
    token_sha256: Mapped[str] = mapped_column(String(64), unique=True)
    role: Mapped[str] = mapped_column(String(16))
    study_id: Mapped[str | None] = mapped_column(ForeignKey("studies.id", ondelete="CASCADE"), nullable=True)
    label: Mapped[str | None] = mapped_column(String(API_KEY_LABEL_LENGTH), nullable=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utc_now)
    revoked_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)

    study: Mapped[Study | None] = relationship()


class IdempotencyRecord(Base):
    """The first successful answer to a POST sent with an ``Idempotency-Key``, replayed to retries."""

    __tablename__ = "idempotency_records"
    __table_args__ = (Index("ix_idempotency_records_created", "created_at"),)

    caller_id: Mapped[str] = mapped_column(String(40), primary_key=True)
    key: Mapped[str] = mapped_column(String(255), primary_key=True)
    method: Mapped[str] = mapped_column(String(8))
    path: Mapped[str] = mapped_column(String(500))
    request_sha256: Mapped[str] = mapped_column(String(64))
    status_code: Mapped[int] = mapped_column(Integer)
    media_type: Mapped[str] = mapped_column(String(100))
    body: Mapped[str] = mapped_column(Text)
    location: Mapped[str | None] = mapped_column(String(500), nullable=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utc_now)


class Webhook(Base):
    """A URL that receives a signed JSON event when a run of the study succeeds or fails."""

    __tablename__ = "webhooks"
    __table_args__ = (Index("ix_webhooks_study", "study_id"),)

    id: Mapped[str] = mapped_column(String(40), primary_key=True)
    study_id: Mapped[str] = mapped_column(ForeignKey("studies.id", ondelete="CASCADE"))
    url: Mapped[str] = mapped_column(String(2000))
    # Kept as it is: signing needs the secret itself, a hash would not do.
    secret: Mapped[str] = mapped_column(String(100))
    events: Mapped[list[str]] = mapped_column(JSON)
    description: Mapped[str | None] = mapped_column(String(200), nullable=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utc_now)


class WebhookDelivery(Base):
    """One event for one webhook: the outbox row, written with the run's outcome, and its delivery log."""

    __tablename__ = "webhook_deliveries"
    __table_args__ = (
        Index("ix_webhook_deliveries_due", "status", "next_attempt_at"),
        Index("ix_webhook_deliveries_webhook", "webhook_id", "created_at"),
    )

    id: Mapped[str] = mapped_column(String(40), primary_key=True)
    webhook_id: Mapped[str] = mapped_column(ForeignKey("webhooks.id", ondelete="CASCADE"))
    event_id: Mapped[str] = mapped_column(String(40))
    event_type: Mapped[str] = mapped_column(String(40))
    run_id: Mapped[str] = mapped_column(String(40))
    payload: Mapped[str] = mapped_column(Text)
    status: Mapped[str] = mapped_column(String(16), default="pending")
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    next_attempt_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utc_now)
    lease_expires_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    last_status_code: Mapped[int | None] = mapped_column(Integer, nullable=True)
    last_error: Mapped[str | None] = mapped_column(Text, nullable=True)
    log: Mapped[list[dict[str, Any]]] = mapped_column(JSON, default=list)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utc_now)
    delivered_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
