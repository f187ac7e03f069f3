"""Scoring an epoch set: window means, per-channel tests and fields, fractions, time course, bootstrap, JSON form."""

import json

import numpy as np
import pydantic
import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests

from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.scoring import score_epochs
from epoch_assay.engine.scoring_spec import BootstrapSpec, ScoringSpec, TimeCourseSpec
from epoch_assay.engine.stats import (
    bootstrap_mean_welch_t,
    bootstrap_significant_fraction,
    hedges_g,
    standardized_measurement_error,
    window_means,
)
from tests.engine.stats_fixtures import MICROVOLT, small_epoch_set

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
    np.testing.assert_allclose([c.statistic for c in score.channels], expected.statistic, rtol=1e-10)
    np.testing.assert_allclose([c.p for c in score.channels], expected.pvalue, rtol=1e-8)
    assert score.statistic_name == "welch_t"


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


def test_fixed_mode_reports_subset_mean_spread_and_share_of_trials_used(epochs):
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
    assert (summary.subset_mean, summary.spread_low, summary.spread_high) == (
        direct.mean,
        direct.percentile_low,
        direct.percentile_high,
    )
    assert (summary.resamples, summary.trials_per_condition) == (100, 20)
    # 20 of the 30 trials kept in each condition
    assert summary.share_of_trials_used == {"dev": 20 / 30, "std": 20 / 30}


def test_fixed_mode_json_has_no_field_called_an_interval(epochs):
    document = score_epochs(epochs, WITH_BOOTSTRAP).model_dump(mode="json")["bootstrap"]
    assert not any(key.startswith("ci") for key in document)
    assert {"subset_mean", "spread_low", "spread_high", "share_of_trials_used"} <= set(document)


def test_all_mode_reports_the_percentile_interval_of_the_fraction(epochs):
    spec = SPEC.model_copy(update={"bootstrap": BootstrapSpec(mode="all", resamples=100, seed=3)})
    document = score_epochs(epochs, spec).model_dump(mode="json")["bootstrap"]
    dev, std = dev_std_means(epochs)
    direct = bootstrap_significant_fraction(
        dev, std, mode="all", resamples=100, seed=3, alpha=0.05, correction="fdr_bh"
    )
    assert (document["ci_low"], document["ci_high"], document["ci"]) == (
        direct.percentile_low,
        direct.percentile_high,
        "percentile",
    )
    assert document["trials_drawn"] == {"dev": 30, "std": 30}


def test_mean_welch_t_is_the_mean_of_scipy_welch_t_over_scored_channels(epochs):
    score = score_epochs(epochs, SPEC)
    dev, std = dev_std_means(epochs)
    # Reference: scipy.stats.ttest_ind(equal_var=False) (Virtanen et al., 2020, SciPy 1.0), averaged over channels
    expected = stats.ttest_ind(dev, std, equal_var=False).statistic.mean()
    assert score.mean_welch_t.value == pytest.approx(expected, rel=1e-10)
    assert score.mean_welch_t.n_channels == 6 and score.mean_welch_t.resamples == 0


def test_mean_welch_t_over_named_channels_averages_only_those(epochs):
    score = score_epochs(epochs, SPEC.model_copy(update={"mean_t_channels": ("E1", "E2", "absent")}))
    dev, std = dev_std_means(epochs)
    # Reference: scipy.stats.ttest_ind(equal_var=False) (Virtanen et al., 2020), channels E1 and E2
    expected = stats.ttest_ind(dev[:, :2], std[:, :2], equal_var=False).statistic.mean()
    assert score.mean_welch_t.value == pytest.approx(expected, rel=1e-10) and score.mean_welch_t.n_channels == 2


def test_mean_welch_t_interval_comes_from_resampling_trials_with_replacement(epochs):
    mean_t = score_epochs(epochs, WITH_BOOTSTRAP).mean_welch_t
    direct = bootstrap_mean_welch_t(*dev_std_means(epochs), resamples=100, seed=3)
    assert (mean_t.ci_low, mean_t.ci_high, mean_t.resamples) == (direct.ci_low, direct.ci_high, 100)


def test_mean_t_channels_none_of_which_exist_is_a_spec_error(epochs):
    with pytest.raises(SpecError) as caught:
        score_epochs(epochs, SPEC.model_copy(update={"mean_t_channels": ("Oz",)}))
    assert caught.value.loc == ("scoring", "mean_t_channels")


def test_no_bootstrap_spec_gives_no_bootstrap(epochs):
    assert score_epochs(epochs, SPEC).bootstrap is None


def test_undefined_statistics_are_null_in_the_json_form(epochs):
    flat = epochs.data.copy()
    flat[:, 3, :] = 2.0 * MICROVOLT
    score = score_epochs(epochs.with_changes(data=flat), WITH_BOOTSTRAP)
    decoded = json.loads(json.dumps(score.model_dump(mode="json"), allow_nan=False))
    flat_channel = decoded["channels"][3]
    keys = ("name", "statistic", "p", "p_adjusted", "significant", "hedges_g")
    assert {key: flat_channel[key] for key in keys} == {
        "name": "E4",
        "statistic": None,
        "p": None,
        "p_adjusted": None,
        "significant": False,
        "hedges_g": None,
    }
    assert flat_channel["hedges_g_ci"] == [None, None]


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


def dev_std_means(epochs):
    """Window means of the six EEG channels, (dev, std), each shape (n_trials, 6), in V."""
    means = explicit_window_means(epochs, 75, 125)[:, :6]
    return means[epochs.labels == "dev"], means[epochs.labels == "std"]


def test_hedges_g_matches_hand_computed_case():
    a = np.array([[1.0], [2.0], [3.0], [4.0], [5.0]])
    b = np.array([[3.0], [4.0], [5.0], [6.0], [7.0]])
    result = hedges_g(a, b)
    # Hedges & Olkin (1985), ch. 5, computed by hand: pooled SD √2.5 = 1.581139, d = −2 / 1.581139 =
    # −1.264911; J = 1 − 3 / (4·10 − 9) = 0.903226; g = −1.142500; large-sample variance
    # (n1 + n2)/(n1 n2) + g²/(2(n1 + n2)) = 0.4 + 1.305307/20 = 0.465265, SE 0.682103;
    # 95 % interval g ± 1.959964 · 0.682103 = [−2.479398, 0.194398].
    np.testing.assert_allclose(result.g, [-1.142500], atol=1e-6)
    np.testing.assert_allclose([result.ci_low[0], result.ci_high[0]], [-2.479398, 0.194398], atol=1e-6)


def test_sme_matches_hand_computed_case():
    values = np.array([[1.0], [2.0], [3.0], [4.0]])
    # Luck et al. (2021), SME of a mean score = SD of the single-trial scores / √N; by hand:
    # SD = √((2.25 + 0.25 + 0.25 + 2.25) / 3) = 1.290994, / √4 = 0.645497.
    np.testing.assert_allclose(standardized_measurement_error(values), [0.645497], atol=1e-6)


def test_channel_fields_equal_the_statistics_of_the_window_means(epochs):
    score = score_epochs(epochs, SPEC)
    dev, std = dev_std_means(epochs)
    effect = hedges_g(dev, std)
    np.testing.assert_allclose([c.mean_diff_uv for c in score.channels], (dev.mean(0) - std.mean(0)) / MICROVOLT)
    np.testing.assert_allclose([c.hedges_g for c in score.channels], effect.g, rtol=1e-12)
    np.testing.assert_allclose([c.hedges_g_ci for c in score.channels], np.c_[effect.ci_low, effect.ci_high])
    # Luck et al. (2021): SD (ddof 1) over √N of each condition's single-trial window means, in µV.
    np.testing.assert_allclose([c.sme_uv["dev"] for c in score.channels], dev.std(0, ddof=1) / np.sqrt(30) / MICROVOLT)


def test_median_sme_is_the_median_over_scored_channels(epochs):
    score = score_epochs(epochs, SPEC)
    for label in ("dev", "std"):
        assert score.median_sme_uv[label] == np.median([c.sme_uv[label] for c in score.channels])


def test_mean_diff_is_first_minus_second_condition(epochs):
    score = score_epochs(epochs, SPEC)
    # The simulated 3 µV deflection is in "dev", the first condition of SPEC.
    assert all(c.mean_diff_uv > 2.0 for c in score.channels[:3])


@pytest.mark.parametrize("test", ["student", "mann_whitney"])
def test_other_tests_match_scipy_on_the_window_means(epochs, test):
    score = score_epochs(epochs, SPEC.model_copy(update={"test": test}))
    dev, std = dev_std_means(epochs)
    # Reference: scipy.stats.ttest_ind(equal_var=True) / mannwhitneyu(method="asymptotic") (Virtanen et al., 2020);
    # for mann_whitney the channel statistic is U, named mann_whitney_u.
    expected = (
        stats.ttest_ind(dev, std, equal_var=True)
        if test == "student"
        else stats.mannwhitneyu(dev, std, method="asymptotic", axis=0)
    )
    np.testing.assert_allclose([c.statistic for c in score.channels], expected.statistic, rtol=1e-10)
    np.testing.assert_allclose([c.p for c in score.channels], expected.pvalue, rtol=1e-8)
    assert score.statistic_name == {"student": "student_t", "mann_whitney": "mann_whitney_u"}[test]


def test_permutation_max_stat_adjusted_p_is_at_least_the_channel_p(epochs):
    spec = SPEC.model_copy(update={"test": "permutation", "correction": "max_stat", "n_permutations": 200})
    score = score_epochs(epochs, spec)
    assert all(c.p_adjusted >= c.p for c in score.channels)
    assert [c.significant for c in score.channels] == [True, True, True, False, False, False]
    assert score.statistic_name == "welch_t_permutation"


def test_max_stat_without_permutation_is_refused():
    with pytest.raises(pydantic.ValidationError, match="max_stat' needs test 'permutation'"):
        ScoringSpec(conditions=("dev", "std"), window_s=(0.2, 0.4), correction="max_stat")


def test_bootstrap_with_permutation_test_is_refused():
    with pytest.raises(pydantic.ValidationError, match="bootstrap cannot be combined with test 'permutation'"):
        ScoringSpec(conditions=("dev", "std"), window_s=(0.2, 0.4), test="permutation", bootstrap=BootstrapSpec())


@pytest.mark.parametrize("mode", ["fixed", "equalized", "all"])
def test_bca_on_the_significant_fraction_is_refused_saying_why(mode):
    with pytest.raises(pydantic.ValidationError, match="step function"):
        BootstrapSpec(mode=mode, ci="bca")


@pytest.mark.parametrize("mode", ["equalized", "all"])
def test_modes_other_than_fixed_accept_fewer_trials_than_trials_per_condition(epochs, mode):
    kept = np.r_[np.arange(15), np.arange(30, 60)]
    fewer = epochs.with_changes(data=epochs.data[kept], labels=epochs.labels[kept])
    spec = SPEC.model_copy(update={"bootstrap": BootstrapSpec(mode=mode, trials_per_condition=20, resamples=50)})
    summary = score_epochs(fewer, spec).bootstrap.model_dump(mode="json")
    if mode == "equalized":
        assert summary["trials_per_condition"] == 15
        assert summary["share_of_trials_used"] == {"dev": 0.5, "std": 1.0}
    else:
        assert summary["trials_drawn"] == {"dev": 30, "std": 15}


def test_uploaded_fraction_counts_dropped_and_flagged_channels_as_not_significant(epochs):
    dropped = epochs.with_changes(
        data=epochs.data[:, 1:], ch_names=epochs.ch_names[1:], ch_types=epochs.ch_types[1:], bads=frozenset({"E3"})
    )
    score = score_epochs(dropped, SPEC, uploaded_eeg_channels=tuple(EEG))
    # E1 dropped, E3 flagged: E2 is the one significant channel left, of four scored and six uploaded.
    assert [c.name for c in score.channels] == ["E2", "E4", "E5", "E6"]
    assert (score.channels_kept, score.channels_uploaded) == (4, 6)
    assert score.significant_fraction == sum(c.significant for c in score.channels) / 4
    assert score.significant_fraction_uploaded == sum(c.significant for c in score.channels) / 6


def test_uploaded_channels_default_to_the_epoch_sets_eeg_channels_bad_ones_included(epochs):
    score = score_epochs(epochs.with_changes(bads=frozenset({"E2"})), SPEC)
    assert (score.channels_kept, score.channels_uploaded) == (5, 6)


def test_time_course_per_sample_equals_scipy_at_one_sample(epochs):
    score = score_epochs(epochs, SPEC)
    course = score.time_course
    np.testing.assert_allclose(course.times_s, epochs.times)
    sample = 100
    values = epochs.data[:, :6, sample]
    # Reference: scipy.stats.ttest_ind(equal_var=False) and statsmodels multipletests("fdr_bh") at one sample
    p = stats.ttest_ind(values[epochs.labels == "dev"], values[epochs.labels == "std"], equal_var=False).pvalue
    assert course.significant_fraction[sample] == multipletests(p, alpha=0.05, method="fdr_bh")[0].mean()


def test_time_course_bins_average_consecutive_samples(epochs):
    # 0.1 s at 250 Hz is 25 samples: 151 samples make 6 full bins and one of a single sample.
    score = score_epochs(epochs, SPEC.model_copy(update={"time_course": TimeCourseSpec(bin_s=0.1)}))
    course = score.time_course
    assert len(course.times_s) == 7 and course.bin_s == 0.1
    np.testing.assert_allclose(course.times_s[0], epochs.times[:25].mean())
    binned = epochs.data[:, :6, 75:100].mean(axis=-1)
    # Reference: scipy.stats.ttest_ind(equal_var=False) and statsmodels multipletests("fdr_bh") on bin 3
    p = stats.ttest_ind(binned[epochs.labels == "dev"], binned[epochs.labels == "std"], equal_var=False).pvalue
    assert course.significant_fraction[3] == multipletests(p, alpha=0.05, method="fdr_bh")[0].mean()


def test_time_course_can_be_switched_off(epochs):
    assert score_epochs(epochs, SPEC.model_copy(update={"time_course": None})).time_course is None


def test_bin_longer_than_the_epoch_is_a_spec_error(epochs):
    with pytest.raises(SpecError) as caught:
        score_epochs(epochs, SPEC.model_copy(update={"time_course": TimeCourseSpec(bin_s=2.0)}))
    assert caught.value.loc == ("scoring", "time_course", "bin_s")
