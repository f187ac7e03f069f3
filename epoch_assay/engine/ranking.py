"""Rank the pipelines of a run by a per-subject metric, best first, each against the reference.

A pipeline's score is the mean of the metric over subjects, with a Student t 95 % interval
over subjects (subjects, not trials, are the units a lab generalises over). The comparison
with the reference pipeline is paired by subject: the mean of the per-subject differences
with its t interval, over the subjects both pipelines scored (``epoch_assay.engine.group.paired_comparison``).
Pipelines with no score sort last.
"""

from dataclasses import dataclass

import numpy as np
from scipy import stats

from epoch_assay.engine.document.multiverse import PipelineGroupResult, RankingEntry
from epoch_assay.engine.group import PairedComparison, paired_comparison
from epoch_assay.engine.subject_metrics import MetricTable

CONFIDENCE = 0.95


@dataclass(frozen=True)
class MeanInterval:
    """Mean over subjects with its t interval; the interval is NaN with fewer than two subjects."""

    n_subjects: int
    mean: float
    ci_low: float
    ci_high: float


@dataclass(frozen=True)
class RankedPipeline:
    """One ranking entry; ``vs_reference`` is None for the reference pipeline itself and when
    fewer than two subjects have scores of both."""

    rank: int
    pipeline: str
    score: MeanInterval
    vs_reference: PairedComparison | None

    def to_document(self, reference: str, metric: str, group: PipelineGroupResult | None) -> RankingEntry:
        """The ranking entry of the result document, with the pipeline's group summary."""
        return RankingEntry(
            rank=self.rank,
            pipeline=self.pipeline,
            n_subjects=self.score.n_subjects,
            mean=self.score.mean,
            ci_low=self.score.ci_low,
            ci_high=self.score.ci_high,
            vs_reference=None if self.vs_reference is None else self.vs_reference.to_document(reference),
            metric=metric,
            group=group,
        )


def mean_intervals(values: np.ndarray, confidence: float = CONFIDENCE) -> list[MeanInterval]:
    """Mean and t interval of each row, ignoring NaN.

    values : array, shape (n_rows, n_subjects), in the metric's unit
    """
    counts = np.sum(np.isfinite(values), axis=1)
    safe_counts = np.maximum(counts, 1)
    means = np.where(counts > 0, np.nansum(values, axis=1) / safe_counts, np.nan)
    deviations = np.where(np.isfinite(values), values - means[:, None], 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        standard_errors = np.sqrt(np.sum(deviations**2, axis=1) / (counts - 1) / counts)
        half_widths = stats.t.ppf(0.5 + confidence / 2, counts - 1) * standard_errors
    half_widths = np.where(counts > 1, half_widths, np.nan)
    return [
        MeanInterval(n_subjects=int(n), mean=float(m), ci_low=float(m - h), ci_high=float(m + h))
        for n, m, h in zip(counts, means, half_widths, strict=False)
    ]


def rank_pipelines(table: MetricTable, reference: str) -> list[RankedPipeline]:
    """Every pipeline of ``table``, best mean first (ties keep the table's order)."""
    if reference not in table.pipelines:
        raise ValueError(f"reference pipeline {reference!r} is not in the table")
    scores = mean_intervals(table.values)
    means = np.array([score.mean for score in scores])
    keys = -means if table.higher_is_better else means
    order = np.lexsort((np.arange(len(means)), np.where(np.isnan(keys), np.inf, keys)))
    return [
        RankedPipeline(
            rank=rank,
            pipeline=table.pipelines[index],
            score=scores[index],
            vs_reference=None
            if table.pipelines[index] == reference
            else _paired(table.values[index], table.row(reference)),
        )
        for rank, index in enumerate(order, start=1)
    ]


def _paired(values: np.ndarray, reference: np.ndarray) -> PairedComparison | None:
    """Comparison over the subjects with a value for both; None with fewer than two."""
    both = np.isfinite(values) & np.isfinite(reference)
    return paired_comparison(values[both], reference[both]) if np.count_nonzero(both) >= 2 else None
