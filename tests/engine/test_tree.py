"""Prefix-tree execution: same outputs as each pipeline alone, shared prefixes computed once, cache use."""

import numpy as np
import pytest

from epoch_assay.engine import provenance
from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.grid import GridSpec, expand_grid
from epoch_assay.engine.pipeline import PipelineSpec, apply_pipeline
from epoch_assay.engine.steps.base import Step
from epoch_assay.engine.steps.baseline import Baseline
from epoch_assay.engine.steps.ica import Ica
from epoch_assay.engine.tree import StepOutput, build_tree, execute_tree, prefix_cache_key

SHA = "0" * 64
GRID = GridSpec(
    factors={
        "highpass": {
            "none": [],
            "1": [{"step": "highpass", "cutoff_hz": 1.0}],
            "2": [{"step": "highpass", "cutoff_hz": 2.0}],
        },
        "reference": {"none": [], "average": [{"step": "reference", "kind": "average"}]},
        "baseline": {"none": [], "pre": [{"step": "baseline", "window_s": [-0.1, 0.0]}]},
    }
)


class DictCache:
    def __init__(self) -> None:
        self.store: dict[str, StepOutput] = {}
        self.hits = 0

    def get(self, key: str) -> StepOutput | None:
        output = self.store.get(key)
        self.hits += output is not None
        return output

    def put(self, key: str, output: StepOutput) -> None:
        self.store[key] = output


@pytest.fixture
def epochs(random_epochs) -> EpochSet:
    return random_epochs(n_trials=8, n_channels=5, n_times=100, sfreq=100.0, tmin=-0.2, seed=3)


def grid_pipelines() -> list[PipelineSpec]:
    return [point.pipeline for point in expand_grid(GRID)]


def test_tree_outputs_equal_each_pipeline_applied_alone(epochs):
    alone = {pipeline.name: apply_pipeline(pipeline, epochs)[0] for pipeline in grid_pipelines()}
    leaves = list(execute_tree(build_tree(grid_pipelines()), epochs, SHA))
    assert sorted(leaf.pipeline.name for leaf in leaves) == sorted(alone)
    for leaf in leaves:
        np.testing.assert_array_equal(leaf.epochs.data, alone[leaf.pipeline.name].data)


def test_tree_records_match_each_pipeline_alone(epochs):
    alone = {pipeline.name: apply_pipeline(pipeline, epochs)[1] for pipeline in grid_pipelines()}
    for leaf in execute_tree(build_tree(grid_pipelines()), epochs, SHA):
        assert [(r.step, r.params) for r in leaf.records] == [(r.step, r.params) for r in alone[leaf.pipeline.name]]


def test_shared_prefixes_are_applied_once(epochs, monkeypatch):
    calls = []
    for cls in {type(step) for pipeline in grid_pipelines() for step in pipeline.steps}:
        original = cls.apply
        monkeypatch.setattr(cls, "apply", lambda self, e, _original=original: calls.append(self) or _original(self, e))
    list(execute_tree(build_tree(grid_pipelines()), epochs, SHA))
    # 2 high-pass nodes, 3 x 1 reference nodes, 6 x 1 baseline nodes
    assert len(calls) == 2 + 3 + 6 == build_tree(grid_pipelines()).count_steps()


def test_equal_steps_written_differently_share_a_node():
    explicit = PipelineSpec.model_validate(
        {"name": "a", "steps": [{"step": "highpass", "cutoff_hz": 1.0, "method": "fir"}]}
    )
    implicit = PipelineSpec.model_validate({"name": "b", "steps": [{"step": "highpass", "cutoff_hz": 1.0}]})
    assert build_tree([explicit, implicit]).count_steps() == 1


def test_branches_split_the_tree_at_its_root_and_keep_every_pipeline():
    tree = build_tree(grid_pipelines())
    branches = tree.branches()
    # the empty pipeline, then one branch per first step: highpass 1, highpass 2, reference, baseline
    assert len(branches) == 5
    assert branches[0].pipelines[0].steps == []
    assert sorted(p.name for b in branches for p in b.pipelines) == sorted(p.name for p in grid_pipelines())
    assert sum(branch.count_steps() for branch in branches) == tree.count_steps()


def test_second_execution_takes_every_step_from_the_cache(epochs):
    cache = DictCache()
    tree = build_tree(grid_pipelines())
    first = {leaf.pipeline.name: leaf.epochs.data for leaf in execute_tree(tree, epochs, SHA, cache)}
    assert cache.hits == 0 and len(cache.store) == tree.count_steps()
    second = {leaf.pipeline.name: leaf.epochs.data for leaf in execute_tree(tree, epochs, SHA, cache)}
    assert cache.hits == tree.count_steps()
    for name, data in first.items():
        np.testing.assert_array_equal(second[name], data)


def test_cache_key_depends_on_source_prefix_and_order():
    steps: list[Step] = list(grid_pipelines()[-1].steps)
    key = prefix_cache_key(SHA, steps)
    assert key != prefix_cache_key("1" * 64, steps)
    assert key != prefix_cache_key(SHA, steps[:-1])
    assert key != prefix_cache_key(SHA, steps[::-1])
    assert key == prefix_cache_key(SHA, list(steps))


def test_a_new_version_of_a_package_misses_every_cached_step(epochs, monkeypatch):
    cache = DictCache()
    tree = build_tree(grid_pipelines())
    list(execute_tree(tree, epochs, SHA, cache))
    installed = provenance.installed_version
    monkeypatch.setattr(provenance, "installed_version", lambda name: "99.0" if name == "scipy" else installed(name))
    list(execute_tree(tree, epochs, SHA, cache))
    assert cache.hits == 0 and len(cache.store) == 2 * tree.count_steps()


def test_a_new_step_version_misses_only_the_prefixes_that_contain_the_step(epochs, monkeypatch):
    tree = build_tree(grid_pipelines())
    prefixes = [pipeline.steps[:n] for pipeline in grid_pipelines() for n in range(1, len(pipeline.steps) + 1)]
    keys_before = {prefix_cache_key(SHA, prefix) for prefix in prefixes}
    cache = DictCache()
    list(execute_tree(tree, epochs, SHA, cache))
    monkeypatch.setattr(Baseline, "version", Baseline.version + 1)
    with_baseline = [prefix for prefix in prefixes if any(isinstance(step, Baseline) for step in prefix)]
    assert {prefix_cache_key(SHA, prefix) for prefix in with_baseline}.isdisjoint(keys_before)
    list(execute_tree(tree, epochs, SHA, cache))
    # 11 nodes: the 6 baseline nodes are computed anew, the 2 high-pass and 3 reference nodes come from the cache
    assert cache.hits == 5 and len(cache.store) == tree.count_steps() + 6


def test_record_names_the_step_version_that_made_it(epochs, monkeypatch):
    monkeypatch.setattr(Baseline, "version", 7)
    pipeline = PipelineSpec.model_validate({"name": "p", "steps": [{"step": "baseline", "window_s": [-0.1, 0.0]}]})
    (leaf,) = execute_tree(build_tree([pipeline]), epochs, SHA)
    assert leaf.records[0].version == 7


def test_scikit_learn_is_in_the_key_of_fastica_only(monkeypatch):
    fastica, infomax = Ica(method="fastica"), Ica(method="infomax")
    before = prefix_cache_key(SHA, [fastica]), prefix_cache_key(SHA, [infomax])
    installed = provenance.installed_version
    monkeypatch.setattr(
        provenance, "installed_version", lambda name: "99.0" if name == "scikit-learn" else installed(name)
    )
    assert prefix_cache_key(SHA, [fastica]) != before[0]
    assert prefix_cache_key(SHA, [infomax]) == before[1]
