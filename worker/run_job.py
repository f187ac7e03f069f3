"""One run from spec to result document: load each epoch set, apply each pipeline, score.

The pipelines (listed, or expanded from a grid) run as a prefix tree per epoch set or recording, in worker
processes and with a step cache when the runner asks for them (``worker.execution.multiverse``); the
document then also ranks the pipelines, gives a grid's factor effects and the selection.

Nothing here knows of HTTP or the database: epoch sets come from a loader the runner hands in,
and progress goes out through a callback.
"""

import functools
import hashlib
import json
import platform
from collections.abc import Callable
from dataclasses import dataclass
from importlib.metadata import version
from typing import Any

from pydantic import TypeAdapter

from epoch_assay.engine.document import RESULT_SCHEMA_VERSION, ResultEntry, RunResultDocument
from epoch_assay.engine.document.multiverse import CacheCounts
from epoch_assay.engine.document.run import RunProvenance, Seeds
from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.grid import GridSpec, expand_grid
from epoch_assay.engine.group import group_summary
from epoch_assay.engine.multiverse_report import (
    DEFAULT_METRIC,
    exploratory_note,
    factor_effects_document,
    ranking_document,
    selection_document,
)
from epoch_assay.engine.pipeline import PipelineSpec
from epoch_assay.engine.provenance import StepProvenanceBase
from epoch_assay.engine.recording import ContinuousInput
from epoch_assay.engine.scoring import eeg_channel_names, score_epochs
from epoch_assay.engine.scoring_spec import ScoringSpec
from epoch_assay.engine.selection import SelectionSpec
from epoch_assay.engine.tree import LeafOutput
from worker.execution.multiverse import ExecutionSettings, SourceHandlers, execute_multiverse
from worker.execution.parallel import Progress

REPORTED_PACKAGES = ("epoch-assay", "numpy", "scipy", "mne", "pydantic")
_SELECTION = TypeAdapter(SelectionSpec)


@dataclass(frozen=True)
class EpochSetRef:
    """An epoch set of the run, as the runner knows it."""

    id: str
    subject: str
    session: str | None
    sha256: str


def _hash_json(value: Any) -> str:
    return hashlib.sha256(json.dumps(value, sort_keys=True, separators=(",", ":")).encode()).hexdigest()


def software_versions() -> dict[str, str]:
    versions = {name: version(name) for name in REPORTED_PACKAGES}
    versions["python"] = platform.python_version()
    return versions


def score_leaf(leaf: LeafOutput, source: EpochSet, scoring: ScoringSpec, ref: EpochSetRef) -> ResultEntry:
    """The entry of a pipeline whose output was reached in a prefix tree built on ``source`` (for a
    recording, its first run: the channels uploaded are those of the recording).

    A spec that turns out impossible only now (a pipeline left too few trials, say) is
    reported in the entry's ``error`` rather than failing the whole run.
    """
    return _scored_entry(leaf.pipeline, leaf.epochs, list(leaf.records), eeg_channel_names(source), scoring, ref)


def _scored_entry(
    pipeline: PipelineSpec,
    processed: EpochSet,
    records: list[StepProvenanceBase],
    uploaded: tuple[str, ...],
    scoring: ScoringSpec,
    ref: EpochSetRef,
) -> ResultEntry:
    try:
        score, error = score_epochs(processed, scoring, uploaded_eeg_channels=uploaded), None
    except SpecError as failure:
        score, error = None, f"{'.'.join(str(part) for part in failure.loc)}: {failure.message}"
    return ResultEntry(
        pipeline=pipeline.name,
        pipeline_hash=pipeline.spec_hash(),
        epoch_set=ref.id,
        subject=ref.subject,
        session=ref.session,
        **(dict(score) if score is not None else {}),
        provenance=records,
        warnings=[warning for record in records for warning in record.warnings],
        error=error,
    )


def execute_run(
    run_id: str,
    study_code: str,
    spec: dict[str, Any],
    epoch_sets: list[EpochSetRef],
    load: Callable[[EpochSetRef], EpochSet | ContinuousInput],
    on_progress: Callable[[float], None],
    *,
    execution: ExecutionSettings | None = None,
    on_detail: Callable[[Progress], None] | None = None,
) -> RunResultDocument:
    """Score every pipeline of ``spec`` on every epoch set; return the result document.

    ``execution`` sets the worker processes and the step cache (default: this process, no
    cache). After each unit (an epoch set × one or more branches of the tree) ``on_detail`` gets the
    entries (pipeline × epoch set) done, their total and an ETA, then ``on_progress`` the share
    done; either may raise to stop.
    """
    grid = GridSpec.model_validate(spec["grid"]) if spec.get("grid") else None
    points = expand_grid(grid, max_pipelines=grid.size()) if grid is not None else []
    pipelines = [point.pipeline for point in points] or [PipelineSpec.model_validate(p) for p in spec["pipelines"]]
    scoring = ScoringSpec.model_validate(spec["scoring"])
    selection = _SELECTION.validate_python(spec["selection"]) if spec.get("selection") else None
    handlers = SourceHandlers(
        load=load,
        source_sha256=lambda ref: ref.sha256,
        score_leaf=lambda ref: functools.partial(score_leaf, scoring=scoring, ref=ref),
    )

    def report(progress: Progress) -> None:
        if on_detail is not None:
            on_detail(progress)
        on_progress(progress.fraction)

    outcome = execute_multiverse(pipelines, epoch_sets, handlers, execution or ExecutionSettings(workers=1), report)
    results = outcome.results
    # The group, ranking and selection read entries in their JSON form.
    entries = [entry.model_dump(mode="json") for entry in results]
    names = [pipeline.name for pipeline in pipelines]
    reference = scoring.reference_pipeline or names[0]
    group = group_summary(entries, names, scoring)
    return RunResultDocument(
        schema_version=RESULT_SCHEMA_VERSION,
        run=run_id,
        study=study_code,
        scoring=scoring,
        provenance=RunProvenance(
            software=software_versions(),
            scoring_hash=_hash_json(scoring.model_dump(mode="json")),
            pipeline_hashes={pipeline.name: pipeline.spec_hash() for pipeline in pipelines},
            epoch_set_sha256={ref.id: ref.sha256 for ref in epoch_sets},
            seeds=Seeds(bootstrap=scoring.bootstrap.seed if scoring.bootstrap else None),
        ),
        results=results,
        group=group,
        cache=CacheCounts(hits=outcome.cache.hits, misses=outcome.cache.misses),
        ranking=ranking_document(
            entries, names, reference, selection.metric if selection else DEFAULT_METRIC, group, seed=scoring.seed
        ),
        factor_effects=factor_effects_document(entries, grid, points) if grid is not None else None,
        selection=selection_document(entries, names, reference, selection) if selection is not None else None,
        exploratory=exploratory_note(selection),
    )
