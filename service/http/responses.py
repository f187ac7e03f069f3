"""The error answers routes declare in OpenAPI, all ``application/problem+json`` (RFC 9457)."""

from typing import Any

from fastapi import FastAPI
from fastapi.openapi.utils import get_openapi

from service.errors import PROBLEM_JSON
from service.schemas.problems import Problem

DESCRIPTIONS = {
    400: "The request is malformed.",
    401: "No API key, or an unknown or revoked one.",
    403: "The key's role does not allow this action.",
    404: "Not found (also for a study the key does not cover).",
    406: "None of the media types in Accept can be produced.",
    409: "Conflicts with the current state, or the Idempotency-Key was used for another request.",
    413: "The request body is too large.",
    422: "The request does not match the schema or cannot be carried out; the detail names the field.",
    503: "The service is not ready.",
}
# What a route that takes a JSON or file body may answer besides its success.
BODY_ERRORS = (400, 401, 403, 404, 409, 413, 422)
BLOB_STORE_DOWN = "The blob store could not keep the file (unreachable or full); nothing was stored; retry later."


def errors(*codes: int, **descriptions: str) -> dict[int | str, dict[str, Any]]:
    """``responses=`` for a route: each code with the Problem schema; ``conflict=``, ``not_found=`` … override texts."""
    overrides = {
        409: descriptions.get("conflict"),
        404: descriptions.get("not_found"),
        422: descriptions.get("unprocessable"),
        503: descriptions.get("unavailable"),
    }
    return {code: {"model": Problem, "description": overrides.get(code) or DESCRIPTIONS[code]} for code in codes}


def upload_errors(unprocessable: str) -> dict[int | str, dict[str, Any]]:
    """``responses=`` of a route that stores an uploaded file in the blob store."""
    return errors(*BODY_ERRORS, 503, unavailable=BLOB_STORE_DOWN, unprocessable=unprocessable)


def install_problem_openapi(app: FastAPI) -> None:
    """Every 4xx/5xx answer in the schema is problem+json with the Problem schema.

    FastAPI files declared error models under ``application/json`` and adds its own 422 shape;
    the service answers errors with RFC 9457 documents, so the schema is corrected to say so.
    """

    def openapi() -> dict[str, Any]:
        if app.openapi_schema is None:
            schema = get_openapi(
                title=app.title,
                version=app.version,
                description=app.description,
                routes=app.routes,
                tags=app.openapi_tags,
            )
            problem_ref = {"$ref": "#/components/schemas/Problem"}
            for path_item in schema.get("paths", {}).values():
                for operation in path_item.values():
                    for code, response in operation.get("responses", {}).items():
                        if code.isdigit() and int(code) >= 400:
                            if int(code) == 422:
                                response["description"] = response["description"].replace(
                                    "Validation Error", DESCRIPTIONS[422]
                                )
                            response["content"] = {PROBLEM_JSON: {"schema": problem_ref}}
            components = schema.setdefault("components", {}).setdefault("schemas", {})
            components.pop("HTTPValidationError", None)
            components.pop("ValidationError", None)
            if "Problem" not in components:
                problem_schema = Problem.model_json_schema(ref_template="#/components/schemas/{model}")
                components.update(problem_schema.pop("$defs", {}))
                components["Problem"] = problem_schema
            app.openapi_schema = schema
        return app.openapi_schema

    app.openapi = openapi  # type: ignore[method-assign]
