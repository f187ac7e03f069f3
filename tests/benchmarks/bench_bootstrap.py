"""Vectorised bootstrap of the significant fraction vs a loop of scipy.stats.ttest_ind.

Both paths score the same resamples (same seed, same drawn trials) of simulated window
means with the same correction; the script checks they agree and prints both wall times
(best of several repeats, to damp other load on the machine) and their ratio, for the
"fixed" mode (k trials without replacement) and the "all" mode (each condition's count
with replacement). It then prints the peak traced memory of the "all" mode at 128
channels x 2 x 1,000 trials for two resample counts, to show that chunking bounds it.

    python tests/benchmarks/bench_bootstrap.py          # 1,000 resamples, 64 channels, 2 x 300 trials, k = 50
    python tests/benchmarks/bench_bootstrap.py --quick  # tiny smoke run
"""

import argparse
import sys
import time
import tracemalloc
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import numpy as np
from scipy import stats

from epoch_assay.engine.stats import (
    TrialDraw,
    adjust_pvalues,
    bootstrap_significant_fraction,
    draw_trials,
    draw_with_replacement,
)
from epoch_assay.engine.stats.bootstrap import DEFAULT_CHUNK_BYTES, resamples_per_chunk

SEED = 7
ALPHA = 0.05
CORRECTION = "fdr_bh"


@dataclass(frozen=True)
class Size:
    resamples: int
    channels: int
    trials: int
    trials_per_condition: int


FULL = Size(resamples=1000, channels=64, trials=300, trials_per_condition=50)
QUICK = Size(resamples=20, channels=8, trials=30, trials_per_condition=10)


@dataclass(frozen=True)
class MemorySize:
    channels: int
    trials: int
    resamples: tuple[int, ...]


MEMORY_FULL = MemorySize(channels=128, trials=1000, resamples=(200, 2000))
MEMORY_QUICK = MemorySize(channels=8, trials=30, resamples=(20, 40))


def simulated_window_means(size: Size) -> tuple[np.ndarray, np.ndarray]:
    """Two conditions of window means, shape (trials, channels), in V; a 1 µV effect on half the channels."""
    rng = np.random.default_rng(0)
    effect = np.where(np.arange(size.channels) < size.channels // 2, 1e-6, 0.0)
    a = rng.normal(0.0, 4e-6, size=(size.trials, size.channels)) + effect
    b = rng.normal(0.0, 5e-6, size=(size.trials, size.channels))
    return a, b


def loop_of_scipy_tests(a: np.ndarray, b: np.ndarray, draw: TrialDraw) -> np.ndarray:
    """The straightforward way: one scipy.stats.ttest_ind call per resample on pre-drawn trials.

    The correction is the engine's own, so the ratio measures the t-tests and their batching.
    """
    fractions = np.empty(draw.indices_a.shape[0])
    for resample, (rows_a, rows_b) in enumerate(zip(draw.indices_a, draw.indices_b, strict=False)):
        p = stats.ttest_ind(a[rows_a], b[rows_b], equal_var=False, axis=0).pvalue
        fractions[resample] = np.mean(adjust_pvalues(p, CORRECTION) < ALPHA)
    return fractions


def vectorised(a: np.ndarray, b: np.ndarray, size: Size, mode: str) -> np.ndarray:
    return bootstrap_significant_fraction(
        a,
        b,
        mode=mode,
        trials_per_condition=size.trials_per_condition,
        resamples=size.resamples,
        seed=SEED,
        alpha=ALPHA,
        correction=CORRECTION,
    ).fractions


def drawn_trials(size: Size, mode: str) -> TrialDraw:
    rng = np.random.default_rng(SEED)
    if mode == "all":
        return draw_with_replacement(rng, size.trials, size.trials, size.resamples)
    return draw_trials(rng, size.trials, size.trials, size.trials_per_condition, size.resamples)


def peak_memory_mb(channels: int, trials: int, resamples: int) -> float:
    """Peak traced memory of one "all"-mode bootstrap, in MB, inputs excluded."""
    rng = np.random.default_rng(1)
    a, b = rng.normal(size=(trials, channels)), rng.normal(size=(trials, channels))
    tracemalloc.start()
    bootstrap_significant_fraction(a, b, mode="all", resamples=resamples, seed=SEED, alpha=ALPHA, correction=CORRECTION)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return peak / 2**20


def best_time(run: Callable[[], np.ndarray], repeats: int) -> tuple[float, np.ndarray]:
    """Shortest wall time of ``repeats`` runs, in s, and the last run's result."""
    times, result = [], None
    for _ in range(repeats):
        started = time.perf_counter()
        result = run()
        times.append(time.perf_counter() - started)
    return min(times), result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--quick", action="store_true", help="tiny sizes, a smoke run")
    quick = parser.parse_args().quick
    size = QUICK if quick else FULL
    a, b = simulated_window_means(size)
    print(
        f"bootstrap: {size.resamples} resamples, {size.channels} channels, "
        f"2 x {size.trials} trials, {size.trials_per_condition} drawn per condition"
    )
    chunk = resamples_per_chunk(size.trials, size.trials, size.channels, DEFAULT_CHUNK_BYTES)
    print(f"  vectorised chunks of {min(chunk, size.resamples)} resamples ({DEFAULT_CHUNK_BYTES / 2**20:g} MB budget)")
    failures = []
    for mode in ("fixed", "all"):
        # The loop gets its trials drawn beforehand, untimed; the vectorised time includes drawing.
        draw = drawn_trials(size, mode)
        loop_seconds, loop_fractions = best_time(lambda draw=draw: loop_of_scipy_tests(a, b, draw), repeats=3)
        vector_seconds, vector_fractions = best_time(lambda mode=mode: vectorised(a, b, size, mode), repeats=10)
        disagreeing = int(np.count_nonzero(loop_fractions != vector_fractions))
        print(f"  mode {mode!r}")
        print(f"    loop of scipy.stats.ttest_ind (best of 3) : {loop_seconds * 1e3:9.1f} ms")
        print(f"    vectorised, drawing included (best of 10) : {vector_seconds * 1e3:9.1f} ms")
        print(f"    speed-up                                  : {loop_seconds / vector_seconds:9.1f} x")
        print(f"    resamples whose fraction differs between the paths: {disagreeing} of {size.resamples}")
        if disagreeing:
            failures.append(mode)
    memory = MEMORY_QUICK if quick else MEMORY_FULL
    for resamples in memory.resamples:
        peak = peak_memory_mb(memory.channels, memory.trials, resamples)
        print(
            f"  peak memory, mode 'all', {memory.channels} channels, 2 x {memory.trials} trials, "
            f"{resamples} resamples: {peak:7.1f} MB"
        )
    if failures:
        sys.exit(f"the vectorised bootstrap disagrees with the scipy loop in mode(s) {', '.join(failures)}")


if __name__ == "__main__":
    main()
