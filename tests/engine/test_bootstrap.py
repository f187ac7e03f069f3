"""Resampling of trials: modes, draws, reproducibility, resamples vs SciPy, the smooth score's interval."""

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests

from epoch_assay.engine.stats import (
    bootstrap_mean_welch_t,
    bootstrap_significant_fraction,
    draw_trials,
    draw_with_replacement,
    mean_welch_t,
)
from epoch_assay.engine.stats.bootstrap import DEFAULT_CHUNK_BYTES, resamples_per_chunk
from tests.engine.stats_fixtures import window_mean_pair

SETTINGS = dict(trials_per_condition=12, resamples=200, alpha=0.05, correction="fdr_bh")


@pytest.fixture(scope="module")
def means():
    return window_mean_pair(40, 35, 16, effect_v=3e-6)


def test_same_seed_gives_identical_fractions(means):
    first = bootstrap_significant_fraction(*means, seed=11, **SETTINGS)
    second = bootstrap_significant_fraction(*means, seed=11, **SETTINGS)
    np.testing.assert_array_equal(first.fractions, second.fractions)
    assert (first.mean, first.percentile_low, first.percentile_high) == (
        second.mean,
        second.percentile_low,
        second.percentile_high,
    )


def test_different_seed_gives_different_fractions(means):
    first = bootstrap_significant_fraction(*means, seed=11, **SETTINGS)
    second = bootstrap_significant_fraction(*means, seed=12, **SETTINGS)
    assert not np.array_equal(first.fractions, second.fractions)


@pytest.mark.parametrize("chunk_size", [1, 7, 64, 200])
def test_result_does_not_depend_on_chunk_size(means, chunk_size):
    default = bootstrap_significant_fraction(*means, seed=3, **SETTINGS)
    chunked = bootstrap_significant_fraction(*means, seed=3, chunk_size=chunk_size, **SETTINGS)
    np.testing.assert_array_equal(chunked.fractions, default.fractions)


def test_drawing_in_two_batches_gives_the_same_trials_as_in_one():
    whole = draw_trials(np.random.default_rng(5), 30, 25, 8, 10)
    rng = np.random.default_rng(5)
    first, rest = draw_trials(rng, 30, 25, 8, 4), draw_trials(rng, 30, 25, 8, 6)
    np.testing.assert_array_equal(whole.indices_a, np.vstack([first.indices_a, rest.indices_a]))
    np.testing.assert_array_equal(whole.indices_b, np.vstack([first.indices_b, rest.indices_b]))


def test_each_resample_draws_distinct_trials_of_each_condition():
    draw = draw_trials(np.random.default_rng(0), 30, 25, 20, 500)
    for indices, n_trials in ((draw.indices_a, 30), (draw.indices_b, 25)):
        assert indices.shape == (500, 20)
        assert indices.min() >= 0 and indices.max() < n_trials
        assert all(np.unique(row).size == 20 for row in indices)


def test_every_subset_of_trials_is_equally_likely():
    # 5 trials, 2 drawn: 10 subsets, each expected 2,000 times in 20,000 resamples
    # (binomial sd about 42); six sd either side is a bound a correct draw never misses
    # in practice (common practice), while a biased shuffle step shifts counts by hundreds.
    draw = draw_trials(np.random.default_rng(9), 5, 5, 2, 20_000)
    for indices in (draw.indices_a, draw.indices_b):
        low, high = np.sort(indices, axis=1).T
        counts = np.bincount(low * 5 + high, minlength=25)[[i * 5 + j for i in range(5) for j in range(i + 1, 5)]]
        assert np.abs(counts - 2000).max() < 6 * 42


@pytest.mark.parametrize("correction", ["none", "bonferroni", "fdr_bh"])
def test_first_resamples_equal_scipy_and_statsmodels_on_the_drawn_trials(means, correction):
    a, b = means
    settings = {**SETTINGS, "correction": correction}
    result = bootstrap_significant_fraction(a, b, seed=21, **settings)
    draw = draw_trials(np.random.default_rng(21), a.shape[0], b.shape[0], SETTINGS["trials_per_condition"], 3)
    for resample in range(3):
        # Reference: scipy.stats.ttest_ind(equal_var=False) (Virtanen et al., 2020, SciPy 1.0) and
        # statsmodels multipletests (Seabold & Perktold, 2010)
        p = stats.ttest_ind(a[draw.indices_a[resample]], b[draw.indices_b[resample]], equal_var=False).pvalue
        rejected = p < 0.05 if correction == "none" else multipletests(p, alpha=0.05, method=correction)[0]
        assert result.fractions[resample] == rejected.mean()


def test_summary_is_mean_and_central_95_percent_of_fractions(means):
    result = bootstrap_significant_fraction(*means, seed=4, **SETTINGS)
    # Reference: numpy.percentile with linear interpolation (Harris et al., 2020, NumPy)
    low, high = np.percentile(result.fractions, [2.5, 97.5])
    assert (result.percentile_low, result.mean, result.percentile_high) == (low, result.fractions.mean(), high)
    assert result.fractions.shape == (200,)
    assert (result.resamples, result.trials_per_condition) == (200, 12)


def test_more_trials_per_condition_than_available_is_refused(means):
    with pytest.raises(ValueError, match="at most the smaller condition"):
        bootstrap_significant_fraction(*means, seed=0, **{**SETTINGS, "trials_per_condition": 36})


ALL_MODE = dict(mode="all", resamples=300, alpha=0.05, correction="fdr_bh")


@pytest.mark.parametrize(
    "settings",
    [
        ALL_MODE,
        {**ALL_MODE, "mode": "equalized"},
        {**SETTINGS, "test": "mann_whitney"},
        {**SETTINGS, "test": "student"},
    ],
    ids=["all", "equalized", "mann_whitney", "student"],
)
@pytest.mark.parametrize("chunk_size", [1, 13])
def test_every_mode_and_test_does_not_depend_on_chunk_size(means, settings, chunk_size):
    default = bootstrap_significant_fraction(*means, seed=4, **settings)
    chunked = bootstrap_significant_fraction(*means, seed=4, chunk_size=chunk_size, **settings)
    np.testing.assert_array_equal(chunked.fractions, default.fractions)


def test_all_mode_draws_each_condition_count_with_replacement():
    draw = draw_with_replacement(np.random.default_rng(1), 30, 25, 400)
    assert draw.indices_a.shape == (400, 30) and draw.indices_b.shape == (400, 25)
    assert draw.indices_a.min() == 0 and draw.indices_a.max() == 29 and draw.indices_b.max() == 24
    # With replacement, a row of 30 draws from 30 trials repeats one with probability 1 - 30!/30**30 ≈ 1.
    assert all(np.unique(row).size < 30 for row in draw.indices_a)


def test_all_mode_reports_each_condition_count(means):
    result = bootstrap_significant_fraction(*means, seed=2, **ALL_MODE)
    assert result.trials_drawn == (40, 35) and result.trials_per_condition is None and result.with_replacement


def test_equalized_mode_draws_the_smaller_count_from_both(means):
    result = bootstrap_significant_fraction(*means, seed=2, **{**ALL_MODE, "mode": "equalized"})
    assert result.trials_drawn == (35, 35) and result.trials_per_condition == 35 and not result.with_replacement


def test_all_mode_first_resamples_equal_scipy_on_the_drawn_trials(means):
    a, b = means
    result = bootstrap_significant_fraction(a, b, seed=8, **ALL_MODE)
    draw = draw_with_replacement(np.random.default_rng(8), a.shape[0], b.shape[0], 3)
    for resample in range(3):
        # Reference: scipy.stats.ttest_ind(equal_var=False) (Virtanen et al., 2020) and statsmodels
        # multipletests(method="fdr_bh") (Seabold & Perktold, 2010)
        p = stats.ttest_ind(a[draw.indices_a[resample]], b[draw.indices_b[resample]], equal_var=False).pvalue
        assert result.fractions[resample] == multipletests(p, alpha=0.05, method="fdr_bh")[0].mean()


@pytest.mark.parametrize("test", ["mann_whitney", "student"])
def test_other_tests_first_resamples_equal_scipy(means, test):
    a, b = means
    result = bootstrap_significant_fraction(a, b, seed=9, test=test, **SETTINGS)
    draw = draw_trials(np.random.default_rng(9), a.shape[0], b.shape[0], SETTINGS["trials_per_condition"], 3)
    for resample in range(3):
        drawn_a, drawn_b = a[draw.indices_a[resample]], b[draw.indices_b[resample]]
        # Reference: scipy.stats.mannwhitneyu(method="asymptotic") / ttest_ind(equal_var=True) (Virtanen et al.,
        # 2020) and statsmodels multipletests(method="fdr_bh") (Seabold & Perktold, 2010)
        if test == "mann_whitney":
            p = stats.mannwhitneyu(drawn_a, drawn_b, method="asymptotic", axis=0).pvalue
        else:
            p = stats.ttest_ind(drawn_a, drawn_b, equal_var=True, axis=0).pvalue
        assert result.fractions[resample] == multipletests(p, alpha=0.05, method="fdr_bh")[0].mean()


def test_chunk_size_keeps_a_large_bootstrap_within_the_memory_budget():
    # 128 channels × 1,000 trials per condition: the per-resample estimate times the chunk
    # stays under the budget, so 10,000 resamples are processed in bounded memory.
    chunk = resamples_per_chunk(1000, 1000, 128, DEFAULT_CHUNK_BYTES)
    per_resample = 8 * (3 * 2000 + 32 * 128)
    assert chunk >= 1 and chunk * per_resample <= DEFAULT_CHUNK_BYTES


def test_mean_welch_t_equals_the_mean_of_scipy_welch_t(means):
    a, b = means
    # Reference: scipy.stats.ttest_ind(equal_var=False) (Virtanen et al., 2020, SciPy 1.0)
    expected = stats.ttest_ind(a, b, equal_var=False).statistic.mean()
    assert mean_welch_t(a, b) == pytest.approx(expected, rel=1e-12)


def test_mean_welch_t_resamples_equal_scipy_on_the_drawn_trials(means):
    a, b = means
    result = bootstrap_mean_welch_t(a, b, resamples=50, seed=6)
    draw = draw_with_replacement(np.random.default_rng(6), a.shape[0], b.shape[0], 50)
    # Reference: scipy.stats.ttest_ind(equal_var=False) (Virtanen et al., 2020) on each resample's trials,
    # and numpy.percentile (linear) of those means for the interval
    expected = np.array(
        [
            stats.ttest_ind(a[rows_a], b[rows_b], equal_var=False).statistic.mean()
            for rows_a, rows_b in zip(draw.indices_a, draw.indices_b, strict=True)
        ]
    )
    np.testing.assert_allclose(result.resampled, expected, rtol=1e-10)
    np.testing.assert_allclose([result.ci_low, result.ci_high], np.percentile(expected, [2.5, 97.5]), rtol=1e-10)
    assert result.observed == pytest.approx(mean_welch_t(a, b), rel=1e-12)


def test_mean_welch_t_does_not_depend_on_chunk_size(means):
    a, b = means
    chunked = bootstrap_mean_welch_t(a, b, resamples=60, seed=2, chunk_size=7)
    whole = bootstrap_mean_welch_t(a, b, resamples=60, seed=2)
    np.testing.assert_allclose(chunked.resampled, whole.resampled, rtol=1e-12)


def test_mean_welch_t_leaves_out_channels_without_variance(means):
    a, b = (values.copy() for values in means)
    a[:, 0], b[:, 0] = 1e-6, 1e-6
    # Reference: scipy.stats.ttest_ind(equal_var=False) (Virtanen et al., 2020) on the other channels
    expected = stats.ttest_ind(a[:, 1:], b[:, 1:], equal_var=False).statistic.mean()
    assert mean_welch_t(a, b) == pytest.approx(expected, rel=1e-12)
