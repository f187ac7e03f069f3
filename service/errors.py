"""Errors the API answers with, and the one place that turns them into RFC 9457 problem+json."""

import logging
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.routing import compile_path

from epoch_assay.engine.errors import EpochSetFormatError, EpochSetTooLargeError, SpecError
from service.logs import request_id_var
from service.storage.blobs import BlobStoreUnavailable

PROBLEM_JSON = "application/problem+json"
_FASTAPI_BODY_PARSE_ERROR = "There was an error parsing the body"
log = logging.getLogger("epoch_assay.service")


class ApiError(Exception):
    """An error with an HTTP status, a short title and a detail that says how to fix it."""

    status = 400
    slug = "bad-request"
    title = "Bad request"

    def __init__(
        self, detail: str, *, errors: list[dict[str, Any]] | None = None, headers: dict[str, str] | None = None
    ) -> None:
        super().__init__(detail)
        self.detail = detail
        self.errors = errors
        self.headers = headers


class Unauthorized(ApiError):
    status, slug, title = 401, "unauthorized", "Unauthorized"

    def __init__(self, detail: str) -> None:
        super().__init__(detail, headers={"WWW-Authenticate": 'Bearer realm="epoch-assay"'})


class Forbidden(ApiError):
    status, slug, title = 403, "forbidden", "Forbidden"


class NotFound(ApiError):
    status, slug, title = 404, "not-found", "Not found"


class Conflict(ApiError):
    status, slug, title = 409, "conflict", "Conflict"


class PayloadTooLarge(ApiError):
    status, slug, title = 413, "payload-too-large", "Payload too large"


class Unprocessable(ApiError):
    status, slug, title = 422, "unprocessable", "Unprocessable content"


class NotAcceptable(ApiError):
    status, slug, title = 406, "not-acceptable", "Not acceptable"


class ServiceUnavailable(ApiError):
    status, slug, title = 503, "not-ready", "Service not ready"


def problem(
    status: int, slug: str, title: str, detail: str, headers: dict[str, str] | None = None, **extra: Any
) -> JSONResponse:
    """A problem+json response (RFC 9457)."""
    body = {"type": f"urn:epoch-assay:problem:{slug}", "title": title, "status": status, "detail": detail}
    body.update({key: value for key, value in extra.items() if value is not None})
    return JSONResponse(body, status_code=status, media_type=PROBLEM_JSON, headers=headers)


def spec_error_to_unprocessable(error: SpecError, *prefix: str | int) -> Unprocessable:
    loc = ["body", *prefix, *error.loc]
    where = ".".join(str(part) for part in loc[1:])
    return Unprocessable(f"{where}: {error.message}", errors=[{"loc": loc, "msg": error.message}])


def format_error_to_unprocessable(error: EpochSetFormatError) -> Unprocessable:
    detail = f"field {error.field!r} of the uploaded file: {error.problem}. {error.fix}"
    return Unprocessable(detail, errors=[{"loc": ["file", error.field], "msg": f"{error.problem}. {error.fix}"}])


def too_large_to_payload_error(error: EpochSetTooLargeError) -> PayloadTooLarge:
    return PayloadTooLarge(
        f"{error}; split the epoch set (for example per session) or ask the operator to raise "
        "EPOCH_ASSAY_MAX_ARRAY_BYTES"
    )


def _describe_validation_errors(errors: list[dict[str, Any]]) -> str:
    parts = []
    for error in errors[:5]:
        where = ".".join(str(part) for part in error.get("loc", ()) if part != "body") or "request"
        parts.append(f"{where}: {error.get('msg', 'invalid')}")
    more = f" (and {len(errors) - 5} more)" if len(errors) > 5 else ""
    return "; ".join(parts) + more


def _allowed_methods(request: Request) -> list[str]:
    """Every method the schema documents on this path (Starlette names only the first matching route's)."""
    methods: set[str] = set()
    for template, operations in request.app.openapi()["paths"].items():
        if compile_path(template)[0].match(request.url.path):
            methods.update(method.upper() for method in operations)
    if "GET" in methods:
        methods.add("HEAD")
    return sorted(methods)


def install_problem_handlers(app: FastAPI) -> None:
    """Map every error to problem+json: ours, validation errors, HTTP errors and bugs."""

    @app.exception_handler(ApiError)
    async def _api_error(_request: Request, error: ApiError) -> JSONResponse:
        return problem(error.status, error.slug, error.title, error.detail, error.headers, errors=error.errors)

    @app.exception_handler(BlobStoreUnavailable)
    async def _blob_store_down(_request: Request, error: BlobStoreUnavailable) -> JSONResponse:
        # The error names the store's location and the driver's message: for the log, not for the caller.
        log.warning("blob store unavailable: %s", error)
        return problem(
            503,
            "blob-store-unavailable",
            "Blob store unavailable",
            "the file store could not keep the file; nothing was stored. Retry later; if this goes on, the "
            "operator should check that the store is reachable and has room (see the service's log)",
            {"Retry-After": "30"},
            request_id=request_id_var.get(),
        )

    @app.exception_handler(RequestValidationError)
    async def _validation_error(_request: Request, error: RequestValidationError) -> JSONResponse:
        errors = [
            {"loc": list(item.get("loc", ())), "msg": item.get("msg", ""), "type": item.get("type", "")}
            for item in error.errors()
        ]
        return problem(
            422, "validation", "Request does not match the schema", _describe_validation_errors(errors), errors=errors
        )

    @app.exception_handler(StarletteHTTPException)
    async def _http_error(request: Request, error: StarletteHTTPException) -> JSONResponse:
        if error.status_code == 400 and error.detail == _FASTAPI_BODY_PARSE_ERROR:
            return problem(
                400,
                "malformed-body",
                "Malformed body",
                "the request body could not be parsed: send JSON (UTF-8) with Content-Type: "
                "application/json, or a multipart form for uploads",
            )
        headers = dict(error.headers) if error.headers else None
        if error.status_code == 405:
            headers = {**(headers or {}), "Allow": ", ".join(_allowed_methods(request))}
        slug = {404: "not-found", 405: "method-not-allowed"}.get(error.status_code, "http-error")
        return problem(error.status_code, slug, str(error.detail), str(error.detail), headers)

    @app.exception_handler(Exception)
    async def _bug(request: Request, error: Exception) -> JSONResponse:
        log.exception("unhandled error on %s %s", request.method, request.url.path)
        return problem(
            500,
            "internal",
            "Internal server error",
            "the server hit a bug; the request was not applied. Please report it with the request id",
            request_id=request_id_var.get(),
        )
