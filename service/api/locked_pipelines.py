"""A study's locked pipeline: the one it settled on, scored on every epoch set posted afterwards.

Locking stores the pipeline (given, or the selection winner of a succeeded run of the study)
with its scoring, its hash and the time. From then on each new epoch set of the study gets a
run of that pipeline, queued with the upload: its result carries the quality measures of the
new data (median SME, channels kept, trials kept), and the study's webhooks hear of it like
of any run. Locking again replaces the pipeline.
"""

from fastapi import APIRouter, status

from service.domain.locked_pipelines import lock_pipeline as lock
from service.domain.locked_pipelines import locked_pipeline_of, winner_of
from service.errors import NotFound
from service.http.access import CallerDep
from service.http.deps import SessionDep
from service.http.lookups import run_by_id, study_by_code
from service.http.responses import BODY_ERRORS, errors
from service.schemas.locked_pipelines import LockCreate, LockedOut
from service.storage.models import LockedPipeline

router = APIRouter(prefix="/v1/studies/{code}/locked-pipeline", tags=["studies"])


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
        *BODY_ERRORS,
        conflict="The run named has not succeeded.",
        unprocessable="The body is malformed, or the run has no selection winner.",
    ),
)
def lock_pipeline(code: str, body: LockCreate, session: SessionDep, caller: CallerDep) -> LockedOut:
    """Lock the study's pipeline; every epoch set posted to the study from now on is scored with it."""
    study = study_by_code(session, code, caller, "write")
    if body.run is None:
        # LockCreate's validator lets no body through without either a run or a pipeline with its scoring.
        assert body.pipeline is not None and body.scoring is not None
        row = lock(session, study, body.pipeline, body.scoring, None)
    else:
        run = run_by_id(session, body.run, caller, "read")
        pipeline, scoring = winner_of(session, study, run)
        row = lock(session, study, pipeline, scoring, run.id)
    return locked_out(row, study.code)


@router.get("", response_model=LockedOut, responses=errors(401, 404))
def get_locked_pipeline(code: str, session: SessionDep, caller: CallerDep) -> LockedOut:
    """The study's locked pipeline (404 when none is locked)."""
    study = study_by_code(session, code, caller, "read")
    row = locked_pipeline_of(session, study)
    if row is None:
        raise NotFound(
            f"study {study.code!r} has no locked pipeline; lock one with POST /v1/studies/{study.code}/locked-pipeline"
        )
    return locked_out(row, study.code)
