"""Which samples lie in a time window."""

import numpy as np

# Sample times are computed as tmin + i / sfreq; a window end given in ms-rounded seconds
# must still include the sample it names, so ends are compared with a tolerance far below
# one sample period.
_TIME_TOLERANCE_S = 1e-9


def sample_times(tmin: float, sfreq: float, n_times: int) -> np.ndarray:
    """Times of the samples, shape (n_times,), in s."""
    return tmin + np.arange(n_times) / sfreq


def window_mask(times: np.ndarray, window_s: tuple[float, float]) -> np.ndarray:
    """Boolean mask, shape (n_times,), of the samples whose time lies in [a, b], ends included."""
    start, end = window_s
    return (times >= start - _TIME_TOLERANCE_S) & (times <= end + _TIME_TOLERANCE_S)
