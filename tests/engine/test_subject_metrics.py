"""Per-subject metric tables built from result entries."""

import numpy as np

from epoch_assay.engine.subject_metrics import metric_table

ENTRIES = [
    {"pipeline": "a", "subject": "s1", "significant_fraction": 0.2, "n_trials": {"x": 10, "y": 12}},
    {"pipeline": "a", "subject": "s1", "significant_fraction": 0.4, "n_trials": {"x": 8, "y": 8}},
    {"pipeline": "a", "subject": "s2", "error": "scoring: too few trials"},
    {"pipeline": "b", "subject": "s1", "significant_fraction": 0.1, "n_trials": {"x": 5, "y": 5}},
    {
        "pipeline": "b",
        "subject": "s2",
        "significant_fraction": 0.3,
        "n_trials": {"x": 5, "y": 6},
        "median_sme_uv": {"x": 1.0, "y": 3.0},
    },
]


def test_sessions_of_a_subject_are_averaged_and_errors_left_missing():
    table = metric_table(ENTRIES, "significant_fraction", ["a", "b"])
    assert table.subjects == ("s1", "s2")
    np.testing.assert_allclose(table.values, [[0.3, np.nan], [0.1, 0.3]])


def test_trials_kept_sums_both_conditions():
    table = metric_table(ENTRIES, "trials_kept", ["a", "b"])
    np.testing.assert_allclose(table.values[:, 0], [19.0, 10.0])


def test_median_sme_is_the_mean_of_the_conditions_medians_and_lower_is_better():
    table = metric_table(ENTRIES, "median_sme", ["a", "b"])
    assert table.values[1, 1] == 2.0 and not table.higher_is_better


def test_mean_scores_ignore_missing_subjects():
    table = metric_table(ENTRIES, "significant_fraction", ["a", "b"])
    np.testing.assert_allclose(table.mean_scores(), [0.3, 0.2])
