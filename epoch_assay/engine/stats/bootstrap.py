"""Resampling of trials: the significant fraction under three schemes, and a smooth score.

Three ways to resample the trials of the two conditions for the significant fraction:

- ``fixed``: the same k trials per condition, drawn without replacement;
- ``equalized``: as many trials per condition as the smaller condition has, drawn
  without replacement (the smaller condition is always used whole);
- ``all``: each condition's own trial count, drawn with replacement (the ordinary
  two-sample bootstrap of Efron & Tibshirani, 1993).

Each resample runs the trial-level test on every channel, adjusts the p-values across
channels and records the fraction of channels whose adjusted p is below alpha. Resamples
are processed in chunks, all resamples and channels of a chunk at once, so memory stays
bounded whatever the number of resamples.

What the numbers are. Subsets of k of n trials (``fixed``, ``equalized``) estimate the
expected fraction *at k trials* by their mean; their 2.5 / 97.5 percentiles describe the
spread from subset to subset, which shrinks to nothing as k approaches n, so they are no
confidence interval. In ``all`` mode the 2.5 / 97.5 percentiles are the percentile
interval (Efron & Tibshirani, 1993, ch. 13) for the expected fraction at the observed
trial counts. The fraction is a step function of every channel's statistic and of the
correction's data-driven threshold, so the bias-corrected and accelerated interval, which
assumes a smooth statistic (Efron, 1987), is not offered for it.

The smooth score is the mean over channels of Welch's t: it moves continuously with the
data, and its percentile interval over trials resampled with replacement within each
condition covers its expectation at the observed trial counts (shown by simulation in the
tests and in ``tests/benchmarks/calibration/resampling.py``).
"""

from collections.abc import Callable, Iterator
from dataclasses import dataclass
from typing import Literal

import numpy as np
from scipy.special import ndtri

from epoch_assay.engine.stats.corrections import CORRECTIONS, PValueCorrection, adjust_pvalues
from epoch_assay.engine.stats.rank_test import mann_whitney_u
from epoch_assay.engine.stats.ttest import TStatistic, student_statistic, two_sided_pvalue, welch_statistic

BootstrapMode = Literal["fixed", "equalized", "all"]
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
#: Central share of the resampled values between the reported lower and upper percentile.
CENTRAL_SHARE = 0.95
_PERCENTILES = (50.0 * (1 - CENTRAL_SHARE), 50.0 * (1 + CENTRAL_SHARE))


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
    mean : mean of ``fractions``; in ``fixed`` and ``equalized`` modes the estimate of the
        expected fraction at ``trials_per_condition`` trials per condition
    percentile_low, percentile_high : the 2.5 / 97.5 percentiles (linear) of ``fractions``:
        a descriptive spread over subsets in ``fixed`` and ``equalized`` modes, the
        percentile interval of the expected fraction in ``all`` mode (see the module docstring)
    trials_drawn : trials per resample of condition a and of condition b
    trials_per_condition : the common count for ``fixed`` and ``equalized``; None for ``all``
    """

    fractions: np.ndarray
    mean: float
    percentile_low: float
    percentile_high: float
    resamples: int
    mode: BootstrapMode
    trials_drawn: tuple[int, int]
    trials_per_condition: int | None
    with_replacement: bool


@dataclass(frozen=True)
class MeanTBootstrap:
    """The mean over channels of Welch's t and its percentile interval over resampled trials.

    observed : mean over channels of Welch's t (first minus second condition) on all trials;
        NaN when no channel has a defined t
    resampled : array, shape (resamples,), the same mean in each resample (trials of each
        condition drawn with replacement, each condition's own count)
    ci_low, ci_high : 2.5 / 97.5 percentiles of ``resampled``: a 95 % interval for the
        expectation of ``observed`` at the observed trial counts
    """

    observed: float
    resampled: np.ndarray
    ci_low: float
    ci_high: float
    resamples: int


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
    chunk_size : resamples processed at once; by default as many as fit in
        ``DEFAULT_CHUNK_BYTES``. The result does not depend on it.

    A channel with no variance in a resample counts as not significant in that resample.
    """
    n_a, n_b = a.shape[0], b.shape[0]
    drawn = _trials_drawn(mode, trials_per_condition, n_a, n_b)
    if chunk_size is None:
        chunk_size = resamples_per_chunk(n_a, n_b, a.shape[1], DEFAULT_CHUNK_BYTES, test=test, drawn=drawn)
    fractions = _over_resamples(
        _fraction_of_draws(a, b, test, alpha, correction), (n_a, n_b), drawn, mode, resamples, seed, chunk_size
    )
    low, high = np.percentile(fractions, _PERCENTILES)
    return BootstrapResult(
        fractions=fractions,
        mean=float(fractions.mean()),
        percentile_low=float(low),
        percentile_high=float(high),
        resamples=resamples,
        mode=mode,
        trials_drawn=drawn,
        trials_per_condition=None if mode == "all" else drawn[0],
        with_replacement=mode == "all",
    )


def bootstrap_mean_welch_t(
    a: np.ndarray, b: np.ndarray, *, resamples: int, seed: int, chunk_size: int | None = None
) -> MeanTBootstrap:
    """Mean over channels of Welch's t, and its percentile interval over trials resampled within condition.

    Parameters
    ----------
    a : array, shape (n_trials_a, n_channels), window means of the first condition, in V
    b : array, shape (n_trials_b, n_channels), window means of the second condition, in V
    resamples : number of resamples; each draws every condition's own trial count with replacement
    seed : seed of ``numpy.random.default_rng``; with the seed of an ``all``-mode
        :func:`bootstrap_significant_fraction` the two use the same resamples
    chunk_size : resamples processed at once; the result does not depend on it

    Channels whose t is undefined (no variance) are left out of each mean.
    """
    n_a, n_b = a.shape[0], b.shape[0]
    drawn = _trials_drawn("all", None, n_a, n_b)
    if chunk_size is None:
        chunk_size = resamples_per_chunk(n_a, n_b, a.shape[1], DEFAULT_CHUNK_BYTES)
    mean_t_of = _mean_welch_t_of_draws(a, b)
    resampled = _over_resamples(mean_t_of, (n_a, n_b), drawn, "all", resamples, seed, chunk_size)
    observed = float(mean_t_of(_every_trial(n_a, n_b))[0])
    low, high = np.percentile(resampled, _PERCENTILES) if np.isfinite(resampled).all() else (np.nan, np.nan)
    return MeanTBootstrap(
        observed=observed, resampled=resampled, ci_low=float(low), ci_high=float(high), resamples=resamples
    )


def mean_welch_t(a: np.ndarray, b: np.ndarray) -> float:
    """Mean over channels of Welch's t of ``a`` against ``b`` (arrays as in :func:`bootstrap_mean_welch_t`).

    Channels whose t is undefined (no variance) are left out; NaN when none has a t.
    """
    return float(_mean_welch_t_of_draws(a, b)(_every_trial(a.shape[0], b.shape[0]))[0])


def _every_trial(n_a: int, n_b: int) -> TrialDraw:
    """One draw of every trial of each condition, once."""
    return TrialDraw(np.arange(n_a)[None], np.arange(n_b)[None])


StatisticOfDraws = Callable[[TrialDraw], np.ndarray]


def _over_resamples(
    statistic_of: StatisticOfDraws,
    counts: tuple[int, int],
    drawn: tuple[int, int],
    mode: BootstrapMode,
    resamples: int,
    seed: int,
    chunk_size: int,
) -> np.ndarray:
    """``statistic_of`` on ``resamples`` draws from a generator seeded with ``seed``, chunk by chunk; shape (resamples,)."""
    if resamples < 1:
        raise ValueError(f"resamples must be at least 1, got {resamples}")
    if chunk_size < 1:
        raise ValueError(f"chunk_size must be at least 1, got {chunk_size}")
    rng = np.random.default_rng(seed)

    def draws() -> Iterator[TrialDraw]:
        for start in range(0, resamples, chunk_size):
            size = min(chunk_size, resamples - start)
            if mode == "all":
                yield draw_with_replacement(rng, counts[0], counts[1], size)
            else:
                yield draw_trials(rng, counts[0], counts[1], drawn[0], size)

    return np.concatenate([statistic_of(draw) for draw in draws()])


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


def _fraction_of_draws(
    a: np.ndarray, b: np.ndarray, test: ResampledTest, alpha: float, correction: PValueCorrection
) -> StatisticOfDraws:
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


def _mean_welch_t_of_draws(a: np.ndarray, b: np.ndarray) -> StatisticOfDraws:
    """A function from a batch of draws to the mean over channels of Welch's t in each, shape (n_resamples,)."""
    centred_a, centred_b = _Centred.of(a), _Centred.of(b)

    def mean_t(draw: TrialDraw) -> np.ndarray:
        mean_a, var_a = centred_a.subset_moments(draw.indices_a)
        mean_b, var_b = centred_b.subset_moments(draw.indices_b)
        t = welch_statistic(mean_a, var_a, draw.indices_a.shape[1], mean_b, var_b, draw.indices_b.shape[1]).statistic
        defined = np.isfinite(t)
        count = defined.sum(axis=-1)
        total = np.where(defined, t, 0.0).sum(axis=-1)
        return np.divide(total, count, out=np.full(count.shape, np.nan), where=count > 0)

    return mean_t


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
