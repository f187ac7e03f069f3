"""Power spectra and robust scores shared by the detection steps (bad channels, trials, ICA)."""

import numpy as np
from scipy import signal

# Welch segments of this length (or the whole epoch, if shorter) give ~0.5 Hz resolution.
WELCH_SEGMENT_S = 2.0
# Rows whose Welch segments are transformed at once stay below this many bytes (complex128).
SPECTRUM_BLOCK_BYTES = 64 * 2**20
# Scale of the median absolute deviation that makes it estimate the standard deviation of
# normal data (Rousseeuw & Croux, 1993).
MAD_TO_SD = 1.4826


def welch_segment_samples(n_times: int, sfreq: float) -> int:
    """Samples per Welch segment for epochs of ``n_times`` samples at ``sfreq`` Hz."""
    return int(min(n_times, round(WELCH_SEGMENT_S * sfreq)))


def mean_channel_psd(data: np.ndarray, sfreq: float) -> tuple[np.ndarray, np.ndarray]:
    """Welch power spectral density per channel, averaged over trials.

    data : array, shape (n_trials, n_channels, n_times), in V
    Returns freqs, shape (n_freqs,), in Hz, and psd, shape (n_channels, n_freqs), in V²/Hz.
    """
    n_trials, n_channels, n_times = data.shape
    nperseg = welch_segment_samples(n_times, sfreq)
    n_segments = max(1, 2 * n_times // nperseg)
    rows_per_block = max(1, SPECTRUM_BLOCK_BYTES // (n_segments * (nperseg // 2 + 1) * 16))
    channels_per_block = max(1, rows_per_block // n_trials)
    freqs = np.fft.rfftfreq(nperseg, 1.0 / sfreq)
    psd = np.empty((n_channels, freqs.size))
    for start in range(0, n_channels, channels_per_block):
        block = data[:, start : start + channels_per_block]
        _, block_psd = signal.welch(block, fs=sfreq, nperseg=nperseg, axis=-1)
        psd[start : start + channels_per_block] = block_psd.mean(axis=0)
    return freqs, psd


def robust_z(values: np.ndarray, axis: int = -1, min_scale: float = 0.0) -> np.ndarray:
    """(values - median) / (1.4826 · MAD) along ``axis``; the scale is at least ``min_scale``.

    A floor on the scale keeps values that barely differ from being called outliers.
    """
    median = np.median(values, axis=axis, keepdims=True)
    scale = MAD_TO_SD * np.median(np.abs(values - median), axis=axis, keepdims=True)
    scale = np.maximum(scale, min_scale)
    return np.divide(values - median, scale, out=np.zeros_like(values, dtype=float), where=scale > 0)
