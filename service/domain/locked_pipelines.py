"""A study's locked pipeline: locking it (given, or a succeeded run's selection winner), and scoring every
epoch set posted afterwards with it (a run queued in the upload's transaction)."""

import json
import logging

from sqlalchemy.orm import Session

from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.pipeline import PipelineSpec
from epoch_assay.engine.scoring_spec import ScoringSpec
from service.domain.runs import epoch_set_meta, queue_run
from service.errors import Conflict, Unprocessable
from service.storage import queue
from service.storage.ids import utc_now
from service.storage.models import EpochSet, LockedPipeline, Run, Study
from service.storage.runs import result_document

log = logging.getLogger("epoch_assay.service")
# The ``origin`` of a run queued on arrival, as stored in its spec.
ARRIVAL_ORIGIN = "locked-pipeline"


def locked_pipeline_of(session: Session, study: Study) -> LockedPipeline | None:
    """The study's locked pipeline, if one is locked."""
    return session.get(LockedPipeline, study.id)


def lock_pipeline(
    session: Session, study: Study, pipeline: PipelineSpec, scoring: ScoringSpec, source_run: str | None
) -> LockedPipeline:
    """Lock ``pipeline`` with ``scoring`` for the study (replacing any locked before); flushed."""
    # The locked pipeline runs alone on each new epoch set, so it is its own reference.
    scoring = scoring.model_copy(update={"reference_pipeline": None})
    row = locked_pipeline_of(session, study) or LockedPipeline(study_id=study.id)
    row.pipeline, row.scoring = pipeline.model_dump(mode="json"), scoring.model_dump(mode="json")
    row.pipeline_hash, row.source_run, row.locked_at = pipeline.spec_hash(), source_run, utc_now()
    session.add(row)
    session.flush()
    return row


def winner_of(session: Session, study: Study, run: Run) -> tuple[PipelineSpec, ScoringSpec]:
    """The selection winner of a succeeded run of the study, with the run's scoring.

    422 when the run belongs to another study or chose no winner; 409 when it has not succeeded.
    """
    if run.study_id != study.id:
        raise Unprocessable(f"run: run {run.id} belongs to another study; name a run of study {study.code!r}")
    document = result_document(session, run.id)
    if run.status != queue.SUCCEEDED or document is None:
        raise Conflict(f"run {run.id} is {run.status}; lock its winner once it has succeeded")
    winner = (json.loads(document).get("selection") or {}).get("winner")
    if winner is None:
        raise Unprocessable(
            f"run: run {run.id} chose no winner (it had no selection, or the selection failed); "
            "post the pipeline itself, or lock from a run with a selection"
        )
    spec = next(item for item in run.spec["pipelines"] if item["name"] == winner)
    return PipelineSpec.model_validate(spec), ScoringSpec.model_validate(run.spec["scoring"])


def score_on_arrival(session: Session, study: Study, row: EpochSet, max_attempts: int) -> str | None:
    """Queue the locked pipeline on a newly stored epoch set; the run's id, or None when the study
    has no locked pipeline or it cannot run on this epoch set (logged, the upload still succeeds)."""
    locked = locked_pipeline_of(session, study)
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
        "origin": ARRIVAL_ORIGIN,
    }
    return queue_run(session, study, spec, [pipeline], [row], max_attempts).id
