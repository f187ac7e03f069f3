"""Per-subject metric tables built from result entries."""

import numpy as np
import pytest
from scipy import stats

from epoch_assay.engine.scoring import score_epochs
from epoch_assay.engine.scoring_spec import ScoringSpec
from epoch_assay.engine.subject_metrics import metric_table
from tests.engine.stats_fixtures import small_epoch_set

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


SCORED = small_epoch_set(n_per_condition=25, seed=3)
SCORED_SPEC = ScoringSpec(conditions=("dev", "std"), window_s=(0.2, 0.4))
SCORED_ENTRY = {"pipeline": "a", "subject": "s1", **score_epochs(SCORED, SCORED_SPEC).model_dump(mode="json")}


def collapsed_by_numpy() -> tuple[np.ndarray, np.ndarray]:
    """Per EEG channel, the equal-weight mean of the two condition means of the window mean and its SE, in µV."""
    window = slice(75, 126)  # samples at 0.2 ... 0.4 s from -0.1 s at 250 Hz, both ends included
    means = SCORED.data[:, :6, window].mean(axis=-1) * 1e6
    dev, std = means[SCORED.labels == "dev"], means[SCORED.labels == "std"]
    # Standard error of the mean of each condition, scipy.stats.sem (Virtanen et al., 2020); the collapsed mean
    # (a + b) / 2 of independent means has variance (SE_a² + SE_b²) / 4.
    se = np.sqrt(stats.sem(dev, axis=0) ** 2 + stats.sem(std, axis=0) ** 2) / 2
    return (dev.mean(axis=0) + std.mean(axis=0)) / 2, se


def test_collapsed_snr_is_the_root_mean_square_of_the_collapsed_mean_over_its_standard_error():
    mean, se = collapsed_by_numpy()
    table = metric_table([SCORED_ENTRY], "collapsed_snr", ["a"])
    assert table.values[0, 0] == pytest.approx(np.sqrt(np.mean((mean / se) ** 2)), rel=1e-6)
    assert table.higher_is_better


def test_collapsed_erp_is_the_root_mean_square_of_the_collapsed_mean_in_microvolts():
    mean, _ = collapsed_by_numpy()
    assert metric_table([SCORED_ENTRY], "collapsed_erp_uv", ["a"]).values[0, 0] == pytest.approx(
        np.sqrt(np.mean(mean**2)), rel=1e-6
    )


def test_entries_without_collapsed_fields_have_no_collapsed_snr():
    assert np.isnan(metric_table(ENTRIES, "collapsed_snr", ["a", "b"]).values).all()
