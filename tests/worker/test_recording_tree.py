"""Recordings through the prefix tree and the step cache: the same epochs and records as each pipeline
run alone by ``apply_two_stage`` (the reference semantics), continuous prefixes computed once per run,
and cached outputs reused by a later run."""

import functools

import pytest

from epoch_assay.engine.grid import GridSpec, expand_grid
from epoch_assay.engine.io.session_files import SessionFiles, UploadedPart, group_runs
from epoch_assay.engine.recording import ChannelSpec, ContinuousInput, EpochingSpec, apply_two_stage, load_session
from epoch_assay.engine.tree import LeafOutput, TreeNode, build_tree, execute_recording_tree
from tests.support.recording_files import known_recording, recording_bytes
from worker.execution.multiverse import ExecutionSettings, SourceHandlers, execute_multiverse
from worker.execution.step_cache import DiskStepCache
from worker.run_job import EpochSetRef, execute_run

EPOCHING = EpochingSpec(tmin=-0.2, tmax=0.6, conditions={"a": ["a"], "b": ["b"]})
# Written with the epochs-stage step (reference) before the continuous-stage one (highpass): the tree
# must group by the two-stage order, in which the high-pass runs first.
GRID = GridSpec(
    factors={
        "reference": {"as_recorded": [], "average": [{"step": "reference", "kind": "average"}]},
        "highpass": {
            "none": [],
            "0.5": [{"step": "highpass", "cutoff_hz": 0.5, "method": "iir", "order": 2}],
            "1": [{"step": "highpass", "cutoff_hz": 1.0, "method": "iir", "order": 2}],
        },
        "baseline": {"off": [], "on": [{"step": "baseline", "window_s": [-0.2, 0.0]}]},
    }
)
PIPELINES = [point.pipeline for point in expand_grid(GRID)]
SHA256 = "ab" * 32


@pytest.fixture(scope="module")
def session(tmp_path_factory) -> ContinuousInput:
    folder = tmp_path_factory.mktemp("runs")
    parts = []
    for number, seed in enumerate((41, 42), start=1):
        path = folder / f"run-{number}.edf"
        path.write_bytes(recording_bytes(known_recording(seed=seed, effect_uv=5.0), "edf"))
        parts.append(UploadedPart(path, path.name))
    return load_session(SessionFiles(runs=group_runs(parts, [])), EPOCHING, ChannelSpec(), max_array_bytes=1 << 28)


def without_seconds(records) -> list[dict]:
    return [record.model_dump(mode="json", exclude={"seconds"}) for record in records]


def leaf_result(leaf: LeafOutput, uploaded) -> dict:
    return {
        "pipeline": leaf.pipeline.name,
        "data": leaf.epochs.data.tobytes(),
        "labels": leaf.epochs.labels.tolist(),
        "records": without_seconds(leaf.records),
    }


def alone(session: ContinuousInput) -> list[dict]:
    results = []
    for pipeline in PIPELINES:
        epochs, records = apply_two_stage(pipeline, session)
        results.append(
            {
                "pipeline": pipeline.name,
                "data": epochs.data.tobytes(),
                "labels": epochs.labels.tolist(),
                "records": without_seconds(records),
            }
        )
    return results


def highpass_nodes(node: TreeNode) -> list[TreeNode]:
    own = [node] if node.prefix and node.prefix[-1].step == "highpass" else []
    return own + [found for child in node.children for found in highpass_nodes(child)]


def test_two_stage_tree_applies_each_high_pass_once_at_the_top():
    # Written order puts the reference first: that tree filters under each reference (2 × 2 nodes);
    # in two-stage order each of the 2 cutoffs is one node, right below the root.
    assert len(highpass_nodes(build_tree(PIPELINES).root)) == 4
    staged = highpass_nodes(build_tree(PIPELINES, two_stage=True).root)
    assert len(staged) == 2 and all(len(node.prefix) == 1 for node in staged)


def test_a_recording_is_split_into_one_branch_per_filter_and_one_on_its_own_epochs():
    branches = build_tree(PIPELINES, two_stage=True).recording_branches()
    assert [len(branch.pipelines) for branch in branches] == [4, 4, 4]
    assert [branch.root.children[0].prefix[0].step for branch in branches[1:]] == ["highpass", "highpass"]
    # The unfiltered branch holds the pipeline of no step and those starting with reference or baseline.
    assert branches[0].root.pipelines and len(branches[0].root.children) == 2


def test_tree_gives_each_pipeline_the_epochs_and_records_of_apply_two_stage_bit_for_bit(session):
    leaves = [
        leaf_result(leaf, None)
        for leaf in execute_recording_tree(build_tree(PIPELINES, two_stage=True), session, SHA256)
    ]
    by_name = {leaf["pipeline"]: leaf for leaf in leaves}
    assert [by_name[name] for name in (p.name for p in PIPELINES)] == alone(session)


def test_records_of_continuous_steps_name_their_run_and_stage(session):
    pipeline = next(p for p in PIPELINES if len(p.steps) == 3)
    (leaf,) = execute_recording_tree(build_tree([pipeline], two_stage=True), session, SHA256)
    assert [(r.step, r.stage, r.run) for r in leaf.records] == [
        ("highpass", "continuous", 1),
        ("highpass", "continuous", 2),
        ("reference", "epochs", None),
        ("baseline", "epochs", None),
    ]


@pytest.mark.parametrize("workers", [1, 2])
def test_multiverse_with_the_cache_equals_apply_two_stage_per_pipeline(session, tmp_path, workers):
    handlers = SourceHandlers(
        load=lambda ref: session, source_sha256=lambda ref: SHA256, score_leaf=lambda ref: leaf_result
    )
    settings = ExecutionSettings(workers=workers, cache_dir=tmp_path / "cache")
    first = execute_multiverse(PIPELINES, ["s1"], handlers, settings, lambda _: None)
    again = execute_multiverse(PIPELINES, ["s1"], handlers, settings, lambda _: None)
    assert first.results == again.results == alone(session)
    assert first.cache.hits == 0 and again.cache.misses == 0 and again.cache.hits == first.cache.misses


def test_a_second_run_with_another_scoring_window_takes_the_steps_from_the_cache(session, tmp_path):
    refs = [EpochSetRef(id="es_1", subject="01", session=None, sha256=SHA256)]
    settings = ExecutionSettings(workers=1, cache_dir=tmp_path / "cache")
    run = functools.partial(execute_run, "run_1", "S", execution=settings, load=lambda ref: session)

    def spec(window: list[float]) -> dict:
        return {
            "grid": GRID.model_dump(mode="json"),
            "scoring": {"conditions": ["a", "b"], "window_s": window, "correction": "none"},
        }

    first = run(spec=spec([0.3, 0.5]), epoch_sets=refs, on_progress=lambda _: None)
    second = run(spec=spec([0.2, 0.4]), epoch_sets=refs, on_progress=lambda _: None)
    assert first.cache.hits == 0 and first.cache.misses > 0
    assert second.cache.misses == 0 and second.cache.hits == first.cache.misses
    # Same processed epochs, another window: the provenance (apart from seconds) is the same.
    assert [without_seconds(e.provenance) for e in second.results] == [
        without_seconds(e.provenance) for e in first.results
    ]


def test_another_epoching_reuses_the_filtered_runs_but_not_the_outputs_after_epoching(session, tmp_path):
    tree = build_tree([next(p for p in PIPELINES if len(p.steps) == 3)], two_stage=True)
    first = DiskStepCache(tmp_path, 10**9)
    list(execute_recording_tree(tree, session, SHA256, first))
    # One high-pass per run (2), then reference and baseline on the epochs (2).
    assert (first.stats().hits, first.stats().misses) == (0, 4)
    shorter = ContinuousInput(session.runs, session.epoching.model_copy(update={"tmax": 0.5}))
    second = DiskStepCache(tmp_path, 10**9)
    list(execute_recording_tree(tree, shorter, SHA256, second))
    assert (second.stats().hits, second.stats().misses) == (2, 2)
