"""Trial-level statistics: window means, tests, corrections, permutations, bootstrap, effect sizes, quality."""

from worker.engine.stats.bootstrap import (
    BootstrapMode,
    BootstrapResult,
    IntervalMethod,
    TrialDraw,
    bootstrap_significant_fraction,
    draw_trials,
    draw_with_replacement,
)
from worker.engine.stats.channel_tests import ChannelTests, ComparisonSettings, TrialTest, compare_channels
from worker.engine.stats.corrections import CorrectionMethod, PValueCorrection, adjust_pvalues
from worker.engine.stats.effect_size import HedgesG, hedges_g
from worker.engine.stats.permutation import PermutationResult, label_permutation_test, sign_flip_test
from worker.engine.stats.quality import standardized_measurement_error
from worker.engine.stats.rank_test import RankTestResult, mann_whitney_u
from worker.engine.stats.ttest import TStatistic, TTestResult, one_sample_t, student_t, two_sided_pvalue, welch_t
from worker.engine.stats.window_means import window_means

__all__ = [
    "BootstrapMode",
    "BootstrapResult",
    "ChannelTests",
    "ComparisonSettings",
    "CorrectionMethod",
    "HedgesG",
    "IntervalMethod",
    "PValueCorrection",
    "PermutationResult",
    "RankTestResult",
    "TStatistic",
    "TTestResult",
    "TrialDraw",
    "TrialTest",
    "adjust_pvalues",
    "bootstrap_significant_fraction",
    "compare_channels",
    "draw_trials",
    "draw_with_replacement",
    "hedges_g",
    "label_permutation_test",
    "mann_whitney_u",
    "one_sample_t",
    "sign_flip_test",
    "standardized_measurement_error",
    "student_t",
    "two_sided_pvalue",
    "welch_t",
    "window_means",
]
