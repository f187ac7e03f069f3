"""Small seeded data for the statistics and scoring tests (simulated, in V)."""

import numpy as np

from epoch_assay.engine.epochs import EpochSet

MICROVOLT = 1e-6


def window_mean_pair(
    n_trials_a: int, n_trials_b: int, n_channels: int, *, effect_v: float = 1.0 * MICROVOLT, seed: int = 0
) -> tuple[np.ndarray, np.ndarray]:
    """Window means of two conditions, shapes (n_trials_a, n_channels), (n_trials_b, n_channels), in V.

    The first half of the channels has a mean difference of ``effect_v``; the second
    condition has a larger spread so that the variances differ.
    """
    rng = np.random.default_rng(seed)
    shift = np.where(np.arange(n_channels) < n_channels // 2, effect_v, 0.0)
    a = rng.normal(0.0, 2.0 * MICROVOLT, size=(n_trials_a, n_channels)) + shift
    b = rng.normal(0.0, 3.0 * MICROVOLT, size=(n_trials_b, n_channels))
    return a, b


def small_epoch_set(*, n_per_condition: int = 30, seed: int = 1) -> EpochSet:
    """Eight channels (six EEG, one EOG, one misc), 250 Hz, -0.1 to 0.5 s, labels "std" and "dev".

    EEG channels E1 to E3 carry a 3 µV deflection between 0.2 and 0.4 s in "dev" trials.
    """
    rng = np.random.default_rng(seed)
    sfreq, tmin, n_times = 250.0, -0.1, 151
    ch_names = ("E1", "E2", "E3", "E4", "E5", "E6", "EOG1", "AUX")
    ch_types = ("eeg",) * 6 + ("eog", "misc")
    labels = np.array(["std"] * n_per_condition + ["dev"] * n_per_condition)
    data = rng.normal(0.0, 5.0 * MICROVOLT, size=(labels.size, len(ch_names), n_times))
    times = tmin + np.arange(n_times) / sfreq
    in_window = (times >= 0.2) & (times <= 0.4)
    data[np.ix_(labels == "dev", [0, 1, 2], np.flatnonzero(in_window))] += 3.0 * MICROVOLT
    return EpochSet(data=data, sfreq=sfreq, tmin=tmin, ch_names=ch_names, ch_types=ch_types, labels=labels)
