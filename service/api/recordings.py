"""Continuous recordings (EDF/EDF+, BDF/BDF+, VHDR, MNE raw FIF) with events, stored as epoch sets
that the worker epochs; several runs of one session in one post.

The multipart body (see docs/inputs.md): repeated ``file`` parts (each recording; a
VHDR header with the data and marker files it names), optional repeated ``events``
parts (one events.tsv per run, in run order), ``epoching`` (JSON), optional ``channels`` (the
JSON channel spec and/or a channels.tsv file part), optional ``electrodes`` (an
electrodes.tsv file part) with ``coordsystem`` (its coordsystem.json file part).

Every part is staged, then packed into one bundle under names of our own
(:mod:`epoch_assay.engine.io.session_bundle`), which is read back exactly as the worker will
read it, and kept as one blob with the specs. The epoch set's ``sha256`` is the hash of the
bundle and the specs together, so the same upload twice gives the stored epoch set (200)
while the same files epoched another way are a new one.
"""

import hashlib
import json
import tempfile
from contextlib import ExitStack
from pathlib import Path
from typing import Annotated, TypeVar

from fastapi import APIRouter, Depends, File, Form, Request, Response, UploadFile, status
from pydantic import BaseModel, Field, ValidationError
from starlette.datastructures import FormData
from starlette.datastructures import UploadFile as StarletteUpload

from epoch_assay.engine.errors import EpochSetFormatError, EpochSetTooLargeError
from epoch_assay.engine.io.session_bundle import write_bundle
from epoch_assay.engine.io.session_files import SessionFiles, UploadedPart, group_runs
from epoch_assay.engine.recording import (
    ChannelSpec,
    ContinuousInput,
    EpochingSpec,
    epoch_runs,
    load_recording,
    plan_epochs,
)
from service.domain.epoch_sets import new_epoch_set_row
from service.errors import Unprocessable, format_error_to_unprocessable, too_large_to_payload_error
from service.http.access import CallerDep
from service.http.deps import BlobsDep, SessionDep, SettingsDep
from service.http.idempotency import IdempotencyDep, canonical_fingerprint
from service.http.lookups import study_by_code
from service.http.responses import upload_errors
from service.http.uploads import answer_upload, epoch_set_out
from service.schemas.epoch_sets import SUBJECT_PATTERN, EpochSetOut
from service.storage.epoch_sets import epoch_set_with_hash
from service.storage.models import RECORDING_SOURCE, EpochSet

Spec = TypeVar("Spec", bound=BaseModel)
router = APIRouter(prefix="/v1/studies/{code}/recordings", tags=["recordings"])
MIXED_FORMATS = "mixed"
# common practice: a channel spec with renames, types and positions of a few hundred channels is tens of kB
MAX_SPEC_BYTES = 1 << 20
# Optional file parts: multipart field → (role in SessionFiles, file name reported back).
SIDECAR_FIELDS = {
    "channels": ("channels_tsv", "channels.tsv"),
    "electrodes": ("electrodes_tsv", "electrodes.tsv"),
    "coordsystem": ("coordsystem", "coordsystem.json"),
}


class RecordingRunOut(BaseModel):
    """One run of a session as read: its format, where its events came from, and what was found."""

    run: int = Field(description="1-based, in the order the recordings were posted.")
    file_format: str = Field(description='"edf", "bdf", "vhdr" (VHDR) or "fif" (MNE raw), read from content.')
    events_from: str = Field(description='"events.tsv", "annotations" or "channel:<name>".')
    n_trials: int = Field(description="Epochs this run gives.")
    events_found: dict[str, int] = Field(description="Events per condition in this run.")
    dropped_at_edges: dict[str, int] = Field(
        description="Events per condition whose epoch reached past the run's ends."
    )


class RecordingOut(EpochSetOut):
    """An epoch set made from a recording: the epoch set's fields, plus where it came from."""

    source: str = Field(description='"recording".')
    file_format: str = Field(description='The runs\' format ("edf", "bdf", "vhdr", "fif"), "mixed" when they differ.')
    epoching: dict = Field(description="The epoching spec as stored.")
    events_found: dict[str, int] = Field(description="Events per condition found in all runs together.")
    dropped_at_edges: dict[str, int] = Field(
        description="Events per condition whose epoch reached past a run's ends, left out."
    )
    runs: list[RecordingRunOut] = Field(
        default_factory=list, description="Each run, in order (empty for older uploads)."
    )
    sidecars: list[str] = Field(
        default_factory=list, description="BIDS sidecars read: channels.tsv, electrodes.tsv, coordsystem.json."
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
        runs=found.get("runs", []),
        sidecars=found.get("sidecars", []),
    )


def _found_in_runs(source: ContinuousInput) -> dict:
    """Events found and dropped per condition, in all runs together and per run, as stored with the row."""
    runs = []
    for number, run in enumerate(source.runs, start=1):
        plan = plan_epochs(run.recording, run.events, source.epoching)
        runs.append(
            RecordingRunOut(
                run=number,
                file_format=run.file_format.value,
                events_from=run.events_from,
                n_trials=int(plan.labels.size),
                events_found=plan.events_found,
                dropped_at_edges=plan.dropped_at_edges,
            ).model_dump()
        )
    labels = source.epoching.conditions
    return {
        "found": {label: sum(run["events_found"][label] for run in runs) for label in labels},
        "dropped_at_edges": {label: sum(run["dropped_at_edges"][label] for run in runs) for label in labels},
        "runs": runs,
    }


def _parsed(model: type[Spec], text: str, field: str) -> Spec:
    try:
        return model.model_validate_json(text)
    except ValidationError as error:
        problems = [{"loc": ["body", field, *item["loc"]], "msg": item["msg"]} for item in error.errors()]
        shown = "; ".join(f"{'.'.join(str(p) for p in item['loc'][1:])}: {item['msg']}" for item in problems[:5])
        raise Unprocessable(f"{shown}. Give {field} as JSON, see docs/inputs.md", errors=problems) from None


async def _form(request: Request) -> FormData:
    # The parsed body, for the parts whose kind varies (a JSON spec or a TSV file under one
    # name); Starlette parses a request's form once and hands the same object to every reader.
    return await request.form()


FormDep = Annotated[FormData, Depends(_form)]


def _sidecar_parts(form: FormData) -> tuple[str, dict[str, StarletteUpload]]:
    """The JSON channel spec ("{}" when absent) and the sidecar file parts by role; repeated parts are refused."""
    spec_text = "{}"
    uploads_by_role: dict[str, StarletteUpload] = {}
    for field, (role, name) in SIDECAR_FIELDS.items():
        values = form.getlist(field)
        uploads = [value for value in values if isinstance(value, StarletteUpload)]
        texts = [value for value in values if isinstance(value, str)]
        if len(uploads) > 1 or len(texts) > 1:
            raise Unprocessable(f"{field} was sent more than once. Send it once, see docs/inputs.md")
        if texts and field != "channels":
            raise Unprocessable(f"{field} must be a file part. Send it as -F {field}=@{name}")
        if texts:
            spec_text = texts[0]
        if uploads and field == "channels" and _is_json(uploads[0]):
            if texts:
                raise Unprocessable("channels was sent twice as a JSON spec. Send the spec once, see docs/inputs.md")
            spec_text = uploads[0].file.read(MAX_SPEC_BYTES + 1).decode("utf-8", errors="replace")
            if len(spec_text) > MAX_SPEC_BYTES:
                raise Unprocessable(f"the channels spec is larger than {MAX_SPEC_BYTES} bytes. Send a smaller spec")
        elif uploads:
            uploads_by_role[role] = uploads[0]
    return spec_text, uploads_by_role


def _is_json(upload: StarletteUpload) -> bool:
    """Whether a file part holds a JSON document (a channel spec sent as a file) rather than a TSV."""
    head = upload.file.read(64)
    upload.file.seek(0)
    return head.lstrip().startswith(b"{")


def _identity(bundle_sha256: str, epoching: EpochingSpec, channels: ChannelSpec) -> str:
    content = {
        "bundle": bundle_sha256,
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
        **upload_errors(
            "The recordings, their events, sidecars or the epoching spec cannot be used (the detail "
            "says what is wrong and how to fix it)."
        ),
    },
)
def upload_recording(
    code: str,
    file: Annotated[
        list[UploadFile],
        File(
            description="Each run's recording: EDF/EDF+, BDF/BDF+, MNE raw FIF, or a VHDR header with the "
            "data and marker files it names (sent under those names). Repeat for several runs, in order."
        ),
    ],
    subject: Annotated[str, Form(pattern=SUBJECT_PATTERN, description="Subject id, e.g. sub-01.")],
    epoching: Annotated[
        str,
        Form(
            description='JSON: {"tmin": s, "tmax": s, "conditions": {label: [values]}, "events_from": '
            '"annotations" | "channel:<name>", "trigger_mask": int}.'
        ),
    ],
    form: FormDep,
    session: SessionDep,
    blobs: BlobsDep,
    settings: SettingsDep,
    caller: CallerDep,
    idempotency: IdempotencyDep,
    events: Annotated[
        list[UploadFile] | None,
        File(description="BIDS-style events.tsv files, one per run in run order; the recordings' own when absent."),
    ] = None,
    session_label: Annotated[str | None, Form(alias="session", pattern=SUBJECT_PATTERN)] = None,
) -> Response:
    """Upload the runs of a recording session and how to epoch them; runs epoch and filter them before epoching.

    Optional parts not listed in this schema because their kind varies: ``channels`` (the JSON
    channel spec ``{"rename": {old: new}, "types": {name: type}, "montage": name, "positions":
    {name: [x, y, z]}}`` in m, and/or a BIDS channels.tsv file part), ``electrodes`` (a BIDS
    electrodes.tsv file part) and ``coordsystem`` (its coordsystem.json file part). See docs/inputs.md.
    """
    study = study_by_code(session, code, caller, "write")
    epoching_spec = _parsed(EpochingSpec, epoching, "epoching")
    channels_text, sidecar_uploads = _sidecar_parts(form)
    channel_spec = _parsed(ChannelSpec, channels_text, "channels")
    with ExitStack() as stack:
        folder = Path(stack.enter_context(tempfile.TemporaryDirectory(prefix="epoch-assay-bundle-")))
        parts = [
            UploadedPart(stack.enter_context(blobs.staged(upload.file)).path, upload.filename or "") for upload in file
        ]
        events_paths = [stack.enter_context(blobs.staged(upload.file)).path for upload in events or []]
        sidecars = {
            role: stack.enter_context(blobs.staged(upload.file)).path for role, upload in sidecar_uploads.items()
        }
        bundle_path = folder / "session.zip"
        try:
            write_bundle(SessionFiles(runs=group_runs(parts, events_paths), **sidecars), bundle_path)
        except EpochSetFormatError as error:
            raise format_error_to_unprocessable(error) from None
        with open(bundle_path, "rb") as bundle_file:
            staged_bundle = stack.enter_context(blobs.staged(bundle_file))
        identity = _identity(staged_bundle.sha256, epoching_spec, channel_spec)
        fingerprint = canonical_fingerprint({"sha256": identity, "subject": subject, "session": session_label})
        if (replayed := idempotency.replay(fingerprint)) is not None:
            return replayed
        existing = epoch_set_with_hash(session, study.id, identity)
        if existing is not None:
            return idempotency.remember(status.HTTP_200_OK, recording_out(existing, study.code))
        try:
            source = load_recording(
                staged_bundle.path, None, epoching_spec, channel_spec, max_array_bytes=settings.max_array_bytes
            )
        except EpochSetFormatError as error:
            raise format_error_to_unprocessable(error) from None
        except EpochSetTooLargeError as error:
            raise too_large_to_payload_error(error) from None
        epochs = epoch_runs([(run.recording, run.events) for run in source.runs], source.epoching)
        row = new_epoch_set_row(study, subject, session_label, identity, staged_bundle.size, epochs)
        formats = {run.file_format.value for run in source.runs}
        row.source, row.file_format = RECORDING_SOURCE, formats.pop() if len(formats) == 1 else MIXED_FORMATS
        row.file_sha256, row.events_sha256 = staged_bundle.sha256, None
        row.epoching, row.channels = epoching_spec.model_dump(mode="json"), channel_spec.model_dump(mode="json")
        sent = [SIDECAR_FIELDS[field][1] for field in SIDECAR_FIELDS if SIDECAR_FIELDS[field][0] in sidecar_uploads]
        row.events_found = _found_in_runs(source) | {"sidecars": sent}
        return answer_upload(
            session,
            study,
            row,
            [staged_bundle],
            idempotency,
            lambda r: recording_out(r, study.code),
            settings.max_attempts,
        )
