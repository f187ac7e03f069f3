"""Queries on epoch sets."""

from collections.abc import Sequence

from sqlalchemy import or_, select
from sqlalchemy.orm import Session

from service.storage.models import EpochSet, RunEpochSet


def epoch_set_with_hash(session: Session, study_id: str, sha256: str) -> EpochSet | None:
    """The study's epoch set of this content hash, if one is stored."""
    return session.scalar(select(EpochSet).where(EpochSet.study_id == study_id, EpochSet.sha256 == sha256))


def epoch_set_in_study(session: Session, study_id: str, epoch_set_id: str) -> EpochSet | None:
    """The epoch set of this id if it belongs to the study."""
    row = session.get(EpochSet, epoch_set_id)
    return row if row is not None and row.study_id == study_id else None


def epoch_sets_of_study(
    session: Session, study_id: str, subject: str | None = None, session_label: str | None = None
) -> list[EpochSet]:
    """The study's epoch sets (of one subject and/or session when given), oldest first."""
    query = select(EpochSet).where(EpochSet.study_id == study_id)
    if subject is not None:
        query = query.where(EpochSet.subject == subject)
    if session_label is not None:
        query = query.where(EpochSet.session == session_label)
    return list(session.scalars(query.order_by(EpochSet.created_at, EpochSet.id)))


def epoch_sets_by_id(session: Session, study_id: str, ids: Sequence[str]) -> dict[str, EpochSet]:
    """Those of ``ids`` that are epoch sets of the study, by id."""
    rows = session.scalars(select(EpochSet).where(EpochSet.id.in_(ids), EpochSet.study_id == study_id))
    return {row.id: row for row in rows}


def epoch_sets_of_run(session: Session, run_id: str) -> list[EpochSet]:
    """The run's epoch sets in the run's order."""
    query = (
        select(EpochSet)
        .join(RunEpochSet, RunEpochSet.epoch_set_id == EpochSet.id)
        .where(RunEpochSet.run_id == run_id)
        .order_by(RunEpochSet.position)
    )
    return list(session.scalars(query))


def runs_scoring(session: Session, epoch_set_id: str, limit: int) -> list[str]:
    """Ids of up to ``limit`` runs that score the epoch set, in id order."""
    query = (
        select(RunEpochSet.run_id)
        .where(RunEpochSet.epoch_set_id == epoch_set_id)
        .order_by(RunEpochSet.run_id)
        .limit(limit)
    )
    return list(session.scalars(query))


def blob_in_use(session: Session, sha256: str) -> bool:
    """Whether any epoch set (of any study) names the blob ``sha256`` (as upload, recording or events file)."""
    named = or_(EpochSet.sha256 == sha256, EpochSet.file_sha256 == sha256, EpochSet.events_sha256 == sha256)
    return session.scalar(select(EpochSet.id).where(named).limit(1)) is not None
