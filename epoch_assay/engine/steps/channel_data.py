"""New data arrays that change some channels of an epoch set and copy the rest, in one pass where possible.

A step's output is a fresh float64 array (steps never write into their input). When a step changes
every channel, as it usually does (all channels are EEG), the output is computed straight from the
input instead of first copying the input and then overwriting the copy: on a recording of tens of
megabytes that halves the memory traffic of the step.
"""

import numpy as np


def _all_channels(data: np.ndarray, channels: np.ndarray) -> bool:
    return channels.size == data.shape[1] and bool(np.array_equal(channels, np.arange(data.shape[1])))


def subtract_on_channels(data: np.ndarray, channels: np.ndarray, offset: np.ndarray) -> np.ndarray:
    """``data`` as a new float64 array with ``offset`` subtracted from ``channels`` only.

    data : shape (n_trials, n_channels, n_times).
    channels : int indices into axis 1.
    offset : broadcastable to (n_trials, len(channels), n_times), same unit as ``data``.
    """
    if _all_channels(data, channels):
        return np.subtract(data, offset, dtype=np.float64)
    out = data.astype(np.float64, copy=True)
    out[:, channels] -= offset
    return out


def replace_channels(data: np.ndarray, channels: np.ndarray, values: np.ndarray) -> np.ndarray:
    """``data`` as a new float64 array whose ``channels`` hold ``values``.

    data : shape (n_trials, n_channels, n_times).
    channels : int indices into axis 1.
    values : shape (n_trials, len(channels), n_times), a new array (returned as is when it covers every channel).
    """
    if _all_channels(data, channels):
        return values.astype(np.float64, copy=False)
    out = data.astype(np.float64, copy=True)
    out[:, channels] = values
    return out


def channel_rows(data: np.ndarray, channels: np.ndarray) -> np.ndarray:
    """The ``channels`` of ``data`` (shape (n_trials, n_channels, n_times)); a view when they are all of them."""
    return data if _all_channels(data, channels) else data[:, channels]
