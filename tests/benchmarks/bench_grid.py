"""A 48-pipeline grid run as one multiverse run vs as 48 independent single-pipeline runs.

Both go through ``worker.run_job.execute_run``, the function the worker runs, in this one
process (one worker: no process pool, so the ratio measures shared prefixes, not cores).
The grid is 4 high-pass × 2 low-pass × 3 reference × 2 baseline levels (low-pass stands in
for the bad-channel rules of the issue's example, so the script runs whatever the step
library has). The grid run uses the step cache with the worker's default settings, starting empty as a
first run of a study does; the script then reruns it with another scoring window and prints
its cache hits. Scoring leaves out the time course (``"time_course": null``), which costs
the same per pipeline either way and is not what the grid shares. It checks
that both ways give the same significant fractions, then prints both wall times, their
ratio, and the peak resident memory of the process after the grid run and at the end
(``ru_maxrss``: all memory, NumPy's buffers included; the independent runs come second, so
the first figure is the grid run's own peak).

    python tests/benchmarks/bench_grid.py          # 8 subjects, 64 channels, 300 trials of 1 s at 250 Hz
    python tests/benchmarks/bench_grid.py --quick  # tiny smoke run
"""

import argparse
import resource
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TypeVar

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import numpy as np

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.grid import GridSpec, expand_grid
from service.settings import Settings
from worker.execution.multiverse import ExecutionSettings
from worker.run_job import EpochSetRef, execute_run

CONDITIONS = ("deviant", "standard")
GIB = 1024**3
Value = TypeVar("Value")


@dataclass(frozen=True)
class Size:
    subjects: int
    channels: int
    trials: int
    sfreq: float
    highpass_hz: tuple[float, ...]


FULL = Size(subjects=8, channels=64, trials=300, sfreq=250.0, highpass_hz=(0.5, 1.0, 2.0))
QUICK = Size(subjects=2, channels=8, trials=40, sfreq=100.0, highpass_hz=(2.0,))


def grid(size: Size) -> GridSpec:
    return GridSpec(
        factors={
            "highpass": {"none": [], **{f"{hz:g}": [{"step": "highpass", "cutoff_hz": hz}] for hz in size.highpass_hz}},
            "lowpass": {"none": [], "30": [{"step": "lowpass", "cutoff_hz": 30.0}]},
            "reference": {
                "none": [],
                "average": [{"step": "reference", "kind": "average"}],
                "pair": [{"step": "reference", "kind": "channels", "channels": ["E00", "E01"]}],
            },
            "baseline": {"none": [], "pre": [{"step": "baseline", "window_s": [-0.2, 0.0]}]},
        }
    )


def simulated_subject(size: Size, subject: int) -> EpochSet:
    """1 s epochs (from -0.2 s), data in V: white noise, a slow offset per trial and a 3 µV effect
    at 0.3-0.5 s on the back half of the channels in the first condition."""
    rng = np.random.default_rng(subject)
    n_times = int(size.sfreq)
    times = -0.2 + np.arange(n_times) / size.sfreq
    data = rng.normal(0.0, 10e-6, (size.trials, size.channels, n_times))
    data += rng.normal(0.0, 20e-6, (size.trials, size.channels, 1)) + rng.normal(0.0, 5e-6, (size.trials, 1, 1)) * times
    labels = np.array([CONDITIONS[i % 2] for i in range(size.trials)])
    effect = 3e-6 * np.exp(-0.5 * ((times - 0.4) / 0.05) ** 2)
    data[labels == CONDITIONS[0], size.channels // 2 :, :] += effect
    return EpochSet(
        data=data,
        sfreq=size.sfreq,
        tmin=-0.2,
        ch_names=tuple(f"E{i:02d}" for i in range(size.channels)),
        ch_types=("eeg",) * size.channels,
        labels=labels,
    )


def simulated_study(size: Size) -> tuple[dict[str, EpochSet], list[EpochSetRef]]:
    """The simulated epoch sets by id, and the run's references to them (in subject order)."""
    sets = {f"es_{s:02d}": simulated_subject(size, s) for s in range(size.subjects)}
    refs = [EpochSetRef(id=key, subject=f"sub-{i:02d}", session=None, sha256=f"{i:064x}") for i, key in enumerate(sets)]
    return sets, refs


def grid_spec(size: Size, window_s: tuple[float, float]) -> dict:
    """The grid run's spec, with its expanded pipelines listed as the service stores them."""
    pipelines = [point.pipeline.model_dump(mode="json") for point in expand_grid(grid(size))]
    return {"grid": grid(size).model_dump(mode="json"), "pipelines": pipelines, "scoring": scoring(window_s)}


def worker_execution(cache_dir: Path, **options: object) -> ExecutionSettings:
    """The worker's default step cache settings, with the cache in ``cache_dir``, and ``options``."""
    defaults = Settings()
    return ExecutionSettings(
        cache_dir=cache_dir,
        cache_max_bytes=defaults.cache_max_bytes,
        cache_min_step_seconds=defaults.cache_min_step_seconds,
        **options,
    )


def scoring(window_s: tuple[float, float]) -> dict:
    return {
        "conditions": list(CONDITIONS),
        "window_s": list(window_s),
        "alpha": 0.05,
        "correction": "fdr_bh",
        "time_course": None,
    }


def timed(run: Callable[[], Value]) -> tuple[Value, float, int]:
    """(what ``run`` returns, its wall time in s, this process's peak resident memory so far in bytes)."""
    started = time.perf_counter()
    value = run()
    seconds = time.perf_counter() - started
    return value, seconds, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def fractions(entries: list[dict]) -> dict[tuple[str, str], float]:
    return {(entry["pipeline"], entry["subject"]): entry["significant_fraction"] for entry in entries}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="tiny smoke run")
    size = QUICK if parser.parse_args().quick else FULL
    sets, refs = simulated_study(size)
    points = expand_grid(grid(size))
    pipelines = [point.pipeline.model_dump(mode="json") for point in points]

    def load(ref: EpochSetRef) -> EpochSet:
        return sets[ref.id]

    def grid_run(cache_dir: Path, window_s: tuple[float, float]) -> Callable[[], dict]:
        spec, execution = grid_spec(size, window_s), worker_execution(cache_dir, workers=1)
        return lambda: execute_run(
            "run_grid", "BENCH", spec, refs, load, lambda _: None, execution=execution
        ).model_dump(mode="json")

    def independent_runs() -> list[dict]:
        entries = []
        for pipeline in pipelines:
            spec = {"pipelines": [pipeline], "scoring": scoring((0.3, 0.5))}
            entries += execute_run("run_one", "BENCH", spec, refs, load, lambda _: None).model_dump(mode="json")[
                "results"
            ]
        return entries

    print(
        f"{len(points)} pipelines × {size.subjects} subjects of {size.channels} channels, {size.trials} trials, "
        f"1 s at {size.sfreq:g} Hz; one process, one worker"
    )
    with tempfile.TemporaryDirectory(prefix="bench-grid-cache-") as cache_dir:
        document, grid_s, grid_peak = timed(grid_run(Path(cache_dir), (0.3, 0.5)))
        print(
            f"grid run (cold cache):   {grid_s:8.1f} s   peak resident memory {grid_peak / GIB:.2f} GiB   "
            f"cache {document['cache']}",
            flush=True,
        )
        rerun, rerun_s, _ = timed(grid_run(Path(cache_dir), (0.25, 0.45)))
        print(f"rerun, new window:       {rerun_s:8.1f} s   cache {rerun['cache']}", flush=True)
    independent, independent_s, independent_peak = timed(independent_runs)
    print(
        f"{len(points)} independent runs:   {independent_s:8.1f} s   peak resident memory {independent_peak / GIB:.2f} GiB"
    )
    if fractions(document["results"]) != fractions(independent):
        raise SystemExit("the grid run and the independent runs disagree")
    print("same significant fractions both ways")
    print(f"ratio independent / grid: {independent_s / grid_s:7.1f} x")


if __name__ == "__main__":
    main()
