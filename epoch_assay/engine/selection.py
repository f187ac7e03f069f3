"""Choose a run's winning pipeline without fooling oneself.

Picking the pipeline with the highest significance on the data that are then tested is
circular: the winner was chosen partly for fitting that data's noise, so its score is biased
upwards. Two rules avoid it:

``tuning_holdout``
    The winner is the best pipeline on the tuning subjects only. On the held-out subjects,
    who played no part in the choice, the winner's and the reference's means carry Student t
    95 % intervals over subjects and the winner is tested against the reference, paired by
    subject. ``optimism`` is the winner's advantage over the reference on the tuning
    subjects minus its advantage on the held-out subjects: how much of the tuning advantage
    was the luck of the choice.
``contrast_blind``
    The winner is chosen on a measure that never looks at the contrast, so all subjects may
    be used. The default, ``collapsed_snr``, is the collapsed ERP (both conditions averaged
    with equal weights; Luck & Gaspelin, 2017) in the scoring window over its SME (Luck et
    al., 2021), root mean square over channels: it rises with signal against noise and falls
    when a step removes the signal. ``median_sme`` and ``trials_kept`` measure noise or
    quantity only; a step that deletes the ERP lowers SME too. When the winner by one of them
    has a collapsed ERP less than half the reference's, the result warns.
"""

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Annotated, Literal, get_args

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, model_validator

from epoch_assay.engine.document.multiverse import HoldoutResult, SelectionOutcome, TuningScores
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.group import PairedComparison
from epoch_assay.engine.ranking import MeanInterval, mean_intervals, paired_over_shared_subjects
from epoch_assay.engine.subject_metrics import MetricTable

ContrastMetric = Literal["significant_fraction", "collapsed_snr", "median_sme", "trials_kept"]
BlindMetric = Literal["collapsed_snr", "median_sme", "trials_kept"]
NOISE_ONLY_METRICS = frozenset({"median_sme", "trials_kept"})
#: The winner's collapsed ERP below this share of the reference's draws a warning.
SHRINK_WARNING_RATIO = 0.5


class SplitSpec(BaseModel):
    """A seeded random split of the subjects: ``fraction`` of them tune, the rest are held out."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    fraction: float = Field(0.5, gt=0.0, lt=1.0, description="Share of subjects used for tuning.")
    seed: int = Field(0, ge=0, description="Seed of the split; same seed and subjects, same split.")


class TuningHoldoutSpec(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    rule: Literal["tuning_holdout"] = "tuning_holdout"
    tuning_subjects: list[str] | None = Field(None, min_length=1, description="Subjects that choose the winner.")
    split: SplitSpec | None = Field(None, description="Or: a seeded random split of the run's subjects.")
    metric: ContrastMetric = "significant_fraction"

    @model_validator(mode="after")
    def _subjects_or_split(self) -> "TuningHoldoutSpec":
        if (self.tuning_subjects is None) == (self.split is None):
            raise ValueError("give exactly one of tuning_subjects (a list of subjects) or split {fraction, seed}")
        return self


class ContrastBlindSpec(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    rule: Literal["contrast_blind"] = "contrast_blind"
    metric: BlindMetric = Field(
        "collapsed_snr",
        description="collapsed_snr weighs signal against noise; median_sme and trials_kept see noise or quantity only.",
    )


SelectionSpec = Annotated[TuningHoldoutSpec | ContrastBlindSpec, Field(discriminator="rule")]


@dataclass(frozen=True)
class HoldoutCheck:
    """The winner and the reference on the held-out subjects.

    winner, reference : mean over held-out subjects with its Student t 95 % interval
    winner_vs_reference : paired by subject, winner minus reference (None with < 2 subjects)
    """

    winner: MeanInterval
    reference: MeanInterval
    winner_vs_reference: PairedComparison | None


@dataclass(frozen=True)
class SelectionResult:
    """The winner, who chose it and how it scores. Scores are means over subjects of ``metric``.

    winner_tuning_score, reference_tuning_score : means over the subjects that chose
    holdout : None for ``contrast_blind`` (nothing is held out)
    optimism : tuning advantage minus held-out advantage, where an advantage is the winner's
        mean minus the reference's, sign turned so that positive means better; None without holdout
    warnings : e.g. a noise-only metric that chose a pipeline shrinking the collapsed ERP
    """

    rule: str
    metric: str
    winner: str
    reference: str
    tuning_subjects: tuple[str, ...]
    holdout_subjects: tuple[str, ...]
    winner_tuning_score: float
    reference_tuning_score: float
    holdout: HoldoutCheck | None
    optimism: float | None
    warnings: tuple[str, ...] = ()

    def to_document(self) -> SelectionOutcome:
        holdout = self.holdout
        return SelectionOutcome(
            rule=self.rule,
            metric=self.metric,
            winner=self.winner,
            reference_pipeline=self.reference,
            tuning_subjects=list(self.tuning_subjects),
            holdout_subjects=list(self.holdout_subjects),
            winner_tuning_score=self.winner_tuning_score,
            winner_holdout_score=None if holdout is None else holdout.winner.mean,
            reference_holdout_score=None if holdout is None else holdout.reference.mean,
            tuning=TuningScores(winner_score=self.winner_tuning_score, reference_score=self.reference_tuning_score),
            holdout=None
            if holdout is None
            else HoldoutResult(
                winner=holdout.winner.to_document(),
                reference=holdout.reference.to_document(),
                winner_vs_reference=None
                if holdout.winner_vs_reference is None
                else holdout.winner_vs_reference.to_document(self.reference),
            ),
            optimism=self.optimism,
            warnings=list(self.warnings),
        )


def split_subjects(subjects: Sequence[str], split: SplitSpec) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """(tuning, held out): a seeded permutation of the sorted subjects, at least one on each side."""
    if len(subjects) < 2:
        raise SpecError(("selection", "split"), "a tuning/holdout split needs at least two subjects in the run")
    ordered = sorted(subjects)
    permuted = [ordered[i] for i in np.random.default_rng(split.seed).permutation(len(ordered))]
    n_tuning = min(max(round(split.fraction * len(ordered)), 1), len(ordered) - 1)
    return tuple(sorted(permuted[:n_tuning])), tuple(sorted(permuted[n_tuning:]))


def best_pipeline(table: MetricTable) -> str:
    """The pipeline with the best mean over the table's subjects; ties go to the earlier pipeline."""
    means = table.mean_scores()
    if not np.isfinite(means).any():
        raise SpecError(("selection",), f"no pipeline has a {table.metric} score on the subjects that choose")
    keys = np.where(np.isfinite(means), means if table.higher_is_better else -means, -np.inf)
    return table.pipelines[int(np.argmax(keys))]


def tuning_holdout(
    table: MetricTable, reference: str, tuning: Sequence[str], collapsed_erp: MetricTable | None = None
) -> SelectionResult:
    """Choose on ``tuning`` subjects; score and test the winner against ``reference`` on all the others.

    collapsed_erp : as for ``contrast_blind``, for the warning on a noise-only metric
    """
    unknown = sorted(set(tuning) - set(table.subjects))
    if unknown:
        raise SpecError(
            ("selection", "tuning_subjects"),
            f"not subjects of this run: {', '.join(unknown)}; the run has {', '.join(table.subjects)}",
        )
    holdout = tuple(subject for subject in table.subjects if subject not in set(tuning))
    if not holdout:
        raise SpecError(
            ("selection", "tuning_subjects"),
            "every subject of the run is a tuning subject; leave at least one out to confirm the winner",
        )
    tuning_table = table.for_subjects(list(tuning))
    winner = best_pipeline(tuning_table)
    holdout_table = table.for_subjects(holdout)
    winner_row, reference_row = (holdout_table.row(name) for name in (winner, reference))
    winner_holdout, reference_holdout = mean_intervals(np.array([winner_row, reference_row]))
    tuning_means = tuning_table.mean_scores()
    winner_tuning, reference_tuning = (tuning_means[table.pipelines.index(name)] for name in (winner, reference))
    sign = 1.0 if table.higher_is_better else -1.0
    optimism = sign * ((winner_tuning - reference_tuning) - (winner_holdout.mean - reference_holdout.mean))
    return SelectionResult(
        rule="tuning_holdout",
        metric=table.metric,
        winner=winner,
        reference=reference,
        tuning_subjects=tuple(tuning),
        holdout_subjects=holdout,
        winner_tuning_score=float(winner_tuning),
        reference_tuning_score=float(reference_tuning),
        holdout=HoldoutCheck(
            winner=winner_holdout,
            reference=reference_holdout,
            winner_vs_reference=paired_over_shared_subjects(winner_row, reference_row),
        ),
        optimism=float(optimism),
        warnings=_shrink_warning(table.metric, winner, reference, collapsed_erp),
    )


def contrast_blind(table: MetricTable, reference: str, collapsed_erp: MetricTable | None = None) -> SelectionResult:
    """Choose on a measure blind to the contrast, over all subjects; nothing is held out.

    collapsed_erp : the ``collapsed_erp_uv`` table of the same run; with a noise-only metric
        the result warns when the winner's mean collapsed ERP is under half the reference's
    """
    if table.metric not in get_args(BlindMetric):
        raise SpecError(
            ("selection", "metric"),
            f"{table.metric} looks at the contrast; contrast_blind takes {', '.join(get_args(BlindMetric))}",
        )
    winner = best_pipeline(table)
    means = table.mean_scores()
    return SelectionResult(
        rule="contrast_blind",
        metric=table.metric,
        winner=winner,
        reference=reference,
        tuning_subjects=table.subjects,
        holdout_subjects=(),
        winner_tuning_score=float(means[table.pipelines.index(winner)]),
        reference_tuning_score=float(means[table.pipelines.index(reference)]),
        holdout=None,
        optimism=None,
        warnings=_shrink_warning(table.metric, winner, reference, collapsed_erp),
    )


def _shrink_warning(metric: str, winner: str, reference: str, collapsed_erp: MetricTable | None) -> tuple[str, ...]:
    if metric not in NOISE_ONLY_METRICS or collapsed_erp is None or winner == reference:
        return ()
    means = collapsed_erp.mean_scores()
    ours, theirs = (means[collapsed_erp.pipelines.index(name)] for name in (winner, reference))
    if not (np.isfinite(ours) and np.isfinite(theirs)) or ours >= SHRINK_WARNING_RATIO * theirs:
        return ()
    return (
        f"{metric} measures noise only, and the winner {winner} has a collapsed ERP of {ours:.3g} µV "
        f"(root mean square over channels, mean over subjects) against {theirs:.3g} µV for the reference "
        f"{reference}: it may have removed the signal with the noise; prefer the metric collapsed_snr",
    )
