"""The ICA step against MNE's default ICA fit on the same epochs.

The epochs have the shape of ``bench_steps.py`` (64 EEG channels on MNE's 10-10 template, 400
trials of 1.2 s at 500 Hz) but independent, heavy-tailed (Laplace) sources with a 1/f-like tilt,
mixed at random, so that the decomposition is identifiable as EEG's is (Gaussian noise has no
independent components to find and makes every algorithm run to its iteration limit), and a
blink-like source mixed into the frontal channels. Printed, in one run:

* the whole ICA step with its defaults (Picard on a 1 Hz high-passed fitting copy, as many
  components as the data's rank, components scored and removed, data rebuilt);
* the same step with the method of earlier releases (extended Infomax);
* ``mne.preprocessing.ICA()`` with MNE's defaults (FastICA, all components), ``fit`` alone;
* the ratio of the step to MNE's fit alone (the aim is at most 0.5), and whether the step
  removed the blink component.

    python tests/benchmarks/bench_ica.py          # 64 channels, 400 trials, 1.2 s, 500 Hz
    python tests/benchmarks/bench_ica.py --quick  # tiny smoke run
"""

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import mne
import numpy as np

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.steps.ica import Ica
from epoch_assay.engine.steps.mne_bridge import MNE_QUIET, to_mne_epochs
from tests.benchmarks.bench_steps import make_epochs

BLINK_UV = 150.0
FRONTAL = ("Fp1", "Fpz", "Fp2", "AF7", "AF3", "AFz", "AF4", "AF8")


def with_independent_sources(epochs: EpochSet) -> EpochSet:
    """``epochs`` with their data replaced by mixed Laplace sources tilted towards low frequencies (V)."""
    rng = np.random.default_rng(0)
    n_trials, n_channels, n_times = epochs.data.shape
    white = rng.laplace(size=(n_trials, n_channels, n_times))
    tilted = np.cumsum(white, axis=-1) * 0.05 + white
    mixing = rng.standard_normal((n_channels, n_channels)) / np.sqrt(n_channels)
    return epochs.with_changes(data=1e-5 * np.einsum("ck,tkn->tcn", mixing, tilted))


def with_blinks(epochs: EpochSet) -> EpochSet:
    """``epochs`` with one blink (a 0.3 s half-sine of ``BLINK_UV`` µV) in every other trial, frontal-weighted."""
    rng = np.random.default_rng(1)
    n_trials, _, n_times = epochs.data.shape
    source = np.zeros((n_trials, n_times))
    width = round(0.3 * epochs.sfreq)
    for trial in range(0, n_trials, 2):
        start = int(rng.integers(0, n_times - width))
        source[trial, start : start + width] = np.sin(np.linspace(0.0, np.pi, width))
    weights = np.array([1.0 if name in FRONTAL else 0.05 for name in epochs.ch_names])
    return epochs.with_changes(data=epochs.data + BLINK_UV * 1e-6 * weights[None, :, None] * source[:, None, :])


def seconds(action) -> tuple[float, object]:
    started = time.perf_counter()
    value = action()
    return time.perf_counter() - started, value


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--quick", action="store_true", help="tiny smoke run")
    args = parser.parse_args()
    shape = (16, 40, 1.2, 250.0) if args.quick else (64, 400, 1.2, 500.0)
    epochs = with_blinks(with_independent_sources(make_epochs(*shape)))
    print(f"{shape[0]} channels x {shape[1]} trials x {shape[2]} s at {shape[3]:g} Hz, a blink in every other trial")
    step_s, (_, record) = seconds(lambda: Ica(seed=0).apply(epochs))
    ocular = [component.index for component in record.components_removed if component.kind == "ocular"]
    print(f"  ICA step, defaults (picard, rank, 1 Hz fitting copy), whole step : {step_s:8.2f} s")
    print(f"    ocular components removed: {ocular or 'none'}")
    infomax_s, _ = seconds(lambda: Ica(method="extended_infomax", n_components=0.99, seed=0).apply(epochs))
    print(f"  ICA step, extended Infomax on 99 % of variance (earlier default)  : {infomax_s:8.2f} s")
    mne_epochs = to_mne_epochs(epochs, np.arange(epochs.data.shape[1]))
    mne_s, _ = seconds(lambda: mne.preprocessing.ICA(random_state=0, verbose=MNE_QUIET).fit(mne_epochs))
    print(f"  mne.preprocessing.ICA() defaults (FastICA), fit alone           : {mne_s:8.2f} s")
    print(f"  step / MNE default fit : {step_s / mne_s:6.2f}  (aim: at most 0.50)")
    print(f"  step / earlier default : {step_s / infomax_s:6.2f}")


if __name__ == "__main__":
    main()
