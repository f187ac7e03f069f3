"""Bootstrap of the significant fraction: modes, draws, reproducibility, resamples vs SciPy, BCa vs SciPy."""

from types import SimpleNamespace

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests

from epoch_assay.engine.stats import adjust_pvalues, bootstrap_significant_fraction, draw_trials, draw_with_replacement
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
    assert (first.median, first.ci_low, first.ci_high) == (second.median, second.ci_low, second.ci_high)


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


def test_summary_is_median_and_central_95_percent_of_fractions(means):
    result = bootstrap_significant_fraction(*means, seed=4, **SETTINGS)
    # Reference: numpy.percentile with linear interpolation (Harris et al., 2020, NumPy)
    low, median, high = np.percentile(result.fractions, [2.5, 50, 97.5])
    assert (result.ci_low, result.median, result.ci_high) == (low, median, high)
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


def test_bca_interval_matches_scipy_bootstrap_on_the_same_resamples():
    # 32 channels and an effect near the detection limit, so that leaving one trial out
    # changes the fraction and the jackknife acceleration is defined.
    a, b = window_mean_pair(40, 35, 32, effect_v=2e-6, seed=3)
    result = bootstrap_significant_fraction(a, b, seed=10, ci="bca", **ALL_MODE)

    def fraction(rows_a, rows_b, axis=-1):
        p = stats.ttest_ind(a[rows_a.astype(int)], b[rows_b.astype(int)], equal_var=False, axis=-2).pvalue
        return (adjust_pvalues(p, "fdr_bh") < 0.05).mean(axis=-1)

    # Reference: scipy.stats.bootstrap(method="BCa") (Virtanen et al., 2020), given our bootstrap
    # distribution (bootstrap_result, n_resamples=0), so that SciPy computes the bias correction and the
    # jackknife acceleration (Efron, 1987) itself. Resampling trial indices resamples the trials.
    previous = SimpleNamespace(bootstrap_distribution=result.fractions)
    expected = stats.bootstrap(
        (np.arange(a.shape[0]), np.arange(b.shape[0])),
        fraction,
        n_resamples=0,
        bootstrap_result=previous,
        method="BCa",
        vectorized=True,
        confidence_level=0.95,
    )
    assert result.observed == fraction(np.arange(a.shape[0]), np.arange(b.shape[0]))
    np.testing.assert_allclose(
        [result.ci_low, result.ci_high],
        [expected.confidence_interval.low, expected.confidence_interval.high],
        rtol=1e-12,
    )


def test_bca_is_refused_for_subsets_without_replacement(means):
    with pytest.raises(ValueError, match="BCa interval needs mode 'all'"):
        bootstrap_significant_fraction(*means, seed=0, ci="bca", **SETTINGS)


def test_chunk_size_keeps_a_large_bootstrap_within_the_memory_budget():
    # 128 channels × 1,000 trials per condition: the per-resample estimate times the chunk
    # stays under the budget, so 10,000 resamples are processed in bounded memory.
    chunk = resamples_per_chunk(1000, 1000, 128, DEFAULT_CHUNK_BYTES)
    per_resample = 8 * (3 * 2000 + 32 * 128)
    assert chunk >= 1 and chunk * per_resample <= DEFAULT_CHUNK_BYTES


def test_bca_acceleration_is_zero_when_no_single_trial_changes_the_fraction(means):
    # The fixture's 3 µV effect is found on every effect channel whichever trial is left
    # out, so every jackknife fraction is the same and the acceleration is 0 by definition.
    result = bootstrap_significant_fraction(*means, seed=10, ci="bca", **ALL_MODE)
    assert result.acceleration == 0.0
