"""Runs: score pipelines on epoch sets; poll their state; read their results."""

import json
from datetime import datetime
from typing import Annotated, Literal

from fastapi import APIRouter, Header, Query, Response, status
from sqlalchemy import and_, or_, select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from epoch_assay.engine.epochs import EpochSetMeta
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.pipeline import PipelineSpec
from service.api.access import CallerDep
from service.api.deps import SessionDep, SettingsDep
from service.api.idempotency import IdempotencyDep, canonical_fingerprint
from service.api.lookups import run_by_id, study_by_code
from service.api.pagination import as_utc, decode_cursor, encode_cursor
from service.api.responses import errors
from service.api.result_csv import CSV_EXAMPLE, preferred_media_type, result_csv
from service.api.run_limits import check_run_size
from service.errors import Conflict, NotAcceptable, Unprocessable, spec_error_to_unprocessable
from service.schemas.epoch_sets import SUBJECT_PATTERN
from service.schemas.runs import RunAccepted, RunCreate, RunOut, RunPage, RunResultDocument, RunStatus
from service.storage import queue
from service.storage.ids import new_id
from service.storage.models import EpochSet, Run, RunEpochSet, RunPipeline, RunResult, Study

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


def epoch_set_meta(row: EpochSet) -> EpochSetMeta:
    """What a spec check needs to know of a stored epoch set."""
    return EpochSetMeta(
        sfreq=row.sfreq,
        tmin=row.tmin,
        n_times=row.n_times,
        ch_names=tuple(row.ch_names),
        ch_types=tuple(row.ch_types),
        condition_counts=dict(row.conditions),
        has_positions=row.has_positions,
    )


def _epoch_sets_of_run(session: SessionDep, study: Study, ids: list[str]) -> list[EpochSet]:
    rows = {
        row.id: row
        for row in session.scalars(select(EpochSet).where(EpochSet.id.in_(ids), EpochSet.study_id == study.id))
    }
    for index, epoch_set_id in enumerate(ids):
        if epoch_set_id not in rows:
            raise Unprocessable(
                f"epoch_sets.{index}: no epoch set {epoch_set_id!r} in study {study.code!r}; "
                f"list them with GET /v1/studies/{study.code}/epoch-sets",
                errors=[{"loc": ["body", "epoch_sets", index], "msg": "unknown epoch set"}],
            )
    return [rows[epoch_set_id] for epoch_set_id in ids]


def check_run_spec(body: RunCreate, pipelines: list[PipelineSpec], epoch_sets: list[EpochSet]) -> None:
    """Refuse, before anything is queued, a pipeline or scoring that cannot run on an epoch set.

    ``pipelines`` are the run's, listed or expanded from its grid; a grid pipeline's error is
    located by its name under ``grid``.
    """
    for row in epoch_sets:
        meta = epoch_set_meta(row)
        for index, pipeline in enumerate(pipelines):
            try:
                processed = pipeline.check(meta)
            except SpecError as error:
                where = ("pipelines", index) if body.grid is None else ("grid", pipeline.name)
                raise _located(error, row, *where) from None
            try:
                body.scoring.check(processed)
            except SpecError as error:
                raise _located(error, row, "scoring") from None


def _located(error: SpecError, row: EpochSet, *prefix: str | int) -> Unprocessable:
    located = spec_error_to_unprocessable(error, *prefix)
    located.detail = f"{located.detail} (epoch set {row.id}, subject {row.subject})"
    return located


@router.post(
    "",
    status_code=status.HTTP_202_ACCEPTED,
    response_model=RunAccepted,
    responses=errors(
        400,
        401,
        403,
        404,
        409,
        413,
        422,
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
    epoch_sets = _epoch_sets_of_run(session, study, body.epoch_sets)
    try:
        pipelines = body.resolved_pipelines(settings.max_pipelines)
    except SpecError as error:
        raise spec_error_to_unprocessable(error) from None
    check_run_size(pipelines, len(epoch_sets), settings)
    check_run_spec(body, pipelines, epoch_sets)
    # A grid run also stores its expanded pipelines, so that readers of the spec see every name.
    spec = body.model_dump(mode="json") | {"pipelines": [pipeline.model_dump(mode="json") for pipeline in pipelines]}
    run = queue_run(session, study, spec, pipelines, epoch_sets, settings.max_attempts)
    try:
        session.flush()
    except IntegrityError:
        # An epoch set of the run was deleted by a concurrent request that committed first.
        session.rollback()
        raise Unprocessable(
            "epoch_sets: an epoch set of this run was deleted while the run was being created; "
            f"list the remaining ones with GET /v1/studies/{body.study}/epoch-sets"
        ) from None
    return idempotency.remember(
        status.HTTP_202_ACCEPTED, RunAccepted(id=run.id, status=queue.QUEUED), location=f"/v1/runs/{run.id}"
    )


def queue_run(
    session: Session,
    study: Study,
    spec: dict,
    pipelines: list[PipelineSpec],
    epoch_sets: list[EpochSet],
    max_attempts: int,
) -> Run:
    """Store a checked run with its epoch sets and pipeline names, and queue its job."""
    run = Run(id=new_id("run"), study_id=study.id, spec=spec, status=queue.QUEUED)
    session.add(run)
    session.flush()
    session.add_all(RunEpochSet(run_id=run.id, epoch_set_id=row.id, position=i) for i, row in enumerate(epoch_sets))
    session.add_all(RunPipeline(run_id=run.id, position=i, name=p.name) for i, p in enumerate(pipelines))
    queue.enqueue(session, run.id, max_attempts=max_attempts)
    return run


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
    query = select(Run, Study.code).join(Study, Run.study_id == Study.id).where(caller.study_filter(Run.study_id))
    if study is not None:
        query = query.where(Run.study_id == study_by_code(session, study, caller, "read").id)
    if subject is not None or session_label is not None:
        scored = select(RunEpochSet.run_id).join(EpochSet, RunEpochSet.epoch_set_id == EpochSet.id)
        if subject is not None:
            scored = scored.where(EpochSet.subject == subject)
        if session_label is not None:
            scored = scored.where(EpochSet.session == session_label)
        query = query.where(Run.id.in_(scored))
    if status_filter is not None:
        query = query.where(Run.status == status_filter)
    if pipeline is not None:
        query = query.where(Run.id.in_(select(RunPipeline.run_id).where(RunPipeline.name == pipeline)))
    if created_after is not None:
        query = query.where(Run.created_at >= as_utc(created_after))
    if created_before is not None:
        query = query.where(Run.created_at < as_utc(created_before))
    if cursor is not None:
        last_created, last_id = decode_cursor(cursor)
        query = query.where(or_(Run.created_at < last_created, and_(Run.created_at == last_created, Run.id < last_id)))
    rows = session.execute(query.order_by(Run.created_at.desc(), Run.id.desc()).limit(limit + 1)).all()
    page = rows[:limit]
    next_cursor = encode_cursor(page[-1][0].created_at, page[-1][0].id) if len(rows) > limit else None
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
    responses={
        200: {
            "model": RunResultDocument,
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
) -> Response:
    """The result document of a succeeded run, as JSON or (``Accept: text/csv`` or ``?format=csv``) CSV."""
    run = run_by_id(session, run_id, caller, "read")
    media_type = _result_media_type(result_format, accept)
    result = session.get(RunResult, run.id)
    if run.status != queue.SUCCEEDED or result is None:
        hint = (
            f"it failed: {run.error}"
            if run.status == queue.FAILED
            else f"poll GET /v1/runs/{run.id} until status is succeeded"
        )
        raise Conflict(f"run {run.id} is {run.status}, so it has no result; {hint}")
    if media_type == "text/csv":
        return Response(
            content=result_csv(json.loads(result.document)),
            media_type="text/csv; charset=utf-8",
            headers={"Content-Disposition": f'attachment; filename="{run.id}.csv"'},
        )
    return Response(content=result.document, media_type="application/json")


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
