"""Epochs files written by MNE (``-epo.fif``), read with ``mne.read_epochs``.

Conditions come from the file's event ids: each epoch's label is the name its event code
has in ``event_id``. Channel types ``eeg``, ``eog`` and ``stim`` are kept; every other
type is read as ``misc``. Positions come from the channels' locations (NaN where MNE has
none). MNE stores amplitudes in V. The result passes the same checks as an NPZ file.
"""

from pathlib import Path

import mne
import numpy as np

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import EpochSetFormatError, EpochSetTooLargeError
from epoch_assay.engine.io.detect import named_for_reader
from epoch_assay.engine.io.npz import epoch_set_from_arrays

KEPT_CHANNEL_TYPES = ("eeg", "eog", "stim")
_BYTES_PER_SAMPLE = 8
_SAVE_AGAIN = "Save the epochs again with mne.Epochs.save (a file ending in -epo.fif) and upload that file"


def read_fif_epochs(path: Path, *, max_array_bytes: int) -> EpochSet:
    """Read an MNE epochs file; data as float64 in V, shape (n_trials, n_channels, n_times)."""
    with named_for_reader(path, "upload-epo.fif") as named:
        epochs = _open(named)
        declared = len(epochs.events) * len(epochs.ch_names) * len(epochs.times) * _BYTES_PER_SAMPLE
        if declared > max_array_bytes:
            raise EpochSetTooLargeError(declared, max_array_bytes)
        data = _load(epochs)
    codes_to_names = {code: name for name, code in epochs.event_id.items()}
    labels = [codes_to_names.get(int(code), str(int(code))) for code in epochs.events[:, 2]]
    return epoch_set_from_arrays(
        {
            "data": data,
            "sfreq": np.array(epochs.info["sfreq"], dtype=np.float64),
            "tmin": np.array(epochs.tmin, dtype=np.float64),
            "ch_names": np.array(epochs.ch_names, dtype=str),
            "labels": np.array(labels, dtype=str),
            "ch_types": np.array(
                [kind if kind in KEPT_CHANNEL_TYPES else "misc" for kind in epochs.get_channel_types()], dtype=str
            ),
            "positions": _positions(epochs.info),
        }
    )


def _open(named: Path) -> mne.Epochs:
    # The file is untrusted and MNE's parser raises many types on damaged input (struct, index,
    # key, value, OS errors...): every one of them means "not a readable epochs file".
    try:
        return mne.read_epochs(named, preload=False, verbose="error")
    except Exception as error:
        raise EpochSetFormatError(
            "file",
            f"the file starts like FIF but MNE cannot read it as epochs ({type(error).__name__}: {error})",
            _SAVE_AGAIN,
        ) from None


def _load(epochs: mne.Epochs) -> np.ndarray:
    try:
        with mne.utils.use_log_level("error"):
            return epochs.get_data(copy=True)
    except Exception as error:
        raise EpochSetFormatError(
            "file", f"the epochs' data could not be read ({type(error).__name__}: {error})", _SAVE_AGAIN
        ) from None


def _positions(info: mne.Info) -> np.ndarray:
    """Channel locations, shape (n_channels, 3), in m; NaN where MNE stores none (all zeros or NaN)."""
    positions = np.array([channel["loc"][:3] for channel in info["chs"]], dtype=np.float64)
    unknown = ~np.isfinite(positions).all(axis=1) | (np.abs(positions).sum(axis=1) == 0)
    positions[unknown] = np.nan
    return positions
