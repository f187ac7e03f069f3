"""execute_run with a grid: same entries as the listed pipelines, plus cache, ranking, factor effects, selection."""

from epoch_assay.engine.document import ResultEntry, RunResultDocument
from epoch_assay.engine.document.multiverse import CacheCounts
from epoch_assay.engine.grid import GridSpec, expand_grid
from epoch_assay.engine.tree import build_tree
from tests.engine.conftest import random_epoch_set
from worker.execution.multiverse import ExecutionSettings
from worker.run_job import EpochSetRef, execute_run

GRID = {
    "factors": {
        "highpass": {"none": [], "2": [{"step": "highpass", "cutoff_hz": 2.0}]},
        "baseline": {"none": [], "pre": [{"step": "baseline", "window_s": [-0.1, 0.0]}]},
    }
}
SCORING = {"conditions": ["a", "b"], "window_s": [0.1, 0.3], "correction": "none"}
PIPELINES = [point.pipeline for point in expand_grid(GridSpec.model_validate(GRID))]
STEPS = build_tree(PIPELINES).count_steps() * 4  # 3 steps per epoch set: highpass, baseline after it, baseline alone
ENTRIES = len(PIPELINES) * 4
REFS = [EpochSetRef(id=f"es_{i}", subject=f"sub-{i}", session=None, sha256=f"{i:064x}") for i in range(4)]


def load(ref: EpochSetRef):
    epochs = random_epoch_set(n_trials=20, n_channels=8, n_times=60, sfreq=100.0, tmin=-0.1, seed=int(ref.id[-1]))
    data = epochs.data.copy()
    data[epochs.labels == "a", :, 20:40] += 8e-6
    return epochs.with_changes(data=data)


def grid_run(tmp_path=None, **extra) -> RunResultDocument:
    execution = ExecutionSettings(workers=1, cache_dir=tmp_path, cache_max_bytes=10**9)
    spec = {"grid": GRID, "scoring": SCORING, **extra}
    return execute_run("run_x", "S", spec, REFS, load, lambda _: None, execution=execution)


def without_timing(entries: list[ResultEntry]) -> list[dict]:
    return [
        {**e.model_dump(mode="json"), "provenance": [r.model_dump(mode="json") | {"seconds": 0} for r in e.provenance]}
        for e in entries
    ]


def test_grid_run_gives_the_entries_of_the_same_pipelines_listed():
    listed = [pipeline.model_dump(mode="json") for pipeline in PIPELINES]
    plain = execute_run("run_x", "S", {"pipelines": listed, "scoring": SCORING}, REFS, load, lambda _: None)
    assert without_timing(grid_run().results) == without_timing(plain.results)


def test_result_counts_cache_hits_of_a_second_run(tmp_path):
    first = grid_run(tmp_path)
    second = grid_run(tmp_path)
    assert first.cache == CacheCounts(hits=0, misses=STEPS) and second.cache == CacheCounts(hits=STEPS, misses=0)


def test_ranking_has_every_pipeline_with_its_group_summary():
    document = grid_run()
    assert document.ranking is not None and document.group is not None
    assert sorted(e.pipeline for e in document.ranking) == sorted(g.pipeline for g in document.group)
    assert all(e.group is not None and e.group.pipeline == e.pipeline for e in document.ranking)


def test_grid_run_reports_factor_effects_of_every_factor():
    effects = grid_run().factor_effects
    assert effects is not None and set(effects.factors or ()) == {"highpass", "baseline"}


def test_listed_pipelines_have_no_factor_effects_or_selection():
    listed = [{"name": "raw", "steps": []}, {"name": "bl", "steps": [{"step": "baseline", "window_s": [-0.1, 0.0]}]}]
    document = execute_run("run_x", "S", {"pipelines": listed, "scoring": SCORING}, REFS, load, lambda _: None)
    assert document.factor_effects is None and document.selection is None


def test_selection_with_tuning_subjects_is_reported():
    selection = {"rule": "tuning_holdout", "tuning_subjects": ["sub-0", "sub-1"], "metric": "significant_fraction"}
    outcome = grid_run(selection=selection).selection
    assert (
        outcome is not None
        and outcome.holdout_subjects == ["sub-2", "sub-3"]
        and outcome.winner in {p.pipeline for p in grid_run().group or ()}
    )


def test_a_run_with_a_selection_marks_group_and_ranking_exploratory():
    selection = {"rule": "tuning_holdout", "tuning_subjects": ["sub-0", "sub-1"], "metric": "significant_fraction"}
    note = grid_run(selection=selection).exploratory
    assert note is not None and note.parts == ["group", "ranking"]
    assert grid_run().exploratory is None


def test_progress_detail_counts_entries_and_gives_an_eta():
    details = []
    execute_run(
        "run_x",
        "S",
        {"grid": GRID, "scoring": SCORING},
        REFS,
        load,
        lambda _: None,
        execution=ExecutionSettings(workers=1),
        on_detail=details.append,
    )
    # Each small epoch set is one unit: progress moves by its pipelines.
    assert [d.done for d in details] == [len(PIPELINES) * (i + 1) for i in range(4)]
    assert details[-1].total == ENTRIES and details[-1].eta_s == 0.0
