"""Small epoch-set files for API tests (random data with a planted effect, seeded)."""

import io
import tempfile
from pathlib import Path

import numpy as np

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.io.npz import write_npz

CHANNELS = ("Fz", "Cz", "Pz", "C3", "C4", "TP9", "TP10", "Oz")


def small_epochs(seed: int = 0, n_per_condition: int = 30, effect_uv: float = 3.0, sfreq: float = 100.0) -> EpochSet:
    """Two conditions "a" and "b"; "a" is shifted by ``effect_uv`` in 0.3–0.5 s on Cz and Pz.

    data : shape (2 * n_per_condition, 8, 81), in V, tmin −0.2 s.
    """
    rng = np.random.default_rng(seed)
    n_trials, n_times = 2 * n_per_condition, round(0.8 * sfreq) + 1
    times = -0.2 + np.arange(n_times) / sfreq
    data = rng.normal(0.0, 5e-6, size=(n_trials, len(CHANNELS), n_times))
    labels = np.array(["a"] * n_per_condition + ["b"] * n_per_condition)
    in_window = (times >= 0.3) & (times <= 0.5)
    data[:n_per_condition, 1:3, :] += effect_uv * 1e-6 * in_window
    return EpochSet(
        data=data, sfreq=sfreq, tmin=-0.2, ch_names=CHANNELS, ch_types=("eeg",) * len(CHANNELS), labels=labels
    )


def npz_bytes(epochs: EpochSet) -> bytes:
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "epochs.npz"
        write_npz(epochs, path)
        return path.read_bytes()


def raw_npz_bytes(**arrays: object) -> bytes:
    """An NPZ file with exactly the given arrays (for malformed-file tests)."""
    buffer = io.BytesIO()
    np.savez(buffer, **arrays)
    return buffer.getvalue()
