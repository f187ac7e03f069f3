"""Trial-level statistics: window means, Welch's t-test, p-value corrections, bootstrap."""

from worker.engine.stats.bootstrap import BootstrapResult, TrialDraw, bootstrap_significant_fraction, draw_trials
from worker.engine.stats.corrections import CorrectionMethod, adjust_pvalues
from worker.engine.stats.ttest import TTestResult, WelchStatistic, two_sided_pvalue, welch_statistic, welch_t
from worker.engine.stats.window_means import window_means

__all__ = [
    "BootstrapResult",
    "CorrectionMethod",
    "TTestResult",
    "TrialDraw",
    "WelchStatistic",
    "adjust_pvalues",
    "bootstrap_significant_fraction",
    "draw_trials",
    "two_sided_pvalue",
    "welch_statistic",
    "welch_t",
    "window_means",
]
