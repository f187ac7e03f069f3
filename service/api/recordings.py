"""Continuous recordings (EDF, EDF+, BDF) with events, stored as epoch sets that the worker epochs.

The file and the events file are kept as blobs with the epoching spec; the epoch set's
``sha256`` is the hash of all of them together, so the same upload twice gives the stored
epoch set (200) while the same file epoched another way is a new one.
"""

import hashlib
import json
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Annotated, TypeVar

from fastapi import APIRouter, File, Form, Response, UploadFile, status
from pydantic import BaseModel, Field, ValidationError

from epoch_assay.engine.errors import EpochSetFormatError, EpochSetTooLargeError
from epoch_assay.engine.recording import ChannelSpec, EpochingSpec, epoch_recording, load_recording, plan_epochs
from service.domain.epoch_sets import new_epoch_set_row
from service.errors import Unprocessable, format_error_to_unprocessable, too_large_to_payload_error
from service.http.access import CallerDep
from service.http.deps import BlobsDep, SessionDep, SettingsDep
from service.http.idempotency import IdempotencyDep, canonical_fingerprint
from service.http.lookups import study_by_code
from service.http.responses import BLOB_STORE_DOWN, errors
from service.http.uploads import answer_upload, epoch_set_out
from service.schemas.epoch_sets import SUBJECT_PATTERN, EpochSetOut
from service.storage.blobs import BlobStore, StagedBlob
from service.storage.epoch_sets import epoch_set_with_hash
from service.storage.models import EpochSet

router = APIRouter(prefix="/v1/studies/{code}/recordings", tags=["recordings"])
RECORDING_SOURCE = "recording"
Spec = TypeVar("Spec", bound=BaseModel)


class RecordingOut(EpochSetOut):
    """An epoch set made from a recording: the epoch set's fields, plus where it came from."""

    source: str = Field(description='"recording".')
    file_format: str = Field(description='"edf" or "bdf", as read from the file\'s first bytes.')
    epoching: dict = Field(description="The epoching spec as stored.")
    events_found: dict[str, int] = Field(description="Events per condition found in the events or annotations.")
    dropped_at_edges: dict[str, int] = Field(
        description="Events per condition whose epoch reached past the recording's ends, left out."
    )


def recording_out(row: EpochSet, study_code: str) -> RecordingOut:
    found = row.events_found or {}
    return RecordingOut(
        **epoch_set_out(row, study_code).model_dump(),
        source=row.source,
        file_format=row.file_format,
        epoching=row.epoching or {},
        events_found=found.get("found", {}),
        dropped_at_edges=found.get("dropped_at_edges", {}),
    )


def _parsed(model: type[Spec], text: str, field: str) -> Spec:
    try:
        return model.model_validate_json(text)
    except ValidationError as error:
        problems = [{"loc": ["body", field, *item["loc"]], "msg": item["msg"]} for item in error.errors()]
        shown = "; ".join(f"{'.'.join(str(p) for p in item['loc'][1:])}: {item['msg']}" for item in problems[:5])
        raise Unprocessable(
            f"{shown}. Give {field} as JSON, see docs/inputs.md, Continuous recordings", errors=problems
        ) from None


@contextmanager
def _staged_optional(blobs: BlobStore, upload: UploadFile | None) -> Iterator[StagedBlob | None]:
    if upload is None:
        yield None
        return
    with blobs.staged(upload.file) as staged:
        yield staged


def _identity(file_sha256: str, events_sha256: str | None, epoching: EpochingSpec, channels: ChannelSpec) -> str:
    content = {
        "file": file_sha256,
        "events": events_sha256,
        "epoching": epoching.model_dump(mode="json"),
        "channels": channels.model_dump(mode="json"),
    }
    return hashlib.sha256(json.dumps(content, sort_keys=True, separators=(",", ":")).encode()).hexdigest()


@router.post(
    "",
    status_code=status.HTTP_201_CREATED,
    response_model=RecordingOut,
    responses={
        200: {"model": RecordingOut, "description": "The same upload was stored before; the existing epoch set."},
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
            unprocessable="The recording, its events or the epoching spec cannot be used (the detail says what "
            "is wrong and how to fix it).",
        ),
    },
)
def upload_recording(
    code: str,
    file: Annotated[UploadFile, File(description="An EDF, EDF+ or BDF recording, told apart by content.")],
    subject: Annotated[str, Form(pattern=SUBJECT_PATTERN, description="Subject id, e.g. sub-01.")],
    epoching: Annotated[str, Form(description='JSON: {"tmin": s, "tmax": s, "conditions": {label: [values]}}.')],
    session: SessionDep,
    blobs: BlobsDep,
    settings: SettingsDep,
    caller: CallerDep,
    idempotency: IdempotencyDep,
    events: Annotated[
        UploadFile | None, File(description="A BIDS-style events.tsv; the file's annotations when absent.")
    ] = None,
    channels: Annotated[
        str | None,
        Form(description='JSON: {"types": {name: type}, "montage": name, "positions": {name: [x, y, z]}} (m).'),
    ] = None,
    session_label: Annotated[str | None, Form(alias="session", pattern=SUBJECT_PATTERN)] = None,
) -> Response:
    """Upload a continuous recording and how to epoch it; runs epoch it and filter it before epoching."""
    study = study_by_code(session, code, caller, "write")
    epoching_spec = _parsed(EpochingSpec, epoching, "epoching")
    channel_spec = _parsed(ChannelSpec, channels or "{}", "channels")
    with blobs.staged(file.file) as staged_file, _staged_optional(blobs, events) as staged_events:
        events_sha256 = staged_events.sha256 if staged_events else None
        identity = _identity(staged_file.sha256, events_sha256, epoching_spec, channel_spec)
        fingerprint = canonical_fingerprint({"sha256": identity, "subject": subject, "session": session_label})
        if (replayed := idempotency.replay(fingerprint)) is not None:
            return replayed
        existing = epoch_set_with_hash(session, study.id, identity)
        if existing is not None:
            return idempotency.remember(status.HTTP_200_OK, recording_out(existing, study.code))
        try:
            source = load_recording(
                staged_file.path,
                staged_events.path if staged_events else None,
                epoching_spec,
                channel_spec,
                max_array_bytes=settings.max_array_bytes,
            )
        except EpochSetFormatError as error:
            raise format_error_to_unprocessable(error) from None
        except EpochSetTooLargeError as error:
            raise too_large_to_payload_error(error) from None
        plan = plan_epochs(source.recording, source.events, source.epoching)
        epochs = epoch_recording(source.recording, source.events, source.epoching)
        size = staged_file.size + (staged_events.size if staged_events else 0)
        row = new_epoch_set_row(study, subject, session_label, identity, size, epochs)
        row.source, row.file_format = RECORDING_SOURCE, source.file_format.value
        row.file_sha256, row.events_sha256 = staged_file.sha256, events_sha256
        row.epoching, row.channels = epoching_spec.model_dump(mode="json"), channel_spec.model_dump(mode="json")
        row.events_found = {"found": plan.events_found, "dropped_at_edges": plan.dropped_at_edges}
        staged = [staged_file] + ([staged_events] if staged_events else [])
        return answer_upload(
            session, study, row, staged, idempotency, lambda r: recording_out(r, study.code), settings.max_attempts
        )
