"""Run a run's units on a Dask distributed cluster (``EPOCH_ASSAY_DASK_SCHEDULER``), with the
same contract as the local pool (``worker.execution.parallel.run_units``): results in unit order,
progress and ETA after each unit, at most ``2 ×`` the cluster's worker threads (counted when
the run starts) pending, so epoch sets are still loaded one at a time as their units are
submitted, and an exception from ``on_progress`` cancels what is pending and propagates.

A :class:`~worker.execution.parallel.SharedInputUnit`'s large input (the epoch set) is scattered to
every worker once, however many units use it, and released when its last unit is collected;
holding a copy on every worker means losing one worker loses no input. Each unit gets its own
key, ``(epoch-assay-unit-<random>, index)``, so units of two runs never share a key, even when
they are the same computation. When a worker dies, the scheduler redoes only the units it was
running or whose results it held and that were not collected yet (each at most
``distributed.scheduler.allowed-failures`` times, then the run fails and the job is retried).
Redoing a unit is safe because units are deterministic and their one side effect, the step
cache, is keyed by content and written by atomic rename.

Units open the step cache folder (``cache_dir``) on the host they run on: point it at a folder
shared by the hosts (a network mount) or at a local folder on each host. Both are correct,
since entries are named by content; a shared folder also shares the saved work.

The client connects for each run and closes when the run ends. A scheduler that cannot be
reached, or that has no worker, raises :class:`DaskSchedulerUnavailable`, which the worker
treats as a failed attempt and retries with backoff.
"""

import uuid
from collections.abc import Callable, Collection, Iterable
from dataclasses import dataclass
from typing import Any, Generic

import dask.config
from dask.utils import parse_timedelta
from distributed import Client, Future, as_completed

from worker.execution.parallel import (
    PENDING_PER_WORKER,
    Progress,
    ProgressClock,
    Result,
    SharedInputUnit,
    Unit,
    run_bounded,
)

NO_WORKER_TIMEOUT_S = 60.0


class DaskSchedulerUnavailable(ConnectionError):
    """The Dask scheduler did not answer, or had no worker to run units on."""


def run_units_on_dask(
    units: Iterable[Unit[Result]],
    total: int,
    on_progress: Callable[[Progress], None],
    scheduler_address: str,
) -> list[Result]:
    """Run every unit on the cluster of the scheduler at ``scheduler_address`` (``tcp://host:8786``)
    and return their results in the order the units came; ``total`` is their number, for progress.

    Units must pickle with references to importable modules: the cluster's workers need the
    project installed (or on their ``PYTHONPATH``).
    """
    with connect(scheduler_address) as client:
        backend: _ClusterBackend[Result] = _ClusterBackend(
            client, PENDING_PER_WORKER * max(sum(client.nthreads().values()), 1)
        )
        return run_bounded(units, backend, ProgressClock(total, on_progress))


def connect(scheduler_address: str) -> Client:
    """A client of the scheduler at ``scheduler_address`` that has at least one worker.

    It waits for the scheduler as long as Dask's ``distributed.comm.timeouts.connect`` says (30 s unless
    configured, e.g. with ``DASK_DISTRIBUTED__COMM__TIMEOUTS__CONNECT``), then for a worker
    ``NO_WORKER_TIMEOUT_S``.
    """
    try:
        client = Client(scheduler_address, set_as_default=False)
    except (OSError, TimeoutError) as error:
        timeout_s = parse_timedelta(dask.config.get("distributed.comm.timeouts.connect"))
        raise DaskSchedulerUnavailable(
            f"cannot reach the Dask scheduler at {scheduler_address} (EPOCH_ASSAY_DASK_SCHEDULER) within "
            f"{timeout_s:g} s: {error}"
        ) from error
    try:
        client.wait_for_workers(1, timeout=NO_WORKER_TIMEOUT_S)
    except TimeoutError as error:
        client.close()
        raise DaskSchedulerUnavailable(
            f"the Dask scheduler at {scheduler_address} had no worker for {NO_WORKER_TIMEOUT_S:g} s"
        ) from error
    return client


@dataclass
class _Scattered:
    value: Any
    future: Future
    users: int = 0


class _ClusterBackend(Generic[Result]):
    """Units as Dask tasks; shared inputs scattered once and held while a unit may still need them."""

    def __init__(self, client: Client, capacity: int) -> None:
        self._client, self.capacity = client, capacity
        self._run_key = f"epoch-assay-unit-{uuid.uuid4().hex}"
        self._scattered: dict[int, _Scattered] = {}
        self._latest: _Scattered | None = None
        self._input_of: dict[Future, int] = {}
        self._finished = as_completed(loop=client.loop)

    def submit(self, unit: Unit[Result], index: int) -> Future:
        key = (self._run_key, index)
        if isinstance(unit, SharedInputUnit):
            shared = self._share(unit.shared)
            future = self._client.submit(unit.function, shared.future, *unit.args, key=key)
            self._input_of[future] = id(unit.shared)
        else:
            future = self._client.submit(unit, key=key)
        self._finished.add(future)
        return future

    def wait_first(self, pending: Collection[Future]) -> Iterable[Future]:
        return self._finished.next_batch(block=True)

    def collect(self, handle: Future) -> Result:
        result = handle.result()
        handle.release()
        if handle in self._input_of:
            self._scattered[self._input_of.pop(handle)].users -= 1
            self._forget_unused()
        return result

    def cancel(self, pending: Collection[Future]) -> None:
        self._client.cancel(list(pending))

    def _share(self, value: Any) -> _Scattered:
        shared = self._scattered.get(id(value))
        if shared is None:
            [future] = self._client.scatter([value], broadcast=True, hash=False)
            shared = self._scattered[id(value)] = _Scattered(value, future)
            self._latest = shared
            self._forget_unused()
        shared.users += 1
        return shared

    def _forget_unused(self) -> None:
        """Release inputs no pending unit uses, but the latest, whose next units may still come."""
        for key, shared in list(self._scattered.items()):
            if shared.users == 0 and shared is not self._latest:
                del self._scattered[key]
                shared.future.release()
