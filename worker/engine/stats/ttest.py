"""Welch's unequal-variance t-test, vectorised over channels and resamples."""

from dataclasses import dataclass

import numpy as np
from scipy.special import stdtr

# A standard error this small relative to the means is rounding noise of constant data,
# not variability: with no variance in either condition the t statistic is undefined.
_ZERO_VARIANCE_ULPS = 64.0

TRIAL_AXIS = -2


@dataclass(frozen=True)
class WelchStatistic:
    """Welch t per channel (and per resample, when there is a leading axis).

    statistic : array, shape (..., n_channels), t of first minus second condition; NaN
        where both conditions have zero variance
    df : array, shape (..., n_channels), Welch–Satterthwaite degrees of freedom
    """

    statistic: np.ndarray
    df: np.ndarray


@dataclass(frozen=True)
class TTestResult:
    """Welch t-test per channel (and per resample, when there is a leading axis).

    statistic : array, shape (..., n_channels), t of first minus second condition
    pvalue : array, shape (..., n_channels), two-sided
    df : array, shape (..., n_channels), Welch–Satterthwaite degrees of freedom
    """

    statistic: np.ndarray
    pvalue: np.ndarray
    df: np.ndarray


def welch_t(a: np.ndarray, b: np.ndarray) -> TTestResult:
    """Welch's t-test of ``a`` against ``b`` for every channel at once.

    Parameters
    ----------
    a : array, shape (..., n_trials_a, n_channels), e.g. window means in V
    b : array, shape (..., n_trials_b, n_channels), same unit; leading axes broadcast
        with those of ``a`` (e.g. one leading axis of resamples)

    Trials lie on axis -2 (``TRIAL_AXIS``) so that leading axes can be resamples.
    A channel that has zero variance in both conditions gets NaN statistic and p-value;
    NaN is never below a significance level, so such a channel counts as not significant.
    """
    n_a, n_b = a.shape[TRIAL_AXIS], b.shape[TRIAL_AXIS]
    if n_a < 2 or n_b < 2:
        raise ValueError(f"Welch's t-test needs at least 2 trials per condition, got {n_a} and {n_b}")
    welch = welch_statistic(
        a.mean(axis=TRIAL_AXIS),
        a.var(axis=TRIAL_AXIS, ddof=1),
        n_a,
        b.mean(axis=TRIAL_AXIS),
        b.var(axis=TRIAL_AXIS, ddof=1),
        n_b,
    )
    return TTestResult(statistic=welch.statistic, pvalue=two_sided_pvalue(welch), df=welch.df)


def welch_statistic(
    mean_a: np.ndarray,
    var_a: np.ndarray,
    n_a: int,
    mean_b: np.ndarray,
    var_b: np.ndarray,
    n_b: int,
) -> WelchStatistic:
    """Welch's t and degrees of freedom from per-condition means and unbiased variances.

    Parameters
    ----------
    mean_a, mean_b : array, shape (..., n_channels), in the data unit (e.g. V)
    var_a, var_b : array, shape (..., n_channels), sample variances (ddof=1), unit squared
    n_a, n_b : number of trials behind each condition's moments, at least 2
    """
    se2_a = var_a / n_a
    se2_b = var_b / n_b
    se2 = se2_a + se2_b
    scale = np.maximum(np.abs(mean_a), np.abs(mean_b))
    undefined = se2 <= (_ZERO_VARIANCE_ULPS * np.finfo(float).eps * scale) ** 2
    with np.errstate(divide="ignore", invalid="ignore"):
        statistic = np.where(undefined, np.nan, (mean_a - mean_b) / np.sqrt(se2))
        # Welch–Satterthwaite approximation of the degrees of freedom.
        df = np.where(undefined, np.nan, se2**2 / (se2_a**2 / (n_a - 1) + se2_b**2 / (n_b - 1)))
    return WelchStatistic(statistic=statistic, df=df)


def two_sided_pvalue(welch: WelchStatistic) -> np.ndarray:
    """Two-sided p-value of each t under Student's t distribution, shape of ``welch.statistic``."""
    return 2.0 * stdtr(welch.df, -np.abs(welch.statistic))
