"""The 16-pipeline grid on continuous recordings: the service against a plain scipy loop and a
vectorised floor; and the service's overhead on many small uploaded epoch sets.

Continuous case: 4 simulated subjects, 34 channels, 330 s at 250 Hz, 160 events alternating two
conditions every 2 s; the grid is IIR high-pass none/0.1/0.5/1 Hz (Butterworth order 4, forward
and backward) × average/as-recorded reference × baseline on/off, epochs -0.2 to 0.8 s, scored on
the 0.3–0.5 s window by Welch's t per channel (alpha 0.05, no correction) on 500 subsets of
50 trials per condition. Three ways, timed in this one run:

- service: ``worker.run_job.execute_run`` (the function the worker runs) with its process pool
  (all cores; the pool's process server started beforehand by an untimed tiny run, as in a
  worker that has run before) and a cold step cache with the worker's default settings, the recordings built in memory as ``ContinuousInput``;
- plain loop: what a user would write with scipy: every pipeline from scratch on every subject
  (filter the recording with ``scipy.signal.sosfiltfilt``, epoch, reference, baseline), then one
  ``scipy.stats.ttest_ind(equal_var=False)`` per subset;
- floor: each distinct filter once per subject, reference and baseline on the window means
  (both are linear), and Welch's t over all subsets at once.

The three give the mean significant fraction over subsets per pipeline and subject; the script checks they
agree within one channel (the service draws its own subsets) and prints the timings and ratios.

Small-sets case: 12 subjects of 16 channels × 60 trials × 71 samples at 100 Hz, the same grid on
the uploaded epochs (full-trial Welch test, Benjamini–Hochberg, no subsets), through
``execute_run`` with the pool, against its arithmetic: the prefix tree of the same pipelines
applied and each entry scored in one process (``execute_tree`` + ``score_epochs``), without
processes, cache or group level.

    python tests/benchmarks/bench_continuous_grid.py          # sizes above
    python tests/benchmarks/bench_continuous_grid.py --quick  # tiny smoke run
"""

import argparse
import os
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TypeVar

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import numpy as np
from scipy import signal, special, stats

from epoch_assay.engine.document.entry import SubsetSpread
from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.grid import GridSpec, expand_grid
from epoch_assay.engine.io.detect import FileFormat
from epoch_assay.engine.io.events import Events
from epoch_assay.engine.recording import ContinuousInput, EpochingSpec, RecordingRun
from epoch_assay.engine.scoring import score_epochs
from epoch_assay.engine.scoring_spec import ScoringSpec
from epoch_assay.engine.tree import build_tree, execute_tree
from service.settings import Settings
from worker.execution.multiverse import ExecutionSettings
from worker.run_job import EpochSetRef, execute_run

CONDITIONS = ("a", "b")
HIGHPASS_HZ = (None, 0.1, 0.5, 1.0)
ORDER = 4
TMIN, TMAX = -0.2, 0.8
WINDOW = (0.3, 0.5)
ALPHA = 0.05
Value = TypeVar("Value")


@dataclass(frozen=True)
class Size:
    subjects: int
    channels: int
    seconds: float
    sfreq: float
    events: int
    resamples: int
    per_condition: int
    small_subjects: int


FULL = Size(
    subjects=4, channels=34, seconds=330.0, sfreq=250.0, events=160, resamples=500, per_condition=50, small_subjects=12
)
QUICK = Size(
    subjects=2, channels=6, seconds=40.0, sfreq=100.0, events=36, resamples=20, per_condition=8, small_subjects=3
)


def grid() -> GridSpec:
    highpass = {"none": []} | {
        f"{hz:g}": [{"step": "highpass", "cutoff_hz": hz, "method": "iir", "order": ORDER}]
        for hz in HIGHPASS_HZ
        if hz is not None
    }
    return GridSpec(
        factors={
            "highpass": highpass,
            "reference": {"as_recorded": [], "average": [{"step": "reference", "kind": "average"}]},
            "baseline": {"off": [], "on": [{"step": "baseline", "window_s": [TMIN, 0.0]}]},
        }
    )


def simulated_recording(size: Size, subject: int) -> ContinuousInput:
    """One run in V: white noise (10 µV), a slow drift per channel (a random walk, about 50 µV over
    a minute) and, 0.3–0.5 s after each first-condition event, 3 µV on the back half of the channels."""
    rng = np.random.default_rng(subject)
    n_samples = round(size.seconds * size.sfreq)
    data = rng.normal(0.0, 10e-6, (size.channels, n_samples))
    data += np.cumsum(rng.normal(0.0, 50e-6 / np.sqrt(60 * size.sfreq), (size.channels, n_samples)), axis=1)
    onsets = 2.0 + (size.seconds - 4.0) / size.events * np.arange(size.events)
    values = np.array([CONDITIONS[i % 2] for i in range(size.events)])
    for onset in onsets[values == CONDITIONS[0]]:
        start = round((onset + 0.3) * size.sfreq)
        data[size.channels // 2 :, start : start + round(0.2 * size.sfreq)] += 3e-6
    recording = EpochSet(
        data=data[np.newaxis],
        sfreq=size.sfreq,
        tmin=0.0,
        ch_names=tuple(f"E{i:02d}" for i in range(size.channels)),
        ch_types=("eeg",) * size.channels,
        labels=np.array(["recording"]),
    )
    events = Events(onset_s=onsets, duration_s=np.zeros(size.events), values=values)
    run = RecordingRun(recording=recording, events=events, file_format=FileFormat.EDF, events_from="events.tsv")
    epoching = EpochingSpec(tmin=TMIN, tmax=TMAX, conditions={label: [label] for label in CONDITIONS})
    return ContinuousInput(runs=(run,), epoching=epoching)


def scoring(size: Size | None) -> dict:
    """Subsets of ``size`` when given (the continuous case), else the full-trial test (the small sets)."""
    spec: dict = {"conditions": list(CONDITIONS), "window_s": list(WINDOW), "alpha": ALPHA, "time_course": None}
    if size is None:
        return spec | {"correction": "fdr_bh"}
    bootstrap = {"mode": "fixed", "trials_per_condition": size.per_condition, "resamples": size.resamples}
    return spec | {"correction": "none", "bootstrap": bootstrap}


def timed(run: Callable[[], Value]) -> tuple[Value, float]:
    started = time.perf_counter()
    value = run()
    return value, time.perf_counter() - started


def service_run(spec: dict, sources: dict[str, object], workers: int | None) -> dict:
    refs = [EpochSetRef(id=key, subject=key, session=None, sha256=f"{i:064x}") for i, key in enumerate(sources)]
    with tempfile.TemporaryDirectory(prefix="bench-continuous-cache-") as cache_dir:
        defaults = Settings()  # the worker's step cache settings
        execution = ExecutionSettings(
            workers=workers,
            cache_dir=Path(cache_dir),
            cache_max_bytes=defaults.cache_max_bytes,
            cache_min_step_seconds=defaults.cache_min_step_seconds,
        )
        document = execute_run(
            "run_bench", "BENCH", spec, refs, lambda ref: sources[ref.id], lambda _: None, execution=execution
        )
    return {
        (e.pipeline, e.subject): e.bootstrap.subset_mean
        if isinstance(e.bootstrap, SubsetSpread)
        else e.significant_fraction
        for e in document.results
    }


def epoch_indices(source: ContinuousInput) -> tuple[np.ndarray, np.ndarray]:
    """(sample index of every epoch sample, shape (n_trials, n_times); condition of each trial)."""
    run, sfreq = source.runs[0], source.recording.sfreq
    first = np.round(run.events.onset_s * sfreq).astype(int) + round(TMIN * sfreq)
    return first[:, np.newaxis] + np.arange(round(TMAX * sfreq) - round(TMIN * sfreq) + 1), run.events.values


def subsets(size: Size, labels: np.ndarray, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Trial indices of each subset, shape (resamples, per_condition), for each condition."""
    rng = np.random.default_rng(seed)
    return tuple(
        np.array(
            [rng.choice(np.flatnonzero(labels == c), size.per_condition, replace=False) for _ in range(size.resamples)]
        )
        for c in CONDITIONS
    )


def plain_loop(size: Size, sources: dict[str, ContinuousInput]) -> dict:
    """Every pipeline from scratch on every subject; one scipy ``ttest_ind`` per subset."""
    fractions = {}
    for subject, source in sources.items():
        index, labels = epoch_indices(source)
        times = TMIN + np.arange(index.shape[1]) / source.recording.sfreq
        draws = subsets(size, labels, seed=1)
        for point in expand_grid(grid()):
            levels = point.levels
            data = source.recording.data[0]
            if levels["highpass"] != "none":
                sos = signal.butter(
                    ORDER, float(levels["highpass"]), "highpass", output="sos", fs=source.recording.sfreq
                )
                data = signal.sosfiltfilt(sos, data, axis=-1)
            epochs = data[:, index].transpose(1, 0, 2)
            if levels["reference"] == "average":
                epochs = epochs - epochs.mean(axis=1, keepdims=True)
            if levels["baseline"] == "on":
                epochs = epochs - epochs[:, :, times <= 0.0].mean(axis=2, keepdims=True)
            means = epochs[:, :, (times >= WINDOW[0]) & (times <= WINDOW[1])].mean(axis=2)
            share = [
                np.mean(stats.ttest_ind(means[a], means[b], equal_var=False).pvalue < ALPHA)
                for a, b in zip(*draws, strict=True)
            ]
            fractions[(point.pipeline.name, subject)] = float(np.mean(share))
    return fractions


def welch_p(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Two-sided Welch p-values along axis -2 (Welch 1947; the t distribution's CDF is scipy's stdtr)."""
    va, vb = a.var(axis=-2, ddof=1) / a.shape[-2], b.var(axis=-2, ddof=1) / b.shape[-2]
    t = (a.mean(axis=-2) - b.mean(axis=-2)) / np.sqrt(va + vb)
    df = (va + vb) ** 2 / (va**2 / (a.shape[-2] - 1) + vb**2 / (b.shape[-2] - 1))
    return 2.0 * special.stdtr(df, -np.abs(t))


def floor(size: Size, sources: dict[str, ContinuousInput]) -> dict:
    """Each distinct filter once per subject; reference and baseline on window means; all subsets at once."""
    fractions = {}
    points = expand_grid(grid())
    for subject, source in sources.items():
        index, labels = epoch_indices(source)
        times = TMIN + np.arange(index.shape[1]) / source.recording.sfreq
        in_window, in_baseline = (times >= WINDOW[0]) & (times <= WINDOW[1]), times <= 0.0
        a, b = subsets(size, labels, seed=1)
        for hz in HIGHPASS_HZ:
            data = source.recording.data[0]
            if hz is not None:
                sos = signal.butter(ORDER, hz, "highpass", output="sos", fs=source.recording.sfreq)
                data = signal.sosfiltfilt(sos, data, axis=-1)
            epochs = data[:, index]  # (channels, trials, times)
            window, baseline = epochs[:, :, in_window].mean(axis=2).T, epochs[:, :, in_baseline].mean(axis=2).T
            for point in (p for p in points if p.levels["highpass"] == ("none" if hz is None else f"{hz:g}")):
                means = window - baseline if point.levels["baseline"] == "on" else window
                if point.levels["reference"] == "average":
                    means = means - means.mean(axis=1, keepdims=True)
                share = (welch_p(means[a], means[b]) < ALPHA).mean(axis=1)
                fractions[(point.pipeline.name, subject)] = float(np.mean(share))
    return fractions


def small_sets(size: Size) -> dict[str, EpochSet]:
    """16 channels × 60 trials × 71 samples (-0.2 to 0.5 s at 100 Hz), 10 µV noise, 3 µV effect."""
    sets = {}
    for subject in range(size.small_subjects):
        rng = np.random.default_rng(100 + subject)
        data = rng.normal(0.0, 10e-6, (60, 16, 71))
        labels = np.array([CONDITIONS[i % 2] for i in range(60)])
        data[labels == CONDITIONS[0], 8:, 50:] += 3e-6
        sets[f"sub-{subject:02d}"] = EpochSet(
            data=data,
            sfreq=100.0,
            tmin=-0.2,
            ch_names=tuple(f"E{i:02d}" for i in range(16)),
            ch_types=("eeg",) * 16,
            labels=labels,
        )
    return sets


def arithmetic(sets: dict[str, EpochSet]) -> None:
    """The computation the service's run cannot avoid: each distinct step once (the prefix tree), and
    each entry scored, in this one process, with no cache, no other process and no group level."""
    spec = ScoringSpec.model_validate(scoring(None))
    tree = build_tree([point.pipeline for point in expand_grid(grid())])
    for epochs in sets.values():
        for leaf in execute_tree(tree, epochs, "0" * 64):
            score_epochs(leaf.epochs, spec)


def agree(name: str, mine: dict, reference: dict, tolerance: float) -> None:
    worst = max(abs(mine[key] - reference[key]) for key in reference)
    print(f"  {name}: largest difference in mean significant fraction {worst:.3f}")
    if worst > tolerance:
        raise SystemExit(f"{name} disagrees with the plain loop by {worst:.3f}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="tiny smoke run")
    size = QUICK if parser.parse_args().quick else FULL
    print(f"load average before: {' '.join(f'{x:.2f}' for x in os.getloadavg())}; {os.cpu_count()} cores")
    sources = {f"sub-{s:02d}": simulated_recording(size, s) for s in range(size.subjects)}
    spec = {"grid": grid().model_dump(mode="json"), "scoring": scoring(size)}
    print(
        f"continuous: 16 pipelines × {size.subjects} subjects of {size.channels} channels, {size.seconds:g} s at "
        f"{size.sfreq:g} Hz, {size.events} events; {size.resamples} subsets of {size.per_condition} trials per "
        "condition",
        flush=True,
    )
    # A worker starts its process server once and keeps it across runs: start it here, untimed.
    warm_up = {"sub-00": simulated_recording(QUICK, 0)}
    service_run({"grid": spec["grid"], "scoring": scoring(QUICK)}, warm_up, workers=None)
    service, service_s = timed(lambda: service_run(spec, sources, workers=None))
    print(f"  service (pool, cold cache): {service_s:7.2f} s", flush=True)
    plain, plain_s = timed(lambda: plain_loop(size, sources))
    print(f"  plain scipy loop:           {plain_s:7.2f} s", flush=True)
    vectorised, floor_s = timed(lambda: floor(size, sources))
    print(f"  vectorised floor:           {floor_s:7.2f} s", flush=True)
    channel = 1.0 / size.channels
    agree("floor vs plain loop (same subsets)", vectorised, plain, 1e-9)
    agree("service vs plain loop (own subsets)", service, plain, channel + 1e-9)
    print(f"  plain loop / service: {plain_s / service_s:5.1f} x (aim ≥ 6)")
    print(f"  service / floor:      {service_s / floor_s:5.1f} x (aim ≤ 2)", flush=True)

    sets = small_sets(size)
    small_spec = {"grid": grid().model_dump(mode="json"), "scoring": scoring(None)}
    print(f"small sets: 16 pipelines × {len(sets)} subjects of 16 channels × 60 trials × 71 samples at 100 Hz")
    _, small_s = timed(lambda: service_run(small_spec, sets, workers=None))
    _, arithmetic_s = timed(lambda: arithmetic(sets))
    print(f"  service (pool, cold cache): {small_s:7.2f} s")
    print(f"  arithmetic (tree + scoring in one process): {arithmetic_s:7.2f} s")
    print(f"  service / arithmetic: {small_s / arithmetic_s:5.1f} x")
    print(f"load average after: {' '.join(f'{x:.2f}' for x in os.getloadavg())}")


if __name__ == "__main__":
    main()
