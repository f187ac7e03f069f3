"""The ranking, factor-effects and selection parts of a result document."""

import numpy as np
import pytest

from epoch_assay.engine.document.multiverse import PipelineGroupResult
from epoch_assay.engine.grid import GridSpec, expand_grid
from epoch_assay.engine.multiverse_report import (
    exploratory_note,
    factor_effects_document,
    ranking_document,
    selection_document,
)
from epoch_assay.engine.selection import ContrastBlindSpec, SplitSpec, TuningHoldoutSpec

GRID = GridSpec(
    factors={
        "hp": {"none": [], "1": [{"step": "highpass", "cutoff_hz": 1.0}]},
        "bl": {"none": [], "pre": [{"step": "baseline", "window_s": [-0.1, 0.0]}]},
    }
)
POINTS = expand_grid(GRID)
NAMES = [point.pipeline.name for point in POINTS]
RNG = np.random.default_rng(1)
RESULTS = [
    {
        "pipeline": name,
        "subject": f"s{s}",
        "significant_fraction": float(np.clip(0.2 + 0.2 * (i >= 2) + RNG.normal(0, 0.05), 0, 1)),
        "n_trials": {"a": 40 - i, "b": 40},
    }
    for s in range(6)
    for i, name in enumerate(NAMES)
]


def group_entry(name: str) -> PipelineGroupResult:
    return PipelineGroupResult(
        pipeline=name,
        n_subjects=6,
        n_entries_with_error=0,
        significant_fraction=None,
        median_sme_uv=None,
        vs_reference=None,
        group_test=None,
    )


def test_ranking_lists_every_pipeline_best_first_with_its_group_entry():
    group = [group_entry(name) for name in NAMES]
    ranking = ranking_document(RESULTS, NAMES, NAMES[0], "significant_fraction", group)
    assert sorted(e.pipeline for e in ranking) == sorted(NAMES)
    assert ranking[0].pipeline.startswith("hp=1") and ranking[0].group == group_entry(ranking[0].pipeline)
    means = [e.mean for e in ranking]
    assert means == sorted(means, reverse=True)


def test_factor_effects_name_every_factor_and_level():
    document = factor_effects_document(RESULTS, GRID, POINTS)
    assert document.factors is not None and set(document.factors) == {"hp", "bl"}
    assert set(document.factors["hp"].levels) == {"none", "1"}
    assert document.factors["hp"].levels["1"].estimate > 0


def test_factor_effects_that_cannot_be_fitted_say_why():
    document = factor_effects_document([e for e in RESULTS if e["subject"] == "s0"], GRID, POINTS)
    assert "at least two subjects" in document.error and document.factors is None


def test_selection_by_split_reports_both_sides():
    document = selection_document(RESULTS, NAMES, NAMES[0], TuningHoldoutSpec(split=SplitSpec(fraction=0.5, seed=3)))
    assert len(document.tuning_subjects) == 3 and len(document.holdout_subjects) == 3
    assert document.winner in NAMES and document.holdout.reference.mean is not None
    assert document.reference_holdout_score == document.holdout.reference.mean


def test_selection_by_split_reports_tuning_scores_held_out_test_and_optimism():
    document = selection_document(RESULTS, NAMES, NAMES[0], TuningHoldoutSpec(split=SplitSpec(fraction=0.5, seed=3)))
    tuning, holdout = document.tuning, document.holdout
    assert None not in (tuning.winner_score, tuning.reference_score, document.optimism)
    assert holdout.winner.ci_low is not None and holdout.winner_vs_reference.paired_t_p is not None
    expected = (tuning.winner_score - tuning.reference_score) - (holdout.winner.mean - holdout.reference.mean)
    assert document.optimism == pytest.approx(expected)


def test_ranking_entries_carry_adjusted_p_and_rank_spread():
    ranking = ranking_document(RESULTS, NAMES, NAMES[0], "significant_fraction", seed=2)
    compared = [entry for entry in ranking if entry.vs_reference is not None]
    assert len(compared) == len(NAMES) - 1
    assert all(0.0 < entry.vs_reference.p_adjusted <= 1.0 for entry in compared)
    assert all("max-|t| sign-flip" in entry.vs_reference.adjustment for entry in compared)
    assert sum(entry.probability_best for entry in ranking) == pytest.approx(1.0)


def test_runs_with_a_selection_mark_group_and_ranking_exploratory():
    note = exploratory_note(TuningHoldoutSpec(split=SplitSpec()))
    assert note.parts == ["group", "ranking"] and "tuning subjects" in note.reason
    assert exploratory_note(None) is None


def test_contrast_blind_selection_on_trials_kept_picks_the_pipeline_keeping_most():
    document = selection_document(RESULTS, NAMES, NAMES[0], ContrastBlindSpec(metric="trials_kept"))
    assert document.winner == NAMES[0]


def test_selection_that_cannot_run_reports_an_error():
    document = selection_document(RESULTS, NAMES, NAMES[0], TuningHoldoutSpec(tuning_subjects=["nobody"]))
    assert document.rule == "tuning_holdout" and "nobody" in document.error and document.winner is None
