"""Storage models (SQLAlchemy 2.0 typed mappings). Wire schemas live in service.schemas."""

from datetime import UTC, datetime
from typing import Any

from sqlalchemy import JSON, DateTime, Float, ForeignKey, Index, Integer, String, Text, TypeDecorator, UniqueConstraint
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


class Base(DeclarativeBase):
    pass


class Study(Base):
    __tablename__ = "studies"

    id: Mapped[str] = mapped_column(String(40), primary_key=True)
    code: Mapped[str] = mapped_column(String(64), unique=True)
    title: Mapped[str] = mapped_column(String(200))
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utc_now)


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

    study: Mapped[Study] = relationship()


class Run(Base):
    """A scoring run: its spec, its state as clients see it, and (once done) its result."""

    __tablename__ = "runs"
    __table_args__ = (Index("ix_runs_study_created", "study_id", "created_at", "id"),)

    id: Mapped[str] = mapped_column(String(40), primary_key=True)
    study_id: Mapped[str] = mapped_column(ForeignKey("studies.id", ondelete="CASCADE"))
    spec: Mapped[dict[str, Any]] = mapped_column(JSON)
    status: Mapped[str] = mapped_column(String(16), default="queued")
    progress: Mapped[float] = mapped_column(Float, default=0.0)
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


class RunResult(Base):
    """The result document of a succeeded run (JSON text, see worker.result_document)."""

    __tablename__ = "run_results"

    run_id: Mapped[str] = mapped_column(ForeignKey("runs.id", ondelete="CASCADE"), primary_key=True)
    document: Mapped[str] = mapped_column(Text)
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


class WorkerBeat(Base):
    """The last time each worker process was heard from (for readiness checks)."""

    __tablename__ = "worker_beats"

    worker_id: Mapped[str] = mapped_column(String(80), primary_key=True)
    seen_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utc_now)
