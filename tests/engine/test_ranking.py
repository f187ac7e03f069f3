"""Ranking of pipelines: order, intervals, the paired comparison with the reference, its
max-t adjustment across pipelines and the bootstrap spread of the ranks."""

import numpy as np
import pytest
from scipy import stats

from epoch_assay.engine.ranking import adjusted_comparisons, mean_intervals, rank_pipelines
from epoch_assay.engine.subject_metrics import MetricTable

RNG = np.random.default_rng(5)
VALUES = RNG.uniform(0.0, 1.0, size=(4, 9))
TABLE = MetricTable("significant_fraction", ("ref", "p1", "p2", "p3"), tuple(f"s{i}" for i in range(9)), VALUES)


def test_mean_interval_matches_scipy_t_interval():
    interval = mean_intervals(VALUES[:1])[0]
    # Reference: scipy.stats.t.interval with the standard error of the mean (Virtanen et al., 2020, SciPy 1.0)
    low, high = stats.t.interval(0.95, df=8, loc=VALUES[0].mean(), scale=stats.sem(VALUES[0]))
    np.testing.assert_allclose([interval.mean, interval.ci_low, interval.ci_high], [VALUES[0].mean(), low, high])


def test_comparison_with_reference_matches_scipy_paired_t_interval():
    entry = next(e for e in rank_pipelines(TABLE, "ref") if e.pipeline == "p2")
    # Reference: scipy.stats.ttest_rel(...).confidence_interval() (Virtanen et al., 2020, SciPy 1.0)
    ci = stats.ttest_rel(VALUES[2], VALUES[0]).confidence_interval(0.95)
    np.testing.assert_allclose([entry.vs_reference.paired.ci_low, entry.vs_reference.paired.ci_high], [ci.low, ci.high])
    assert entry.to_document("ref", TABLE.metric, None).vs_reference.reference_pipeline == "ref"


def test_pipelines_are_sorted_best_mean_first_with_ranks_from_one():
    ranking = rank_pipelines(TABLE, "ref")
    assert [e.pipeline for e in ranking] == [TABLE.pipelines[i] for i in np.argsort(-VALUES.mean(axis=1))]
    assert [e.rank for e in ranking] == [1, 2, 3, 4]


def test_lower_is_better_metrics_sort_ascending():
    table = MetricTable("median_sme", TABLE.pipelines, TABLE.subjects, VALUES)
    assert rank_pipelines(table, "ref")[0].pipeline == TABLE.pipelines[int(np.argmin(VALUES.mean(axis=1)))]


def test_pipeline_without_scores_sorts_last_and_the_reference_has_no_comparison():
    values = VALUES.copy()
    values[1] = np.nan
    ranking = rank_pipelines(MetricTable(TABLE.metric, TABLE.pipelines, TABLE.subjects, values), "ref")
    assert ranking[-1].pipeline == "p1" and ranking[-1].to_document("ref", TABLE.metric, None).mean is None
    assert next(e for e in ranking if e.pipeline == "ref").vs_reference is None
    assert ranking[-1].vs_reference is None


def test_unadjusted_paired_p_values_match_scipy_ttest_rel_and_wilcoxon():
    entry = next(e for e in rank_pipelines(TABLE, "ref") if e.pipeline == "p3")
    # Reference: scipy.stats.ttest_rel and scipy.stats.wilcoxon (Virtanen et al., 2020, SciPy 1.0)
    assert entry.vs_reference.paired.paired_t_p == pytest.approx(stats.ttest_rel(VALUES[3], VALUES[0]).pvalue)
    assert entry.vs_reference.paired.wilcoxon_p == pytest.approx(stats.wilcoxon(VALUES[3] - VALUES[0]).pvalue)


def max_abs_paired_t(x, y, axis):
    """Largest |paired t| over the pipelines (last axis) of samples paired along ``axis``."""
    differences = x - y
    n = differences.shape[axis]
    t = differences.mean(axis=axis) / (differences.std(axis=axis, ddof=1) / np.sqrt(n))
    return np.abs(t).max(axis=-1)


def test_smallest_adjusted_p_equals_scipy_exact_permutation_test_of_the_largest_t():
    comparisons = adjusted_comparisons(TABLE, "ref")
    others = VALUES[1:].T
    # Reference: scipy.stats.permutation_test, permutation_type "samples" swaps each pair (a sign flip of the
    # subject's differences), exhaustive here (2**9 patterns), on the max-|t| statistic (Westfall & Young, 1993).
    reference = stats.permutation_test(
        (others, np.repeat(VALUES[0][:, None], 3, axis=1)),
        max_abs_paired_t,
        permutation_type="samples",
        alternative="greater",
        n_resamples=np.inf,
        vectorized=True,
        axis=0,
    )
    assert min(c.p_adjusted for c in comparisons.values()) == pytest.approx(reference.pvalue)
    assert "exact, all 512 sign patterns" in comparisons["p1"].adjustment


def test_adjusted_p_is_never_below_the_unadjusted_sign_flip_p():
    comparisons = adjusted_comparisons(TABLE, "ref")
    for name, comparison in comparisons.items():
        alone = adjusted_comparisons(
            MetricTable(TABLE.metric, ("ref", name), TABLE.subjects, TABLE.values[[0, TABLE.pipelines.index(name)]]),
            "ref",
        )
        assert comparison.p_adjusted >= alone[name].p_adjusted


def test_many_subjects_switch_to_a_seeded_monte_carlo_and_say_so():
    rng = np.random.default_rng(2)
    table = MetricTable("collapsed_snr", ("ref", "p1"), tuple(f"s{i}" for i in range(20)), rng.normal(size=(2, 20)))
    first = adjusted_comparisons(table, "ref", n_sign_flips=4000, seed=3)["p1"]
    again = adjusted_comparisons(table, "ref", n_sign_flips=4000, seed=3)["p1"]
    assert first.p_adjusted == again.p_adjusted
    assert "Monte Carlo, 4000 random sign patterns of 20 subjects, seed 3" in first.adjustment
    # One pipeline: the family is one test and the sign-flip p approximates the paired t p (Fisher, 1935).
    assert first.p_adjusted == pytest.approx(stats.ttest_rel(table.values[1], table.values[0]).pvalue, abs=0.03)


def test_probability_best_sums_to_one_and_follows_a_clear_winner():
    rng = np.random.default_rng(4)
    values = rng.normal(0.0, 1.0, size=(3, 15)) + np.array([[0.0], [0.0], [3.0]])
    ranked = rank_pipelines(
        MetricTable("collapsed_snr", ("ref", "p1", "p2"), tuple(map(str, range(15))), values), "ref"
    )
    assert sum(entry.spread.probability_best for entry in ranked) == pytest.approx(1.0)
    assert ranked[0].pipeline == "p2" and ranked[0].spread.probability_best > 0.99
    assert (ranked[0].spread.rank_spread_low, ranked[0].spread.rank_spread_high) == (1.0, 1.0)


def test_rank_spread_of_equal_pipelines_spans_several_ranks_and_is_labelled_descriptive():
    ranked = rank_pipelines(TABLE, "ref")
    assert all(entry.spread.rank_spread_high - entry.spread.rank_spread_low >= 1 for entry in ranked)
    assert "descriptive" in ranked[0].to_document("ref", TABLE.metric, None).rank_spread.kind


def test_pipelines_with_identical_scores_share_probability_best():
    values = np.vstack([VALUES[0], VALUES[1] + 5.0, VALUES[1] + 5.0])
    ranked = rank_pipelines(MetricTable("collapsed_snr", ("ref", "p1", "p2"), TABLE.subjects, values), "ref")
    shares = {entry.pipeline: entry.spread.probability_best for entry in ranked}
    assert shares == {"p1": 0.5, "p2": 0.5, "ref": 0.0}
