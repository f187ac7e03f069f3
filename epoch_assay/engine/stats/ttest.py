"""Student's and Welch's t-tests, two-sample and one-sample, vectorised over channels and resamples."""

from dataclasses import dataclass

import numpy as np
from scipy.special import stdtr

# A standard error this small relative to the means is rounding noise of constant data,
# not variability: with no variance the t statistic is undefined.
_ZERO_VARIANCE_ULPS = 64.0

TRIAL_AXIS = -2


@dataclass(frozen=True)
class TStatistic:
    """A t statistic per channel (and per resample, when there is a leading axis).

    statistic : array, shape (..., n_channels), t of first minus second condition (or of
        the mean against zero); NaN where the variance is zero
    df : array, shape (..., n_channels), degrees of freedom
    """

    statistic: np.ndarray
    df: np.ndarray


@dataclass(frozen=True)
class TTestResult:
    """A t-test per channel (and per resample, when there is a leading axis).

    statistic : array, shape (..., n_channels), t of first minus second condition
    pvalue : array, shape (..., n_channels), two-sided
    df : array, shape (..., n_channels), degrees of freedom
    """

    statistic: np.ndarray
    pvalue: np.ndarray
    df: np.ndarray

    @classmethod
    def of(cls, t: TStatistic) -> "TTestResult":
        return cls(statistic=t.statistic, pvalue=two_sided_pvalue(t), df=t.df)


def welch_t(a: np.ndarray, b: np.ndarray) -> TTestResult:
    """Welch's unequal-variance t-test of ``a`` against ``b`` for every channel at once.

    Parameters
    ----------
    a : array, shape (..., n_trials_a, n_channels), e.g. window means in V
    b : array, shape (..., n_trials_b, n_channels), same unit; leading axes broadcast
        with those of ``a`` (e.g. one leading axis of resamples)

    Trials lie on axis -2 (``TRIAL_AXIS``) so that leading axes can be resamples.
    A channel that has zero variance in both conditions gets NaN statistic and p-value;
    NaN is never below a significance level, so such a channel counts as not significant.
    """
    return TTestResult.of(welch_statistic(*_moments(a, b)))


def student_t(a: np.ndarray, b: np.ndarray) -> TTestResult:
    """Student's pooled-variance t-test of ``a`` against ``b``; shapes and NaN rule as :func:`welch_t`."""
    return TTestResult.of(student_statistic(*_moments(a, b)))


def _moments(a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray, int, np.ndarray, np.ndarray, int]:
    n_a, n_b = a.shape[TRIAL_AXIS], b.shape[TRIAL_AXIS]
    if n_a < 2 or n_b < 2:
        raise ValueError(f"a two-sample t-test needs at least 2 trials per condition, got {n_a} and {n_b}")
    return (
        a.mean(axis=TRIAL_AXIS),
        a.var(axis=TRIAL_AXIS, ddof=1),
        n_a,
        b.mean(axis=TRIAL_AXIS),
        b.var(axis=TRIAL_AXIS, ddof=1),
        n_b,
    )


def negligible_variance(se2: np.ndarray, *means: np.ndarray) -> np.ndarray:
    """Where a variance (or squared standard error) is rounding noise relative to the means' magnitude."""
    scale = np.abs(means[0])
    for mean in means[1:]:
        scale = np.maximum(scale, np.abs(mean))
    return se2 <= (_ZERO_VARIANCE_ULPS * np.finfo(float).eps * scale) ** 2


def welch_statistic(
    mean_a: np.ndarray,
    var_a: np.ndarray,
    n_a: int | np.ndarray,
    mean_b: np.ndarray,
    var_b: np.ndarray,
    n_b: int | np.ndarray,
) -> TStatistic:
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
    undefined = negligible_variance(se2, mean_a, mean_b)
    with np.errstate(divide="ignore", invalid="ignore"):
        statistic = np.where(undefined, np.nan, (mean_a - mean_b) / np.sqrt(se2))
        # Welch–Satterthwaite approximation of the degrees of freedom.
        df = np.where(undefined, np.nan, se2**2 / (se2_a**2 / (n_a - 1) + se2_b**2 / (n_b - 1)))
    return TStatistic(statistic=statistic, df=df)


def student_statistic(
    mean_a: np.ndarray,
    var_a: np.ndarray,
    n_a: int | np.ndarray,
    mean_b: np.ndarray,
    var_b: np.ndarray,
    n_b: int | np.ndarray,
) -> TStatistic:
    """Student's t with the pooled variance, and n_a + n_b - 2 degrees of freedom; arguments as :func:`welch_statistic`."""
    df = np.broadcast_to(np.asarray(n_a + n_b - 2, dtype=float), np.shape(mean_a))
    pooled = ((n_a - 1) * var_a + (n_b - 1) * var_b) / df
    se2 = pooled * (1.0 / n_a + 1.0 / n_b)
    undefined = negligible_variance(se2, mean_a, mean_b)
    with np.errstate(divide="ignore", invalid="ignore"):
        statistic = np.where(undefined, np.nan, (mean_a - mean_b) / np.sqrt(se2))
    return TStatistic(statistic=statistic, df=np.where(undefined, np.nan, df))


def one_sample_t(x: np.ndarray) -> TTestResult:
    """One-sample t-test of the mean against zero per channel, missing values left out.

    Parameters
    ----------
    x : array, shape (n_subjects, n_channels), e.g. condition differences in V; NaN
        where a subject has no value for a channel

    A channel with fewer than 2 values, or zero variance, gets NaN statistic and p-value.
    """
    present = ~np.isnan(x)
    n = present.sum(axis=0)
    values = np.where(present, x, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        mean = values.sum(axis=0) / n
        variance = np.where(present, (values - mean) ** 2, 0.0).sum(axis=0) / (n - 1)
        se2 = np.where(n >= 2, variance / n, 0.0)
        undefined = negligible_variance(se2, mean)
        statistic = np.where(undefined, np.nan, mean / np.sqrt(se2))
    return TTestResult.of(TStatistic(statistic=statistic, df=np.where(undefined, np.nan, n - 1.0)))


def two_sided_pvalue(t: TStatistic) -> np.ndarray:
    """Two-sided p-value of each t under Student's t distribution, shape of ``t.statistic``."""
    return 2.0 * stdtr(t.df, -np.abs(t.statistic))
