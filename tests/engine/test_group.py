"""Group level across subjects: per-subject averaging, paired comparisons and the group test vs SciPy, statsmodels, MNE."""

import mne
import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.weightstats import DescrStatsW

from epoch_assay.engine.group import group_channel_test, group_summary, paired_comparison, subject_scores
from epoch_assay.engine.scoring_spec import ScoringSpec

SPEC = ScoringSpec(conditions=("a", "b"), window_s=(0.1, 0.2), correction="holm")
CHANNELS = ("C1", "C2", "C3")


def entry(pipeline, subject, fraction, diffs_uv, sme=(1.0, 2.0), names=CHANNELS):
    """A scored result entry as score_unit writes it (only the fields the group level reads)."""
    return {
        "pipeline": pipeline,
        "subject": subject,
        "significant_fraction": fraction,
        "median_sme_uv": {"a": sme[0], "b": sme[1]},
        "channels": [{"name": name, "mean_diff_uv": diff} for name, diff in zip(names, diffs_uv, strict=False)],
    }


@pytest.fixture(scope="module")
def study():
    rng = np.random.default_rng(0)
    entries = []
    for index in range(8):
        subject = f"s{index}"
        base = rng.uniform(0.1, 0.5)
        entries.append(entry("raw", subject, base, rng.normal([2.0, 0.5, 0.0], 1.0)))
        entries.append(entry("clean", subject, base + rng.normal(0.05, 0.05), rng.normal([2.5, 0.5, 0.0], 1.0)))
    entries.append({"pipeline": "clean", "subject": "s9", "error": "scoring.conditions.0: too few trials"})
    return entries


def fractions(entries, pipeline):
    return np.array([e["significant_fraction"] for e in entries if e["pipeline"] == pipeline and "error" not in e])


def test_vs_reference_wilcoxon_p_equals_scipy(study):
    clean = group_summary(study, ["raw", "clean"], SPEC)[1]
    # Reference: scipy.stats.wilcoxon (Virtanen et al., 2020) on the paired per-subject fractions
    expected = stats.wilcoxon(fractions(study, "clean") - fractions(study, "raw")).pvalue
    assert clean.vs_reference.wilcoxon_p == pytest.approx(expected, rel=1e-12)


def test_vs_reference_paired_t_p_equals_scipy(study):
    clean = group_summary(study, ["raw", "clean"], SPEC)[1]
    # Reference: scipy.stats.ttest_rel (Virtanen et al., 2020)
    expected = stats.ttest_rel(fractions(study, "clean"), fractions(study, "raw")).pvalue
    assert clean.vs_reference.paired_t_p == pytest.approx(expected, rel=1e-12)


def test_mean_difference_interval_equals_statsmodels_t_interval():
    rng = np.random.default_rng(1)
    values, reference = rng.normal(0.4, 0.1, 10), rng.normal(0.3, 0.1, 10)
    result = paired_comparison(values, reference)
    # Reference: statsmodels DescrStatsW.tconfint_mean(alpha=0.05) (Seabold & Perktold, 2010)
    expected = DescrStatsW(values - reference).tconfint_mean(alpha=0.05)
    np.testing.assert_allclose([result.ci_low, result.ci_high], expected, rtol=1e-12)
    assert result.mean_difference == pytest.approx(np.mean(values - reference), rel=1e-12)


def test_reference_pipeline_has_no_comparison_and_defaults_to_the_first(study):
    raw, clean = group_summary(study, ["raw", "clean"], SPEC)
    assert raw.vs_reference is None
    assert clean.vs_reference.reference_pipeline == "raw"


def test_named_reference_pipeline_is_used(study):
    raw, clean = group_summary(study, ["raw", "clean"], SPEC.model_copy(update={"reference_pipeline": "clean"}))
    assert clean.vs_reference is None and raw.vs_reference.reference_pipeline == "clean"


def test_fewer_than_two_subjects_give_no_comparison_and_no_group_test():
    entries = [entry("raw", "s0", 0.2, [1, 2, 3]), entry("clean", "s0", 0.3, [1, 2, 3])]
    _raw, clean = group_summary(entries, ["raw", "clean"], SPEC)
    assert clean.vs_reference is None and clean.group_test is None and clean.n_subjects == 1


def test_entries_with_error_are_left_out_and_counted(study):
    clean = group_summary(study, ["raw", "clean"], SPEC)[1]
    assert clean.n_subjects == 8 and clean.n_entries_with_error == 1


def test_fraction_summary_is_mean_median_and_standard_error(study):
    raw = group_summary(study, ["raw", "clean"], SPEC)[0]
    values = fractions(study, "raw")
    # Reference: scipy.stats.sem (Virtanen et al., 2020)
    assert raw.significant_fraction.model_dump() == pytest.approx(
        {"mean": values.mean(), "median": np.median(values), "se": stats.sem(values)}, rel=1e-12
    )


def test_two_epoch_sets_of_one_subject_are_averaged_first():
    entries = [
        entry("raw", "s0", 0.2, [1.0, 2.0, 3.0], sme=(1.0, 1.0)),
        entry("raw", "s0", 0.4, [3.0, 2.0, 1.0], sme=(3.0, 1.0)),
        entry("raw", "s1", 0.5, [1.0, 1.0, 1.0]),
    ]
    scores = subject_scores(entries, ("a", "b"))
    assert scores.subjects == ("s0", "s1")
    np.testing.assert_allclose(scores.significant_fraction, [0.3, 0.5])
    np.testing.assert_allclose(scores.median_sme_uv["a"], [2.0, 1.0])
    np.testing.assert_allclose(scores.mean_diff[0], [2e-6, 2e-6, 2e-6])


def test_channel_missing_in_one_subject_is_left_out_of_that_channel_only():
    entries = [entry("raw", "s0", 0.2, [1.0, 2.0], names=("C1", "C2")), entry("raw", "s1", 0.2, [1.5], names=("C1",))]
    scores = subject_scores(entries, ("a", "b"))
    assert scores.channel_names == ("C1", "C2")
    assert np.isnan(scores.mean_diff[1, 1]) and scores.mean_diff[1, 0] == pytest.approx(1.5e-6)


def test_group_test_equals_scipy_one_sample_t_with_the_runs_correction(study):
    raw = group_summary(study, ["raw", "clean"], SPEC)[0]
    diffs = np.array([[c["mean_diff_uv"] for c in e["channels"]] for e in study if e["pipeline"] == "raw"])
    # Reference: scipy.stats.ttest_1samp (Virtanen et al., 2020) and statsmodels multipletests("holm")
    # (Seabold & Perktold, 2010)
    expected = stats.ttest_1samp(diffs, 0.0, axis=0)
    channels = raw.group_test.channels
    np.testing.assert_allclose([c.t for c in channels], expected.statistic, rtol=1e-10)
    np.testing.assert_allclose([c.p for c in channels], expected.pvalue, rtol=1e-8)
    np.testing.assert_allclose(
        [c.p_adjusted for c in channels], multipletests(expected.pvalue, method="holm")[1], rtol=1e-8
    )
    assert raw.group_test.significant_fraction == np.mean([c.significant for c in channels])


def test_group_max_stat_uses_sign_flips_like_mne():
    rng = np.random.default_rng(2)
    diffs = rng.normal([1.0, 0.3, 0.0, 0.0], 1.0, size=(9, 4)) * 1e-6
    spec = ScoringSpec(
        conditions=("a", "b"), window_s=(0.1, 0.2), test="permutation", correction="max_stat", n_permutations=1000
    )
    result = group_channel_test(("C1", "C2", "C3", "C4"), diffs, spec)
    # Reference: mne.stats.permutation_t_test (Gramfort et al., 2013, MNE-Python); 2**9 sign patterns
    # ≤ 1000, so both enumerate them all and agree exactly.
    _, p_mne, _ = mne.stats.permutation_t_test(diffs, n_permutations=1000, seed=0, verbose=False)
    np.testing.assert_allclose(result.p_adjusted, p_mne, rtol=1e-12)
