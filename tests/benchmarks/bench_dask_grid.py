"""The 48-pipeline grid of ``bench_grid`` with its units on a Dask cluster of 1, 2 and 4 worker processes,
and in the local process pool, for comparison.

Each configuration runs the grid through ``worker.run_job.execute_run`` (the function the worker
runs) with a fresh, empty step cache and the worker's cache settings; with ``--repeat N`` the
configurations take turns N times and the best time of each counts, which evens out other load on a
shared machine. The clusters are ``distributed.LocalCluster``s of one-thread worker processes on
127.0.0.1, each started before its clock starts and closed after its run, so the figures are the
runs, not the start-up, and no idle cluster shares the machine with another run; the local pool
starts within its time, as the worker starts one for each run. The script prints each wall time,
its speed-up over one Dask worker, and checks that every configuration gives the same significant
fractions.
A machine with N cores cannot speed up past N workers; the script says how many cores this one has.

    python tests/benchmarks/bench_dask_grid.py          # 8 subjects, 64 channels, 300 trials of 1 s at 250 Hz
    python tests/benchmarks/bench_dask_grid.py --repeat 2
    python tests/benchmarks/bench_dask_grid.py --quick  # tiny smoke run
"""

import argparse
import functools
import os
import sys
import tempfile
import time
from collections.abc import Callable, Iterator
from contextlib import AbstractContextManager, contextmanager, nullcontext
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from distributed import LocalCluster

from tests.benchmarks.bench_grid import (
    FULL,
    QUICK,
    fractions,
    grid_spec,
    simulated_study,
    worker_execution,
)
from worker.execution.parallel import default_workers
from worker.run_job import execute_run

DASK_WORKERS = (1, 2, 4)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="tiny smoke run")
    parser.add_argument("--repeat", type=int, default=1, help="runs of each configuration, in turn; the best counts")
    args = parser.parse_args()
    size = QUICK if args.quick else FULL
    sets, refs = simulated_study(size)
    spec = grid_spec(size, (0.3, 0.5))

    def timed_run(**options: object) -> tuple[dict, float]:
        with tempfile.TemporaryDirectory(prefix="bench-dask-cache-") as cache_dir:
            execution = worker_execution(Path(cache_dir), **options)
            started = time.perf_counter()
            document = execute_run(
                "run_grid", "BENCH", spec, refs, lambda ref: sets[ref.id], lambda _: None, execution=execution
            ).model_dump(mode="json")
            return document, time.perf_counter() - started

    cores = default_workers()
    print(
        f"{len(spec['pipelines'])} pipelines × {size.subjects} subjects of {size.channels} channels, "
        f"{size.trials} trials, 1 s at {size.sfreq:g} Hz; {cores} cores on this machine; "
        f"best of {args.repeat} run(s) each; load average before {os.getloadavg()[0]:.1f}",
        flush=True,
    )
    configurations: dict[str, Callable[[], AbstractContextManager[dict[str, object]]]] = {
        f"Dask, {n} worker{'s' if n > 1 else ''}": functools.partial(_on_cluster, n) for n in DASK_WORKERS
    }
    configurations[f"local pool, {cores} processes"] = functools.partial(nullcontext, {"workers": cores})
    seconds = {label: float("inf") for label in configurations}
    documents: dict[str, dict] = {}
    for _ in range(args.repeat):
        for label, started_configuration in configurations.items():
            with started_configuration() as options:
                documents[label], run_s = timed_run(**options)
            seconds[label] = min(seconds[label], run_s)
    one_worker = seconds["Dask, 1 worker"]
    for label, run_s in seconds.items():
        print(f"{label:<24} {run_s:8.1f} s   speed-up over 1 Dask worker {one_worker / run_s:5.2f} x")
    print(f"load average after {os.getloadavg()[0]:.1f} (other processes on the machine slow every figure)")
    if len({str(sorted(fractions(document["results"]).items())) for document in documents.values()}) != 1:
        raise SystemExit("the configurations disagree")
    print("same significant fractions in every configuration")
    if max(DASK_WORKERS) > cores:
        print(
            f"note: {max(DASK_WORKERS)} Dask workers share {cores} cores here, so they cannot beat {cores}; "
            "more workers pay off only on more cores or more hosts"
        )


@contextmanager
def _on_cluster(n_workers: int) -> Iterator[dict[str, object]]:
    """A LocalCluster of ``n_workers`` one-thread processes for one timed run, closed after it, so no idle
    cluster shares the machine with another configuration's run."""
    with LocalCluster(
        n_workers=n_workers, processes=True, threads_per_worker=1, host="127.0.0.1", dashboard_address="127.0.0.1:0"
    ) as cluster:
        yield {"dask_scheduler": cluster.scheduler_address}


if __name__ == "__main__":
    main()
