"""Mann–Whitney U test (normal approximation), vectorised over channels and resamples."""

from dataclasses import dataclass

import numpy as np
from scipy.special import ndtr
from scipy.stats import rankdata

from epoch_assay.engine.stats.ttest import TRIAL_AXIS


@dataclass(frozen=True)
class RankTestResult:
    """Mann–Whitney U test per channel (and per resample, when there is a leading axis).

    statistic : array, shape (..., n_channels), U of the first condition (the number of
        (a, b) pairs with a > b, ties counting one half)
    pvalue : array, shape (..., n_channels), two-sided, from the normal approximation
        with tie and continuity corrections; NaN when every value of a channel is equal
    """

    statistic: np.ndarray
    pvalue: np.ndarray


def mann_whitney_u(a: np.ndarray, b: np.ndarray) -> RankTestResult:
    """Mann–Whitney U test of ``a`` against ``b`` for every channel at once.

    Parameters
    ----------
    a : array, shape (..., n_trials_a, n_channels), e.g. window means in V
    b : array, shape (..., n_trials_b, n_channels), leading axes equal to those of ``a``

    The p-value uses the large-sample normal approximation of U with the variance
    corrected for ties and a continuity correction of 1/2, which is accurate from about
    ten trials per condition on; no exact small-sample distribution is computed.
    """
    n_a, n_b = a.shape[TRIAL_AXIS], b.shape[TRIAL_AXIS]
    if n_a < 1 or n_b < 1:
        raise ValueError(f"the Mann–Whitney test needs trials in both conditions, got {n_a} and {n_b}")
    pooled = np.concatenate((a, b), axis=TRIAL_AXIS)
    ranks = rankdata(pooled, axis=TRIAL_AXIS)
    u = ranks[..., :n_a, :].sum(axis=TRIAL_AXIS) - n_a * (n_a + 1) / 2.0
    # Each trial tied with t - 1 others adds t² - 1 to the sum of (t³ - t) over tie groups.
    tie_sizes = rankdata(pooled, method="max", axis=TRIAL_AXIS) - rankdata(pooled, method="min", axis=TRIAL_AXIS) + 1
    tie_term = (tie_sizes**2 - 1.0).sum(axis=TRIAL_AXIS)
    n = n_a + n_b
    variance = n_a * n_b / 12.0 * ((n + 1) - tie_term / (n * (n - 1)))
    centred = np.abs(u - n_a * n_b / 2.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(variance > 0, (centred - 0.5) / np.sqrt(variance), np.nan)
    pvalue = np.minimum(2.0 * ndtr(-z), 1.0)
    return RankTestResult(statistic=u, pvalue=pvalue)
