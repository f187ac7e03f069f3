"""Epoch sets: uploaded files of trials × channels × time with a condition label per trial."""

from typing import Annotated

from fastapi import APIRouter, File, Form, Query, Response, UploadFile, status
from sqlalchemy import or_, select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from epoch_assay.engine.epochs import EpochSet as EngineEpochSet
from epoch_assay.engine.errors import EpochSetFormatError, EpochSetTooLargeError
from epoch_assay.engine.io import read_epoch_set_file
from epoch_assay.engine.io.detect import FileFormat
from service.api.access import CallerDep
from service.api.deps import BlobsDep, SessionDep, SettingsDep
from service.api.epoch_set_store import save_epoch_set, stored_epoch_set
from service.api.idempotency import IdempotencyDep, canonical_fingerprint
from service.api.lookups import study_by_code
from service.api.responses import BLOB_STORE_DOWN, errors
from service.errors import Conflict, NotFound, format_error_to_unprocessable, too_large_to_payload_error
from service.schemas.epoch_sets import SUBJECT_PATTERN, EpochSetOut
from service.schemas.json_epoch_sets import JSON_EPOCH_SET_OPENAPI
from service.storage.ids import new_id
from service.storage.models import EpochSet, RunEpochSet, Study

router = APIRouter(prefix="/v1/studies/{code}/epoch-sets", tags=["epoch sets"])


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


def new_epoch_set_row(
    study: Study, subject: str, session: str | None, sha256: str, size: int, epochs: EngineEpochSet
) -> EpochSet:
    meta = epochs.meta()
    return EpochSet(
        id=new_id("es"),
        study_id=study.id,
        subject=subject,
        session=session,
        sha256=sha256,
        size_bytes=size,
        n_trials=epochs.n_trials,
        n_channels=epochs.n_channels,
        n_times=epochs.n_times,
        sfreq=epochs.sfreq,
        tmin=epochs.tmin,
        ch_names=list(epochs.ch_names),
        ch_types=list(epochs.ch_types),
        conditions=meta.condition_counts,
        has_positions=meta.has_positions,
    )


@router.post(
    "",
    status_code=status.HTTP_201_CREATED,
    response_model=EpochSetOut,
    openapi_extra=JSON_EPOCH_SET_OPENAPI,
    responses={
        200: {"model": EpochSetOut, "description": "The same bytes were stored before; the existing epoch set."},
        **errors(
            400,
            401,
            403,
            404,
            409,
            413,
            422,
            503,
            unavailable=BLOB_STORE_DOWN,
            unprocessable="The file is malformed (the detail names the field and the fix), or a form field "
            "breaks its pattern.",
        ),
    },
)
def upload_epoch_set(
    code: str,
    file: Annotated[
        UploadFile, File(description="An NPZ or MNE epochs (-epo.fif) file, told apart by content (see the README).")
    ],
    subject: Annotated[str, Form(pattern=SUBJECT_PATTERN, description="Subject id, e.g. sub-01.", examples=["sub-01"])],
    session: SessionDep,
    blobs: BlobsDep,
    settings: SettingsDep,
    caller: CallerDep,
    idempotency: IdempotencyDep,
    session_label: Annotated[str | None, Form(alias="session", pattern=SUBJECT_PATTERN, examples=["ses-01"])] = None,
) -> Response:
    """Upload one epoch set to a study. Uploading the same bytes again returns the stored one (200)."""
    study = study_by_code(session, code, caller, "write")
    with blobs.staged(file.file) as staged:
        # A retried multipart body has a new boundary, so the fingerprint is what it carries, not its bytes.
        fingerprint = canonical_fingerprint({"sha256": staged.sha256, "subject": subject, "session": session_label})
        if (replayed := idempotency.replay(fingerprint)) is not None:
            return replayed
        existing = stored_epoch_set(session, study, staged.sha256)
        if existing is not None:
            return idempotency.remember(status.HTTP_200_OK, epoch_set_out(existing, study.code))
        try:
            epochs, file_format = read_epoch_set_file(
                staged.path,
                max_array_bytes=settings.max_array_bytes,
                max_compression_ratio=settings.max_compression_ratio,
                allowed=(FileFormat.NPZ, FileFormat.FIF),
            )
        except EpochSetFormatError as error:
            raise format_error_to_unprocessable(error) from None
        except EpochSetTooLargeError as error:
            raise too_large_to_payload_error(error) from None
        row = new_epoch_set_row(study, subject, session_label, staged.sha256, staged.size, epochs)
        row.file_format = file_format.value
        return save_epoch_set(
            session,
            study,
            row,
            [staged],
            idempotency,
            lambda r: epoch_set_out(r, study.code),
            f"/v1/studies/{study.code}/epoch-sets",
            settings.max_attempts,
        )


@router.get("", response_model=list[EpochSetOut], responses=errors(401, 404))
def list_epoch_sets(
    code: str,
    session: SessionDep,
    caller: CallerDep,
    subject: Annotated[str | None, Query(description="Only this subject.")] = None,
    session_label: Annotated[str | None, Query(alias="session", description="Only this session.")] = None,
) -> list[EpochSetOut]:
    """The study's epoch sets, oldest first."""
    study = study_by_code(session, code, caller, "read")
    query = select(EpochSet).where(EpochSet.study_id == study.id)
    if subject is not None:
        query = query.where(EpochSet.subject == subject)
    if session_label is not None:
        query = query.where(EpochSet.session == session_label)
    rows = session.scalars(query.order_by(EpochSet.created_at, EpochSet.id))
    return [epoch_set_out(row, study.code) for row in rows]


@router.get("/{epoch_set_id}", response_model=EpochSetOut, responses=errors(401, 404))
def get_epoch_set(code: str, epoch_set_id: str, session: SessionDep, caller: CallerDep) -> EpochSetOut:
    """One epoch set of the study."""
    study = study_by_code(session, code, caller, "read")
    return epoch_set_out(_epoch_set_of(session, study, epoch_set_id), study.code)


def _epoch_set_of(session: Session, study: Study, epoch_set_id: str) -> EpochSet:
    row = session.get(EpochSet, epoch_set_id)
    if row is None or row.study_id != study.id:
        raise NotFound(
            f"no epoch set {epoch_set_id!r} in study {study.code!r}; "
            f"list them with GET /v1/studies/{study.code}/epoch-sets"
        )
    return row


@router.delete(
    "/{epoch_set_id}",
    status_code=status.HTTP_204_NO_CONTENT,
    responses=errors(401, 403, 404, 409, conflict="A run still scores this epoch set; delete the run first."),
)
def delete_epoch_set(code: str, epoch_set_id: str, session: SessionDep, blobs: BlobsDep, caller: CallerDep) -> Response:
    """Delete an epoch set; its files go too once no epoch set (of any study) names the same bytes.

    Refused with 409 while a run refers to it, so no result loses the data it was computed on.
    """
    study = study_by_code(session, code, caller, "write")
    row = _epoch_set_of(session, study, epoch_set_id)
    _refuse_if_scored(session, row)
    # An upload's blob is named by sha256; a recording's by file_sha256 and events_sha256.
    blob_names = {name for name in (row.sha256, row.file_sha256, row.events_sha256) if name}
    session.delete(row)
    try:
        session.flush()
    except IntegrityError:
        # A run naming it was created concurrently and committed first.
        session.rollback()
        raise _scored_conflict(epoch_set_id, []) from None
    session.commit()
    for name in blob_names:
        blobs.discard(name, lambda name=name: _blob_in_use(session, name))
    return Response(status_code=status.HTTP_204_NO_CONTENT)


def _blob_in_use(session: Session, sha256: str) -> bool:
    named = or_(EpochSet.sha256 == sha256, EpochSet.file_sha256 == sha256, EpochSet.events_sha256 == sha256)
    return session.scalar(select(EpochSet.id).where(named).limit(1)) is not None


def _refuse_if_scored(session: Session, row: EpochSet) -> None:
    run_ids = session.scalars(
        select(RunEpochSet.run_id).where(RunEpochSet.epoch_set_id == row.id).order_by(RunEpochSet.run_id).limit(5)
    ).all()
    if run_ids:
        raise _scored_conflict(row.id, run_ids)


def _scored_conflict(epoch_set_id: str, run_ids: list[str]) -> Conflict:
    named = f" ({', '.join(run_ids)}{', …' if len(run_ids) == 5 else ''})" if run_ids else ""
    return Conflict(
        f"epoch set {epoch_set_id} is scored by a run{named}; delete the runs that use it first "
        "(DELETE /v1/runs/ID), then the epoch set"
    )
