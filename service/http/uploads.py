"""What the three upload routes (file, JSON, recording) share: an epoch set on the wire, and the answer to
an upload once its row is built (201 with Location, or 200 with the stored one), kept for idempotent retries."""

from collections.abc import Callable, Sequence

from fastapi import Response, status
from pydantic import BaseModel
from sqlalchemy.orm import Session

from service.domain.epoch_sets import finish_stored, store_epoch_set
from service.http.idempotency import Idempotency
from service.schemas.epoch_sets import EpochSetOut
from service.storage.blobs import StagedBlob
from service.storage.models import EpochSet, Study


def epoch_set_out(row: EpochSet, study_code: str) -> EpochSetOut:
    return EpochSetOut(
        id=row.id,
        study=study_code,
        subject=row.subject,
        session=row.session,
        n_trials=row.n_trials,
        n_channels=row.n_channels,
        n_times=row.n_times,
        sfreq=row.sfreq,
        tmin=row.tmin,
        ch_names=row.ch_names,
        conditions=row.conditions,
        sha256=row.sha256,
        created_at=row.created_at,
    )


def answer_upload(
    session: Session,
    study: Study,
    row: EpochSet,
    blobs: Sequence[StagedBlob],
    idempotency: Idempotency,
    render: Callable[[EpochSet], BaseModel],
    max_attempts: int,
) -> Response:
    """Store the upload (see :func:`service.domain.epoch_sets.store_epoch_set`) and answer it:
    201 with its Location, or 200 with the stored one when the same content won a race."""
    stored, created = store_epoch_set(session, study, row, blobs, max_attempts)
    if not created:
        return idempotency.remember(status.HTTP_200_OK, render(stored))
    location = f"/v1/studies/{study.code}/epoch-sets/{stored.id}"
    answer = idempotency.remember(status.HTTP_201_CREATED, render(stored), location=location)
    session.commit()
    finish_stored(blobs)
    return answer
