"""Wall time and peak traced memory of each processing step on one large epoch set.

The set is seeded Gaussian noise with a 1/f-like tilt, 64 EEG channels on MNE's 10-10
template, 400 trials of 1.2 s at 500 Hz (about 123 MB as float64). Each step runs once on
it; the script prints seconds, the peak memory traced by ``tracemalloc`` during the step
(numpy buffers included), and that peak as a multiple of the input's size.

    python tests/benchmarks/bench_steps.py          # 64 channels, 400 trials, 1.2 s, 500 Hz
    python tests/benchmarks/bench_steps.py --quick  # tiny smoke run
"""

import argparse
import sys
import time
import tracemalloc
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import numpy as np

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.montage import montage_positions, standard_montage
from epoch_assay.engine.pipeline import PipelineSpec

STEPS = [
    {"step": "highpass", "cutoff_hz": 0.1},
    {"step": "highpass", "cutoff_hz": 0.5, "method": "iir"},
    {"step": "lowpass", "cutoff_hz": 40.0},
    {"step": "bandpass", "low_hz": 0.5, "high_hz": 40.0},
    {"step": "line_noise", "freq_hz": 50, "method": "notch"},
    {"step": "line_noise", "freq_hz": 50, "method": "spectrum_interpolation"},
    {"step": "resample", "sfreq": 250.0},
    {"step": "reference", "kind": "average"},
    {"step": "reference", "kind": "rest"},
    {
        "step": "bad_channels",
        "criteria": {
            "near_silent": {},
            "amplitude_outlier": {},
            "partner_agreement": {},
            "mains_excess": {},
            "fast_power_excess": {},
            "bridged_pair": {},
        },
        "action": "interpolate",
    },
    {"step": "ica", "n_components": 0.9, "seed": 0},
    {"step": "detrend", "kind": "linear"},
    {
        "step": "trial_rejection",
        "criteria": {"peak_to_peak_uv": 150.0, "amplitude_z": 5.0, "high_frequency_z": 5.0, "low_frequency_z": 5.0},
    },
    {"step": "baseline", "window_s": [-0.2, 0.0]},
]


def make_epochs(n_channels: int, n_trials: int, duration_s: float, sfreq: float) -> EpochSet:
    """Seeded noise epochs, data in V, on the first ``n_channels`` names of the 10-10 template."""
    names = tuple(standard_montage("standard_1005").ch_names[:n_channels])
    n_times = round(duration_s * sfreq)
    rng = np.random.default_rng(0)
    mixing = rng.standard_normal((n_channels, n_channels)) / np.sqrt(n_channels)
    white = rng.standard_normal((n_trials, n_channels, n_times))
    # A running sum gives the low frequencies the weight they have in EEG.
    tilted = np.cumsum(white, axis=-1) * 0.05 + white
    data = 1e-5 * np.einsum("ck,tkn->tcn", mixing, tilted)
    positions = montage_positions(names, "standard_1005")
    return EpochSet(
        data=data,
        sfreq=sfreq,
        tmin=-0.2,
        ch_names=names,
        ch_types=("eeg",) * n_channels,
        labels=np.array(["a", "b"] * (n_trials // 2)),
        positions=positions,
    )


def measure(step_spec: dict, epochs: EpochSet) -> tuple[float, int]:
    """Seconds and peak traced bytes of one application of ``step_spec``."""
    step = PipelineSpec(name="bench", steps=[step_spec]).steps[0]
    step.check(epochs.meta())
    tracemalloc.start()
    started = time.perf_counter()
    step.apply(epochs)
    seconds = time.perf_counter() - started
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return seconds, peak


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--quick", action="store_true", help="tiny smoke run")
    args = parser.parse_args()
    shape = (16, 20, 1.2, 250.0) if args.quick else (64, 400, 1.2, 500.0)
    epochs = make_epochs(*shape)
    input_mb = epochs.data.nbytes / 2**20
    print(f"{shape[0]} channels x {shape[1]} trials x {shape[2]} s at {shape[3]:g} Hz: input {input_mb:.1f} MB")
    print(f"{'step':<60} {'seconds':>8} {'peak MB':>9} {'x input':>8}")
    for spec in STEPS:
        seconds, peak = measure(spec, epochs)
        label = ", ".join(f"{key}={value}" for key, value in spec.items() if key != "criteria")
        print(f"{label:<60} {seconds:8.2f} {peak / 2**20:9.1f} {peak / epochs.data.nbytes:8.2f}")


if __name__ == "__main__":
    main()
