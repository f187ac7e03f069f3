"""Run a run's units (epoch set × tree branch) in local worker processes, reporting progress and an ETA.

Units are taken from an iterable as room frees up, so the caller can load an epoch set only
when its units are about to be submitted: at most ``2 × workers`` units are pending at once.
Processes are started with the "forkserver" method, because the calling worker has threads
(heartbeat, webhook delivery) that a forked child would inherit half-way through whatever
they were doing. The fork server imports the ``preload`` modules once and forks each worker
from there, so workers do not pay for importing the scientific stack themselves. With one
worker the units run in the calling process, without pickling. The large input of a
:class:`SharedInputUnit` (an epoch set, a recording) is pickled once into a file of a folder
private to the run, and each worker process reads it once and keeps it while consecutive
units use it, instead of receiving a copy with every unit; the file goes when its last unit
is collected.
If ``on_progress`` raises (the job is handed back, or its lease was lost), units not yet
started are cancelled, the ones running finish, and the exception propagates.

The submission loop (:func:`run_bounded`) is shared with the Dask cluster path
(``worker.execution.dask_units``), which gives it another :class:`UnitBackend`.
"""

import ctypes
import importlib
import multiprocessing
import os
import pickle
import select
import shutil
import tempfile
import threading
import time
from collections.abc import Callable, Collection, Iterable, Sequence
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Generic, Protocol, TypeVar

from threadpoolctl import threadpool_limits

Result = TypeVar("Result")
Handle = TypeVar("Handle")
Unit = Callable[[], Result]
PENDING_PER_WORKER = 2


@dataclass(frozen=True)
class Progress:
    """Work done out of the total, the time since the first unit started and the time left, in s.

    Work is counted in units, each weighing its ``weight`` (1 unless it says otherwise: a
    :class:`SharedInputUnit` scoring several pipelines weighs one per pipeline).
    ``eta_s`` extrapolates the mean time per unit of work so far; None before the first unit is done.
    """

    done: int
    total: int
    elapsed_s: float
    eta_s: float | None

    @property
    def fraction(self) -> float:
        return self.done / self.total if self.total else 1.0


@dataclass(frozen=True)
class SharedInputUnit(Generic[Result]):
    """A unit that computes ``function(shared, *args)``, where ``shared`` is a large input that
    consecutive units have in common (one epoch set, for its tree branches).

    Called with no argument it is an ordinary unit; a Dask cluster gets ``shared`` once for all
    the units that carry the same object, not once per unit. ``weight`` is its share of the
    run's work in progress reports.
    """

    function: Callable[..., Result]
    shared: Any
    args: tuple[Any, ...] = ()
    weight: int = 1

    def __call__(self) -> Result:
        return self.function(self.shared, *self.args)


class UnitBackend(Protocol[Handle, Result]):
    """Where :func:`run_bounded` sends units: ``capacity`` units may be pending at once."""

    capacity: int

    def submit(self, unit: Unit[Result], index: int) -> Handle:
        """Start unit number ``index``; a handle to wait on."""

    def wait_first(self, pending: Collection[Handle]) -> Iterable[Handle]:
        """Block until at least one pending unit is finished; the finished ones."""

    def collect(self, handle: Handle) -> Result:
        """The result of a finished unit (raising what the unit raised)."""

    def cancel(self, pending: Collection[Handle]) -> None:
        """Drop units still pending when the run stops early."""


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
    module-level function wrapped in ``functools.partial`` or a :class:`SharedInputUnit`).
    ``total`` is the number of units, for progress. ``workers`` defaults to
    :func:`default_workers`; a single unit runs in this process, since starting a pool would only
    add to its time. ``preload`` names the modules the units need (taken into account when the
    first pool of the process starts).
    """
    workers = default_workers() if workers is None else workers
    if workers < 1:
        raise ValueError("workers must be at least 1")
    clock = ProgressClock(total, on_progress)
    if min(workers, total) <= 1:
        results = []
        keep_freed_memory()
        try:
            for unit in units:
                results.append(unit())
                clock.unit_done(unit_weight(unit))
        finally:
            release_freed_memory()
        return results
    context = multiprocessing.get_context("forkserver")
    context.set_forkserver_preload(list(preload))
    executor = ProcessPoolExecutor(
        max_workers=workers, mp_context=context, initializer=start_pool_process, initargs=(os.getpid(),)
    )
    folder = Path(tempfile.mkdtemp(prefix="epoch-assay-inputs-"))
    try:
        return run_bounded(units, _PoolBackend(executor, PENDING_PER_WORKER * workers, folder), clock)
    finally:
        executor.shutdown(wait=True, cancel_futures=True)
        shutil.rmtree(folder, ignore_errors=True)


def unit_weight(unit: Unit[Any]) -> int:
    """The unit's share of the work, for progress (1 unless the unit has a ``weight``)."""
    return getattr(unit, "weight", 1)


def start_pool_process(owner_pid: int) -> None:
    """Set up a pool process: one BLAS thread (see :func:`one_blas_thread`), freed memory kept for reuse
    (see :func:`keep_freed_memory`), and exit with the owner."""
    one_blas_thread()
    keep_freed_memory()
    exit_with(owner_pid)


# glibc's mallopt parameters (malloc.h) and their defaults (mallopt(3)).
_M_TRIM_THRESHOLD, _M_MMAP_MAX = -1, -4
_DEFAULT_TRIM_THRESHOLD, _DEFAULT_MMAP_MAX = 128 * 1024, 65536
KEPT_FREE_BYTES = 2**30


def keep_freed_memory() -> None:
    """Make glibc's allocator reuse freed memory in this process instead of returning it to the system.

    By default glibc serves each large block (an epoch set, a filtered recording) with its own
    ``mmap`` and unmaps it when freed, so the next array of that size starts from fresh pages, and
    the kernel faults in and zeroes every page again: on a virtual machine that costs about as much
    as the arithmetic of a baseline or reference step. While a run computes, up to ``KEPT_FREE_BYTES``
    of freed heap stay for the next array (mallopt(3): M_MMAP_MAX 0, M_TRIM_THRESHOLD). A pool
    process lives for one run and keeps this setting; the calling process restores the defaults after
    its run with :func:`release_freed_memory`. Both are no-ops where the C library is not glibc.
    """
    _mallopt(_M_MMAP_MAX, 0)
    _mallopt(_M_TRIM_THRESHOLD, KEPT_FREE_BYTES)


def release_freed_memory() -> None:
    """Restore glibc's default allocation thresholds and give the freed heap back to the system."""
    _mallopt(_M_MMAP_MAX, _DEFAULT_MMAP_MAX)
    _mallopt(_M_TRIM_THRESHOLD, _DEFAULT_TRIM_THRESHOLD)
    trim = getattr(_libc(), "malloc_trim", None)
    if trim is not None:
        trim(0)


def _libc() -> ctypes.CDLL | None:
    try:
        return ctypes.CDLL(None)
    except OSError:
        return None


def _mallopt(parameter: int, value: int) -> None:
    mallopt = getattr(_libc(), "mallopt", None)
    if mallopt is not None:
        mallopt.argtypes, mallopt.restype = (ctypes.c_int, ctypes.c_int), ctypes.c_int
        mallopt(parameter, value)


def one_blas_thread() -> None:
    """Limit the BLAS and OpenMP libraries loaded in this process to one thread each.

    Pool processes already run one per core; a BLAS that also starts a thread per core in each of
    them puts cores × cores threads on the cores, which then wait on each other (OpenBLAS spins
    while it waits). Set once per pool process, for its whole life, after loading NumPy, since a limit
    applies to the libraries loaded when it is set.
    """
    importlib.import_module("numpy")
    threadpool_limits(limits=1)


def exit_with(owner_pid: int) -> None:
    """Make this pool process exit as soon as the process ``owner_pid`` (the one that started the pool) ends.

    A pool process waits on a queue it holds both ends of, so it would outlive an owner killed outright
    (SIGKILL, the OOM killer), and keep the fork server alive with it. A daemon thread waits on a pidfd
    of the owner (exact, even if its pid is reused), or polls it each second where pidfds are missing.
    """
    threading.Thread(target=_wait_for_exit, args=(owner_pid,), name="exit-with-owner", daemon=True).start()


def _wait_for_exit(owner_pid: int) -> None:
    try:
        handle = os.pidfd_open(owner_pid)
    except (AttributeError, OSError):
        while _is_running(owner_pid):
            time.sleep(1.0)
    else:
        select.select([handle], [], [])
    os._exit(0)


def _is_running(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


class ProgressClock:
    """Calls ``on_progress`` with a :class:`Progress` each time a unit is done."""

    def __init__(self, total: int, on_progress: Callable[[Progress], None]) -> None:
        self._total, self._on_progress = total, on_progress
        self._started = time.monotonic()
        self._done = 0

    def unit_done(self, weight: int = 1) -> None:
        self._done += weight
        elapsed = time.monotonic() - self._started
        eta = elapsed / self._done * max(self._total - self._done, 0)
        self._on_progress(Progress(done=self._done, total=self._total, elapsed_s=elapsed, eta_s=eta))


def run_bounded(
    units: Iterable[Unit[Result]], backend: UnitBackend[Handle, Result], clock: ProgressClock
) -> list[Result]:
    """Submit units while fewer than ``backend.capacity`` are pending, collect each as it finishes
    and return the results in unit order; on any exception the pending units are cancelled."""
    results: dict[int, Result] = {}
    pending: dict[Handle, int] = {}
    weights: dict[int, int] = {}
    iterator = enumerate(units)
    try:
        exhausted = False
        while True:
            while not exhausted and len(pending) < backend.capacity:
                item = next(iterator, None)
                if item is None:
                    exhausted = True
                    break
                index, unit = item
                weights[index] = unit_weight(unit)
                pending[backend.submit(unit, index)] = index
            if not pending:
                break
            for handle in backend.wait_first(list(pending)):
                index = pending.pop(handle)
                results[index] = backend.collect(handle)
                clock.unit_done(weights[index])
    finally:
        if pending:
            backend.cancel(list(pending))
    return [results[index] for index in range(len(results))]


# In a pool process: the input last read from a spooled file, by path (one at a time).
_READ_INPUT: dict[str, Any] = {}


@dataclass(frozen=True)
class SpooledInputUnit(Generic[Result]):
    """A :class:`SharedInputUnit` whose input waits in a pickle file, read once per process."""

    function: Callable[..., Result]
    path: str
    args: tuple[Any, ...]
    weight: int

    def __call__(self) -> Result:
        if self.path not in _READ_INPUT:
            _READ_INPUT.clear()
            with open(self.path, "rb") as stream:
                _READ_INPUT[self.path] = pickle.load(stream)
        return self.function(_READ_INPUT[self.path], *self.args)


@dataclass
class _Spooled:
    value: Any
    path: Path
    users: int = 0


@dataclass
class _PoolBackend(Generic[Result]):
    executor: ProcessPoolExecutor
    capacity: int
    folder: Path
    _spooled: list[_Spooled] = field(default_factory=list)
    _input_of: dict[Future, _Spooled] = field(default_factory=dict)
    _written: int = 0

    def submit(self, unit: Unit[Result], index: int) -> Future[Result]:
        if not isinstance(unit, SharedInputUnit):
            return self.executor.submit(unit)
        spooled = self._spool(unit.shared)
        future = self.executor.submit(SpooledInputUnit(unit.function, str(spooled.path), unit.args, unit.weight))
        spooled.users += 1
        self._input_of[future] = spooled
        return future

    def wait_first(self, pending: Collection[Future[Result]]) -> Iterable[Future[Result]]:
        return wait(pending, return_when=FIRST_COMPLETED).done

    def collect(self, handle: Future[Result]) -> Result:
        spooled = self._input_of.pop(handle, None)
        if spooled is not None:
            spooled.users -= 1
            self._forget_unused()
        return handle.result()

    def cancel(self, pending: Collection[Future]) -> None:
        for future in pending:
            future.cancel()

    def _spool(self, value: Any) -> _Spooled:
        """The file of ``value``: the latest one when units of the same input follow each other."""
        if self._spooled and self._spooled[-1].value is value:
            return self._spooled[-1]
        self._written += 1
        path = self.folder / f"input-{self._written}.pickle"
        with open(path, "wb") as stream:
            pickle.dump(value, stream, protocol=pickle.HIGHEST_PROTOCOL)
        self._spooled.append(_Spooled(value, path))
        self._forget_unused()
        return self._spooled[-1]

    def _forget_unused(self) -> None:
        """Delete the files no pending unit reads, but the latest, whose next units may still come."""
        for spooled in self._spooled[:-1]:
            if spooled.users == 0:
                spooled.path.unlink(missing_ok=True)
        self._spooled = [spooled for spooled in self._spooled[:-1] if spooled.users > 0] + self._spooled[-1:]
