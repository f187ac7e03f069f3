"""Reports: a run's results as a self-contained HTML page and as single figures; a study's page."""

import json
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Path, Response
from fastapi.responses import HTMLResponse
from sqlalchemy import select
from sqlalchemy.orm import Session

from service.api.access import CallerDep
from service.api.deps import SessionDep
from service.api.locked_pipelines import ORIGIN as ARRIVAL_ORIGIN
from service.api.lookups import run_by_id, study_by_code
from service.api.responses import errors
from service.errors import Conflict, NotFound
from service.report import catalogue
from service.report.figures import arrival_figure, figure_bytes
from service.report.html import (
    ArrivalQuality,
    EpochSetFacts,
    LockedFacts,
    RunFacts,
    RunSummaryRow,
    run_report_html,
    study_report_html,
)
from service.report.summary import Arrival
from service.storage import queue
from service.storage.models import EpochSet, LockedPipeline, Run, RunEpochSet, RunResult, Study

router = APIRouter(tags=["reports"])
STUDY_REPORT_RUNS = 200
MEDIA_TYPES = {"png": "image/png", "svg": "image/svg+xml"}
HTML_CONTENT = {"text/html": {"schema": {"type": "string"}}}
IMAGE_CONTENT = {media: {"schema": {"type": "string", "format": "binary"}} for media in MEDIA_TYPES.values()}


def _document(session: Session, run: Run) -> dict[str, Any]:
    result = session.get(RunResult, run.id)
    if run.status != queue.SUCCEEDED or result is None:
        hint = (
            f"it failed: {run.error}"
            if run.status == queue.FAILED
            else f"poll GET /v1/runs/{run.id} until status is succeeded"
        )
        raise Conflict(f"run {run.id} is {run.status}, so it has no report yet; {hint}")
    return json.loads(result.document)


def _epoch_set_facts(row: EpochSet) -> EpochSetFacts:
    return EpochSetFacts(
        id=row.id,
        subject=row.subject,
        session=row.session,
        sha256=row.sha256,
        n_channels=row.n_channels,
        sfreq=row.sfreq,
        conditions=dict(row.conditions),
        created_at=row.created_at,
    )


def _run_facts(session: Session, run: Run) -> RunFacts:
    rows = session.scalars(
        select(EpochSet)
        .join(RunEpochSet, RunEpochSet.epoch_set_id == EpochSet.id)
        .where(RunEpochSet.run_id == run.id)
        .order_by(RunEpochSet.position)
    )
    return RunFacts(
        id=run.id,
        study_code=run.study.code,
        study_title=run.study.title,
        status=run.status,
        created_at=run.created_at,
        finished_at=run.finished_at,
        pipelines=list(run.spec["pipelines"]),
        epoch_sets=[_epoch_set_facts(row) for row in rows],
    )


@router.get(
    "/v1/runs/{run_id}/report",
    response_class=HTMLResponse,
    responses={
        200: {"content": HTML_CONTENT, "description": "A self-contained HTML page."},
        **errors(401, 404, 409, conflict="The run has not succeeded (yet)."),
    },
)
def get_run_report(run_id: str, session: SessionDep, caller: CallerDep) -> HTMLResponse:
    """The run's results as one HTML page with its figures embedded: nothing else to load, safe to mail or archive."""
    run = run_by_id(session, run_id, caller, "read")
    document = _document(session, run)
    available = catalogue.run_figures(document)
    shown = set(catalogue.embedded_names(document, available))
    pictures = [(item, figure_bytes(item.draw(), "png")) for item in available if item.name in shown]
    return HTMLResponse(run_report_html(document, _run_facts(session, run), pictures))


@router.get(
    "/v1/runs/{run_id}/figures/{name}.{fmt}",
    response_class=Response,
    responses={
        200: {"content": IMAGE_CONTENT, "description": "The figure as PNG or SVG."},
        **errors(
            401,
            404,
            409,
            422,
            not_found="No such run, or no such figure for this run.",
            conflict="The run has not succeeded (yet).",
        ),
    },
)
def get_run_figure(
    run_id: str,
    name: Annotated[str, Path(description="ranking, topomap-<pipeline>, time-course, kept or sme.")],
    fmt: Annotated[Literal["png", "svg"], Path(description="Image format.")],
    session: SessionDep,
    caller: CallerDep,
) -> Response:
    """One figure of the run report alone, at a stable URL."""
    run = run_by_id(session, run_id, caller, "read")
    available = {item.name: item for item in catalogue.run_figures(_document(session, run))}
    if name not in available:
        raise NotFound(f"run {run.id} has no figure {name!r}; it has: {', '.join(available) or 'none'}")
    return Response(
        content=figure_bytes(available[name].draw(), fmt),
        media_type=MEDIA_TYPES[fmt],
        headers={"Cache-Control": "private, max-age=3600"},
    )


@router.get(
    "/v1/studies/{code}/report",
    response_class=HTMLResponse,
    responses={200: {"content": HTML_CONTENT, "description": "A self-contained HTML page."}, **errors(401, 404)},
)
def get_study_report(code: str, session: SessionDep, caller: CallerDep) -> HTMLResponse:
    """The study's page: its runs so far (newest first) and its epoch sets as they arrived."""
    study: Study = study_by_code(session, code, caller, "read")
    runs = session.scalars(
        select(Run)
        .where(Run.study_id == study.id)
        .order_by(Run.created_at.desc(), Run.id.desc())
        .limit(STUDY_REPORT_RUNS)
    )
    rows = [
        RunSummaryRow(
            id=run.id,
            status=run.status,
            created_at=run.created_at,
            pipelines=[pipeline["name"] for pipeline in run.spec.get("pipelines", [])],
            n_epoch_sets=len(run.spec.get("epoch_sets", [])),
            error=run.error,
        )
        for run in runs
    ]
    epoch_sets = [
        _epoch_set_facts(row)
        for row in session.scalars(
            select(EpochSet).where(EpochSet.study_id == study.id).order_by(EpochSet.created_at, EpochSet.id)
        )
    ]
    arrivals = [
        Arrival(
            label=f"{item.subject}/{item.session}" if item.session else item.subject,
            trials=item.conditions,
            channels=item.n_channels,
        )
        for item in epoch_sets
    ]
    arrival_png = figure_bytes(arrival_figure(arrivals), "png") if arrivals else None
    locked = session.get(LockedPipeline, study.id)
    locked_facts = (
        None
        if locked is None
        else LockedFacts(
            name=locked.pipeline["name"],
            steps=locked.pipeline.get("steps", []),
            pipeline_hash=locked.pipeline_hash,
            locked_at=locked.locked_at,
            source_run=locked.source_run,
        )
    )
    return HTMLResponse(
        study_report_html(
            study.code,
            study.title,
            rows,
            epoch_sets,
            arrival_png,
            locked_facts,
            _quality_on_arrival(session, study),
            _latest_compared(session, study),
        )
    )


def _latest_compared(session: Session, study: Study) -> tuple[str, dict[str, Any]] | None:
    """The newest succeeded run that compared pipelines (not a score on arrival): its id and result document."""
    succeeded = session.scalars(
        select(Run)
        .where(Run.study_id == study.id, Run.status == queue.SUCCEEDED)
        .order_by(Run.created_at.desc(), Run.id.desc())
    )
    run = next((run for run in succeeded if run.spec.get("origin") != ARRIVAL_ORIGIN), None)
    result = None if run is None else session.get(RunResult, run.id)
    return None if result is None else (run.id, json.loads(result.document))


def _quality_on_arrival(session: Session, study: Study) -> list[ArrivalQuality]:
    """What the locked pipeline found in each epoch set scored on arrival, oldest first."""
    scored = session.execute(
        select(Run, RunResult.document)
        .join(RunResult, RunResult.run_id == Run.id)
        .where(Run.study_id == study.id, Run.status == queue.SUCCEEDED)
        .order_by(Run.created_at, Run.id)
    ).all()
    quality = []
    for run, document in scored:
        if run.spec.get("origin") != ARRIVAL_ORIGIN:
            continue
        for entry in json.loads(document)["results"]:
            quality.append(
                ArrivalQuality(
                    epoch_set=entry["epoch_set"],
                    subject=entry["subject"],
                    session=entry.get("session"),
                    scored_at=run.created_at,
                    pipeline=entry["pipeline"],
                    n_trials=entry.get("n_trials") or {},
                    median_sme_uv=entry.get("median_sme_uv") or {},
                    channels_kept=entry.get("channels_kept"),
                    channels_uploaded=entry.get("channels_uploaded"),
                    error=entry.get("error"),
                )
            )
    return quality
