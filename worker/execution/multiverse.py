"""Many pipelines on many epoch sets: one prefix tree per epoch set, split at its root into branches
that run as units in worker processes, with step outputs kept in the on-disk cache.

A unit is one epoch set × one or more branches of the tree (a branch: the pipelines that start
with the same step). In the local pool an epoch set smaller than ``SMALL_SOURCE_BYTES`` goes as
one unit with all its branches, since sending it to a process and back costs more than its
steps; a larger one (and every one on a Dask cluster, which gets each input once and has more
workers to spread branches over) as one unit per branch, so that its branches run side by side.
Epoch sets are loaded in the calling process, one at a time as their units are submitted, and
handed to the units; each unit opens the cache folder itself, so processes share entries
through the files. A recording
(``ContinuousInput``) goes through the tree of its pipelines in two-stage order
(``epoch_assay.engine.tree.execute_recording_tree``): the continuous-stage prefixes run once per
run of the session and are shared and cached like any step, the runs are epoched once per
distinct continuous-stage output.

Units run in a local process pool (``worker.execution.parallel``) or, when a scheduler address is set,
on a Dask distributed cluster (``worker.execution.dask_units``); the results are the same either way.
"""

from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Generic, TypeVar

from epoch_assay.engine.document import ResultEntry
from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.pipeline import PipelineSpec
from epoch_assay.engine.recording import ContinuousInput
from epoch_assay.engine.tree import LeafOutput, PipelineTree, build_tree, execute_recording_tree, execute_tree
from worker.execution.parallel import Progress, SharedInputUnit, Unit, run_units
from worker.execution.step_cache import CacheStats, DiskStepCache

Source = TypeVar("Source")
Entry = ResultEntry
GIB = 1024**3
SMALL_SOURCE_BYTES = 4 * 1024**2


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

    load : the input of a reference: an ``EpochSet``, or a ``ContinuousInput`` for a recording
    source_sha256 : the content hash of a reference's stored file, for cache keys
    score_leaf : for a reference, a picklable callable turning a tree leaf and the epoch set it
        came from (a recording's first run, for a recording) into a result entry
    """

    load: Callable[[Source], EpochSet | ContinuousInput]
    source_sha256: Callable[[Source], str]
    score_leaf: Callable[[Source], Callable[[LeafOutput, EpochSet], Entry]]


def run_branches(
    source: EpochSet | ContinuousInput,
    branches: tuple[PipelineTree, ...],
    source_sha256: str,
    score_leaf: Callable[[LeafOutput, EpochSet], Entry],
    settings: ExecutionSettings,
) -> UnitOutcome:
    """Run one unit (module level, so that it pickles into a worker process)."""
    cache = None
    if settings.cache_dir is not None:
        cache = DiskStepCache(settings.cache_dir, settings.cache_max_bytes, settings.cache_min_step_seconds)
    entries = {}
    for branch in branches:
        if isinstance(source, ContinuousInput):
            leaves = execute_recording_tree(branch, source, source_sha256, cache)
            uploaded = source.recording
        else:
            leaves = execute_tree(branch, source, source_sha256, cache)
            uploaded = source
        entries.update({leaf.pipeline.name: score_leaf(leaf, uploaded) for leaf in leaves})
    return UnitOutcome(entries, cache.stats() if cache is not None else CacheStats(0, 0))


def unit_branches(
    source: EpochSet | ContinuousInput, branches: list[PipelineTree], *, batch_small: bool = True
) -> list[tuple[PipelineTree, ...]]:
    """The branches of ``source``'s tree grouped into units: all in one for a small source when
    ``batch_small``, else one each."""
    if isinstance(source, ContinuousInput):
        nbytes = sum(run.recording.data.nbytes for run in source.runs)
    else:
        nbytes = source.data.nbytes
    if batch_small and nbytes < SMALL_SOURCE_BYTES:
        return [tuple(branches)]
    return [(branch,) for branch in branches]


def execute_multiverse(
    pipelines: Sequence[PipelineSpec],
    sources: Sequence[Source],
    handlers: SourceHandlers[Source],
    settings: ExecutionSettings,
    on_progress: Callable[[Progress], None],
) -> MultiverseOutcome:
    """Score every pipeline on every source, sharing prefixes, caching steps, in parallel.

    Progress counts entries (a pipeline on a source): each unit weighs the pipelines it scores.
    """
    epoch_set_branches = build_tree(pipelines).branches()
    recording_branches = build_tree(pipelines, two_stage=True).recording_branches()
    if settings.dask_scheduler is not None and settings.cache_dir is not None:
        # A relative folder would be taken from each Dask worker's own working directory.
        settings = replace(settings, cache_dir=settings.cache_dir.absolute())
    units_of_source: list[int] = []
    # A cluster gets each input once (scattered) and has many workers to spread branches over: no batching.
    on_pool = settings.dask_scheduler is None

    def units() -> Iterator[SharedInputUnit[UnitOutcome]]:
        for source in sources:
            loaded = handlers.load(source)
            branches = recording_branches if isinstance(loaded, ContinuousInput) else epoch_set_branches
            groups = unit_branches(loaded, branches, batch_small=on_pool)
            units_of_source.append(len(groups))
            for group in groups:
                yield SharedInputUnit(
                    run_branches,
                    loaded,
                    (group, handlers.source_sha256(source), handlers.score_leaf(source), settings),
                    weight=sum(len(branch.pipelines) for branch in group),
                )

    outcomes = _run(units(), len(sources) * len(pipelines), on_progress, settings)
    results: list[Entry] = []
    start = 0
    for count in units_of_source:
        entries: dict[str, Entry] = {}
        for outcome in outcomes[start : start + count]:
            entries.update(outcome.entries)
        start += count
        results.extend(entries[pipeline.name] for pipeline in pipelines)
    return MultiverseOutcome(results=results, cache=sum((o.cache for o in outcomes), CacheStats(0, 0)))


def _run(
    units: Iterator[Unit[UnitOutcome]], total: int, on_progress: Callable[[Progress], None], settings: ExecutionSettings
) -> list[UnitOutcome]:
    if settings.dask_scheduler is None:
        return run_units(units, total, on_progress, workers=settings.workers, preload=[__name__])
    from worker.execution.dask_units import run_units_on_dask  # distributed takes a second to import: only when used

    return run_units_on_dask(units, total, on_progress, settings.dask_scheduler)
