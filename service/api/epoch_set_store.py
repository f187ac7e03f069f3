"""Storing a checked epoch set: its blobs and row, once per study and content, safe against concurrent uploads.

Used by the JSON epoch-set route and the recordings route; the row is built by the caller.
"""

from collections.abc import Callable, Sequence

from fastapi import Response, status
from pydantic import BaseModel
from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from service.api.idempotency import Idempotency
from service.api.locked_pipelines import score_on_arrival
from service.storage.blobs import StagedBlob
from service.storage.models import EpochSet, Study


def stored_epoch_set(session: Session, study: Study, sha256: str) -> EpochSet | None:
    """The study's epoch set of this content hash, if one is stored."""
    return session.scalar(select(EpochSet).where(EpochSet.study_id == study.id, EpochSet.sha256 == sha256))


def save_epoch_set(
    session: Session,
    study: Study,
    row: EpochSet,
    blobs: Sequence[StagedBlob],
    idempotency: Idempotency,
    render: Callable[[EpochSet], BaseModel],
    location: str,
    max_attempts: int,
) -> Response:
    """Keep ``blobs`` and commit ``row``; 201, or 200 with the stored one when the same content won a race.

    When the study has a locked pipeline, a run scoring the new epoch set with it is queued in the
    same transaction.
    """
    for blob in blobs:
        blob.commit()
    session.add(row)
    try:
        session.flush()
    except IntegrityError:
        session.rollback()
        existing = stored_epoch_set(session, study, row.sha256)
        return idempotency.remember(status.HTTP_200_OK, render(existing))
    score_on_arrival(session, study, row, max_attempts)
    answer = idempotency.remember(status.HTTP_201_CREATED, render(row), location=f"{location}/{row.id}")
    session.commit()
    # Linked again after the commit: a delete of the same bytes in another study may have removed them meanwhile.
    for blob in blobs:
        blob.commit()
    return answer
