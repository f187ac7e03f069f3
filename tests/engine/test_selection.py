"""Selection rules: the winner is chosen on the right subjects, and the holdout guards against the bias."""

import numpy as np
import pytest
from pydantic import TypeAdapter, ValidationError

from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.pipeline import PipelineSpec
from epoch_assay.engine.scoring import score_epochs
from epoch_assay.engine.scoring_spec import ScoringSpec
from epoch_assay.engine.selection import (
    SelectionSpec,
    SplitSpec,
    contrast_blind,
    split_subjects,
    tuning_holdout,
)
from epoch_assay.engine.subject_metrics import MetricTable, metric_table
from epoch_assay.engine.tree import build_tree, execute_tree
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


def test_tuning_holdout_scores_winner_and_reference_on_held_out_subjects():
    result = tuning_holdout(TABLE, "ref", ["s1", "s2"])
    assert (result.winner_tuning_score, result.winner_holdout_score, result.reference_holdout_score) == (0.5, 0.0, 0.1)


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
    result = contrast_blind(table)
    assert result.winner == "ref" and result.tuning_subjects == SUBJECTS and result.holdout_subjects == ()


def test_contrast_blind_refuses_a_metric_that_sees_the_contrast():
    with pytest.raises(SpecError):
        contrast_blind(TABLE)


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
        holdout_scores.append(result.winner_holdout_score)
    # A level-alpha test rejects a true null with probability alpha (Neyman & Pearson, 1933), which Welch's
    # test attains closely for normal data (Welch, 1947): chance is ALPHA significant channels per channel.
    holdout_mean, holdout_se = np.mean(holdout_scores), np.std(holdout_scores, ddof=1) / np.sqrt(40)
    tuning_mean, tuning_se = np.mean(tuning_scores), np.std(tuning_scores, ddof=1) / np.sqrt(40)
    assert holdout_mean < ALPHA + 3 * holdout_se
    assert tuning_mean > ALPHA + 3 * tuning_se
    assert tuning_mean > holdout_mean
