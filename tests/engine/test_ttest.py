"""Welch's t-test against SciPy and the Welch–Satterthwaite formula."""

import numpy as np
import pytest
from scipy import stats

from tests.engine.stats_fixtures import MICROVOLT, window_mean_pair
from worker.engine.stats import welch_t


def test_statistic_and_pvalue_match_scipy_for_many_channels():
    a, b = window_mean_pair(23, 31, 40)
    result = welch_t(a, b)
    # Reference: scipy.stats.ttest_ind(equal_var=False) (Virtanen et al., 2020, SciPy 1.0)
    expected = stats.ttest_ind(a, b, equal_var=False, axis=0)
    np.testing.assert_allclose(result.statistic, expected.statistic, rtol=1e-10)
    np.testing.assert_allclose(result.pvalue, expected.pvalue, rtol=1e-8, atol=1e-300)


def test_leading_resample_axis_matches_scipy_per_resample():
    rng = np.random.default_rng(3)
    a = rng.normal(0.5 * MICROVOLT, 2 * MICROVOLT, size=(6, 15, 12))
    b = rng.normal(0.0, 1 * MICROVOLT, size=(6, 19, 12))
    result = welch_t(a, b)
    # Reference: scipy.stats.ttest_ind(equal_var=False, axis=-2) (Virtanen et al., 2020, SciPy 1.0)
    expected = stats.ttest_ind(a, b, equal_var=False, axis=-2)
    assert result.statistic.shape == (6, 12)
    np.testing.assert_allclose(result.statistic, expected.statistic, rtol=1e-10)
    np.testing.assert_allclose(result.pvalue, expected.pvalue, rtol=1e-8, atol=1e-300)


def test_df_matches_welch_satterthwaite_formula():
    a, b = window_mean_pair(12, 40, 9, seed=5)
    n_a, n_b = a.shape[0], b.shape[0]
    s2_a, s2_b = a.var(axis=0, ddof=1), b.var(axis=0, ddof=1)
    # Welch (1947), Biometrika 34:28–35: df = (s1²/n1 + s2²/n2)² / ((s1²/n1)²/(n1-1) + (s2²/n2)²/(n2-1))
    expected = (s2_a / n_a + s2_b / n_b) ** 2 / ((s2_a / n_a) ** 2 / (n_a - 1) + (s2_b / n_b) ** 2 / (n_b - 1))
    np.testing.assert_allclose(welch_t(a, b).df, expected, rtol=1e-12)


def test_df_matches_scipy():
    a, b = window_mean_pair(12, 40, 9, seed=6)
    # Reference: scipy.stats.ttest_ind(equal_var=False).df (Virtanen et al., 2020, SciPy 1.0)
    expected = stats.ttest_ind(a, b, equal_var=False, axis=0).df
    np.testing.assert_allclose(welch_t(a, b).df, expected, rtol=1e-12)


@pytest.mark.parametrize("value_b", [0.3 * MICROVOLT, 0.7 * MICROVOLT])
def test_channel_constant_in_both_conditions_gives_nan(value_b):
    a, b = window_mean_pair(10, 10, 3, seed=7)
    a[:, 1] = 0.3 * MICROVOLT
    b[:, 1] = value_b
    result = welch_t(a, b)
    assert np.isnan(result.statistic[1]) and np.isnan(result.pvalue[1])
    assert np.isfinite(result.pvalue[[0, 2]]).all()


@pytest.mark.filterwarnings("ignore:Precision loss occurred:RuntimeWarning")
def test_channel_constant_in_one_condition_only_is_tested():
    a, b = window_mean_pair(10, 10, 2, seed=8)
    a[:, 0] = 0.3 * MICROVOLT
    result = welch_t(a, b)
    # Reference: scipy.stats.ttest_ind(equal_var=False) (Virtanen et al., 2020, SciPy 1.0)
    expected = stats.ttest_ind(a, b, equal_var=False, axis=0)
    np.testing.assert_allclose(result.pvalue, expected.pvalue, rtol=1e-8)


def test_fewer_than_two_trials_is_refused():
    a, b = window_mean_pair(1, 10, 2)
    with pytest.raises(ValueError, match="at least 2 trials"):
        welch_t(a, b)
