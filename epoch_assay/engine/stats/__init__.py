"""Trial-level statistics: window means, tests, corrections, permutations, bootstrap, effect sizes, quality."""

from epoch_assay.engine.stats.bootstrap import (
    BootstrapMode,
    BootstrapResult,
    MeanTBootstrap,
    TrialDraw,
    bootstrap_mean_welch_t,
    bootstrap_significant_fraction,
    draw_trials,
    draw_with_replacement,
    mean_welch_t,
)
from epoch_assay.engine.stats.channel_tests import (
    TRIAL_TESTS,
    ChannelTests,
    ComparisonSettings,
    TrialTest,
    compare_channels,
)
from epoch_assay.engine.stats.corrections import (
    CORRECTIONS,
    P_VALUE_ADJUSTMENTS,
    Correction,
    CorrectionMethod,
    PValueCorrection,
    adjust_pvalues,
)
from epoch_assay.engine.stats.effect_size import HedgesG, hedges_g
from epoch_assay.engine.stats.permutation import PermutationResult, label_permutation_test, sign_flip_test
from epoch_assay.engine.stats.quality import standardized_measurement_error
from epoch_assay.engine.stats.rank_test import RankTestResult, mann_whitney_u
from epoch_assay.engine.stats.ttest import TStatistic, TTestResult, one_sample_t, student_t, two_sided_pvalue, welch_t
from epoch_assay.engine.stats.window_means import window_means

__all__ = [
    "CORRECTIONS",
    "P_VALUE_ADJUSTMENTS",
    "TRIAL_TESTS",
    "BootstrapMode",
    "BootstrapResult",
    "ChannelTests",
    "ComparisonSettings",
    "Correction",
    "CorrectionMethod",
    "HedgesG",
    "MeanTBootstrap",
    "PValueCorrection",
    "PermutationResult",
    "RankTestResult",
    "TStatistic",
    "TTestResult",
    "TrialDraw",
    "TrialTest",
    "adjust_pvalues",
    "bootstrap_mean_welch_t",
    "bootstrap_significant_fraction",
    "compare_channels",
    "draw_trials",
    "draw_with_replacement",
    "hedges_g",
    "label_permutation_test",
    "mann_whitney_u",
    "mean_welch_t",
    "one_sample_t",
    "sign_flip_test",
    "standardized_measurement_error",
    "student_t",
    "two_sided_pvalue",
    "welch_t",
    "window_means",
]
