"""The FastAPI application: routers, problem handlers, request-size limits."""

from fastapi import FastAPI
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from epoch_assay import __version__
from service.api import (
    epoch_set_json,
    epoch_sets,
    health,
    locked_pipelines,
    recordings,
    reports,
    runs,
    studies,
    webhooks,
)
from service.errors import PayloadTooLarge, install_problem_handlers, problem
from service.http.responses import install_problem_openapi
from service.metrics import ServiceMetrics
from service.middleware import KeyBeforeBody, LocalOnly, RequestContext
from service.settings import Settings
from service.storage.blobs import open_blob_store
from service.storage.db import Database

DESCRIPTION = (
    "Scores EEG preprocessing pipelines on a lab's own epoch sets: per channel a test of the mean "
    "amplitude in a time window between two conditions, the share of channels significant, bootstrap "
    "confidence intervals. Research software, not for clinical decisions.\n\n"
    "**Access.** Send an API key as `Authorization: Bearer <token>` (made with `epoch-assay keys create`). "
    "An admin key manages everything; a read or write key covers one study. 401: no valid key; 404: no such "
    "study, or one the key does not cover; 403: the key's role does not allow the action.\n\n"
    "**Retries.** A POST with an `Idempotency-Key` header returns its first answer again when retried with the "
    "same body (header `Idempotent-Replayed: true`), and 409 for the same key with another body.\n\n"
    "**Errors** are RFC 9457 `application/problem+json` documents. Every answer carries `X-Request-ID`."
)


class BodySizeLimit:
    """Answer 413 to a request whose body is larger than allowed, without reading all of it.

    Multipart uploads may be as large as ``max_upload_bytes``; other bodies (JSON) as large
    as ``max_json_bytes``.
    """

    def __init__(self, app: ASGIApp, *, max_upload_bytes: int, max_json_bytes: int) -> None:
        self.app = app
        self.max_upload_bytes = max_upload_bytes
        self.max_json_bytes = max_json_bytes

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        headers = dict(scope["headers"])
        is_upload = headers.get(b"content-type", b"").startswith(b"multipart/")
        limit = self.max_upload_bytes if is_upload else self.max_json_bytes
        declared = headers.get(b"content-length")
        if declared is not None and declared.isdigit() and int(declared) > limit:
            await self._refuse(scope, receive, send, limit)
            return
        received = 0

        async def limited_receive() -> Message:
            nonlocal received
            message = await receive()
            received += len(message.get("body", b""))
            if received > limit:
                raise PayloadTooLarge(_too_large_detail(limit))
            return message

        await self.app(scope, limited_receive, send)

    @staticmethod
    async def _refuse(scope: Scope, receive: Receive, send: Send, limit: int) -> None:
        response = problem(413, "payload-too-large", "Payload too large", _too_large_detail(limit))
        await response(scope, receive, send)


def _too_large_detail(limit: int) -> str:
    return (
        f"the request body is larger than the limit of {limit} bytes; split the upload or ask the "
        "operator to raise EPOCH_ASSAY_MAX_UPLOAD_BYTES / EPOCH_ASSAY_MAX_JSON_BODY_BYTES"
    )


def create_app(settings: Settings) -> FastAPI:
    """The application for ``settings``; the database must already be at the newest migration."""
    app = FastAPI(title="epoch-assay", version=__version__, description=DESCRIPTION)
    app.state.settings = settings
    app.state.database = Database(settings.resolved_database_url)
    app.state.blobs = open_blob_store(settings)
    app.state.metrics = ServiceMetrics(settings.worker_stale_seconds)
    install_problem_handlers(app)
    # epoch_set_json before epoch_sets: it takes the JSON bodies of the same path; multipart falls through.
    for module in (health, studies, locked_pipelines, epoch_set_json, epoch_sets, recordings, runs, webhooks, reports):
        app.include_router(module.router)
    install_problem_openapi(app)
    app.add_middleware(
        BodySizeLimit, max_upload_bytes=settings.max_upload_bytes, max_json_bytes=settings.max_json_body_bytes
    )
    if settings.open:
        app.add_middleware(LocalOnly)
    else:
        app.add_middleware(KeyBeforeBody, database=app.state.database)
    # Added last, so it is outermost: it sees (and times) the 413 answers of the size limit too.
    app.add_middleware(RequestContext, metrics=app.state.metrics)
    return app
