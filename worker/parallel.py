"""Run a run's units (epoch set × tree branch) in worker processes, reporting progress and an ETA.

Units are taken from an iterable as room frees up, so the caller can load an epoch set only
when its units are about to be submitted: at most ``2 × workers`` units are pending at once.
Processes are started with the "forkserver" method, because the calling worker has threads
(heartbeat, webhook delivery) that a forked child would inherit half-way through whatever
they were doing. The fork server imports the ``preload`` modules once and forks each worker
from there, so workers do not pay for importing the scientific stack themselves. With one
worker the units run in the calling process, without pickling.
If ``on_progress`` raises (the job is handed back, or its lease was lost), units not yet
started are cancelled, the ones running finish, and the exception propagates.
"""

import multiprocessing
import os
import time
from collections.abc import Callable, Iterable, Sequence
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from dataclasses import dataclass
from typing import TypeVar

Result = TypeVar("Result")
Unit = Callable[[], Result]
_PENDING_PER_WORKER = 2


@dataclass(frozen=True)
class Progress:
    """Units done out of the total, the time since the first unit started and the time left, in s.

    ``eta_s`` extrapolates the mean time per unit so far; None before the first unit is done.
    """

    done: int
    total: int
    elapsed_s: float
    eta_s: float | None

    @property
    def fraction(self) -> float:
        return self.done / self.total if self.total else 1.0


def default_workers() -> int:
    """All cores this process may use."""
    return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1


def run_units(
    units: Iterable[Unit[Result]],
    total: int,
    on_progress: Callable[[Progress], None],
    workers: int | None = None,
    preload: Sequence[str] = (),
) -> list[Result]:
    """Run every unit and return their results in the order the units came.

    ``units`` are argument-free callables; with more than one worker they must pickle (a
    module-level function wrapped in ``functools.partial``). ``total`` is the number of units,
    for progress. ``workers`` defaults to :func:`default_workers`; a single unit runs in this
    process, since starting a pool would only add to its time. ``preload`` names the modules
    the units need (taken into account when the first pool of the process starts).
    """
    workers = default_workers() if workers is None else workers
    if workers < 1:
        raise ValueError("workers must be at least 1")
    clock = _ProgressClock(total, on_progress)
    if min(workers, total) <= 1:
        results = []
        for unit in units:
            results.append(unit())
            clock.unit_done()
        return results
    return _run_in_pool(units, workers, clock, preload)


class _ProgressClock:
    def __init__(self, total: int, on_progress: Callable[[Progress], None]) -> None:
        self._total, self._on_progress = total, on_progress
        self._started = time.monotonic()
        self._done = 0

    def unit_done(self) -> None:
        self._done += 1
        elapsed = time.monotonic() - self._started
        eta = elapsed / self._done * max(self._total - self._done, 0)
        self._on_progress(Progress(done=self._done, total=self._total, elapsed_s=elapsed, eta_s=eta))


def _run_in_pool(
    units: Iterable[Unit[Result]], workers: int, clock: _ProgressClock, preload: Sequence[str]
) -> list[Result]:
    results: dict[int, Result] = {}
    pending: dict[Future, int] = {}
    iterator = enumerate(units)
    context = multiprocessing.get_context("forkserver")
    context.set_forkserver_preload(list(preload))
    executor = ProcessPoolExecutor(max_workers=workers, mp_context=context)
    try:
        exhausted = False
        while True:
            while not exhausted and len(pending) < _PENDING_PER_WORKER * workers:
                item = next(iterator, None)
                if item is None:
                    exhausted = True
                    break
                index, unit = item
                pending[executor.submit(unit)] = index
            if not pending:
                break
            finished, _ = wait(pending, return_when=FIRST_COMPLETED)
            for future in finished:
                results[pending.pop(future)] = future.result()
                clock.unit_done()
    finally:
        executor.shutdown(wait=True, cancel_futures=True)
    return [results[index] for index in range(len(results))]
