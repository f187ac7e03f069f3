"""Rank the pipelines of a run by a per-subject metric, best first, each against the reference.

A pipeline's score is the mean of the metric over subjects, with a Student t 95 % interval
over subjects (subjects, not trials, are the units a lab generalises over). The comparison
with the reference pipeline is paired by subject: the mean of the per-subject differences
with its t interval, over the subjects both pipelines scored (``epoch_assay.engine.group.paired_comparison``).

Many pipelines are compared with one reference, so each comparison also carries
``p_adjusted``: the paired t of every pipeline against the reference is referred to the
distribution of the largest |t| over all of them when the sign of each subject's differences
is flipped at random (one flip per subject, shared by every pipeline, so the correlation
between pipelines is kept). This max-t permutation controls the family-wise error rate in
the strong sense (Westfall & Young, 1993; Nichols & Holmes, 2002) under the assumption that
each subject's vector of differences is symmetric about zero under the null.

How sure the order is: ``probability_best`` and the rank spread come from a bootstrap over
subjects (subjects drawn with replacement, all pipelines of a drawn subject together). They
describe how much the order moves when the subjects change; they are not a posterior
probability and not a confidence interval for the rank (bootstrap rank intervals do not
hold their level when means are close; Hall & Miller, 2009).
Pipelines with no score sort last.
"""

from dataclasses import dataclass

import numpy as np
from scipy import stats

from epoch_assay.engine.document.multiverse import (
    AdjustedComparisonResult,
    MeanIntervalResult,
    PipelineGroupResult,
    RankingEntry,
    RankSpreadResult,
)
from epoch_assay.engine.group import PairedComparison, paired_comparison, paired_comparisons
from epoch_assay.engine.stats import sign_flip_test
from epoch_assay.engine.subject_metrics import MetricTable

CONFIDENCE = 0.95
#: Sign patterns for the max-t adjustment: up to 16 subjects every pattern is enumerated (exact).
N_SIGN_FLIPS = 2**16
#: Subject bootstraps for ``probability_best`` and the rank spread.
N_RANK_BOOTSTRAPS = 2000
DEFAULT_SEED = 0


@dataclass(frozen=True)
class MeanInterval:
    """Mean over subjects with its t interval; the interval is NaN with fewer than two subjects."""

    n_subjects: int
    mean: float
    ci_low: float
    ci_high: float

    def to_document(self) -> MeanIntervalResult:
        return MeanIntervalResult(n_subjects=self.n_subjects, mean=self.mean, ci_low=self.ci_low, ci_high=self.ci_high)


@dataclass(frozen=True)
class AdjustedComparison:
    """The paired comparison with the reference and its p adjusted across every pipeline compared.

    p_adjusted : two-sided max-t sign-flip p over the pipelines compared with the reference
    adjustment : the method in words, with exact enumeration or Monte Carlo and its draws
    """

    paired: PairedComparison
    p_adjusted: float
    adjustment: str

    def to_document(self, reference: str) -> AdjustedComparisonResult:
        return AdjustedComparisonResult(
            **self.paired.to_document(reference).model_dump(),
            p_adjusted=self.p_adjusted,
            adjustment=self.adjustment,
        )


@dataclass(frozen=True)
class RankSpread:
    """How the rank moves over bootstraps of the subjects; descriptive, not a confidence interval.

    probability_best : share of bootstraps in which the pipeline has the best mean (a tie for the
        best shares the bootstrap equally)
    rank_spread_low, rank_spread_high : 2.5 and 97.5 percentiles of its rank (1 = best)
    """

    probability_best: float
    rank_spread_low: float
    rank_spread_high: float
    n_bootstraps: int


@dataclass(frozen=True)
class RankedPipeline:
    """One ranking entry; ``vs_reference`` is None for the reference pipeline itself and when
    fewer than two subjects have scores of both; ``spread`` is None for a pipeline with no score."""

    rank: int
    pipeline: str
    score: MeanInterval
    vs_reference: AdjustedComparison | None
    spread: RankSpread | None

    def to_document(self, reference: str, metric: str, group: PipelineGroupResult | None) -> RankingEntry:
        """The ranking entry of the result document, with the pipeline's group summary."""
        spread = self.spread
        return RankingEntry(
            rank=self.rank,
            pipeline=self.pipeline,
            n_subjects=self.score.n_subjects,
            mean=self.score.mean,
            ci_low=self.score.ci_low,
            ci_high=self.score.ci_high,
            vs_reference=None if self.vs_reference is None else self.vs_reference.to_document(reference),
            probability_best=None if spread is None else spread.probability_best,
            rank_spread=None
            if spread is None
            else RankSpreadResult(
                low=spread.rank_spread_low,
                high=spread.rank_spread_high,
                n_bootstraps=spread.n_bootstraps,
                kind="2.5-97.5 percentiles of the rank over subject bootstraps; descriptive, not a confidence interval",
            ),
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


def rank_pipelines(
    table: MetricTable,
    reference: str,
    *,
    n_sign_flips: int = N_SIGN_FLIPS,
    n_bootstraps: int = N_RANK_BOOTSTRAPS,
    seed: int = DEFAULT_SEED,
) -> list[RankedPipeline]:
    """Every pipeline of ``table``, best mean first (ties keep the table's order).

    n_sign_flips : random sign patterns of the max-t adjustment; when 2**n_subjects is not
        larger, every pattern is enumerated and the adjusted p is exact
    n_bootstraps : subject bootstraps behind ``probability_best`` and the rank spread
    seed : seed of both the sign patterns and the bootstraps
    """
    if reference not in table.pipelines:
        raise ValueError(f"reference pipeline {reference!r} is not in the table")
    scores = mean_intervals(table.values)
    means = np.array([score.mean for score in scores])
    order = _best_first(means, table.higher_is_better)
    comparisons = adjusted_comparisons(table, reference, n_sign_flips=n_sign_flips, seed=seed)
    spreads = rank_spreads(table, n_bootstraps=n_bootstraps, seed=seed)
    return [
        RankedPipeline(
            rank=rank,
            pipeline=table.pipelines[index],
            score=scores[index],
            vs_reference=comparisons.get(table.pipelines[index]),
            spread=spreads[index],
        )
        for rank, index in enumerate(order, start=1)
    ]


def adjusted_comparisons(
    table: MetricTable, reference: str, *, n_sign_flips: int = N_SIGN_FLIPS, seed: int = DEFAULT_SEED
) -> dict[str, AdjustedComparison]:
    """Each pipeline but the reference against it, paired by subject, with the max-t adjusted p.

    The family is every pipeline with at least two subjects scored by both it and the
    reference. A subject missing for one pipeline leaves that pipeline's t only.
    """
    reference_row = table.row(reference)
    paired = _paired_with_reference(table, reference)
    comparable = {name: comparison for name, comparison in paired.items() if comparison is not None}
    family = list(comparable)
    if not family:
        return {}
    rows = [table.pipelines.index(name) for name in family]
    differences = (table.values[rows] - reference_row).T
    # Subjects the reference did not score carry no information on any comparison.
    differences = differences[np.isfinite(reference_row)]
    result = sign_flip_test(differences, n_permutations=n_sign_flips, seed=seed)
    n_subjects = differences.shape[0]
    how = (
        f"exact, all {result.n_permutations} sign patterns of {n_subjects} subjects"
        if result.exact
        else f"Monte Carlo, {result.n_permutations} random sign patterns of {n_subjects} subjects, seed {seed}"
    )
    adjustment = f"max-|t| sign-flip permutation over subjects across {len(family)} pipelines ({how})"
    return {
        name: AdjustedComparison(paired=comparable[name], p_adjusted=float(result.pvalue_max[i]), adjustment=adjustment)
        for i, name in enumerate(family)
    }


def rank_spreads(
    table: MetricTable, *, n_bootstraps: int = N_RANK_BOOTSTRAPS, seed: int = DEFAULT_SEED
) -> list[RankSpread | None]:
    """Per pipeline in table order: share of subject bootstraps where it is best, and its rank percentiles.

    A bootstrap draws the subjects with replacement; a pipeline's mean is over the drawn
    subjects it scored, and a pipeline with no drawn score ranks last in that bootstrap.
    None for a pipeline with no score at all.
    """
    n_pipelines, n_subjects = table.values.shape
    if n_subjects == 0:
        return [None] * n_pipelines
    rng = np.random.default_rng(seed)
    # counts[b, s]: how often subject s is drawn in bootstrap b.
    counts = rng.multinomial(n_subjects, np.full(n_subjects, 1.0 / n_subjects), size=n_bootstraps).astype(float)
    present = np.isfinite(table.values)
    sums = counts @ np.where(present, table.values, 0.0).T
    weights = counts @ present.T.astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        means = np.where(weights > 0, sums / weights, np.nan)
    keys = -means if table.higher_is_better else means
    keys = np.where(np.isnan(keys), np.inf, keys)
    # Rank 1 is best; ties go to the earlier pipeline, as in the ranking itself.
    order = np.argsort(keys, axis=1, kind="stable")
    ranks = np.empty_like(order)
    np.put_along_axis(ranks, order, np.arange(1, n_pipelines + 1)[None, :], axis=1)
    low, high = np.percentile(ranks, [2.5, 97.5], axis=0, method="inverted_cdf")
    # Pipelines tied for the best mean in a bootstrap (identical outputs, say) share that bootstrap.
    at_best = np.isfinite(keys) & (keys == keys.min(axis=1, keepdims=True))
    best = (at_best / np.maximum(at_best.sum(axis=1, keepdims=True), 1)).mean(axis=0)
    return [
        RankSpread(float(best[i]), float(low[i]), float(high[i]), n_bootstraps) if present[i].any() else None
        for i in range(n_pipelines)
    ]


def _paired_with_reference(table: MetricTable, reference: str) -> dict[str, PairedComparison | None]:
    """Each other pipeline's paired comparison; pipelines with every subject scored by both go in one batch."""
    reference_row = table.row(reference)
    others = [index for index, name in enumerate(table.pipelines) if name != reference]
    complete = [
        index for index in others if np.isfinite(table.values[index]).all() and np.isfinite(reference_row).all()
    ]
    paired: dict[str, PairedComparison | None] = {}
    if complete and len(reference_row) >= 2:
        batch = paired_comparisons(table.values[complete], reference_row)
        paired.update({table.pipelines[index]: result for index, result in zip(complete, batch, strict=True)})
    for index in others:
        if table.pipelines[index] not in paired:
            paired[table.pipelines[index]] = paired_over_shared_subjects(table.values[index], reference_row)
    return {table.pipelines[index]: paired[table.pipelines[index]] for index in others}


def _best_first(means: np.ndarray, higher_is_better: bool) -> np.ndarray:
    keys = -means if higher_is_better else means
    return np.lexsort((np.arange(len(means)), np.where(np.isnan(keys), np.inf, keys)))


def paired_over_shared_subjects(values: np.ndarray, reference: np.ndarray) -> PairedComparison | None:
    """Comparison over the subjects with a value for both; None with fewer than two."""
    both = np.isfinite(values) & np.isfinite(reference)
    return paired_comparison(values[both], reference[both]) if np.count_nonzero(both) >= 2 else None
