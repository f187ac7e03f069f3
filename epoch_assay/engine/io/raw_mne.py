"""A continuous recording read through an ``mne.io.Raw`` object, whatever file it came from.

MNE scales every signal to V; trigger (stim) channels keep their integer codes (for BDF, MNE
reads the Status channel's 24-bit words unscaled). Channel types ``eeg``, ``eog`` and ``stim``
are kept; every other type is read as ``misc``. Positions come from the channels' locations
when the file stores any (NaN elsewhere).

A recording is an :class:`EpochSet` with one trial spanning the whole file: ``tmin`` 0,
label ``RECORDING_LABEL``.
"""

from dataclasses import dataclass

import mne
import numpy as np

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import EpochSetFormatError, EpochSetTooLargeError
from epoch_assay.engine.io.detect import FileFormat
from epoch_assay.engine.io.events import Events, events_from_lists
from epoch_assay.engine.io.npz import epoch_set_from_arrays

RECORDING_LABEL = "recording"
KEPT_CHANNEL_TYPES = ("eeg", "eog", "stim")
_FLOAT64_BYTES = 8


@dataclass(frozen=True)
class ContinuousFile:
    """A continuous recording read from a file.

    recording : one trial, data shape (1, n_channels, n_samples), in V, tmin 0 s
    annotations : the file's annotations, onsets in s from the first sample, possibly none
    """

    recording: EpochSet
    annotations: Events
    file_format: FileFormat


def load_within(raw: mne.io.BaseRaw, max_array_bytes: int, problem: str, fix: str) -> None:
    """Load an opened, not yet loaded ``raw``, refusing it first when its samples would exceed the limit.

    A failure to load (a data file shorter or other than its header says) is refused with
    ``problem`` and ``fix``; MNE's own message is not passed on (it can hold a server path).
    """
    declared = len(raw.ch_names) * raw.n_times * _FLOAT64_BYTES
    if declared > max_array_bytes:
        raise EpochSetTooLargeError(declared, max_array_bytes)
    # The data are untrusted; MNE raises many types on damaged input, each meaning "unreadable".
    try:
        raw.load_data(verbose="error")
    except Exception:
        raise EpochSetFormatError("file", problem, fix) from None


def continuous_from_raw(raw: mne.io.BaseRaw, file_format: FileFormat) -> ContinuousFile:
    """The recording and annotations of a loaded ``raw`` (see the module docstring)."""
    arrays = {
        "data": raw.get_data()[np.newaxis],
        "sfreq": np.float64(raw.info["sfreq"]),
        "tmin": np.float64(0.0),
        "ch_names": np.array(raw.ch_names, dtype=str),
        "labels": np.array([RECORDING_LABEL]),
        "ch_types": np.array(
            [kind if kind in KEPT_CHANNEL_TYPES else "misc" for kind in raw.get_channel_types()], dtype=str
        ),
    }
    positions = channel_positions(raw.info)
    if np.isfinite(positions).any():
        arrays["positions"] = positions
    # Annotations with an origin are timed from the measurement start, and the data may start
    # later (a FIF file's first_samp); without one they are timed from the first sample (MNE's
    # Annotations documentation, "orig_time").
    offset_s = raw.first_time if raw.annotations.orig_time is not None else 0.0
    annotations = events_from_lists(
        [onset - offset_s for onset in raw.annotations.onset],
        list(raw.annotations.duration),
        list(raw.annotations.description),
    )
    return ContinuousFile(recording=epoch_set_from_arrays(arrays), annotations=annotations, file_format=file_format)


def channel_positions(info: mne.Info) -> np.ndarray:
    """Channel locations, shape (n_channels, 3), in m; NaN where MNE stores none (all zeros or NaN)."""
    positions = np.array([channel["loc"][:3] for channel in info["chs"]], dtype=np.float64)
    unknown = ~np.isfinite(positions).all(axis=1) | (np.abs(positions).sum(axis=1) == 0)
    positions[unknown] = np.nan
    return positions
