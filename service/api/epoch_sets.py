"""Epoch sets: uploaded files of trials × channels × time with a condition label per trial."""

from typing import Annotated

from fastapi import APIRouter, File, Form, Query, Response, UploadFile, status
from sqlalchemy.orm import Session

from epoch_assay.engine.errors import EpochSetFormatError, EpochSetTooLargeError
from epoch_assay.engine.io import read_epoch_set_file
from epoch_assay.engine.io.detect import FileFormat
from service.domain.epoch_sets import delete_epoch_set as remove_epoch_set
from service.domain.epoch_sets import new_epoch_set_row
from service.errors import NotFound, format_error_to_unprocessable, too_large_to_payload_error
from service.http.access import CallerDep
from service.http.deps import BlobsDep, SessionDep, SettingsDep
from service.http.idempotency import IdempotencyDep, canonical_fingerprint
from service.http.lookups import study_by_code
from service.http.responses import errors, upload_errors
from service.http.uploads import answer_upload, epoch_set_out
from service.schemas.epoch_sets import SUBJECT_PATTERN, EpochSetOut
from service.schemas.json_epoch_sets import JSON_EPOCH_SET_OPENAPI
from service.storage.epoch_sets import epoch_set_in_study, epoch_set_with_hash, epoch_sets_of_study
from service.storage.models import EpochSet, Study

router = APIRouter(prefix="/v1/studies/{code}/epoch-sets", tags=["epoch sets"])


@router.post(
    "",
    status_code=status.HTTP_201_CREATED,
    response_model=EpochSetOut,
    openapi_extra=JSON_EPOCH_SET_OPENAPI,
    responses={
        200: {"model": EpochSetOut, "description": "The same bytes were stored before; the existing epoch set."},
        **upload_errors(
            "The file is malformed (the detail names the field and the fix), or a form field breaks its pattern."
        ),
    },
)
def upload_epoch_set(
    code: str,
    file: Annotated[
        UploadFile,
        File(description="An NPZ or MNE epochs (-epo.fif) file, told apart by content (see docs/inputs.md)."),
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
        existing = epoch_set_with_hash(session, study.id, staged.sha256)
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
        return answer_upload(
            session, study, row, [staged], idempotency, lambda r: epoch_set_out(r, study.code), settings.max_attempts
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
    return [epoch_set_out(row, study.code) for row in epoch_sets_of_study(session, study.id, subject, session_label)]


@router.get("/{epoch_set_id}", response_model=EpochSetOut, responses=errors(401, 404))
def get_epoch_set(code: str, epoch_set_id: str, session: SessionDep, caller: CallerDep) -> EpochSetOut:
    """One epoch set of the study."""
    study = study_by_code(session, code, caller, "read")
    return epoch_set_out(_epoch_set_of(session, study, epoch_set_id), study.code)


def _epoch_set_of(session: Session, study: Study, epoch_set_id: str) -> EpochSet:
    row = epoch_set_in_study(session, study.id, epoch_set_id)
    if row is None:
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
    remove_epoch_set(session, blobs, _epoch_set_of(session, study, epoch_set_id))
    return Response(status_code=status.HTTP_204_NO_CONTENT)
