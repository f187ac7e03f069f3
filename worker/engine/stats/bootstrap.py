"""Bootstrap of the share of significant channels over random subsets of trials.

Each resample draws the same number of trials from each condition without replacement,
runs Welch's t-test on every channel, adjusts the p-values across channels and records
the fraction of channels whose adjusted p is below alpha. Resamples are processed in
chunks, all resamples and channels of a chunk at once.
"""

from dataclasses import dataclass

import numpy as np
from scipy.special import ndtri

from worker.engine.stats.corrections import CorrectionMethod, adjust_pvalues
from worker.engine.stats.ttest import WelchStatistic, two_sided_pvalue, welch_statistic

#: Upper bound on the intermediate arrays of one chunk of resamples, in bytes. Memory
#: stays bounded whatever the number of resamples; a few MB rather than tens keeps a
#: chunk's arrays in the processor cache, which measured faster in bench_bootstrap.py.
DEFAULT_CHUNK_BYTES = 4 * 2**20

_BYTES_PER_VALUE = 8
# Per resample and trial: its place in the shuffle and its selection weight, plus at most
# one uniform draw (only the drawn trials take one).
_VALUES_PER_TRIAL = 3
# Per resample and channel: sums, sums of squares, means and variances of both
# conditions, the t-test outputs and the sorting work of the correction.
_VALUES_PER_CHANNEL = 32


@dataclass(frozen=True)
class TrialDraw:
    """Trials drawn for a batch of resamples.

    indices_a : array of int, shape (n_resamples, trials_per_condition), rows of condition a
    indices_b : array of int, shape (n_resamples, trials_per_condition), rows of condition b
    """

    indices_a: np.ndarray
    indices_b: np.ndarray


@dataclass(frozen=True)
class BootstrapResult:
    """Distribution of the significant fraction over resamples.

    fractions : array, shape (resamples,), share of channels significant in each resample
    median, ci_low, ci_high : median and 2.5 / 97.5 percentiles (linear) of ``fractions``
    """

    fractions: np.ndarray
    median: float
    ci_low: float
    ci_high: float
    resamples: int
    trials_per_condition: int


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
        indices_a=_partial_shuffle(uniforms[:, :trials_per_condition], n_trials_a),
        indices_b=_partial_shuffle(uniforms[:, trials_per_condition:], n_trials_b),
    )


def _partial_shuffle(uniforms: np.ndarray, n_trials: int) -> np.ndarray:
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


def resamples_per_chunk(n_trials_a: int, n_trials_b: int, n_channels: int, budget_bytes: int) -> int:
    """Largest number of resamples whose intermediates fit in ``budget_bytes`` (at least 1)."""
    per_resample = _BYTES_PER_VALUE * (
        _VALUES_PER_TRIAL * (n_trials_a + n_trials_b) + _VALUES_PER_CHANNEL * n_channels
    )
    return max(1, budget_bytes // per_resample)


def bootstrap_significant_fraction(
    a: np.ndarray,
    b: np.ndarray,
    *,
    trials_per_condition: int,
    resamples: int,
    seed: int,
    alpha: float,
    correction: CorrectionMethod,
    chunk_size: int | None = None,
) -> BootstrapResult:
    """Bootstrap distribution of the fraction of channels significant between two conditions.

    Parameters
    ----------
    a : array, shape (n_trials_a, n_channels), window means of the first condition, in V
    b : array, shape (n_trials_b, n_channels), window means of the second condition, in V
    trials_per_condition : trials drawn from each condition per resample, without replacement
    resamples : number of resamples
    seed : seed of ``numpy.random.default_rng``; the same seed gives the same numbers
    alpha : significance level applied to the adjusted p-values
    correction : multiple-comparison correction across channels
    chunk_size : resamples processed at once; by default as many as fit in
        ``DEFAULT_CHUNK_BYTES``. The result does not depend on it.

    A channel with no variance in a resample counts as not significant in that resample.
    """
    n_a, n_b = a.shape[0], b.shape[0]
    if not 2 <= trials_per_condition <= min(n_a, n_b):
        raise ValueError(
            f"trials_per_condition={trials_per_condition} must be at least 2 and at most the "
            f"smaller condition's trial count ({n_a} and {n_b} trials)"
        )
    if resamples < 1:
        raise ValueError(f"resamples must be at least 1, got {resamples}")
    if chunk_size is None:
        chunk_size = resamples_per_chunk(n_a, n_b, a.shape[1], DEFAULT_CHUNK_BYTES)
    if chunk_size < 1:
        raise ValueError(f"chunk_size must be at least 1, got {chunk_size}")
    rng = np.random.default_rng(seed)
    centred_a, centred_b = _Centred.of(a), _Centred.of(b)
    fractions = np.empty(resamples)
    for start in range(0, resamples, chunk_size):
        stop = min(start + chunk_size, resamples)
        draw = draw_trials(rng, n_a, n_b, trials_per_condition, stop - start)
        mean_a, var_a = centred_a.subset_moments(draw.indices_a)
        mean_b, var_b = centred_b.subset_moments(draw.indices_b)
        welch = welch_statistic(mean_a, var_a, trials_per_condition, mean_b, var_b, trials_per_condition)
        significant = adjust_pvalues(_pvalues_that_matter(welch, alpha), correction) < alpha
        fractions[start:stop] = significant.mean(axis=-1)
    low, median, high = np.percentile(fractions, [2.5, 50.0, 97.5])
    return BootstrapResult(
        fractions=fractions,
        median=float(median),
        ci_low=float(low),
        ci_high=float(high),
        resamples=resamples,
        trials_per_condition=trials_per_condition,
    )


def _pvalues_that_matter(welch: WelchStatistic, alpha: float) -> np.ndarray:
    """Two-sided p-values, exact where they can be below ``alpha`` and 1.0 elsewhere.

    The t distribution has heavier tails than the normal, so |t| below the normal
    quantile z(1 - alpha/2) means p > alpha at any df. Every offered correction keeps a
    p-value at or above its raw value, and in Benjamini–Hochberg a p-value above alpha
    never makes another channel significant, so those channels' exact p-values cannot
    change the significant fraction; skipping them saves most of the costly t
    distribution evaluations.
    """
    pvalues = np.ones_like(welch.statistic)
    # NaN statistics are kept as candidates so that they stay NaN and out of the test count.
    candidates = ~(np.abs(welch.statistic) < ndtri(1.0 - alpha / 2.0))
    pvalues[candidates] = two_sided_pvalue(WelchStatistic(welch.statistic[candidates], welch.df[candidates]))
    return pvalues


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
        """Mean and unbiased variance, shape (n_resamples, n_channels), of each row's trials."""
        count = indices.shape[1]
        selection = np.zeros((indices.shape[0], self.values.shape[0]))
        np.put_along_axis(selection, indices, 1.0, axis=1)
        sums = selection @ self.values
        centred_mean = sums / count
        variance = np.maximum((selection @ self.squares - sums * centred_mean) / (count - 1), 0.0)
        return centred_mean + self.centre, variance
