"""Runs: score pipelines on epoch sets; poll their state; read their results."""

from datetime import datetime
from typing import Annotated, Literal

from fastapi import APIRouter, Header, Query, Response, status

from epoch_assay.engine.document import RunResultDocument
from epoch_assay.engine.errors import SpecError
from service.domain.run_limits import check_run_size
from service.domain.runs import check_run_spec, epoch_sets_of_new_run, queue_run, stored_result_document
from service.errors import NotAcceptable, spec_error_to_unprocessable
from service.http.access import CallerDep
from service.http.deps import SessionDep, SettingsDep
from service.http.idempotency import IdempotencyDep, canonical_fingerprint
from service.http.lookups import run_by_id, study_by_code
from service.http.pagination import as_utc, decode_cursor, encode_cursor
from service.http.responses import BODY_ERRORS, errors
from service.http.result_csv import CSV_EXAMPLE, preferred_media_type, result_csv
from service.schemas.epoch_sets import SUBJECT_PATTERN
from service.schemas.runs import RunAccepted, RunCreate, RunOut, RunPage, RunStatus
from service.storage import queue
from service.storage.models import Run
from service.storage.runs import RunFilter, runs_page

router = APIRouter(prefix="/v1/runs", tags=["runs"])


def run_out(run: Run, study_code: str) -> RunOut:
    return RunOut(
        id=run.id,
        study=study_code,
        status=run.status,
        progress=run.progress,
        error=run.error,
        created_at=run.created_at,
        started_at=run.started_at,
        finished_at=run.finished_at,
        pipelines=[pipeline["name"] for pipeline in run.spec.get("pipelines") or []],
        epoch_sets=list(run.spec.get("epoch_sets", [])),
        progress_detail=run.progress_detail if run.status == queue.RUNNING else None,
    )


@router.post(
    "",
    status_code=status.HTTP_202_ACCEPTED,
    response_model=RunAccepted,
    responses=errors(
        *BODY_ERRORS,
        unprocessable="The spec is malformed or cannot run on these epoch sets; the detail names the field.",
    ),
)
def create_run(
    body: RunCreate, session: SessionDep, settings: SettingsDep, caller: CallerDep, idempotency: IdempotencyDep
) -> Response:
    """Queue a run that scores each pipeline on each epoch set."""
    study = study_by_code(session, body.study, caller, "write")
    if (replayed := idempotency.replay(canonical_fingerprint(body.model_dump(mode="json")))) is not None:
        return replayed
    epoch_sets = epoch_sets_of_new_run(session, study, body.epoch_sets)
    try:
        pipelines = body.resolved_pipelines(settings.max_pipelines)
    except SpecError as error:
        raise spec_error_to_unprocessable(error) from None
    check_run_size(pipelines, len(epoch_sets), settings)
    check_run_spec(pipelines, body.scoring, epoch_sets, from_grid=body.grid is not None)
    # A grid run also stores its expanded pipelines, so that readers of the spec see every name.
    spec = body.model_dump(mode="json") | {"pipelines": [pipeline.model_dump(mode="json") for pipeline in pipelines]}
    run = queue_run(session, study, spec, pipelines, epoch_sets, settings.max_attempts)
    return idempotency.remember(
        status.HTTP_202_ACCEPTED, RunAccepted(id=run.id, status=queue.QUEUED), location=f"/v1/runs/{run.id}"
    )


@router.get("", response_model=RunPage, responses=errors(401, 404, 422))
def list_runs(
    session: SessionDep,
    caller: CallerDep,
    study: Annotated[str | None, Query(description="Only runs of this study (its code).")] = None,
    subject: Annotated[
        str | None, Query(pattern=SUBJECT_PATTERN, description="Only runs scoring an epoch set of this subject.")
    ] = None,
    session_label: Annotated[
        str | None,
        Query(alias="session", pattern=SUBJECT_PATTERN, description="Only runs scoring an epoch set of this session."),
    ] = None,
    status_filter: Annotated[RunStatus | None, Query(alias="status")] = None,
    pipeline: Annotated[
        str | None, Query(min_length=1, max_length=200, description="Only runs with a pipeline of this name.")
    ] = None,
    created_after: Annotated[
        datetime | None,
        Query(description="Only runs created at or after this time (ISO 8601; UTC if no zone is given)."),
    ] = None,
    created_before: Annotated[datetime | None, Query(description="Only runs created before this time.")] = None,
    limit: Annotated[int, Query(ge=1, le=500, description="Runs per page.")] = 100,
    cursor: Annotated[str | None, Query(max_length=400, description="next_cursor of the previous page.")] = None,
) -> RunPage:
    """Runs the key covers, newest first, one page at a time (pass ``next_cursor`` on for the next page)."""
    where = RunFilter(
        study_id=None if study is None else study_by_code(session, study, caller, "read").id,
        subject=subject,
        session_label=session_label,
        status=status_filter,
        pipeline=pipeline,
        created_after=None if created_after is None else as_utc(created_after),
        created_before=None if created_before is None else as_utc(created_before),
    )
    after = None if cursor is None else decode_cursor(cursor)
    page, more = runs_page(session, caller.study_filter(Run.study_id), where, after, limit)
    next_cursor = encode_cursor(page[-1][0].created_at, page[-1][0].id) if more else None
    return RunPage(runs=[run_out(run, code) for run, code in page], next_cursor=next_cursor)


@router.get("/{run_id}", response_model=RunOut, responses=errors(401, 404))
def get_run(run_id: str, session: SessionDep, caller: CallerDep) -> RunOut:
    """The state of a run: queued, running (with progress), succeeded or failed (with the error)."""
    run = run_by_id(session, run_id, caller, "read")
    return run_out(run, run.study.code)


@router.delete("/{run_id}", status_code=status.HTTP_204_NO_CONTENT, responses=errors(401, 403, 404))
def delete_run(run_id: str, session: SessionDep, caller: CallerDep) -> Response:
    """Delete a run, its job and its result. A running run is dropped by its worker at the next heartbeat.

    Its epoch sets stay; delete them afterwards if they are no longer wanted.
    """
    run = run_by_id(session, run_id, caller, "write")
    queue.delete_run(session, run.id)
    return Response(status_code=status.HTTP_204_NO_CONTENT)


MEDIA_TYPES = ("application/json", "text/csv")


@router.get(
    "/{run_id}/result",
    response_model=RunResultDocument,
    responses={
        200: {
            "description": "The result document, or its CSV table.",
            "content": {"text/csv": {"schema": {"type": "string"}, "example": CSV_EXAMPLE}},
        },
        **errors(401, 404, 406, 409, conflict="The run has not succeeded (yet)."),
    },
)
def get_run_result(
    run_id: str,
    session: SessionDep,
    caller: CallerDep,
    result_format: Annotated[
        Literal["json", "csv"] | None,
        Query(alias="format", description="csv: one row per pipeline × epoch set × channel. Overrides Accept."),
    ] = None,
    accept: Annotated[str | None, Header(include_in_schema=False)] = None,
) -> RunResultDocument | Response:
    """The result document of a succeeded run, as JSON or (``Accept: text/csv`` or ``?format=csv``) CSV.

    A document stored under an earlier schema_version is converted to the current one on the way out.
    """
    run = run_by_id(session, run_id, caller, "read")
    media_type = _result_media_type(result_format, accept)
    document = stored_result_document(session, run, "result")
    if media_type == "text/csv":
        return Response(
            content=result_csv(document),
            media_type="text/csv; charset=utf-8",
            headers={"Content-Disposition": f'attachment; filename="{run.id}.csv"'},
        )
    return document


def _result_media_type(result_format: str | None, accept: str | None) -> str:
    if result_format is not None:
        return "text/csv" if result_format == "csv" else "application/json"
    media_type = preferred_media_type(accept or "", MEDIA_TYPES)
    if media_type is None:
        raise NotAcceptable(
            f"the result is available as {' or '.join(MEDIA_TYPES)}; the Accept header "
            f"{accept!r} takes neither (or use ?format=csv / ?format=json)"
        )
    return media_type
