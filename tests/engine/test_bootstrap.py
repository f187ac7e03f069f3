"""Bootstrap of the significant fraction: reproducibility, draws, and one resample vs SciPy."""

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests

from tests.engine.stats_fixtures import window_mean_pair
from worker.engine.stats import bootstrap_significant_fraction, draw_trials

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
