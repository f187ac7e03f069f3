"""The trial-level test of every channel, with its correction across channels, by name."""

from dataclasses import dataclass
from typing import Literal

import numpy as np

from epoch_assay.engine.stats.corrections import CorrectionMethod, adjust_pvalues
from epoch_assay.engine.stats.permutation import label_permutation_test
from epoch_assay.engine.stats.rank_test import mann_whitney_u
from epoch_assay.engine.stats.ttest import student_t, welch_t

TrialTest = Literal["welch", "student", "mann_whitney", "permutation"]


@dataclass(frozen=True)
class ComparisonSettings:
    """Which test and correction, at which level; permutation count and seed for ``permutation``."""

    test: TrialTest
    correction: CorrectionMethod
    alpha: float
    n_permutations: int
    seed: int


@dataclass(frozen=True)
class ChannelTests:
    """Per-channel test results, one family of channels per row of the leading axes.

    statistic : array, shape (..., n_channels), t of first minus second condition (Welch,
        Student, or Welch's t under permutation), or U of the first condition (Mann–Whitney)
    pvalue : array, shape (..., n_channels), two-sided, before correction
    p_adjusted : array, shape (..., n_channels), after the correction across channels
    significant : array of bool, shape (..., n_channels), p_adjusted below alpha
    """

    statistic: np.ndarray
    pvalue: np.ndarray
    p_adjusted: np.ndarray
    significant: np.ndarray


def compare_channels(a: np.ndarray, b: np.ndarray, settings: ComparisonSettings) -> ChannelTests:
    """Test ``a`` against ``b`` on every channel and correct across the channels of each family.

    Parameters
    ----------
    a : array, shape (..., n_trials_a, n_channels), e.g. window means in V
    b : array, shape (..., n_trials_b, n_channels), leading axes equal to those of ``a``

    ``max_stat`` is only defined for the permutation test; the scoring spec refuses the
    combination before this is reached.
    """
    if settings.test == "permutation":
        result = label_permutation_test(a, b, n_permutations=settings.n_permutations, seed=settings.seed)
        statistic, pvalue = result.statistic, result.pvalue
        p_adjusted = result.pvalue_max if settings.correction == "max_stat" else None
    elif settings.correction == "max_stat":
        raise ValueError("correction 'max_stat' needs test 'permutation'")
    else:
        test = {"welch": welch_t, "student": student_t, "mann_whitney": mann_whitney_u}[settings.test](a, b)
        statistic, pvalue, p_adjusted = test.statistic, test.pvalue, None
    if p_adjusted is None:
        p_adjusted = adjust_pvalues(pvalue, settings.correction)
    return ChannelTests(
        statistic=statistic, pvalue=pvalue, p_adjusted=p_adjusted, significant=p_adjusted < settings.alpha
    )
