"""A study's locked pipeline: the one it settled on, scored on every epoch set posted afterwards.

Locking stores the pipeline (given, or the selection winner of a succeeded run of the study)
with its scoring, its hash and the time. From then on each new epoch set of the study gets a
run of that pipeline, queued with the upload: its result carries the quality measures of the
new data (median SME, channels kept, trials kept), and the study's webhooks hear of it like
of any run. Locking again replaces the pipeline.
"""

import json
import logging

from fastapi import APIRouter, status
from sqlalchemy.orm import Session

from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.pipeline import PipelineSpec
from epoch_assay.engine.scoring_spec import ScoringSpec
from service.api.access import CallerDep
from service.api.deps import SessionDep
from service.api.lookups import run_by_id, study_by_code
from service.api.responses import errors
from service.api.runs import epoch_set_meta, queue_run
from service.errors import Conflict, NotFound, Unprocessable
from service.schemas.locked_pipelines import LockCreate, LockedOut
from service.storage import queue
from service.storage.ids import utc_now
from service.storage.models import EpochSet, LockedPipeline, RunResult, Study

log = logging.getLogger("epoch_assay.service")
router = APIRouter(prefix="/v1/studies/{code}/locked-pipeline", tags=["studies"])
ORIGIN = "locked-pipeline"


def locked_out(row: LockedPipeline, study_code: str) -> LockedOut:
    return LockedOut(
        study=study_code,
        pipeline=row.pipeline,
        pipeline_hash=row.pipeline_hash,
        scoring=row.scoring,
        source_run=row.source_run,
        locked_at=row.locked_at,
    )


@router.post(
    "",
    status_code=status.HTTP_201_CREATED,
    response_model=LockedOut,
    responses=errors(
        400,
        401,
        403,
        404,
        409,
        413,
        422,
        conflict="The run named has not succeeded.",
        unprocessable="The body is malformed, or the run has no selection winner.",
    ),
)
def lock_pipeline(code: str, body: LockCreate, session: SessionDep, caller: CallerDep) -> LockedOut:
    """Lock the study's pipeline; every epoch set posted to the study from now on is scored with it."""
    study = study_by_code(session, code, caller, "write")
    if body.run is None:
        pipeline, scoring, source_run = body.pipeline, body.scoring, None
    else:
        pipeline, scoring, source_run = _winner_of(session, study, body.run, caller)
    # The locked pipeline runs alone on each new epoch set, so it is its own reference.
    scoring = scoring.model_copy(update={"reference_pipeline": None})
    row = session.get(LockedPipeline, study.id) or LockedPipeline(study_id=study.id)
    row.pipeline, row.scoring = pipeline.model_dump(mode="json"), scoring.model_dump(mode="json")
    row.pipeline_hash, row.source_run, row.locked_at = pipeline.spec_hash(), source_run, utc_now()
    session.add(row)
    session.flush()
    return locked_out(row, study.code)


@router.get("", response_model=LockedOut, responses=errors(401, 404))
def get_locked_pipeline(code: str, session: SessionDep, caller: CallerDep) -> LockedOut:
    """The study's locked pipeline (404 when none is locked)."""
    study = study_by_code(session, code, caller, "read")
    row = session.get(LockedPipeline, study.id)
    if row is None:
        raise NotFound(
            f"study {study.code!r} has no locked pipeline; lock one with POST /v1/studies/{study.code}/locked-pipeline"
        )
    return locked_out(row, study.code)


def score_on_arrival(session: Session, study: Study, row: EpochSet, max_attempts: int) -> str | None:
    """Queue the locked pipeline on a newly stored epoch set; the run's id, or None when the study
    has no locked pipeline or it cannot run on this epoch set (logged, the upload still succeeds)."""
    locked = session.get(LockedPipeline, study.id)
    if locked is None:
        return None
    pipeline, scoring = PipelineSpec.model_validate(locked.pipeline), ScoringSpec.model_validate(locked.scoring)
    try:
        scoring.check(pipeline.check(epoch_set_meta(row)))
    except SpecError as error:
        log.warning(
            "the locked pipeline cannot run on a new epoch set; not scored",
            extra={"study": study.code, "epoch_set": row.id, "reason": error.message},
        )
        return None
    spec = {
        "study": study.code,
        "epoch_sets": [row.id],
        "pipelines": [locked.pipeline],
        "scoring": locked.scoring,
        "origin": ORIGIN,
    }
    return queue_run(session, study, spec, [pipeline], [row], max_attempts).id


def _winner_of(session: Session, study: Study, run_id: str, caller: CallerDep) -> tuple[PipelineSpec, ScoringSpec, str]:
    run = run_by_id(session, run_id, caller, "read")
    if run.study_id != study.id:
        raise Unprocessable(f"run: run {run.id} belongs to another study; name a run of study {study.code!r}")
    result = session.get(RunResult, run.id)
    if run.status != queue.SUCCEEDED or result is None:
        raise Conflict(f"run {run.id} is {run.status}; lock its winner once it has succeeded")
    winner = (json.loads(result.document).get("selection") or {}).get("winner")
    if winner is None:
        raise Unprocessable(
            f"run: run {run.id} chose no winner (it had no selection, or the selection failed); "
            "post the pipeline itself, or lock from a run with a selection"
        )
    spec = next(item for item in run.spec["pipelines"] if item["name"] == winner)
    return PipelineSpec.model_validate(spec), ScoringSpec.model_validate(run.spec["scoring"]), run.id
