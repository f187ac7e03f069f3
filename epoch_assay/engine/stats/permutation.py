"""Permutation tests with the max-statistic correction, vectorised over permutations in chunks.

Two designs: label permutation of two independent conditions (Welch's t as the statistic)
and sign flipping of one sample of differences (one-sample t), the latter for the group
level. Each permutation's statistics are computed for all channels at once from sums over
trials (a matrix product per chunk of permutations), and the maximum |t| across the
channels of a family gives the family-wise adjusted p-value (Westfall & Young, 1993;
Nichols & Holmes, 2002). p-values count the observed labelling among the permutations,
p = (1 + #{|t*| >= |t|}) / (1 + n_permutations), so they are never zero (Phipson & Smyth,
2010); with exact enumeration of all sign patterns the observed one is among them and
p = #{|t*| >= |t|} / 2**n.
"""

from collections.abc import Callable, Iterator
from dataclasses import dataclass

import numpy as np

from epoch_assay.engine.stats.bootstrap import partial_shuffle, selection_counts
from epoch_assay.engine.stats.ttest import TRIAL_AXIS, TStatistic, welch_statistic

#: Upper bound on the intermediate arrays of one chunk of permutations, in bytes.
DEFAULT_CHUNK_BYTES = 16 * 2**20
_BYTES_PER_VALUE = 8
# Per permutation and feature: sums, squares, means, variances and t of both groups.
_VALUES_PER_FEATURE = 12
# Statistics within this relative distance of the observed one count as at least as
# extreme: the same labelling computed by another summation order differs in the last bits.
_TIE_TOLERANCE = 100 * np.finfo(float).eps


@dataclass(frozen=True)
class PermutationResult:
    """A permutation test per channel.

    statistic : array, shape (..., n_channels), observed t
    pvalue : array, shape (..., n_channels), two-sided permutation p of each channel alone
    pvalue_max : array, shape (..., n_channels), two-sided p against the distribution of the
        largest |t| across the channels of the family (the last axis): family-wise adjusted
    n_permutations : permutations drawn (or all sign patterns when enumerated exactly)
    exact : whether every sign pattern was enumerated
    """

    statistic: np.ndarray
    pvalue: np.ndarray
    pvalue_max: np.ndarray
    n_permutations: int
    exact: bool


def label_permutation_test(
    a: np.ndarray, b: np.ndarray, *, n_permutations: int, seed: int, chunk_bytes: int = DEFAULT_CHUNK_BYTES
) -> PermutationResult:
    """Welch's t of ``a`` against ``b`` with p-values from random relabellings of the trials.

    Parameters
    ----------
    a : array, shape (..., n_trials_a, n_channels), e.g. window means in V; leading axes
        are separate families (e.g. time bins), each corrected on its own
    b : array, shape (..., n_trials_b, n_channels), leading axes equal to those of ``a``
    n_permutations : random relabellings; each keeps the two group sizes
    seed : seed of ``numpy.random.default_rng``; the same seed gives the same p-values
    chunk_bytes : memory budget of one chunk of permutations; the result does not depend on it
    """
    n_a, n_b = a.shape[TRIAL_AXIS], b.shape[TRIAL_AXIS]
    if n_a < 2 or n_b < 2:
        raise ValueError(f"the permutation test needs at least 2 trials per condition, got {n_a} and {n_b}")
    family_shape = a.shape[:-2] + a.shape[-1:]
    pooled = np.moveaxis(np.concatenate((a, b), axis=TRIAL_AXIS), TRIAL_AXIS, 0).reshape(n_a + n_b, -1)
    # Centring leaves every t unchanged and keeps the one-pass variances free of cancellation.
    pooled = pooled - pooled.mean(axis=0)
    squares = pooled**2
    totals, total_squares = pooled.sum(axis=0), squares.sum(axis=0)
    first = np.zeros((1, n_a + n_b))
    first[0, :n_a] = 1.0

    def statistic(selection: np.ndarray) -> np.ndarray:
        sums, sums_sq = selection @ pooled, selection @ squares
        return _welch_from_sums(sums, sums_sq, n_a, totals - sums, total_squares - sums_sq, n_b).statistic

    observed = statistic(first)[0]
    rng = np.random.default_rng(seed)

    def chunks() -> Iterator[np.ndarray]:
        for size in _chunk_sizes(n_permutations, n_a + n_b, observed.size, chunk_bytes):
            yield selection_counts(partial_shuffle(rng.random((size, n_a)), n_a + n_b), n_a + n_b)

    counts = _exceedances(statistic, chunks(), observed.reshape(family_shape))
    return _result(observed.reshape(family_shape), counts, n_permutations, exact=False)


def sign_flip_test(
    x: np.ndarray, *, n_permutations: int, seed: int, chunk_bytes: int = DEFAULT_CHUNK_BYTES
) -> PermutationResult:
    """One-sample t of ``x`` against zero with p-values from flipping the sign of each row.

    Parameters
    ----------
    x : array, shape (n_subjects, n_channels), e.g. per-subject condition differences in V;
        NaN where a subject has no value for a channel (left out of that channel's t)
    n_permutations : random sign patterns; when 2**n_subjects is not larger, every
        pattern is enumerated instead and the test is exact
    seed : seed of ``numpy.random.default_rng`` for the random patterns
    """
    n_subjects = x.shape[0]
    present = ~np.isnan(x)
    values = np.where(present, x, 0.0)
    count = present.sum(axis=0)
    sum_squares = (values**2).sum(axis=0)

    def statistic(flips: np.ndarray) -> np.ndarray:
        sums = flips @ values
        mean = sums / np.maximum(count, 1)
        with np.errstate(divide="ignore", invalid="ignore"):
            variance = np.where(count >= 2, np.maximum(sum_squares - sums * mean, 0.0) / (count - 1), np.nan)
        return _t_from_moments(mean, variance / np.maximum(count, 1))

    observed = statistic(np.ones((1, n_subjects)))[0]
    exact = 2**n_subjects <= n_permutations
    rng = np.random.default_rng(seed)

    def chunks() -> Iterator[np.ndarray]:
        start = 0
        for size in _chunk_sizes(2**n_subjects if exact else n_permutations, n_subjects, observed.size, chunk_bytes):
            if exact:
                codes = np.arange(start, start + size)[:, None]
                yield 1.0 - 2.0 * ((codes >> np.arange(n_subjects)) & 1)
            else:
                yield np.where(rng.random((size, n_subjects)) < 0.5, -1.0, 1.0)
            start += size

    counts = _exceedances(statistic, chunks(), observed[None])
    drawn = 2**n_subjects if exact else n_permutations
    result = _result(observed[None], counts, drawn, exact=exact)
    return PermutationResult(
        statistic=result.statistic[0],
        pvalue=result.pvalue[0],
        pvalue_max=result.pvalue_max[0],
        n_permutations=drawn,
        exact=exact,
    )


def _t_from_moments(mean: np.ndarray, se2: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(se2 > 0, mean / np.sqrt(se2), np.nan)


def _welch_from_sums(
    sums_a: np.ndarray, squares_a: np.ndarray, n_a: int, sums_b: np.ndarray, squares_b: np.ndarray, n_b: int
) -> TStatistic:
    mean_a, mean_b = sums_a / n_a, sums_b / n_b
    var_a = np.maximum(squares_a - sums_a * mean_a, 0.0) / (n_a - 1)
    var_b = np.maximum(squares_b - sums_b * mean_b, 0.0) / (n_b - 1)
    return welch_statistic(mean_a, var_a, n_a, mean_b, var_b, n_b)


def _chunk_sizes(total: int, n_rows: int, n_features: int, chunk_bytes: int) -> Iterator[int]:
    per_permutation = _BYTES_PER_VALUE * (n_rows + _VALUES_PER_FEATURE * n_features)
    step = max(1, chunk_bytes // per_permutation)
    for start in range(0, total, step):
        yield min(step, total - start)


@dataclass(frozen=True)
class _Exceedances:
    """How often a permuted |t| reached the observed one: per channel, and for the family maximum."""

    channel: np.ndarray
    family_max: np.ndarray


def _exceedances(
    statistic: Callable[[np.ndarray], np.ndarray], chunks: Iterator[np.ndarray], observed: np.ndarray
) -> _Exceedances:
    """Count, over all chunks, permuted |t| (and family-maximum |t|) at least the observed |t|.

    observed : array, shape (..., n_channels); the statistic of a chunk has shape
        (chunk, prod(observed.shape))
    """
    threshold = np.abs(observed) * (1.0 - _TIE_TOLERANCE)
    channel = np.zeros(observed.shape, dtype=np.int64)
    family_max = np.zeros(observed.shape, dtype=np.int64)
    for selection in chunks:
        # A permutation that leaves a channel undefined does not count as extreme.
        permuted = np.nan_to_num(np.abs(statistic(selection)), nan=0.0).reshape((-1, *observed.shape))
        channel += (permuted >= threshold).sum(axis=0)
        largest = permuted.max(axis=-1, keepdims=True)
        family_max += (largest >= threshold).sum(axis=0)
    return _Exceedances(channel=channel, family_max=family_max)


def _result(observed: np.ndarray, counts: _Exceedances, n_permutations: int, *, exact: bool) -> PermutationResult:
    undefined = np.isnan(observed)
    offset = 0 if exact else 1

    def pvalue(count: np.ndarray) -> np.ndarray:
        return np.where(undefined, np.nan, (count + offset) / (n_permutations + offset))

    return PermutationResult(
        statistic=observed,
        pvalue=pvalue(counts.channel),
        pvalue_max=pvalue(counts.family_max),
        n_permutations=n_permutations,
        exact=exact,
    )
