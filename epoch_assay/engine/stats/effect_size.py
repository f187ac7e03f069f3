"""Standardised effect size of a condition difference: Hedges' g with its confidence interval."""

from dataclasses import dataclass

import numpy as np
from scipy.special import ndtri

from epoch_assay.engine.stats.ttest import TRIAL_AXIS, negligible_variance

CI_LEVEL = 0.95


@dataclass(frozen=True)
class HedgesG:
    """Hedges' g per channel and its 95 % confidence interval.

    g : array, shape (..., n_channels), bias-corrected standardised mean difference of
        first minus second condition (unitless); NaN where the pooled SD is zero
    ci_low, ci_high : array, shape (..., n_channels), g ∓ z(0.975) times the large-sample
        standard error of Hedges & Olkin (1985)
    """

    g: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray


def hedges_g(a: np.ndarray, b: np.ndarray) -> HedgesG:
    """Hedges' g of ``a`` against ``b`` for every channel.

    Parameters
    ----------
    a : array, shape (..., n_trials_a, n_channels), e.g. window means in V
    b : array, shape (..., n_trials_b, n_channels), same unit

    g = J · (mean_a − mean_b) / s_pooled with the pooled SD (ddof 1 per condition) and the
    small-sample correction J = 1 − 3 / (4 (n_a + n_b) − 9). The interval is g ± z · √v with
    the large-sample variance v = (n_a + n_b) / (n_a n_b) + g² / (2 (n_a + n_b))
    (Hedges & Olkin, 1985, ch. 5).
    """
    n_a, n_b = a.shape[TRIAL_AXIS], b.shape[TRIAL_AXIS]
    if n_a < 2 or n_b < 2:
        raise ValueError(f"Hedges' g needs at least 2 trials per condition, got {n_a} and {n_b}")
    pooled_var = ((n_a - 1) * a.var(axis=TRIAL_AXIS, ddof=1) + (n_b - 1) * b.var(axis=TRIAL_AXIS, ddof=1)) / (
        n_a + n_b - 2
    )
    mean_a, mean_b = a.mean(axis=TRIAL_AXIS), b.mean(axis=TRIAL_AXIS)
    undefined = negligible_variance(pooled_var, mean_a, mean_b)
    correction = 1.0 - 3.0 / (4.0 * (n_a + n_b) - 9.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        g = np.where(undefined, np.nan, correction * (mean_a - mean_b) / np.sqrt(pooled_var))
    half_width = ndtri(0.5 * (1 + CI_LEVEL)) * np.sqrt((n_a + n_b) / (n_a * n_b) + g**2 / (2.0 * (n_a + n_b)))
    return HedgesG(g=g, ci_low=g - half_width, ci_high=g + half_width)
