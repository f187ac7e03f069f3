"""Storing a checked epoch set (its blobs and row, once per study and content, scored on arrival under a
locked pipeline) and deleting one (refused while a run scores it; its blobs go once nothing names them)."""

from collections.abc import Sequence
from functools import partial

from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from epoch_assay.engine.epochs import EpochSet as EngineEpochSet
from service.domain.locked_pipelines import score_on_arrival
from service.errors import Conflict
from service.storage.blobs import BlobStore, StagedBlob
from service.storage.epoch_sets import blob_in_use, epoch_set_with_hash, runs_scoring
from service.storage.ids import new_id
from service.storage.models import EpochSet, Study

# How many of the runs holding an epoch set a refused delete names.
RUNS_NAMED = 5


def new_epoch_set_row(
    study: Study, subject: str, session: str | None, sha256: str, size: int, epochs: EngineEpochSet
) -> EpochSet:
    """The row describing ``epochs`` (not yet added to a session)."""
    meta = epochs.meta()
    return EpochSet(
        id=new_id("es"),
        study_id=study.id,
        subject=subject,
        session=session,
        sha256=sha256,
        size_bytes=size,
        n_trials=epochs.n_trials,
        n_channels=epochs.n_channels,
        n_times=epochs.n_times,
        sfreq=epochs.sfreq,
        tmin=epochs.tmin,
        ch_names=list(epochs.ch_names),
        ch_types=list(epochs.ch_types),
        conditions=meta.condition_counts,
        has_positions=meta.has_positions,
    )


def store_epoch_set(
    session: Session, study: Study, row: EpochSet, blobs: Sequence[StagedBlob], max_attempts: int
) -> tuple[EpochSet, bool]:
    """Keep ``blobs`` and add ``row`` (flushed, not committed); with a locked pipeline, queue a run scoring it.

    Returns the stored row and True; or, when the same content of the study won a concurrent
    upload, that one and False (this transaction then rolled back). Call :func:`finish_stored`
    after the commit.
    """
    for blob in blobs:
        blob.commit()
    session.add(row)
    try:
        session.flush()
    except IntegrityError:
        session.rollback()
        existing = epoch_set_with_hash(session, study.id, row.sha256)
        if existing is None:
            raise
        return existing, False
    score_on_arrival(session, study, row, max_attempts)
    return row, True


def finish_stored(blobs: Sequence[StagedBlob]) -> None:
    """Link the blobs again after the commit: a delete of the same bytes in another study may have removed them."""
    for blob in blobs:
        blob.commit()


def delete_epoch_set(session: Session, blobs: BlobStore, row: EpochSet) -> None:
    """Delete the epoch set and commit; its blobs go too once no epoch set (of any study) names them.

    409 while a run refers to it, so no result loses the data it was computed on.
    """
    run_ids = runs_scoring(session, row.id, RUNS_NAMED)
    if run_ids:
        raise _scored_conflict(row.id, run_ids)
    epoch_set_id = row.id
    # An upload's blob is named by sha256; a recording's by file_sha256 and events_sha256.
    blob_names = {name for name in (row.sha256, row.file_sha256, row.events_sha256) if name}
    session.delete(row)
    try:
        session.flush()
    except IntegrityError:
        # A run naming it was created concurrently and committed first.
        session.rollback()
        raise _scored_conflict(epoch_set_id, []) from None
    session.commit()
    for name in blob_names:
        blobs.discard(name, partial(blob_in_use, session, name))


def _scored_conflict(epoch_set_id: str, run_ids: list[str]) -> Conflict:
    named = f" ({', '.join(run_ids)}{', …' if len(run_ids) == RUNS_NAMED else ''})" if run_ids else ""
    return Conflict(
        f"epoch set {epoch_set_id} is scored by a run{named}; delete the runs that use it first "
        "(DELETE /v1/runs/ID), then the epoch set"
    )
