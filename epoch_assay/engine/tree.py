"""Many pipelines on one epoch set as a prefix tree: a prefix of steps shared by several
pipelines is computed once.

Each node of the tree is one step, reached by the steps above it (its prefix); the
pipelines ending at a node are its leaves. Nodes are keyed by the step's canonical JSON
(defaults filled in, sorted keys), so ``{"step": "highpass", "cutoff_hz": 1}`` and the same
step with ``"method": "fir"`` written out are one node. Execution is depth-first and holds
only the epoch sets on the current path, so memory grows with the depth of the tree, not
with the number of pipelines.

Step outputs may be kept in a cache handed in by the caller (the engine itself touches no
files); the key of a node is the SHA-256 of the source epoch set's SHA-256 and, for every
step of the node's prefix, its canonical JSON, its implementation version (``Step.version``)
and the installed versions of the packages it depends on (``Step.dependencies``: numpy,
scipy, mne, epoch-assay, and scikit-learn or python-picard for the ICA methods that use
them). So a different input, a different chain of steps, a changed step or an upgraded
package never reuses an output, even from a cache shared by several installations.

Recordings (:class:`~epoch_assay.engine.recording.ContinuousInput`) go through the same tree,
built on each pipeline's steps in two-stage order (continuous-stage steps first, in written
order, then the epochs-stage steps; :func:`two_stage_steps`), with exactly the semantics of
:func:`~epoch_assay.engine.recording.apply_two_stage`. A continuous-stage node is applied to
each run of the session; the runs are epoched and concatenated once per continuous-stage node
that has pipelines ending at it or epochs-stage steps below it, and the epochs-stage subtree
runs on those epochs. Keys of continuous-stage outputs use the source's SHA-256 and the run
number in place of the source hash; keys of epochs-stage outputs use the source's SHA-256 and
the epoching spec.
"""

import hashlib
import json
import time
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from typing import Protocol

from epoch_assay.engine import provenance
from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.pipeline import PipelineSpec
from epoch_assay.engine.provenance import Stage, StepProvenanceBase
from epoch_assay.engine.recording import ContinuousInput, epoch_runs
from epoch_assay.engine.steps.base import Step


@dataclass(frozen=True)
class StepOutput:
    """What one step made of its input: the new epoch set and its provenance record."""

    epochs: EpochSet
    record: StepProvenanceBase


class StepCache(Protocol):
    """Where step outputs are kept between pipelines, units and runs."""

    def get(self, key: str) -> StepOutput | None:
        """The output stored under ``key``, or None."""

    def put(self, key: str, output: StepOutput) -> None:
        """Store ``output`` under ``key``."""


@dataclass(frozen=True)
class TreeNode:
    """The steps from the root to here (empty at the root), the pipelines ending here, and what follows."""

    prefix: tuple[Step, ...]
    pipelines: tuple[PipelineSpec, ...]
    children: tuple["TreeNode", ...]

    def count_steps(self) -> int:
        """Steps applied when this node's subtree is executed (this node's own step excluded)."""
        return sum(1 + child.count_steps() for child in self.children)


@dataclass(frozen=True)
class PipelineTree:
    """The pipelines of a run arranged by shared prefixes."""

    root: TreeNode

    @property
    def pipelines(self) -> tuple[PipelineSpec, ...]:
        """Every pipeline of the tree, depth-first (the order leaves are produced in)."""
        return tuple(_pipelines_below(self.root))

    def count_steps(self) -> int:
        """Steps applied to run the whole tree once (a pipeline run alone applies all of its own)."""
        return self.root.count_steps()

    def branches(self) -> list["PipelineTree"]:
        """The tree split at its root: one tree per first step, and one for pipelines with no step.

        Branches share nothing but the input, so they can run in separate processes.
        """
        trees = [PipelineTree(TreeNode((), (), (child,))) for child in self.root.children]
        if self.root.pipelines:
            trees.insert(0, PipelineTree(TreeNode((), self.root.pipelines, ())))
        return trees

    def recording_branches(self) -> list["PipelineTree"]:
        """A two-stage tree split at its root for a recording: one tree per continuous-stage first step,
        and one with the pipelines that start on the epochs of the recording as it is (epoched once).
        """
        continuous = [child for child in self.root.children if child.prefix[-1].stage == Stage.CONTINUOUS]
        on_epochs = tuple(child for child in self.root.children if child.prefix[-1].stage != Stage.CONTINUOUS)
        trees = [PipelineTree(TreeNode((), (), (child,))) for child in continuous]
        if self.root.pipelines or on_epochs:
            trees.insert(0, PipelineTree(TreeNode((), self.root.pipelines, on_epochs)))
        return trees


@dataclass(frozen=True)
class LeafOutput:
    """A pipeline's processed epoch set and one provenance record per step, in order."""

    pipeline: PipelineSpec
    epochs: EpochSet
    records: tuple[StepProvenanceBase, ...]


def canonical_step_json(step: Step) -> str:
    """The step as canonical JSON (defaults filled in, sorted keys, no spaces)."""
    return json.dumps(step.model_dump(mode="json"), sort_keys=True, separators=(",", ":"))


def step_fingerprint(step: Step) -> str:
    """What identifies a step's computation: its canonical JSON, its version and its packages' versions."""
    packages = {name: provenance.installed_version(name) for name in step.dependencies()}
    return json.dumps(
        {"step": canonical_step_json(step), "version": step.version, "packages": packages},
        sort_keys=True,
        separators=(",", ":"),
    )


def prefix_cache_key(source_sha256: str, prefix: Sequence[Step]) -> str:
    """SHA-256 (hex) of the source epoch set's SHA-256 and the fingerprint of each step of the prefix, in order."""
    return hashlib.sha256("\n".join((source_sha256, *map(step_fingerprint, prefix))).encode()).hexdigest()


def two_stage_steps(pipeline: PipelineSpec) -> tuple[Step, ...]:
    """The pipeline's steps in the order a recording runs them: continuous-stage steps, then the others,
    each in written order (as in :func:`~epoch_assay.engine.recording.apply_two_stage`)."""
    continuous = tuple(step for step in pipeline.steps if step.stage == Stage.CONTINUOUS)
    return continuous + tuple(step for step in pipeline.steps if step.stage != Stage.CONTINUOUS)


def build_tree(pipelines: Sequence[PipelineSpec], *, two_stage: bool = False) -> PipelineTree:
    """Arrange ``pipelines`` by shared prefixes; children keep the order their first pipeline has.

    With ``two_stage`` the prefixes are those of each pipeline's :func:`two_stage_steps` (the tree
    that :func:`execute_recording_tree` takes); the leaves keep the pipelines as written.
    """
    steps_of = two_stage_steps if two_stage else (lambda pipeline: tuple(pipeline.steps))
    return PipelineTree(_build_node((), [(steps_of(pipeline), pipeline) for pipeline in pipelines]))


def execute_tree(
    tree: PipelineTree, epochs: EpochSet, source_sha256: str, cache: StepCache | None = None
) -> Iterator[LeafOutput]:
    """Apply the tree to ``epochs`` depth-first, yielding each pipeline's output as it is reached.

    ``source_sha256`` identifies ``epochs`` in cache keys (the SHA-256 of the stored file).
    Errors raised by a step propagate, as when the pipeline is applied alone.
    """
    yield from _execute_node(tree.root, epochs, (), source_sha256, cache)


def execute_recording_tree(
    tree: PipelineTree, source: ContinuousInput, source_sha256: str, cache: StepCache | None = None
) -> Iterator[LeafOutput]:
    """Apply a two-stage tree (``build_tree(..., two_stage=True)``) to a session, depth-first.

    Each leaf's epochs and records are those ``apply_two_stage`` gives its pipeline: continuous-stage
    records run by run (stage "continuous", the run number when the session has several runs),
    then the epochs-stage records. ``source_sha256`` identifies the session (the stored set's SHA-256).
    """
    recordings = tuple(run.recording for run in source.runs)
    yield from _execute_continuous(tree.root, recordings, tuple(() for _ in recordings), source, source_sha256, cache)


def run_source_sha256(source_sha256: str, run: int) -> str:
    """What identifies run ``run`` (1-based) of a session in the keys of its continuous-stage outputs."""
    return hashlib.sha256(f"{source_sha256}\nrun {run}".encode()).hexdigest()


def epoched_source_sha256(source_sha256: str, source: ContinuousInput) -> str:
    """What identifies a session's epochs in the keys of epochs-stage outputs: the session and its epoching."""
    epoching = json.dumps(source.epoching.model_dump(mode="json"), sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(f"{source_sha256}\nepoching {epoching}".encode()).hexdigest()


def _execute_continuous(
    node: TreeNode,
    recordings: tuple[EpochSet, ...],
    records_by_run: tuple[tuple[StepProvenanceBase, ...], ...],
    source: ContinuousInput,
    source_sha256: str,
    cache: StepCache | None,
) -> Iterator[LeafOutput]:
    continuous = tuple(child for child in node.children if child.prefix[-1].stage == Stage.CONTINUOUS)
    after_epoching = tuple(child for child in node.children if child.prefix[-1].stage != Stage.CONTINUOUS)
    if node.pipelines or after_epoching:
        epochs = epoch_runs([(r, run.events) for r, run in zip(recordings, source.runs, strict=True)], source.epoching)
        records = tuple(record for run_records in records_by_run for record in run_records)
        epochs_node = TreeNode(node.prefix, node.pipelines, after_epoching)
        yield from _execute_node(epochs_node, epochs, records, epoched_source_sha256(source_sha256, source), cache)
    several = len(recordings) > 1
    for child in continuous:
        outputs = [
            _apply_step(child, recording, run_source_sha256(source_sha256, number), cache)
            for number, recording in enumerate(recordings, start=1)
        ]
        # A copy: the cached record stays as the step made it, whatever run it is reused for.
        child_records_by_run = tuple(
            (
                *run_records,
                output.record.model_copy(update={"stage": Stage.CONTINUOUS, "run": number if several else None}),
            )
            for number, (run_records, output) in enumerate(zip(records_by_run, outputs, strict=True), start=1)
        )
        yield from _execute_continuous(
            child, tuple(output.epochs for output in outputs), child_records_by_run, source, source_sha256, cache
        )


def _build_node(prefix: tuple[Step, ...], pipelines: list[tuple[tuple[Step, ...], PipelineSpec]]) -> TreeNode:
    depth = len(prefix)
    groups: dict[str, list[tuple[tuple[Step, ...], PipelineSpec]]] = {}
    for steps, pipeline in pipelines:
        if len(steps) > depth:
            groups.setdefault(canonical_step_json(steps[depth]), []).append((steps, pipeline))
    children = tuple(_build_node((*prefix, group[0][0][depth]), group) for group in groups.values())
    ending = tuple(pipeline for steps, pipeline in pipelines if len(steps) == depth)
    return TreeNode(prefix=prefix, pipelines=ending, children=children)


def _pipelines_below(node: TreeNode) -> Iterator[PipelineSpec]:
    yield from node.pipelines
    for child in node.children:
        yield from _pipelines_below(child)


def _execute_node(
    node: TreeNode,
    epochs: EpochSet,
    records: tuple[StepProvenanceBase, ...],
    source_sha256: str,
    cache: StepCache | None,
) -> Iterator[LeafOutput]:
    for pipeline in node.pipelines:
        yield LeafOutput(pipeline=pipeline, epochs=epochs, records=records)
    for child in node.children:
        output = _apply_step(child, epochs, source_sha256, cache)
        yield from _execute_node(child, output.epochs, (*records, output.record), source_sha256, cache)


def _apply_step(node: TreeNode, epochs: EpochSet, source_sha256: str, cache: StepCache | None) -> StepOutput:
    if cache is None:
        return _run_step(node.prefix[-1], epochs)
    key = prefix_cache_key(source_sha256, node.prefix)
    cached = cache.get(key)
    if cached is not None:
        return cached
    output = _run_step(node.prefix[-1], epochs)
    cache.put(key, output)
    return output


def _run_step(step: Step, epochs: EpochSet) -> StepOutput:
    started = time.perf_counter()
    processed, record = step.apply(epochs)
    record.seconds = round(time.perf_counter() - started, 6)
    return StepOutput(epochs=processed, record=record)
