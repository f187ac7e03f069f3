"""Ranking of pipelines: order, intervals and the paired comparison with the reference."""

import numpy as np
from scipy import stats

from epoch_assay.engine.ranking import mean_intervals, rank_pipelines
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
    np.testing.assert_allclose([entry.vs_reference.ci_low, entry.vs_reference.ci_high], [ci.low, ci.high])
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
