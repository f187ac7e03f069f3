"""Epoch sets: uploaded files of trials × channels × time with a condition label per trial."""

from typing import Annotated

from fastapi import APIRouter, File, Form, Query, Response, UploadFile, status
from sqlalchemy import select
from sqlalchemy.exc import IntegrityError

from service.api.deps import BlobsDep, SessionDep, SettingsDep
from service.api.lookups import study_by_code
from service.errors import NotFound, format_error_to_unprocessable, too_large_to_payload_error
from service.schemas.epoch_sets import SUBJECT_PATTERN, EpochSetOut
from service.storage.ids import new_id
from service.storage.models import EpochSet, Study
from worker.engine.epochs import EpochSet as EngineEpochSet
from worker.engine.errors import EpochSetFormatError, EpochSetTooLargeError
from worker.engine.io.npz import read_npz

router = APIRouter(prefix="/v1/studies/{code}/epoch-sets", tags=["epoch sets"])


def epoch_set_out(row: EpochSet, study_code: str) -> EpochSetOut:
    return EpochSetOut(
        id=row.id, study=study_code, subject=row.subject, session=row.session, n_trials=row.n_trials,
        n_channels=row.n_channels, n_times=row.n_times, sfreq=row.sfreq, tmin=row.tmin, ch_names=row.ch_names,
        conditions=row.conditions, sha256=row.sha256, created_at=row.created_at,
    )


def _new_row(study: Study, subject: str, session: str | None, sha256: str, size: int, epochs: EngineEpochSet) -> EpochSet:
    meta = epochs.meta()
    return EpochSet(
        id=new_id("es"), study_id=study.id, subject=subject, session=session, sha256=sha256, size_bytes=size,
        n_trials=epochs.n_trials, n_channels=epochs.n_channels, n_times=epochs.n_times, sfreq=epochs.sfreq,
        tmin=epochs.tmin, ch_names=list(epochs.ch_names), ch_types=list(epochs.ch_types),
        conditions=meta.condition_counts, has_positions=meta.has_positions,
    )


@router.post(
    "",
    status_code=status.HTTP_201_CREATED,
    response_model=EpochSetOut,
    responses={
        200: {"model": EpochSetOut, "description": "The same bytes were stored before; the existing epoch set."},
        413: {"description": "The upload or the arrays it declares are too large."},
        422: {"description": "The file is malformed; the detail names the field and the fix."},
    },
)
def upload_epoch_set(
    code: str,
    file: Annotated[UploadFile, File(description="An NPZ epoch-set file (see the README).")],
    subject: Annotated[str, Form(pattern=SUBJECT_PATTERN, description="Subject id, e.g. sub-01.")],
    session: SessionDep,
    blobs: BlobsDep,
    settings: SettingsDep,
    response: Response,
    session_label: Annotated[str | None, Form(alias="session", pattern=SUBJECT_PATTERN)] = None,
) -> EpochSetOut:
    """Upload one epoch set to a study. Uploading the same bytes again returns the stored one (200)."""
    study = study_by_code(session, code)
    with blobs.staged(file.file) as staged:
        existing = session.scalar(select(EpochSet).where(EpochSet.study_id == study.id, EpochSet.sha256 == staged.sha256))
        if existing is not None:
            response.status_code = status.HTTP_200_OK
            return epoch_set_out(existing, study.code)
        try:
            epochs = read_npz(staged.path, max_array_bytes=settings.max_array_bytes)
        except EpochSetFormatError as error:
            raise format_error_to_unprocessable(error) from None
        except EpochSetTooLargeError as error:
            raise too_large_to_payload_error(error) from None
        row = _new_row(study, subject, session_label, staged.sha256, staged.size, epochs)
        staged.commit()
    session.add(row)
    try:
        session.flush()
    except IntegrityError:
        # The same bytes arrived in a concurrent request that committed first.
        session.rollback()
        response.status_code = status.HTTP_200_OK
        existing = session.scalars(
            select(EpochSet).where(EpochSet.study_id == study.id, EpochSet.sha256 == row.sha256)
        ).one()
        return epoch_set_out(existing, code)
    return epoch_set_out(row, study.code)


@router.get("", response_model=list[EpochSetOut])
def list_epoch_sets(
    code: str,
    session: SessionDep,
    subject: Annotated[str | None, Query(description="Only this subject.")] = None,
    session_label: Annotated[str | None, Query(alias="session", description="Only this session.")] = None,
) -> list[EpochSetOut]:
    """The study's epoch sets, oldest first."""
    study = study_by_code(session, code)
    query = select(EpochSet).where(EpochSet.study_id == study.id)
    if subject is not None:
        query = query.where(EpochSet.subject == subject)
    if session_label is not None:
        query = query.where(EpochSet.session == session_label)
    rows = session.scalars(query.order_by(EpochSet.created_at, EpochSet.id))
    return [epoch_set_out(row, study.code) for row in rows]


@router.get("/{epoch_set_id}", response_model=EpochSetOut, responses={404: {"description": "No such epoch set."}})
def get_epoch_set(code: str, epoch_set_id: str, session: SessionDep) -> EpochSetOut:
    """One epoch set of the study."""
    study = study_by_code(session, code)
    row = session.get(EpochSet, epoch_set_id)
    if row is None or row.study_id != study.id:
        raise NotFound(f"no epoch set {epoch_set_id!r} in study {code!r}; list them with GET /v1/studies/{code}/epoch-sets")
    return epoch_set_out(row, study.code)
