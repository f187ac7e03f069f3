"""Queries on runs and their results."""

from dataclasses import dataclass
from datetime import datetime

from sqlalchemy import ColumnElement, and_, or_, select
from sqlalchemy.orm import Session

from service.storage import queue
from service.storage.models import EpochSet, Run, RunEpochSet, RunPipeline, RunResult, Study


@dataclass(frozen=True)
class RunFilter:
    """Which runs a listing keeps; None leaves a field open. Times are timezone-aware."""

    study_id: str | None = None
    subject: str | None = None
    session_label: str | None = None
    status: str | None = None
    pipeline: str | None = None
    created_after: datetime | None = None
    created_before: datetime | None = None


def runs_page(
    session: Session,
    visible: ColumnElement[bool],
    where: RunFilter,
    after: tuple[datetime, str] | None,
    limit: int,
) -> tuple[list[tuple[Run, str]], bool]:
    """Up to ``limit`` runs (with their study's code) matching ``visible`` (a filter on ``Run.study_id``) and
    ``where``, newest first, strictly after the (created_at, id) ``after``; and whether more follow."""
    query = select(Run, Study.code).join(Study, Run.study_id == Study.id).where(visible)
    if where.study_id is not None:
        query = query.where(Run.study_id == where.study_id)
    if where.subject is not None or where.session_label is not None:
        scored = select(RunEpochSet.run_id).join(EpochSet, RunEpochSet.epoch_set_id == EpochSet.id)
        if where.subject is not None:
            scored = scored.where(EpochSet.subject == where.subject)
        if where.session_label is not None:
            scored = scored.where(EpochSet.session == where.session_label)
        query = query.where(Run.id.in_(scored))
    if where.status is not None:
        query = query.where(Run.status == where.status)
    if where.pipeline is not None:
        query = query.where(Run.id.in_(select(RunPipeline.run_id).where(RunPipeline.name == where.pipeline)))
    if where.created_after is not None:
        query = query.where(Run.created_at >= where.created_after)
    if where.created_before is not None:
        query = query.where(Run.created_at < where.created_before)
    if after is not None:
        last_created, last_id = after
        query = query.where(or_(Run.created_at < last_created, and_(Run.created_at == last_created, Run.id < last_id)))
    rows = session.execute(query.order_by(Run.created_at.desc(), Run.id.desc()).limit(limit + 1)).all()
    return [(run, code) for run, code in rows[:limit]], len(rows) > limit


def latest_runs_of_study(session: Session, study_id: str, limit: int) -> list[Run]:
    """The study's ``limit`` newest runs, newest first."""
    query = select(Run).where(Run.study_id == study_id).order_by(Run.created_at.desc(), Run.id.desc()).limit(limit)
    return list(session.scalars(query))


def succeeded_documents_of_study(session: Session, study_id: str) -> list[tuple[Run, str]]:
    """The study's succeeded runs with their stored result documents (JSON text), oldest first."""
    query = (
        select(Run, RunResult.document)
        .join(RunResult, RunResult.run_id == Run.id)
        .where(Run.study_id == study_id, Run.status == queue.SUCCEEDED)
        .order_by(Run.created_at, Run.id)
    )
    return [(run, document) for run, document in session.execute(query).all()]


def result_document(session: Session, run_id: str) -> str | None:
    """The stored result document (JSON text) of the run, if it has one."""
    result = session.get(RunResult, run_id)
    return None if result is None else result.document
