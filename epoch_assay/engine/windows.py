"""Which samples lie in a time window."""

import numpy as np

from epoch_assay.engine.epochs import EpochSetMeta
from epoch_assay.engine.errors import SpecError

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


def check_window_in_epoch(window_s: tuple[float, float], meta: EpochSetMeta, loc: tuple[str | int, ...]) -> None:
    """Raise SpecError at ``loc`` unless the window [a, b] (in s) lies inside the epoch and holds a sample."""
    start, end = window_s
    if start < meta.tmin - 0.5 / meta.sfreq or end > meta.tmax + 0.5 / meta.sfreq:
        raise SpecError(
            loc,
            f"window [{start}, {end}] s lies outside the epoch [{meta.tmin:.4g}, {meta.tmax:.4g}] s; "
            "choose a window inside the epoch",
        )
    if not window_mask(sample_times(meta.tmin, meta.sfreq, meta.n_times), window_s).any():
        raise SpecError(
            loc,
            f"window [{start}, {end}] s contains no sample at {meta.sfreq:g} Hz; widen it to at least one "
            f"sample period ({1 / meta.sfreq:.4g} s)",
        )
