"""Selection rules: the winner is chosen on the right subjects, and the holdout guards against the bias."""

import numpy as np
import pytest
from pydantic import TypeAdapter, ValidationError
from scipy import stats

from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.multiverse_report import selection_document
from epoch_assay.engine.pipeline import PipelineSpec
from epoch_assay.engine.scoring import score_epochs
from epoch_assay.engine.scoring_spec import ScoringSpec
from epoch_assay.engine.selection import (
    ContrastBlindSpec,
    SelectionSpec,
    SplitSpec,
    contrast_blind,
    split_subjects,
    tuning_holdout,
)
from epoch_assay.engine.subject_metrics import MetricTable, metric_table
from epoch_assay.engine.tree import build_tree, execute_tree
from tests.benchmarks.calibration.comparisons import PIPELINE_NAMES, score_study
from tests.engine.conftest import random_epoch_set

SUBJECTS = ("s1", "s2", "s3", "s4")
# p1 is best on s1, s2 only; p2 is best overall
VALUES = np.array(
    [
        [0.10, 0.10, 0.10, 0.10],
        [0.50, 0.50, 0.00, 0.00],
        [0.40, 0.40, 0.40, 0.40],
    ]
)
TABLE = MetricTable("significant_fraction", ("ref", "p1", "p2"), SUBJECTS, VALUES)


def test_tuning_holdout_chooses_on_tuning_subjects_only():
    result = tuning_holdout(TABLE, "ref", ["s1", "s2"])
    assert result.winner == "p1"
    assert (result.tuning_subjects, result.holdout_subjects) == (("s1", "s2"), ("s3", "s4"))


def test_tuning_holdout_scores_winner_and_reference_on_both_sides():
    result = tuning_holdout(TABLE, "ref", ["s1", "s2"])
    assert (result.winner_tuning_score, result.reference_tuning_score) == (0.5, 0.1)
    assert (result.holdout.winner.mean, result.holdout.reference.mean) == (0.0, 0.1)


def test_optimism_is_the_tuning_advantage_minus_the_held_out_advantage():
    result = tuning_holdout(TABLE, "ref", ["s1", "s2"])
    # (0.5 - 0.1) on tuning subjects minus (0.0 - 0.1) held out
    assert result.optimism == pytest.approx(0.5)


def test_optimism_of_a_lower_is_better_metric_counts_a_lower_score_as_an_advantage():
    result = tuning_holdout(MetricTable("median_sme", TABLE.pipelines, SUBJECTS, -VALUES), "ref", ["s1", "s2"])
    assert result.winner == "p1" and result.optimism == pytest.approx(0.5)


GUARD_VALUES = np.random.default_rng(8).normal(0.0, 1.0, size=(3, 12)) + np.array([[0.0], [0.8], [0.2]])
GUARD_TABLE = MetricTable("collapsed_snr", ("ref", "p1", "p2"), tuple(f"s{i:02d}" for i in range(12)), GUARD_VALUES)


def test_held_out_means_carry_scipy_t_intervals():
    result = tuning_holdout(GUARD_TABLE, "ref", GUARD_TABLE.subjects[:5])
    held_out = GUARD_VALUES[GUARD_TABLE.pipelines.index(result.winner), 5:]
    # Reference: scipy.stats.t.interval with the standard error of the mean (Virtanen et al., 2020, SciPy 1.0)
    low, high = stats.t.interval(0.95, df=6, loc=held_out.mean(), scale=stats.sem(held_out))
    np.testing.assert_allclose([result.holdout.winner.ci_low, result.holdout.winner.ci_high], [low, high])
    low, high = stats.t.interval(0.95, df=6, loc=GUARD_VALUES[0, 5:].mean(), scale=stats.sem(GUARD_VALUES[0, 5:]))
    np.testing.assert_allclose([result.holdout.reference.ci_low, result.holdout.reference.ci_high], [low, high])


def test_held_out_winner_is_tested_against_the_reference_like_scipy_ttest_rel():
    result = tuning_holdout(GUARD_TABLE, "ref", GUARD_TABLE.subjects[:5])
    winner = GUARD_VALUES[GUARD_TABLE.pipelines.index(result.winner), 5:]
    # Reference: scipy.stats.ttest_rel and its confidence_interval (Virtanen et al., 2020, SciPy 1.0)
    test = stats.ttest_rel(winner, GUARD_VALUES[0, 5:])
    paired = result.holdout.winner_vs_reference
    assert paired.paired_t_p == pytest.approx(test.pvalue)
    np.testing.assert_allclose([paired.ci_low, paired.ci_high], list(test.confidence_interval(0.95)))
    assert result.to_document().holdout.winner_vs_reference.reference_pipeline == "ref"


def test_tuning_subjects_not_in_the_run_are_refused():
    with pytest.raises(SpecError) as caught:
        tuning_holdout(TABLE, "ref", ["s1", "s9"])
    assert caught.value.loc == ("selection", "tuning_subjects") and "s9" in caught.value.message


def test_all_subjects_tuning_is_refused():
    with pytest.raises(SpecError):
        tuning_holdout(TABLE, "ref", list(SUBJECTS))


def test_seeded_split_is_reproducible_disjoint_and_sized_by_fraction():
    subjects = [f"s{i:02d}" for i in range(10)]
    tuning, holdout = split_subjects(subjects, SplitSpec(fraction=0.3, seed=4))
    assert (tuning, holdout) == split_subjects(list(reversed(subjects)), SplitSpec(fraction=0.3, seed=4))
    assert len(tuning) == 3 and sorted(tuning + holdout) == subjects


def test_contrast_blind_picks_the_lowest_median_sme_over_all_subjects():
    table = MetricTable("median_sme", TABLE.pipelines, SUBJECTS, VALUES)
    result = contrast_blind(table, "ref")
    assert result.winner == "ref" and result.tuning_subjects == SUBJECTS and result.holdout_subjects == ()
    assert result.holdout is None and result.optimism is None


def test_contrast_blind_refuses_a_metric_that_sees_the_contrast():
    with pytest.raises(SpecError):
        contrast_blind(TABLE, "ref")


def test_contrast_blind_defaults_to_the_collapsed_erp_over_its_sme():
    assert TypeAdapter(SelectionSpec).validate_python({"rule": "contrast_blind"}).metric == "collapsed_snr"


def test_a_noise_only_winner_that_halves_the_collapsed_erp_is_warned_about():
    sme = MetricTable("median_sme", TABLE.pipelines, SUBJECTS, np.array([[1.0] * 4, [0.2] * 4, [0.9] * 4]))
    erp = MetricTable("collapsed_erp_uv", TABLE.pipelines, SUBJECTS, np.array([[3.0] * 4, [1.4] * 4, [3.0] * 4]))
    result = contrast_blind(sme, "ref", erp)
    assert result.winner == "p1"
    assert len(result.warnings) == 1 and "collapsed ERP of 1.4 µV" in result.warnings[0]


def test_a_noise_only_winner_keeping_the_collapsed_erp_is_not_warned_about():
    sme = MetricTable("median_sme", TABLE.pipelines, SUBJECTS, np.array([[1.0] * 4, [0.2] * 4, [0.9] * 4]))
    erp = MetricTable("collapsed_erp_uv", TABLE.pipelines, SUBJECTS, np.array([[3.0] * 4, [1.6] * 4, [3.0] * 4]))
    assert contrast_blind(sme, "ref", erp).warnings == ()


SLOW_ERP_STUDY = score_study(np.random.default_rng(21), 6)


def test_default_contrast_blind_rule_does_not_choose_a_high_pass_that_removes_a_slow_erp():
    # The ERP of comparisons.slow_erp_epochs has nearly all its power below 2 Hz, so a 4 Hz high-pass
    # (run by the real filter step) removes it; the collapsed ERP over its SME must fall with it.
    result = selection_document(SLOW_ERP_STUDY, PIPELINE_NAMES, "baseline", ContrastBlindSpec())
    assert result.metric == "collapsed_snr" and result.winner != "highpass-4"


def test_median_sme_chooses_the_signal_removing_high_pass_and_warns():
    result = selection_document(SLOW_ERP_STUDY, PIPELINE_NAMES, "baseline", ContrastBlindSpec(metric="median_sme"))
    assert result.winner == "highpass-4"
    assert any("removed the signal" in warning for warning in result.warnings)


def test_selection_spec_wants_exactly_one_of_tuning_subjects_or_split():
    adapter = TypeAdapter(SelectionSpec)
    with pytest.raises(ValidationError):
        adapter.validate_python({"rule": "tuning_holdout", "tuning_subjects": ["s1"], "split": {"fraction": 0.5}})
    with pytest.raises(ValidationError):
        adapter.validate_python({"rule": "contrast_blind", "metric": "significant_fraction"})


N_CHANNELS = 12
ALPHA = 0.05
NULL_PIPELINES = [PipelineSpec(name="average", steps=[{"step": "reference", "kind": "average"}])] + [
    PipelineSpec(name=f"ref-E{i}", steps=[{"step": "reference", "kind": "channels", "channels": [f"E{i}"]}])
    for i in range(8)
]
NULL_SCORING = ScoringSpec(conditions=("a", "b"), window_s=(0.05, 0.2), alpha=ALPHA, correction="none")


def null_study(simulation: int, n_subjects: int) -> list[dict]:
    """Per-subject entries of every pipeline on noise with no condition effect."""
    tree = build_tree(NULL_PIPELINES)
    entries = []
    for subject in range(n_subjects):
        epochs = random_epoch_set(
            n_trials=40, n_channels=N_CHANNELS, n_times=30, sfreq=100.0, tmin=-0.05, seed=1000 * simulation + subject
        )
        for leaf in execute_tree(tree, epochs, f"{simulation:032x}{subject:032x}"):
            entries.append(
                {
                    "pipeline": leaf.pipeline.name,
                    "subject": f"s{subject}",
                    **score_epochs(leaf.epochs, NULL_SCORING).model_dump(mode="json"),
                }
            )
    return entries


@pytest.mark.slow
def test_holdout_score_of_a_tuned_winner_stays_at_chance_while_its_tuning_score_is_inflated():
    tuning_scores, holdout_scores = [], []
    for simulation in range(40):
        table = metric_table(null_study(simulation, 8), "significant_fraction", [p.name for p in NULL_PIPELINES])
        result = tuning_holdout(table, "average", ["s0", "s1", "s2", "s3"])
        tuning_scores.append(result.winner_tuning_score)
        holdout_scores.append(result.holdout.winner.mean)
    # A level-alpha test rejects a true null with probability alpha (Neyman & Pearson, 1933), which Welch's
    # test attains closely for normal data (Welch, 1947): chance is ALPHA significant channels per channel.
    holdout_mean, holdout_se = np.mean(holdout_scores), np.std(holdout_scores, ddof=1) / np.sqrt(40)
    tuning_mean, tuning_se = np.mean(tuning_scores), np.std(tuning_scores, ddof=1) / np.sqrt(40)
    assert holdout_mean < ALPHA + 3 * holdout_se
    assert tuning_mean > ALPHA + 3 * tuning_se
    assert tuning_mean > holdout_mean


def test_a_tuned_noise_only_winner_that_halves_the_collapsed_erp_is_warned_about():
    sme = MetricTable("median_sme", TABLE.pipelines, SUBJECTS, np.array([[1.0] * 4, [0.2] * 4, [0.9] * 4]))
    erp = MetricTable("collapsed_erp_uv", TABLE.pipelines, SUBJECTS, np.array([[3.0] * 4, [1.0] * 4, [3.0] * 4]))
    assert "removed the signal" in tuning_holdout(sme, "ref", ["s1", "s2"], erp).warnings[0]
