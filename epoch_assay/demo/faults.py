"""Electrode faults added to simulated epochs: the demo's noisy channels and the bad-channel benchmark.

Each function changes ``data`` (shape (n_trials, n_channels, n_times), in V) in place on the
channel(s) given by index; amplitudes are in µV as given by a person, converted here.
"""

import numpy as np
from scipy import signal

from epoch_assay.engine.units import uv_to_v

MUSCLE_BAND_HZ = (40.0, 100.0)
# A wandering electrode: a random walk plus this much white noise, relative to the walk.
WANDER_WHITE_FRACTION = 0.5


def silence(data: np.ndarray, channel: int, std_uv: float, rng: np.random.Generator) -> None:
    """Replace the channel by white noise of ``std_uv``: an electrode that records almost nothing."""
    data[:, channel] = uv_to_v(std_uv) * rng.standard_normal(data[:, channel].shape)


def add_white_noise(data: np.ndarray, channel: int, std_uv: float, rng: np.random.Generator) -> None:
    """Add broadband white noise of ``std_uv``: a high-impedance or moving electrode."""
    data[:, channel] += uv_to_v(std_uv) * rng.standard_normal(data[:, channel].shape)


def decouple(data: np.ndarray, channel: int, level_uv: float, rng: np.random.Generator) -> None:
    """Replace the channel by a wandering potential of its own, RMS about ``level_uv``, sharing no scalp signal."""
    shape = data[:, channel].shape
    walk = np.cumsum(rng.standard_normal(shape), axis=-1)
    walk = (walk - walk.mean(axis=-1, keepdims=True)) / walk.std()
    data[:, channel] = uv_to_v(level_uv) * (walk + WANDER_WHITE_FRACTION * rng.standard_normal(shape))


def add_muscle(data: np.ndarray, channel: int, std_uv: float, sfreq: float, rng: np.random.Generator) -> None:
    """Add 40-100 Hz band-limited noise of ``std_uv`` (muscle activity under the electrode).

    The band is cut at 0.45 of ``sfreq`` when the Nyquist frequency is below 100 Hz.
    """
    high = min(MUSCLE_BAND_HZ[1], 0.45 * sfreq)
    band = signal.butter(4, (MUSCLE_BAND_HZ[0], high), btype="bandpass", fs=sfreq, output="sos")
    burst = signal.sosfiltfilt(band, rng.standard_normal(data[:, channel].shape), axis=-1)
    data[:, channel] += uv_to_v(std_uv) * burst / burst.std()


def add_mains(
    data: np.ndarray, channel: int, amplitude_uv: float, freq_hz: float, times: np.ndarray, rng: np.random.Generator
) -> None:
    """Add a mains sinusoid of peak ``amplitude_uv`` at ``freq_hz`` with a random phase per trial; times in s."""
    phase = rng.uniform(0.0, 2.0 * np.pi, size=(data.shape[0], 1))
    data[:, channel] += uv_to_v(amplitude_uv) * np.sin(2.0 * np.pi * freq_hz * times + phase)


def bridge(data: np.ndarray, pair: tuple[int, int], noise_uv: float, rng: np.random.Generator) -> None:
    """Set both channels of ``pair`` to their mean plus independent white noise of ``noise_uv`` (a gel bridge)."""
    mean = (data[:, pair[0]] + data[:, pair[1]]) / 2.0
    for channel in pair:
        data[:, channel] = mean + uv_to_v(noise_uv) * rng.standard_normal(mean.shape)
