"""Multiverse execution: same entries as each pipeline alone, in run order, with the cache reused across runs."""

import functools

import pytest

from epoch_assay.engine.grid import GridSpec, expand_grid
from epoch_assay.engine.pipeline import apply_pipeline
from epoch_assay.engine.tree import LeafOutput, build_tree
from tests.engine.conftest import random_epoch_set
from worker.execution.multiverse import (
    SMALL_SOURCE_BYTES,
    ExecutionSettings,
    SourceHandlers,
    execute_multiverse,
    unit_branches,
)

GRID = GridSpec(
    factors={
        "highpass": {"none": [], "2": [{"step": "highpass", "cutoff_hz": 2.0}]},
        "reference": {
            "average": [{"step": "reference", "kind": "average"}],
            "E0": [{"step": "reference", "kind": "channels", "channels": ["E0"]}],
        },
        "baseline": {"none": [], "pre": [{"step": "baseline", "window_s": [-0.1, 0.0]}]},
    }
)
PIPELINES = [point.pipeline for point in expand_grid(GRID)]
SOURCES = ["s0", "s1", "s2"]


def load(source: str):
    return random_epoch_set(n_trials=6, n_channels=4, n_times=60, sfreq=100.0, tmin=-0.1, seed=SOURCES.index(source))


def leaf_entry(leaf: LeafOutput, epochs, source: str, window: int) -> dict:
    return {"pipeline": leaf.pipeline.name, "subject": source, "value": float(leaf.epochs.data[:, :, window].sum())}


def handlers(window: int = 10) -> SourceHandlers:
    return SourceHandlers(
        load=load,
        source_sha256=lambda source: source.encode().hex().ljust(64, "0"),
        score_leaf=lambda source: functools.partial(leaf_entry, source=source, window=window),
    )


def expected(window: int = 10) -> list[dict]:
    return [
        {"pipeline": p.name, "subject": s, "value": float(apply_pipeline(p, load(s))[0].data[:, :, window].sum())}
        for s in SOURCES
        for p in PIPELINES
    ]


@pytest.mark.parametrize("workers", [1, 2])
def test_entries_equal_each_pipeline_alone_in_run_order(workers):
    outcome = execute_multiverse(PIPELINES, SOURCES, handlers(), ExecutionSettings(workers=workers), lambda _: None)
    assert outcome.results == expected()


def test_progress_counts_entries_and_a_small_epoch_set_goes_as_one_unit():
    seen = []
    execute_multiverse(PIPELINES, SOURCES, handlers(), ExecutionSettings(workers=1), seen.append)
    # Each source is far below SMALL_SOURCE_BYTES: one unit with all its pipelines.
    assert [p.done for p in seen] == [len(PIPELINES) * (i + 1) for i in range(len(SOURCES))]
    assert seen[-1].total == len(SOURCES) * len(PIPELINES)


def test_a_large_epoch_set_goes_as_one_unit_per_branch():
    branches = build_tree(PIPELINES).branches()
    large = random_epoch_set(n_trials=2, n_channels=2, n_times=SMALL_SOURCE_BYTES // 32 + 1, sfreq=100.0, seed=0)
    small = load("s0")
    assert unit_branches(large, branches) == [(branch,) for branch in branches]
    assert unit_branches(small, branches) == [tuple(branches)]


def test_second_run_with_another_scoring_recomputes_no_step(tmp_path):
    settings = ExecutionSettings(workers=1, cache_dir=tmp_path, cache_max_bytes=10**9)
    first = execute_multiverse(PIPELINES, SOURCES, handlers(), settings, lambda _: None)
    steps = build_tree(PIPELINES).count_steps() * len(SOURCES)
    assert (first.cache.hits, first.cache.misses) == (0, steps)
    second = execute_multiverse(PIPELINES, SOURCES, handlers(window=20), settings, lambda _: None)
    assert (second.cache.hits, second.cache.misses) == (steps, 0)
    assert second.results == expected(window=20)
