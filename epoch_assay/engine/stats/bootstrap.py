"""Bootstrap of the share of significant channels over resampled trials.

Three ways to resample the trials of the two conditions:

- ``fixed``: the same k trials per condition, drawn without replacement;
- ``equalized``: as many trials per condition as the smaller condition has, drawn
  without replacement (the smaller condition is always used whole);
- ``all``: each condition's own trial count, drawn with replacement (the ordinary
  two-sample bootstrap of Efron & Tibshirani, 1993).

Each resample runs the trial-level test on every channel, adjusts the p-values across
channels and records the fraction of channels whose adjusted p is below alpha. Resamples
are processed in chunks, all resamples and channels of a chunk at once, so memory stays
bounded whatever the number of resamples. The interval is the percentile interval or,
for ``all``, optionally the bias-corrected and accelerated (BCa) interval of Efron (1987)
with a jackknife estimate of the acceleration.
"""

from collections.abc import Callable, Iterator
from dataclasses import dataclass
from typing import Literal

import numpy as np
from scipy.special import ndtr, ndtri

from epoch_assay.engine.stats.corrections import CORRECTIONS, PValueCorrection, adjust_pvalues
from epoch_assay.engine.stats.rank_test import mann_whitney_u
from epoch_assay.engine.stats.ttest import TStatistic, student_statistic, two_sided_pvalue, welch_statistic

BootstrapMode = Literal["fixed", "equalized", "all"]
IntervalMethod = Literal["percentile", "bca"]
ResampledTest = Literal["welch", "student", "mann_whitney"]

#: Upper bound on the intermediate arrays of one chunk of resamples, in bytes. Memory
#: stays bounded whatever the number of resamples; a few MB rather than tens keeps a
#: chunk's arrays in the processor cache, which measured faster in bench_bootstrap.py.
DEFAULT_CHUNK_BYTES = 4 * 2**20

_BYTES_PER_VALUE = 8
# Per resample and trial: its place in the shuffle, its selection count and at most one
# uniform draw.
_VALUES_PER_TRIAL = 3
# Per resample and channel: sums, sums of squares, means and variances of both
# conditions, the test outputs and the sorting work of the correction.
_VALUES_PER_CHANNEL = 32
# Per resample, drawn trial and channel for the rank test: the gathered values, their
# ranks (three kinds) and the tie sizes.
_VALUES_PER_RANKED_VALUE = 6
CI_LEVEL = 0.95


@dataclass(frozen=True)
class TrialDraw:
    """Trials drawn for a batch of resamples.

    indices_a : array of int, shape (n_resamples, k_a), rows of condition a
    indices_b : array of int, shape (n_resamples, k_b), rows of condition b
    """

    indices_a: np.ndarray
    indices_b: np.ndarray


@dataclass(frozen=True)
class BootstrapResult:
    """Distribution of the significant fraction over resamples.

    fractions : array, shape (resamples,), share of channels significant in each resample
    median : median of ``fractions``
    ci_low, ci_high : bounds of the 95 % interval: the 2.5 / 97.5 percentiles (linear) of
        ``fractions``, or the BCa bounds; NaN when BCa is undefined (every resample on one
        side of the observed fraction)
    trials_drawn : trials per resample of condition a and of condition b
    trials_per_condition : the common count for ``fixed`` and ``equalized``; None for ``all``
    observed : fraction on all trials (used by BCa), NaN for the percentile interval
    acceleration, bias_correction : BCa's a and z0, NaN for the percentile interval
    """

    fractions: np.ndarray
    median: float
    ci_low: float
    ci_high: float
    resamples: int
    mode: BootstrapMode
    ci: IntervalMethod
    trials_drawn: tuple[int, int]
    trials_per_condition: int | None
    with_replacement: bool
    observed: float
    acceleration: float
    bias_correction: float


def draw_trials(
    rng: np.random.Generator, n_trials_a: int, n_trials_b: int, trials_per_condition: int, n_resamples: int
) -> TrialDraw:
    """Draw ``trials_per_condition`` distinct trials per condition for each resample.

    Each resample takes ``2 * trials_per_condition`` uniform numbers from ``rng``: the
    first half drives a partial Fisher–Yates shuffle of condition a's trials, the second
    half one of condition b's, so every subset of that size is equally likely. Because
    the stream is consumed resample by resample, drawing 10 resamples at once gives the
    same trials as drawing 4 and then 6.
    """
    uniforms = rng.random((n_resamples, 2 * trials_per_condition))
    return TrialDraw(
        indices_a=partial_shuffle(uniforms[:, :trials_per_condition], n_trials_a),
        indices_b=partial_shuffle(uniforms[:, trials_per_condition:], n_trials_b),
    )


def draw_with_replacement(rng: np.random.Generator, n_trials_a: int, n_trials_b: int, n_resamples: int) -> TrialDraw:
    """Draw each condition's own trial count with replacement, for each resample.

    One row of ``n_trials_a + n_trials_b`` uniform numbers per resample, so, as in
    :func:`draw_trials`, the draws do not depend on how resamples are batched.
    """
    uniforms = rng.random((n_resamples, n_trials_a + n_trials_b))
    return TrialDraw(
        indices_a=(uniforms[:, :n_trials_a] * n_trials_a).astype(np.intp),
        indices_b=(uniforms[:, n_trials_a:] * n_trials_b).astype(np.intp),
    )


def partial_shuffle(uniforms: np.ndarray, n_trials: int) -> np.ndarray:
    """First k positions of a Fisher–Yates shuffle of ``range(n_trials)`` in each row.

    uniforms : array, shape (n_resamples, k), in [0, 1)
    """
    n_rows, count = uniforms.shape
    order = np.tile(np.arange(n_trials), (n_rows, 1))
    # Swaps address the flat array: one index array per access is faster than row/column pairs.
    flat = order.reshape(-1)
    row_starts = np.arange(n_rows) * n_trials
    # One step per drawn position, each step for all resamples at once.
    for position in range(count):
        here = row_starts + position
        there = here + (uniforms[:, position] * (n_trials - position)).astype(np.intp)
        displaced = flat[here]
        flat[here] = flat[there]
        flat[there] = displaced
    return order[:, :count]


def selection_counts(indices: np.ndarray, n_trials: int) -> np.ndarray:
    """How often each trial is drawn in each row: array, shape (n_rows, n_trials), float.

    indices : array of int, shape (n_rows, k), values in [0, n_trials)
    """
    n_rows = indices.shape[0]
    flat = (indices + np.arange(n_rows)[:, None] * n_trials).reshape(-1)
    return np.bincount(flat, minlength=n_rows * n_trials).reshape(n_rows, n_trials).astype(float)


def resamples_per_chunk(
    n_trials_a: int,
    n_trials_b: int,
    n_channels: int,
    budget_bytes: int,
    *,
    test: ResampledTest = "welch",
    drawn: tuple[int, int] | None = None,
) -> int:
    """Largest number of resamples whose intermediates fit in ``budget_bytes`` (at least 1)."""
    values = _VALUES_PER_TRIAL * (n_trials_a + n_trials_b) + _VALUES_PER_CHANNEL * n_channels
    if test == "mann_whitney":
        values += _VALUES_PER_RANKED_VALUE * sum(drawn or (n_trials_a, n_trials_b)) * n_channels
    return max(1, budget_bytes // (_BYTES_PER_VALUE * values))


def bootstrap_significant_fraction(
    a: np.ndarray,
    b: np.ndarray,
    *,
    resamples: int,
    seed: int,
    alpha: float,
    correction: PValueCorrection,
    mode: BootstrapMode = "fixed",
    trials_per_condition: int | None = None,
    test: ResampledTest = "welch",
    ci: IntervalMethod = "percentile",
    chunk_size: int | None = None,
) -> BootstrapResult:
    """Bootstrap distribution of the fraction of channels significant between two conditions.

    Parameters
    ----------
    a : array, shape (n_trials_a, n_channels), window means of the first condition, in V
    b : array, shape (n_trials_b, n_channels), window means of the second condition, in V
    resamples : number of resamples
    seed : seed of ``numpy.random.default_rng``; the same seed gives the same numbers
    alpha : significance level applied to the adjusted p-values
    correction : multiple-comparison correction across channels
    mode : "fixed", "equalized" or "all" (see the module docstring)
    trials_per_condition : trials drawn per condition in "fixed" mode; ignored otherwise
    test : the trial-level test run in each resample
    ci : "percentile", or "bca" (only with mode "all")
    chunk_size : resamples processed at once; by default as many as fit in
        ``DEFAULT_CHUNK_BYTES``. The result does not depend on it.

    A channel with no variance in a resample counts as not significant in that resample.
    """
    n_a, n_b = a.shape[0], b.shape[0]
    drawn = _trials_drawn(mode, trials_per_condition, n_a, n_b)
    if resamples < 1:
        raise ValueError(f"resamples must be at least 1, got {resamples}")
    if ci == "bca" and mode != "all":
        raise ValueError(
            "the BCa interval needs mode 'all': it corrects towards the estimate on all trials, "
            "which subsets of fewer trials do not estimate"
        )
    if chunk_size is None:
        chunk_size = resamples_per_chunk(n_a, n_b, a.shape[1], DEFAULT_CHUNK_BYTES, test=test, drawn=drawn)
    if chunk_size < 1:
        raise ValueError(f"chunk_size must be at least 1, got {chunk_size}")
    fraction_of = _fraction_of_draws(a, b, test, alpha, correction)
    rng = np.random.default_rng(seed)

    def draws() -> Iterator[TrialDraw]:
        for start in range(0, resamples, chunk_size):
            size = min(chunk_size, resamples - start)
            if mode == "all":
                yield draw_with_replacement(rng, n_a, n_b, size)
            else:
                yield draw_trials(rng, n_a, n_b, drawn[0], size)

    fractions = np.concatenate([fraction_of(draw) for draw in draws()])
    median = float(np.median(fractions))
    observed = acceleration = bias_correction = float("nan")
    if ci == "bca":
        observed = float(fraction_of(TrialDraw(np.arange(n_a)[None], np.arange(n_b)[None]))[0])
        acceleration = _jackknife_acceleration(fraction_of, n_a, n_b, chunk_size)
        low, high, bias_correction = _bca_bounds(fractions, observed, acceleration)
    else:
        low, high = np.percentile(fractions, [50.0 * (1 - CI_LEVEL), 50.0 * (1 + CI_LEVEL)])
    return BootstrapResult(
        fractions=fractions,
        median=median,
        ci_low=float(low),
        ci_high=float(high),
        resamples=resamples,
        mode=mode,
        ci=ci,
        trials_drawn=drawn,
        trials_per_condition=None if mode == "all" else drawn[0],
        with_replacement=mode == "all",
        observed=observed,
        acceleration=acceleration,
        bias_correction=bias_correction,
    )


def _trials_drawn(mode: BootstrapMode, trials_per_condition: int | None, n_a: int, n_b: int) -> tuple[int, int]:
    if min(n_a, n_b) < 2:
        raise ValueError(f"the bootstrap needs at least 2 trials per condition, got {n_a} and {n_b}")
    if mode == "all":
        return n_a, n_b
    if mode == "equalized":
        return min(n_a, n_b), min(n_a, n_b)
    if trials_per_condition is None or not 2 <= trials_per_condition <= min(n_a, n_b):
        raise ValueError(
            f"trials_per_condition={trials_per_condition} must be at least 2 and at most the "
            f"smaller condition's trial count ({n_a} and {n_b} trials)"
        )
    return trials_per_condition, trials_per_condition


FractionOfDraws = Callable[[TrialDraw], np.ndarray]


def _fraction_of_draws(
    a: np.ndarray, b: np.ndarray, test: ResampledTest, alpha: float, correction: PValueCorrection
) -> FractionOfDraws:
    """A function from a batch of draws to the significant fraction of each, shape (n_resamples,)."""
    if test == "mann_whitney":

        def ranked(draw: TrialDraw) -> np.ndarray:
            pvalue = mann_whitney_u(a[draw.indices_a], b[draw.indices_b]).pvalue
            return (adjust_pvalues(pvalue, correction) < alpha).mean(axis=-1)

        return ranked
    statistic = {"welch": welch_statistic, "student": student_statistic}[test]
    centred_a, centred_b = _Centred.of(a), _Centred.of(b)
    # The shortcut is exact only for corrections that declare this property (see corrections.py).
    skip_large_p = CORRECTIONS[correction].decided_below_alpha

    def parametric(draw: TrialDraw) -> np.ndarray:
        mean_a, var_a = centred_a.subset_moments(draw.indices_a)
        mean_b, var_b = centred_b.subset_moments(draw.indices_b)
        t = statistic(mean_a, var_a, draw.indices_a.shape[1], mean_b, var_b, draw.indices_b.shape[1])
        pvalue = _pvalues_that_matter(t, alpha) if skip_large_p else two_sided_pvalue(t)
        return (adjust_pvalues(pvalue, correction) < alpha).mean(axis=-1)

    return parametric


def _pvalues_that_matter(t: TStatistic, alpha: float) -> np.ndarray:
    """Two-sided p-values, exact where they can be below ``alpha`` and 1.0 elsewhere.

    The t distribution has heavier tails than the normal, so |t| below the normal
    quantile z(1 - alpha/2) means p > alpha at any df. For a correction that declares
    ``decided_below_alpha`` (its significant channels are decided by the raw p-values below
    alpha alone, as in the step-up Benjamini–Hochberg/–Yekutieli and step-down Holm
    procedures), those channels' exact p-values cannot change the significant fraction;
    skipping them saves most of the costly t distribution evaluations. Other corrections get
    every exact p-value.
    """
    pvalues = np.ones_like(t.statistic)
    # NaN statistics are kept as candidates so that they stay NaN and out of the test count.
    candidates = ~(np.abs(t.statistic) < ndtri(1.0 - alpha / 2.0))
    pvalues[candidates] = two_sided_pvalue(TStatistic(t.statistic[candidates], t.df[candidates]))
    return pvalues


def _jackknife_acceleration(fraction_of: FractionOfDraws, n_a: int, n_b: int, chunk_size: int) -> float:
    """BCa acceleration from leave-one-trial-out fractions of each condition.

    The two-sample form of Efron & Tibshirani (1993), eq. 14.15 with one jackknife per
    sample: U_ji = (n_j - 1)(mean_i θ_ji - θ_ji), a = Σ_j Σ_i U_ji³ / n_j³ / (6 (Σ_j Σ_i U_ji² / n_j²)^{3/2}).
    Zero when every leave-one-out fraction is the same.
    """
    numerator = denominator = 0.0
    for condition, n in enumerate((n_a, n_b)):
        others = n_b if condition == 0 else n_a
        leave_one_out = np.concatenate(
            [
                fraction_of(_leave_one_out_draw(start, min(start + chunk_size, n), n, others, condition))
                for start in range(0, n, chunk_size)
            ]
        )
        influence = (n - 1) * (leave_one_out.mean() - leave_one_out)
        numerator += float((influence**3).sum()) / n**3
        denominator += float((influence**2).sum()) / n**2
    return 0.0 if denominator == 0.0 else numerator / (6.0 * denominator**1.5)


def _leave_one_out_draw(start: int, stop: int, n: int, n_other: int, condition: int) -> TrialDraw:
    """Rows start..stop of the jackknife of one condition: trial i left out in row i, the other condition whole."""
    positions = np.arange(n - 1)[None, :]
    left_out = np.arange(start, stop)[:, None]
    jackknifed = positions + (positions >= left_out)
    whole = np.broadcast_to(np.arange(n_other), (stop - start, n_other))
    return TrialDraw(jackknifed, whole) if condition == 0 else TrialDraw(whole, jackknifed)


def _bca_bounds(fractions: np.ndarray, observed: float, acceleration: float) -> tuple[float, float, float]:
    """BCa bounds (Efron, 1987) at CI_LEVEL and the bias correction z0.

    z0 is the normal quantile of the share of resamples below the observed fraction,
    ties counting one half, because the fraction takes few distinct values.
    """
    below = (np.count_nonzero(fractions < observed) + np.count_nonzero(fractions <= observed)) / (2 * fractions.size)
    z0 = float(ndtri(below))
    if not np.isfinite(z0):
        return float("nan"), float("nan"), z0
    quantiles = []
    for z_level in (ndtri(0.5 * (1 - CI_LEVEL)), ndtri(0.5 * (1 + CI_LEVEL))):
        shifted = z0 + z_level
        quantiles.append(ndtr(z0 + shifted / (1 - acceleration * shifted)))
    low, high = np.percentile(fractions, [100.0 * quantiles[0], 100.0 * quantiles[1]])
    return float(low), float(high), z0


@dataclass(frozen=True)
class _Centred:
    """One condition's values minus their channel means, and their squares.

    Subset sums then come from one matrix product per chunk instead of copying every
    drawn trial; centring keeps the one-pass variance free of cancellation.
    """

    centre: np.ndarray
    values: np.ndarray
    squares: np.ndarray

    @classmethod
    def of(cls, values: np.ndarray) -> "_Centred":
        centre = values.mean(axis=0)
        centred = values - centre
        return cls(centre=centre, values=centred, squares=centred**2)

    def subset_moments(self, indices: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Mean and unbiased variance, shape (n_resamples, n_channels), of each row's trials (repeats count)."""
        count = indices.shape[1]
        selection = selection_counts(indices, self.values.shape[0])
        sums = selection @ self.values
        centred_mean = sums / count
        variance = np.maximum((selection @ self.squares - sums * centred_mean) / (count - 1), 0.0)
        return centred_mean + self.centre, variance
