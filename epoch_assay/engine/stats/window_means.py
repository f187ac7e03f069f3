"""Mean amplitude of each trial and channel over a time window."""

import numpy as np

from epoch_assay.engine.windows import window_mask


def window_means(data: np.ndarray, times: np.ndarray, window_s: tuple[float, float]) -> np.ndarray:
    """Mean over the samples whose time lies in [a, b], both ends included.

    Parameters
    ----------
    data : array, shape (n_trials, n_channels, n_times), in V
    times : array, shape (n_times,), in s, increasing
    window_s : (a, b), in s

    Returns
    -------
    array, shape (n_trials, n_channels), in V

    Raises ``ValueError`` when no sample lies in the window; a scoring spec is checked
    against the epoch set before this is reached, so that only happens on misuse.
    """
    inside = np.flatnonzero(window_mask(times, window_s))
    if inside.size == 0:
        raise ValueError(f"no sample time lies in the window {window_s} s")
    # Times increase, so the samples inside a window are contiguous: a slice avoids a copy.
    return data[..., inside[0] : inside[-1] + 1].mean(axis=-1)
