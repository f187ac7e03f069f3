"""Epoch sets posted as JSON (``Content-Type: application/json``) on the epoch-sets path.

The route matches only JSON bodies, so multipart uploads fall through to the file-upload route
of ``service.api.epoch_sets`` on the same path. The body size is capped by the application's
JSON body limit (413 past it).
"""

import io
import re
from typing import Annotated

from fastapi import APIRouter, Depends, Request, Response, status
from fastapi.routing import APIRoute
from starlette.routing import Match
from starlette.types import Scope

from epoch_assay.engine.errors import EpochSetFormatError
from epoch_assay.engine.io.detect import FileFormat
from epoch_assay.engine.io.json_epochs import parse_json_epochs
from service.domain.epoch_sets import new_epoch_set_row
from service.errors import Unprocessable, format_error_to_unprocessable
from service.http.access import CallerDep
from service.http.deps import BlobsDep, SessionDep, SettingsDep
from service.http.idempotency import IdempotencyDep, canonical_fingerprint
from service.http.lookups import study_by_code
from service.http.uploads import answer_upload, epoch_set_out
from service.schemas.epoch_sets import SUBJECT_PATTERN
from service.schemas.json_epoch_sets import JSON_MEDIA_TYPE
from service.storage.epoch_sets import epoch_set_with_hash

_SUBJECT = re.compile(SUBJECT_PATTERN)


class JsonBodyRoute(APIRoute):
    """A route that matches only requests with a JSON body."""

    def matches(self, scope: Scope) -> tuple[Match, Scope]:
        match, child = super().matches(scope)
        content_type = dict(scope.get("headers", [])).get(b"content-type", b"").split(b";")[0].strip().lower()
        if match != Match.NONE and content_type != JSON_MEDIA_TYPE.encode():
            return Match.NONE, {}
        return match, child


router = APIRouter(prefix="/v1/studies/{code}/epoch-sets", tags=["epoch sets"], route_class=JsonBodyRoute)


async def _body(request: Request) -> bytes:
    return await request.body()


@router.post("", status_code=status.HTTP_201_CREATED, include_in_schema=False)
def post_json_epoch_set(
    code: str,
    body: Annotated[bytes, Depends(_body)],
    session: SessionDep,
    blobs: BlobsDep,
    settings: SettingsDep,
    caller: CallerDep,
    idempotency: IdempotencyDep,
) -> Response:
    """Store a JSON epoch set; the same bytes again give the stored one (200)."""
    study = study_by_code(session, code, caller, "write")
    with blobs.staged(io.BytesIO(body)) as staged:
        if (replayed := idempotency.replay(canonical_fingerprint({"sha256": staged.sha256}))) is not None:
            return replayed
        existing = epoch_set_with_hash(session, study.id, staged.sha256)
        if existing is not None:
            return idempotency.remember(status.HTTP_200_OK, epoch_set_out(existing, study.code))
        try:
            parsed = parse_json_epochs(body)
        except EpochSetFormatError as error:
            raise format_error_to_unprocessable(error) from None
        subject = _checked_label("subject", parsed.subject)
        if parsed.session is not None:
            _checked_label("session", parsed.session)
        row = new_epoch_set_row(study, subject, parsed.session, staged.sha256, staged.size, parsed.epochs)
        row.file_format = FileFormat.JSON.value
        return answer_upload(
            session, study, row, [staged], idempotency, lambda r: epoch_set_out(r, study.code), settings.max_attempts
        )


def _checked_label(key: str, value: str | None) -> str:
    """``value`` when it is a valid subject or session label; else 422 naming ``key``."""
    if value is None or not _SUBJECT.match(value):
        shown = "missing" if value is None else f"{value!r}, which does not match {SUBJECT_PATTERN}"
        raise Unprocessable(
            f"{key} is {shown}; give it as a short id such as sub-01",
            errors=[{"loc": ["body", key], "msg": f"{key} must match {SUBJECT_PATTERN}"}],
        )
    return value
