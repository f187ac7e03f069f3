"""Choose a run's winning pipeline without fooling oneself.

Picking the pipeline with the highest significance on the data that are then tested is
circular: the winner was chosen partly for fitting that data's noise, so its score is biased
upwards. Two rules avoid it:

``tuning_holdout``
    The winner is the best pipeline on the tuning subjects only; its score is then read on
    the held-out subjects, who played no part in the choice, next to the reference pipeline's.
``contrast_blind``
    The winner is chosen on a measure that never looks at the contrast (median SME or trials
    kept), so all subjects may be used.
"""

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Annotated, Literal, get_args

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, model_validator

from epoch_assay.engine.document.multiverse import SelectionOutcome
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.subject_metrics import MetricTable

ContrastMetric = Literal["significant_fraction", "median_sme", "trials_kept"]
BlindMetric = Literal["median_sme", "trials_kept"]


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
    metric: BlindMetric = "median_sme"


SelectionSpec = Annotated[TuningHoldoutSpec | ContrastBlindSpec, Field(discriminator="rule")]


@dataclass(frozen=True)
class SelectionResult:
    """The winner, who chose it and how it scores. Scores are means over subjects of ``metric``."""

    rule: str
    metric: str
    winner: str
    tuning_subjects: tuple[str, ...]
    holdout_subjects: tuple[str, ...]
    winner_tuning_score: float
    winner_holdout_score: float | None
    reference_holdout_score: float | None

    def to_document(self) -> SelectionOutcome:
        return SelectionOutcome(
            rule=self.rule,
            metric=self.metric,
            winner=self.winner,
            tuning_subjects=list(self.tuning_subjects),
            holdout_subjects=list(self.holdout_subjects),
            winner_tuning_score=self.winner_tuning_score,
            winner_holdout_score=self.winner_holdout_score,
            reference_holdout_score=self.reference_holdout_score,
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


def tuning_holdout(table: MetricTable, reference: str, tuning: Sequence[str]) -> SelectionResult:
    """Choose on ``tuning`` subjects; score the winner and ``reference`` on all the other subjects."""
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
    holdout_means = table.for_subjects(holdout).mean_scores()
    return SelectionResult(
        rule="tuning_holdout",
        metric=table.metric,
        winner=winner,
        tuning_subjects=tuple(tuning),
        holdout_subjects=holdout,
        winner_tuning_score=_score(tuning_table.mean_scores()[table.pipelines.index(winner)]),
        winner_holdout_score=_score(holdout_means[table.pipelines.index(winner)]),
        reference_holdout_score=_score(holdout_means[table.pipelines.index(reference)]),
    )


def contrast_blind(table: MetricTable) -> SelectionResult:
    """Choose on a measure blind to the contrast, over all subjects; nothing is held out."""
    if table.metric not in get_args(BlindMetric):
        raise SpecError(
            ("selection", "metric"),
            f"{table.metric} looks at the contrast; contrast_blind takes median_sme or trials_kept",
        )
    winner = best_pipeline(table)
    return SelectionResult(
        rule="contrast_blind",
        metric=table.metric,
        winner=winner,
        tuning_subjects=table.subjects,
        holdout_subjects=(),
        winner_tuning_score=_score(table.mean_scores()[table.pipelines.index(winner)]),
        winner_holdout_score=None,
        reference_holdout_score=None,
    )


def _score(value: float) -> float | None:
    return float(value) if np.isfinite(value) else None
