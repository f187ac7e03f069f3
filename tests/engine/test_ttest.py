"""Per-channel tests: Welch, Student, Mann–Whitney, one-sample t and permutation tests against SciPy and MNE."""

import mne
import numpy as np
import pytest
from scipy import stats

from epoch_assay.engine.stats import (
    label_permutation_test,
    mann_whitney_u,
    one_sample_t,
    sign_flip_test,
    student_t,
    welch_t,
)
from tests.engine.stats_fixtures import MICROVOLT, window_mean_pair


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


def test_student_statistic_and_pvalue_match_scipy():
    a, b = window_mean_pair(17, 29, 20, seed=9)
    result = student_t(a, b)
    # Reference: scipy.stats.ttest_ind(equal_var=True) (Virtanen et al., 2020, SciPy 1.0)
    expected = stats.ttest_ind(a, b, equal_var=True, axis=0)
    np.testing.assert_allclose(result.statistic, expected.statistic, rtol=1e-10)
    np.testing.assert_allclose(result.pvalue, expected.pvalue, rtol=1e-8, atol=1e-300)
    np.testing.assert_array_equal(result.df, 17 + 29 - 2)


def test_mann_whitney_u_and_pvalue_match_scipy_asymptotic():
    a, b = window_mean_pair(21, 26, 16, seed=10)
    result = mann_whitney_u(a, b)
    # Reference: scipy.stats.mannwhitneyu(method="asymptotic", use_continuity=True) (Virtanen et al., 2020)
    expected = stats.mannwhitneyu(a, b, method="asymptotic", use_continuity=True, axis=0)
    np.testing.assert_allclose(result.statistic, expected.statistic, rtol=1e-12)
    np.testing.assert_allclose(result.pvalue, expected.pvalue, rtol=1e-10)


def test_mann_whitney_tie_correction_matches_scipy():
    rng = np.random.default_rng(11)
    # Values on a coarse grid, so that many trials tie within and across conditions.
    a = rng.integers(0, 5, size=(18, 6)).astype(float)
    b = rng.integers(1, 6, size=(15, 6)).astype(float)
    result = mann_whitney_u(a, b)
    # Reference: scipy.stats.mannwhitneyu(method="asymptotic") with its tie-corrected variance (Virtanen et al., 2020)
    expected = stats.mannwhitneyu(a, b, method="asymptotic", axis=0)
    np.testing.assert_allclose(result.statistic, expected.statistic, rtol=1e-12)
    np.testing.assert_allclose(result.pvalue, expected.pvalue, rtol=1e-10)


def test_mann_whitney_leading_resample_axis_matches_scipy_per_resample():
    rng = np.random.default_rng(12)
    a, b = rng.normal(size=(4, 12, 5)), rng.normal(0.5, 1.0, size=(4, 14, 5))
    result = mann_whitney_u(a, b)
    # Reference: scipy.stats.mannwhitneyu(method="asymptotic", axis=-2) (Virtanen et al., 2020)
    expected = stats.mannwhitneyu(a, b, method="asymptotic", axis=-2)
    np.testing.assert_allclose(result.pvalue, expected.pvalue, rtol=1e-10)


def test_one_sample_t_with_missing_values_matches_scipy_omit():
    rng = np.random.default_rng(13)
    x = rng.normal(0.4, 1.0, size=(14, 9))
    x[[0, 3], 2] = np.nan
    x[5, 7] = np.nan
    result = one_sample_t(x)
    # Reference: scipy.stats.ttest_1samp(nan_policy="omit") (Virtanen et al., 2020, SciPy 1.0)
    expected = stats.ttest_1samp(x, 0.0, axis=0, nan_policy="omit")
    np.testing.assert_allclose(result.statistic, expected.statistic, rtol=1e-10)
    np.testing.assert_allclose(result.pvalue, expected.pvalue, rtol=1e-8)


def test_sign_flip_max_stat_matches_mne_permutation_t_test_exact():
    rng = np.random.default_rng(14)
    x = rng.normal(0.6, 1.0, size=(9, 12))
    x[:, 6:] -= 0.6
    # 2**9 = 512 sign patterns, fewer than 1000: both enumerate every pattern, so the
    # p-values must agree exactly.
    result = sign_flip_test(x, n_permutations=1000, seed=0)
    # Reference: mne.stats.permutation_t_test (Gramfort et al., 2013, MNE-Python), max-|t| correction
    t_obs, p_mne, _ = mne.stats.permutation_t_test(x, n_permutations=1000, tail=0, seed=0, verbose=False)
    assert result.exact
    np.testing.assert_allclose(result.statistic, t_obs, rtol=1e-10)
    np.testing.assert_allclose(result.pvalue_max, p_mne, rtol=1e-12)


def test_sign_flip_random_patterns_agree_with_mne_within_monte_carlo_error():
    rng = np.random.default_rng(15)
    x = rng.normal(0.5, 1.0, size=(16, 10))
    result = sign_flip_test(x, n_permutations=4000, seed=3)
    # Reference: mne.stats.permutation_t_test (Gramfort et al., 2013, MNE-Python) with its own random
    # patterns; two Monte Carlo estimates from 4000 patterns each differ by at most
    # 4 · √2 · √(0.25 / 4000) ≈ 0.045 (binomial error, common practice for the factor 4).
    _, p_mne, _ = mne.stats.permutation_t_test(x, n_permutations=4000, tail=0, seed=3, verbose=False)
    assert not result.exact
    np.testing.assert_allclose(result.pvalue_max, p_mne, atol=0.045)


def test_label_permutation_pvalue_matches_scipy_permutation_test_on_one_channel():
    rng = np.random.default_rng(16)
    a, b = rng.normal(0.9, 1.0, size=(8, 1)), rng.normal(0.0, 1.5, size=(8, 1))
    result = label_permutation_test(a, b, n_permutations=20_000, seed=4)

    def welch(x, y, axis):
        return stats.ttest_ind(x, y, equal_var=False, axis=axis).statistic

    # Reference: scipy.stats.permutation_test(permutation_type="independent") (Virtanen et al., 2020);
    # C(16, 8) = 12,870 partitions ≤ n_resamples, so SciPy enumerates them exactly. Equal group
    # sizes make the null of t symmetric, so SciPy's doubled one-sided p equals P(|t*| ≥ |t|).
    expected = stats.permutation_test(
        (a[:, 0], b[:, 0]),
        welch,
        permutation_type="independent",
        n_resamples=20_000,
        vectorized=True,
        alternative="two-sided",
    )
    np.testing.assert_allclose(result.statistic[0], expected.statistic, rtol=1e-10)
    # Monte Carlo error of 20,000 permutations: sd ≤ √(0.25 / 20000) ≈ 0.0035; 4 sd (common practice).
    np.testing.assert_allclose(result.pvalue[0], expected.pvalue, atol=0.014)


def test_label_permutation_max_stat_is_never_below_the_channel_pvalue():
    a, b = window_mean_pair(15, 15, 12, seed=17)
    result = label_permutation_test(a, b, n_permutations=500, seed=5)
    assert np.all(result.pvalue_max >= result.pvalue)
    assert np.all(result.pvalue >= 1 / 501)


@pytest.mark.parametrize("chunk_bytes", [2_000, 50_000, 2**24])
def test_label_permutation_does_not_depend_on_chunk_size(chunk_bytes):
    a, b = window_mean_pair(12, 14, 6, seed=18)
    default = label_permutation_test(a, b, n_permutations=300, seed=6)
    chunked = label_permutation_test(a, b, n_permutations=300, seed=6, chunk_bytes=chunk_bytes)
    np.testing.assert_array_equal(chunked.pvalue, default.pvalue)
    np.testing.assert_array_equal(chunked.pvalue_max, default.pvalue_max)


def test_label_permutation_families_are_corrected_separately():
    a, b = window_mean_pair(12, 14, 6, seed=19)
    stacked = label_permutation_test(np.stack([a, a * 2]), np.stack([b, b * 2]), n_permutations=200, seed=8)
    alone = label_permutation_test(a, b, n_permutations=200, seed=8)
    # Scaling a family by 2 leaves every t unchanged, so both rows equal the single-family result.
    np.testing.assert_array_equal(stacked.pvalue_max[0], alone.pvalue_max)
    np.testing.assert_array_equal(stacked.pvalue_max[1], alone.pvalue_max)
