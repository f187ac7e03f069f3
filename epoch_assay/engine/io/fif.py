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
from epoch_assay.engine.io.fif_safety import refuse_file_references
from epoch_assay.engine.io.npz import epoch_set_from_arrays
from epoch_assay.engine.io.raw_mne import KEPT_CHANNEL_TYPES, channel_positions

_BYTES_PER_SAMPLE = 8
_SAVE_AGAIN = (
    "Save the epochs again with mne.Epochs.save (a file ending in -epo.fif) and upload that file; a continuous "
    "recording (_raw.fif) goes to POST /v1/studies/{code}/recordings with an epoching spec"
)


def read_fif_epochs(path: Path, *, max_array_bytes: int) -> EpochSet:
    """Read an MNE epochs file; data as float64 in V, shape (n_trials, n_channels, n_times).

    A file that refers to other files (split files) is refused before MNE opens it.
    """
    refuse_file_references(path)
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
            "positions": channel_positions(epochs.info),
        }
    )


def _open(named: Path) -> mne.Epochs:
    # The file is untrusted and MNE's parser raises many types on damaged input (struct, index,
    # key, value, OS errors...): every one of them means "not a readable epochs file". MNE's
    # message is not passed on: it names server paths.
    try:
        return mne.read_epochs(named, preload=False, verbose="error")
    except Exception:
        raise EpochSetFormatError(
            "file", "the file starts like FIF but is not a complete, readable MNE epochs file", _SAVE_AGAIN
        ) from None


def _load(epochs: mne.Epochs) -> np.ndarray:
    try:
        with mne.utils.use_log_level("error"):
            return epochs.get_data(copy=True)
    except Exception:
        raise EpochSetFormatError(
            "file", "the epochs' data could not be read: the file ends early or is damaged", _SAVE_AGAIN
        ) from None
