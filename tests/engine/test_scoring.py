"""Scoring an epoch set: window means, per-channel tests, fraction, bootstrap, JSON."""

import json

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests

from tests.engine.stats_fixtures import MICROVOLT, small_epoch_set
from worker.engine.errors import SpecError
from worker.engine.scoring import score_epochs
from worker.engine.scoring_spec import BootstrapSpec, ScoringSpec
from worker.engine.stats import bootstrap_significant_fraction, window_means

SPEC = ScoringSpec(conditions=("dev", "std"), window_s=(0.2, 0.4), alpha=0.05, correction="fdr_bh")
WITH_BOOTSTRAP = SPEC.model_copy(update={"bootstrap": BootstrapSpec(trials_per_condition=20, resamples=100, seed=3)})
EEG = ["E1", "E2", "E3", "E4", "E5", "E6"]


def explicit_window_means(epochs, first_sample, last_sample):
    """Window means by explicit sample indices, shape (n_trials, n_channels), in V."""
    return epochs.data[:, :, first_sample : last_sample + 1].mean(axis=2)


@pytest.fixture(scope="module")
def epochs():
    return small_epoch_set()


def test_window_means_average_the_samples_in_the_window_ends_included():
    times = np.arange(11) / 100.0
    data = np.broadcast_to(times, (2, 3, 11)) * MICROVOLT
    # Samples at 0.02, 0.03, 0.04 and 0.05 s; hand calculation: mean 0.035.
    np.testing.assert_allclose(window_means(data, times, (0.02, 0.05)), 0.035 * MICROVOLT, rtol=1e-12)


def test_channel_p_values_equal_scipy_on_the_window_means(epochs):
    score = score_epochs(epochs, SPEC)
    # At 250 Hz from -0.1 s, 0.2 s is sample 75 and 0.4 s is sample 125.
    means = explicit_window_means(epochs, 75, 125)[:, :6]
    # Reference: scipy.stats.ttest_ind(equal_var=False) (Virtanen et al., 2020, SciPy 1.0)
    expected = stats.ttest_ind(means[epochs.labels == "dev"], means[epochs.labels == "std"], equal_var=False)
    np.testing.assert_allclose([c.t for c in score.channels], expected.statistic, rtol=1e-10)
    np.testing.assert_allclose([c.p for c in score.channels], expected.pvalue, rtol=1e-8)


def test_adjusted_p_values_equal_statsmodels(epochs):
    score = score_epochs(epochs, SPEC)
    # Reference: statsmodels multipletests(method="fdr_bh") (Seabold & Perktold, 2010)
    expected = multipletests([c.p for c in score.channels], alpha=0.05, method="fdr_bh")[1]
    np.testing.assert_allclose([c.p_adjusted for c in score.channels], expected, rtol=1e-12)


def test_significant_fraction_is_share_of_channels_below_alpha(epochs):
    score = score_epochs(epochs, SPEC)
    # Reference: statsmodels multipletests(method="fdr_bh") rejections (Seabold & Perktold, 2010)
    rejected = multipletests([c.p for c in score.channels], alpha=0.05, method="fdr_bh")[0]
    assert [c.significant for c in score.channels] == rejected.tolist()
    assert score.significant_fraction == rejected.sum() / 6
    # The simulated 3 µV effect on E1–E3 is large enough to be found.
    assert 0 < score.significant_fraction < 1


def test_only_eeg_channels_not_marked_bad_are_scored(epochs):
    score = score_epochs(epochs.with_changes(bads=frozenset({"E2", "EOG1"})), SPEC)
    assert [c.name for c in score.channels] == ["E1", "E3", "E4", "E5", "E6"]


def test_bad_channel_does_not_count_in_the_correction(epochs):
    with_bad = score_epochs(epochs.with_changes(bads=frozenset({"E2"})), SPEC)
    p = [c.p for c in with_bad.channels]
    # Reference: statsmodels multipletests over the five scored channels only (Seabold & Perktold, 2010)
    expected = multipletests(p, alpha=0.05, method="fdr_bh")[1]
    np.testing.assert_allclose([c.p_adjusted for c in with_bad.channels], expected, rtol=1e-12)


def test_n_trials_counts_each_condition(epochs):
    kept = np.r_[np.arange(25), np.arange(30, 60)]
    fewer = epochs.with_changes(data=epochs.data[kept], labels=epochs.labels[kept])
    assert score_epochs(fewer, SPEC).n_trials == {"dev": 30, "std": 25}


def test_bootstrap_summary_equals_bootstrap_of_scored_window_means(epochs):
    score = score_epochs(epochs, WITH_BOOTSTRAP)
    means = explicit_window_means(epochs, 75, 125)[:, :6]
    direct = bootstrap_significant_fraction(
        means[epochs.labels == "dev"],
        means[epochs.labels == "std"],
        trials_per_condition=20,
        resamples=100,
        seed=3,
        alpha=0.05,
        correction="fdr_bh",
    )
    summary = score.bootstrap
    assert (summary.median, summary.ci_low, summary.ci_high) == (direct.median, direct.ci_low, direct.ci_high)
    assert (summary.resamples, summary.trials_per_condition) == (100, 20)


def test_no_bootstrap_spec_gives_no_bootstrap(epochs):
    assert score_epochs(epochs, SPEC).bootstrap is None


def test_to_json_is_json_with_nan_as_null(epochs):
    flat = epochs.data.copy()
    flat[:, 3, :] = 2.0 * MICROVOLT
    score = score_epochs(epochs.with_changes(data=flat), WITH_BOOTSTRAP)
    decoded = json.loads(json.dumps(score.to_json(), allow_nan=False))
    flat_channel = decoded["channels"][3]
    assert flat_channel == {"name": "E4", "t": None, "p": None, "p_adjusted": None, "significant": False}


def test_to_json_has_exactly_the_documented_keys(epochs):
    document = score_epochs(epochs, WITH_BOOTSTRAP).to_json()
    assert set(document) == {"n_trials", "channels", "significant_fraction", "bootstrap"}
    assert set(document["channels"][0]) == {"name", "t", "p", "p_adjusted", "significant"}
    assert set(document["bootstrap"]) == {"median", "ci_low", "ci_high", "resamples", "trials_per_condition"}
    assert all(type(value) in (float, int) for value in document["bootstrap"].values())


def test_too_few_trials_for_the_bootstrap_is_a_spec_error(epochs):
    kept = np.r_[np.arange(15), np.arange(30, 60)]
    fewer = epochs.with_changes(data=epochs.data[kept], labels=epochs.labels[kept])
    with pytest.raises(SpecError) as caught:
        score_epochs(fewer, WITH_BOOTSTRAP)
    assert caught.value.loc == ("scoring", "bootstrap", "trials_per_condition")
    assert "'std' has 15 trials" in caught.value.message


def test_condition_with_too_few_trials_is_a_spec_error(epochs):
    kept = np.r_[np.arange(30), [30]]
    fewer = epochs.with_changes(data=epochs.data[kept], labels=epochs.labels[kept])
    with pytest.raises(SpecError) as caught:
        score_epochs(fewer, SPEC)
    assert caught.value.loc == ("scoring", "conditions", 0)


def test_no_scorable_channel_is_a_spec_error(epochs):
    with pytest.raises(SpecError) as caught:
        score_epochs(epochs.with_changes(bads=frozenset(EEG)), SPEC)
    assert caught.value.loc == ("scoring",)
