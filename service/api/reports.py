"""Reports: a run's results as a self-contained HTML page and as single figures; a study's page."""

import json
from typing import Annotated, Literal

from fastapi import APIRouter, Path, Response
from fastapi.responses import HTMLResponse
from sqlalchemy.orm import Session

from epoch_assay.engine.document import RunResultDocument, upgrade_document
from service.domain.figures import run_figure_bytes
from service.domain.locked_pipelines import ARRIVAL_ORIGIN, locked_pipeline_of
from service.domain.runs import stored_result_document
from service.errors import NotFound
from service.http.access import CallerDep
from service.http.deps import SessionDep
from service.http.lookups import run_by_id, study_by_code
from service.http.responses import errors
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
from service.storage.epoch_sets import epoch_sets_of_run, epoch_sets_of_study
from service.storage.models import EpochSet, Run, Study
from service.storage.runs import latest_runs_of_study, succeeded_documents_of_study

router = APIRouter(tags=["reports"])
STUDY_REPORT_RUNS = 200
MEDIA_TYPES = {"png": "image/png", "svg": "image/svg+xml"}
HTML_CONTENT = {"text/html": {"schema": {"type": "string"}}}
IMAGE_CONTENT = {media: {"schema": {"type": "string", "format": "binary"}} for media in MEDIA_TYPES.values()}


def _document(session: Session, run: Run) -> RunResultDocument:
    return stored_result_document(session, run, "report yet")


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
    rows = epoch_sets_of_run(session, run.id)
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
    pictures = [(item, run_figure_bytes(session, run.id, item, "png")) for item in available if item.name in shown]
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
        content=run_figure_bytes(session, run.id, available[name], fmt),
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
    runs = latest_runs_of_study(session, study.id, STUDY_REPORT_RUNS)
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
    epoch_sets = [_epoch_set_facts(row) for row in epoch_sets_of_study(session, study.id)]
    arrivals = [
        Arrival(
            label=f"{item.subject}/{item.session}" if item.session else item.subject,
            trials=item.conditions,
            channels=item.n_channels,
        )
        for item in epoch_sets
    ]
    arrival_png = figure_bytes(arrival_figure(arrivals), "png") if arrivals else None
    locked = locked_pipeline_of(session, study)
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


def _latest_compared(session: Session, study: Study) -> tuple[str, RunResultDocument] | None:
    """The newest succeeded run that compared pipelines (not a score on arrival): its id and result document."""
    latest = None
    for run, document in succeeded_documents_of_study(session, study.id):
        if run.spec.get("origin") != ARRIVAL_ORIGIN:
            latest = (run.id, document)
    return None if latest is None else (latest[0], upgrade_document(json.loads(latest[1])))


def _quality_on_arrival(session: Session, study: Study) -> list[ArrivalQuality]:
    """What the locked pipeline found in each epoch set scored on arrival, oldest first."""
    quality = []
    for run, document in succeeded_documents_of_study(session, study.id):
        if run.spec.get("origin") != ARRIVAL_ORIGIN:
            continue
        for entry in upgrade_document(json.loads(document)).results:
            quality.append(
                ArrivalQuality(
                    epoch_set=entry.epoch_set,
                    subject=entry.subject,
                    session=entry.session,
                    scored_at=run.created_at,
                    pipeline=entry.pipeline,
                    n_trials=entry.n_trials or {},
                    median_sme_uv=entry.median_sme_uv or {},
                    channels_kept=entry.channels_kept,
                    channels_uploaded=entry.channels_uploaded,
                    error=entry.error,
                )
            )
    return quality
