"""Many pipelines on many epoch sets: one prefix tree per epoch set, split at its root into branches
that run as units in worker processes, with step outputs kept in the on-disk cache.

A unit is one epoch set × one branch of the tree (the pipelines that start with the same step).
Epoch sets are loaded in the calling process, one at a time as their units are submitted, and
handed to the units; each unit opens the cache folder itself, so processes share entries
through the files. An input that is not an epoch set (a recording, epoched per pipeline)
is scored pipeline by pipeline with ``score_alone``, still one unit per branch.

Units run in a local process pool (``worker.execution.parallel``) or, when a scheduler address is set,
on a Dask distributed cluster (``worker.execution.dask_units``); the results are the same either way.
"""

from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, Generic, TypeVar

from epoch_assay.engine.document import ResultEntry
from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.pipeline import PipelineSpec
from epoch_assay.engine.tree import LeafOutput, PipelineTree, build_tree, execute_tree
from worker.execution.parallel import Progress, SharedInputUnit, Unit, run_units
from worker.execution.step_cache import CacheStats, DiskStepCache

Source = TypeVar("Source")
Entry = ResultEntry
GIB = 1024**3


@dataclass(frozen=True)
class ExecutionSettings:
    """How units run: ``workers`` local processes (None: all cores; 1: in the calling process), or
    on the Dask cluster of the scheduler at ``dask_scheduler`` (``tcp://host:8786``) when it is
    set, and the step cache in ``cache_dir`` bounded by ``cache_max_bytes``, keeping the outputs of
    steps that took at least ``cache_min_step_seconds`` (no cache when ``cache_dir`` is None).

    On a cluster each unit opens ``cache_dir`` (made absolute on the calling host) on the host it
    runs on: a folder shared by the hosts, or a local folder on each (entries are named by
    content, so either is correct)."""

    workers: int | None = None
    cache_dir: Path | None = None
    cache_max_bytes: int = 8 * GIB
    cache_min_step_seconds: float = 0.0
    dask_scheduler: str | None = None


@dataclass(frozen=True)
class UnitOutcome:
    """The entries of one unit by pipeline name, and the unit's cache lookups."""

    entries: dict[str, Entry]
    cache: CacheStats


@dataclass(frozen=True)
class MultiverseOutcome:
    """``results``: for each epoch set in order, one entry per pipeline in run order."""

    results: list[Entry]
    cache: CacheStats


@dataclass(frozen=True)
class SourceHandlers(Generic[Source]):
    """How the runner's epoch-set references are turned into work.

    load : the input of a reference (an ``EpochSet``, or anything ``score_alone`` takes)
    source_sha256 : the content hash of a reference's stored file, for cache keys
    score_leaf : for a reference, a picklable callable turning a tree leaf and the epoch set it
        came from into a result entry
    score_alone : for a reference, a picklable callable applying and scoring one pipeline on
        an input that is not an epoch set
    """

    load: Callable[[Source], Any]
    source_sha256: Callable[[Source], str]
    score_leaf: Callable[[Source], Callable[[LeafOutput, EpochSet], Entry]]
    score_alone: Callable[[Source], Callable[[PipelineSpec, Any], Entry]]


def run_branch(
    source: Any,
    branch: PipelineTree,
    source_sha256: str,
    score_leaf: Callable[[LeafOutput, EpochSet], Entry],
    score_alone: Callable[[PipelineSpec, Any], Entry],
    settings: ExecutionSettings,
) -> UnitOutcome:
    """Run one unit (module level, so that it pickles into a worker process)."""
    if not isinstance(source, EpochSet):
        return UnitOutcome({p.name: score_alone(p, source) for p in branch.pipelines}, CacheStats(0, 0))
    cache = None
    if settings.cache_dir is not None:
        cache = DiskStepCache(settings.cache_dir, settings.cache_max_bytes, settings.cache_min_step_seconds)
    leaves = execute_tree(branch, source, source_sha256, cache)
    entries = {leaf.pipeline.name: score_leaf(leaf, source) for leaf in leaves}
    return UnitOutcome(entries, cache.stats() if cache is not None else CacheStats(0, 0))


def execute_multiverse(
    pipelines: Sequence[PipelineSpec],
    sources: Sequence[Source],
    handlers: SourceHandlers[Source],
    settings: ExecutionSettings,
    on_progress: Callable[[Progress], None],
) -> MultiverseOutcome:
    """Score every pipeline on every source, sharing prefixes, caching steps, in parallel."""
    branches = build_tree(pipelines).branches()
    if settings.dask_scheduler is not None and settings.cache_dir is not None:
        # A relative folder would be taken from each Dask worker's own working directory.
        settings = replace(settings, cache_dir=settings.cache_dir.absolute())

    def units() -> Iterator[SharedInputUnit[UnitOutcome]]:
        for source in sources:
            loaded = handlers.load(source)
            for branch in branches:
                yield SharedInputUnit(
                    run_branch,
                    loaded,
                    (
                        branch,
                        handlers.source_sha256(source),
                        handlers.score_leaf(source),
                        handlers.score_alone(source),
                        settings,
                    ),
                )

    outcomes = _run(units(), len(sources) * len(branches), on_progress, settings)
    results: list[Entry] = []
    for index in range(len(sources)):
        entries: dict[str, Entry] = {}
        for outcome in outcomes[index * len(branches) : (index + 1) * len(branches)]:
            entries.update(outcome.entries)
        results.extend(entries[pipeline.name] for pipeline in pipelines)
    return MultiverseOutcome(results=results, cache=sum((o.cache for o in outcomes), CacheStats(0, 0)))


def _run(
    units: Iterator[Unit[UnitOutcome]], total: int, on_progress: Callable[[Progress], None], settings: ExecutionSettings
) -> list[UnitOutcome]:
    if settings.dask_scheduler is None:
        return run_units(units, total, on_progress, workers=settings.workers, preload=[__name__])
    from worker.execution.dask_units import run_units_on_dask  # distributed takes a second to import: only when used

    return run_units_on_dask(units, total, on_progress, settings.dask_scheduler)
