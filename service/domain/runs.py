"""Queueing a run: its epoch sets found in the study, its spec checked against their stored metadata, the run,
its epoch sets, pipeline names and job stored together; and reading a run's result once it has one."""

import json
from typing import Any

from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from epoch_assay.engine.document import RunResultDocument, upgrade_document
from epoch_assay.engine.epochs import EpochSetMeta
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.pipeline import PipelineSpec
from epoch_assay.engine.scoring_spec import ScoringSpec
from epoch_assay.engine.steps.filters import check_highpass_fits_epochs
from service.errors import Conflict, Unprocessable, spec_error_to_unprocessable
from service.storage import queue
from service.storage.epoch_sets import epoch_sets_by_id
from service.storage.ids import new_id
from service.storage.models import RECORDING_SOURCE, EpochSet, Run, RunEpochSet, RunPipeline, Study
from service.storage.runs import result_document


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


def epoch_sets_of_new_run(session: Session, study: Study, ids: list[str]) -> list[EpochSet]:
    """The epoch sets named by a run in its order; 422 naming the first that is not in the study."""
    rows = epoch_sets_by_id(session, study.id, ids)
    for index, epoch_set_id in enumerate(ids):
        if epoch_set_id not in rows:
            raise Unprocessable(
                f"epoch_sets.{index}: no epoch set {epoch_set_id!r} in study {study.code!r}; "
                f"list them with GET /v1/studies/{study.code}/epoch-sets",
                errors=[{"loc": ["body", "epoch_sets", index], "msg": "unknown epoch set"}],
            )
    return [rows[epoch_set_id] for epoch_set_id in ids]


def check_run_spec(
    pipelines: list[PipelineSpec], scoring: ScoringSpec, epoch_sets: list[EpochSet], *, from_grid: bool
) -> None:
    """Refuse (422), before anything is queued, a pipeline or scoring that cannot run on an epoch set.

    ``pipelines`` are the run's, listed or expanded from its grid; a grid pipeline's error is
    located by its name under ``grid``. On epoch sets uploaded as epochs (not cut from a
    recording) a high-pass edge whose three periods outlast the epoch is refused too, unless
    its step allows short epochs.
    """
    for row in epoch_sets:
        meta = epoch_set_meta(row)
        for index, pipeline in enumerate(pipelines):
            where = ("grid", pipeline.name) if from_grid else ("pipelines", index)
            try:
                processed = pipeline.check(meta)
            except SpecError as error:
                raise _located(error, row, *where) from None
            if row.source != RECORDING_SOURCE:
                try:
                    check_highpass_fits_epochs(pipeline.steps, meta)
                except SpecError as error:
                    route = f"; a recording is uploaded with POST /v1/studies/{row.study.code}/recordings"
                    raise _located(SpecError(error.loc, error.message + route), row, *where) from None
            try:
                scoring.check(processed)
            except SpecError as error:
                raise _located(error, row, "scoring") from None


def _located(error: SpecError, row: EpochSet, *prefix: str | int) -> Unprocessable:
    located = spec_error_to_unprocessable(error, *prefix)
    located.detail = f"{located.detail} (epoch set {row.id}, subject {row.subject})"
    return located


def queue_run(
    session: Session,
    study: Study,
    spec: dict[str, Any],
    pipelines: list[PipelineSpec],
    epoch_sets: list[EpochSet],
    max_attempts: int,
) -> Run:
    """Store a checked run with its epoch sets and pipeline names, and queue its job (flushed).

    422 when an epoch set of the run was deleted by a concurrent request that committed first.
    """
    run = Run(id=new_id("run"), study_id=study.id, spec=spec, status=queue.QUEUED)
    session.add(run)
    session.flush()
    session.add_all(RunEpochSet(run_id=run.id, epoch_set_id=row.id, position=i) for i, row in enumerate(epoch_sets))
    session.add_all(RunPipeline(run_id=run.id, position=i, name=p.name) for i, p in enumerate(pipelines))
    queue.enqueue(session, run.id, max_attempts=max_attempts)
    try:
        session.flush()
    except IntegrityError:
        session.rollback()
        raise Unprocessable(
            "epoch_sets: an epoch set of this run was deleted while the run was being created; "
            f"list the remaining ones with GET /v1/studies/{study.code}/epoch-sets"
        ) from None
    return run


def stored_result(session: Session, run: Run, what: str) -> str:
    """The run's result document as stored (JSON text); 409 saying why when the run has none (yet).

    ``what`` names the thing asked for in the answer ("result", "report").
    """
    document = result_document(session, run.id)
    if run.status != queue.SUCCEEDED or document is None:
        hint = (
            f"it failed: {run.error}"
            if run.status == queue.FAILED
            else f"poll GET /v1/runs/{run.id} until status is succeeded"
        )
        raise Conflict(f"run {run.id} is {run.status}, so it has no {what}; {hint}")
    return document


def stored_result_document(session: Session, run: Run, what: str) -> RunResultDocument:
    """:func:`stored_result` as the typed document (older schema versions converted on read)."""
    return upgrade_document(json.loads(stored_result(session, run, what)))
