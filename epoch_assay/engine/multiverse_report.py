"""The multiverse parts of a result document: ``ranking``, ``factor_effects``, ``selection``
and the ``exploratory`` note.

Pure functions of the result's entries. A part that cannot be computed on this run (too few
subjects for a model, a tuning subject the run does not have) carries its reason in ``error``
in place of its content; the rest of the result is unaffected.
"""

from collections.abc import Sequence
from typing import Any

from epoch_assay.engine.document.multiverse import (
    ExploratoryNote,
    FactorEffectsResult,
    PipelineGroupResult,
    RankingEntry,
    SelectionOutcome,
)
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.factor_effects import factor_effects
from epoch_assay.engine.grid import GridPipeline, GridSpec
from epoch_assay.engine.ranking import rank_pipelines
from epoch_assay.engine.selection import (
    ContrastBlindSpec,
    SelectionSpec,
    SplitSpec,
    contrast_blind,
    split_subjects,
    tuning_holdout,
)
from epoch_assay.engine.subject_metrics import metric_table

Entry = dict[str, Any]
DEFAULT_METRIC = "significant_fraction"


def ranking_document(
    results: Sequence[Entry],
    pipelines: Sequence[str],
    reference: str,
    metric: str,
    group: Sequence[PipelineGroupResult] | None = None,
    seed: int = 0,
) -> list[RankingEntry]:
    """One entry per pipeline, best first by the mean over subjects of ``metric``, each with its
    ``group`` summary (from ``epoch_assay.engine.group``) when given.

    seed : seed of the sign flips of ``p_adjusted`` and of the subject bootstraps
    """
    group_of = {item.pipeline: item for item in group or ()}
    table = metric_table(results, metric, pipelines)
    return [
        ranked.to_document(reference, metric, group_of.get(ranked.pipeline))
        for ranked in rank_pipelines(table, reference, seed=seed)
    ]


def factor_effects_document(
    results: Sequence[Entry], grid: GridSpec, points: Sequence[GridPipeline], metric: str = DEFAULT_METRIC
) -> FactorEffectsResult:
    """Per-subject contrasts of ``metric`` tested across subjects (see ``epoch_assay.engine.factor_effects``)."""
    table = metric_table(results, metric, [point.pipeline.name for point in points])
    try:
        effects = factor_effects(
            table,
            {point.pipeline.name: point.levels for point in points},
            {factor: list(levels) for factor, levels in grid.factors.items()},
        )
    except ValueError as error:
        return FactorEffectsResult(metric=metric, error=str(error))
    return effects.to_document()


def selection_document(
    results: Sequence[Entry], pipelines: Sequence[str], reference: str, selection: SelectionSpec
) -> SelectionOutcome:
    """The winner by ``selection``'s rule, with the subjects on each side and its scores."""
    table = metric_table(results, selection.metric, pipelines)
    collapsed_erp = metric_table(results, "collapsed_erp_uv", pipelines)
    try:
        if isinstance(selection, ContrastBlindSpec):
            return contrast_blind(table, reference, collapsed_erp).to_document()
        # The spec holds exactly one of tuning_subjects and split (TuningHoldoutSpec's validator).
        split = selection.split or SplitSpec()
        tuning = selection.tuning_subjects or list(split_subjects(table.subjects, split)[0])
        return tuning_holdout(table, reference, tuning, collapsed_erp).to_document()
    except SpecError as error:
        return SelectionOutcome(
            rule=selection.rule,
            metric=selection.metric,
            error=f"{'.'.join(str(part) for part in error.loc)}: {error.message}",
        )


def exploratory_note(selection: SelectionSpec | None) -> ExploratoryNote | None:
    """The document's ``exploratory``: which all-subject parts are not confirmatory in a run with a selection."""
    if selection is None:
        return None
    if isinstance(selection, ContrastBlindSpec):
        reason = (
            "a winner was chosen by a contrast-blind rule: only the winner's group test is confirmatory; "
            "the ranking and the other pipelines' tests compare many pipelines on the same subjects"
        )
    else:
        reason = (
            "computed over all subjects, the tuning subjects included, so the winner's figures here are "
            "biased by its choice; the confirmatory test of the winner is selection.holdout"
        )
    return ExploratoryNote(parts=["group", "ranking"], reason=reason)
