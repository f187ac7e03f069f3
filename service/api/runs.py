"""Runs: score pipelines on epoch sets; poll their state; read their results."""

from typing import Annotated

from fastapi import APIRouter, Query, Response, status
from sqlalchemy import select

from service.api.deps import SessionDep, SettingsDep
from service.api.lookups import run_by_id, study_by_code
from service.errors import Conflict, Unprocessable, spec_error_to_unprocessable
from service.schemas.runs import RunAccepted, RunCreate, RunOut, RunPage, RunResultDocument, RunStatus
from service.storage import queue
from service.storage.ids import new_id
from service.storage.models import EpochSet, Run, RunEpochSet, RunResult, Study
from worker.engine.epochs import EpochSetMeta
from worker.engine.errors import SpecError

router = APIRouter(prefix="/v1/runs", tags=["runs"])


def run_out(run: Run, study_code: str) -> RunOut:
    return RunOut(
        id=run.id, study=study_code, status=run.status, progress=run.progress, error=run.error,
        created_at=run.created_at, started_at=run.started_at, finished_at=run.finished_at,
    )


def epoch_set_meta(row: EpochSet) -> EpochSetMeta:
    """What a spec check needs to know of a stored epoch set."""
    return EpochSetMeta(
        sfreq=row.sfreq, tmin=row.tmin, n_times=row.n_times, ch_names=tuple(row.ch_names),
        ch_types=tuple(row.ch_types), condition_counts=dict(row.conditions), has_positions=row.has_positions,
    )


def _epoch_sets_of_run(session: SessionDep, study: Study, ids: list[str]) -> list[EpochSet]:
    rows = {row.id: row for row in session.scalars(select(EpochSet).where(EpochSet.id.in_(ids), EpochSet.study_id == study.id))}
    for index, epoch_set_id in enumerate(ids):
        if epoch_set_id not in rows:
            raise Unprocessable(
                f"epoch_sets.{index}: no epoch set {epoch_set_id!r} in study {study.code!r}; "
                f"list them with GET /v1/studies/{study.code}/epoch-sets",
                errors=[{"loc": ["body", "epoch_sets", index], "msg": "unknown epoch set"}],
            )
    return [rows[epoch_set_id] for epoch_set_id in ids]


def check_run_spec(body: RunCreate, epoch_sets: list[EpochSet]) -> None:
    """Refuse, before anything is queued, a pipeline or scoring that cannot run on an epoch set."""
    for row in epoch_sets:
        meta = epoch_set_meta(row)
        for index, pipeline in enumerate(body.pipelines):
            try:
                processed = pipeline.check(meta)
            except SpecError as error:
                raise _located(error, row, "pipelines", index) from None
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
    responses={404: {"description": "No such study."}, 422: {"description": "The spec cannot run on these epoch sets."}},
)
def create_run(body: RunCreate, session: SessionDep, settings: SettingsDep, response: Response) -> RunAccepted:
    """Queue a run that scores each pipeline on each epoch set."""
    study = study_by_code(session, body.study)
    epoch_sets = _epoch_sets_of_run(session, study, body.epoch_sets)
    check_run_spec(body, epoch_sets)
    run = Run(id=new_id("run"), study_id=study.id, spec=body.model_dump(mode="json"), status=queue.QUEUED)
    session.add(run)
    session.flush()
    session.add_all(RunEpochSet(run_id=run.id, epoch_set_id=row.id, position=i) for i, row in enumerate(epoch_sets))
    queue.enqueue(session, run.id, max_attempts=settings.max_attempts)
    response.headers["Location"] = f"/v1/runs/{run.id}"
    return RunAccepted(id=run.id, status=queue.QUEUED)


@router.get("", response_model=RunPage)
def list_runs(
    session: SessionDep,
    study: Annotated[str | None, Query(description="Only runs of this study (its code).")] = None,
    status_filter: Annotated[RunStatus | None, Query(alias="status")] = None,
    limit: Annotated[int, Query(ge=1, le=500)] = 100,
) -> RunPage:
    """Runs, newest first."""
    query = select(Run, Study.code).join(Study, Run.study_id == Study.id)
    if study is not None:
        query = query.where(Run.study_id == study_by_code(session, study).id)
    if status_filter is not None:
        query = query.where(Run.status == status_filter)
    rows = session.execute(query.order_by(Run.created_at.desc(), Run.id.desc()).limit(limit)).all()
    return RunPage(runs=[run_out(run, code) for run, code in rows])


@router.get("/{run_id}", response_model=RunOut, responses={404: {"description": "No such run."}})
def get_run(run_id: str, session: SessionDep) -> RunOut:
    """The state of a run: queued, running (with progress), succeeded or failed (with the error)."""
    run = run_by_id(session, run_id)
    return run_out(run, run.study.code)


@router.get(
    "/{run_id}/result",
    responses={
        200: {"model": RunResultDocument, "description": "The result document."},
        404: {"description": "No such run."},
        409: {"description": "The run has not succeeded (yet)."},
    },
)
def get_run_result(run_id: str, session: SessionDep) -> Response:
    """The result document of a succeeded run."""
    run = run_by_id(session, run_id)
    result = session.get(RunResult, run.id)
    if run.status != queue.SUCCEEDED or result is None:
        hint = f"it failed: {run.error}" if run.status == queue.FAILED else f"poll GET /v1/runs/{run.id} until status is succeeded"
        raise Conflict(f"run {run.id} is {run.status}, so it has no result; {hint}")
    return Response(content=result.document, media_type="application/json")
