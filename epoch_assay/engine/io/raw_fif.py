"""Continuous recordings saved by MNE (``Raw.save``, a file ending in ``-raw.fif`` or ``_raw.fif``).

A FIF file may name other files (split recordings) that MNE would open beside it: such a file
is refused by :func:`epoch_assay.engine.io.fif_safety.refuse_file_references` before MNE
reads anything, and MNE reads the file under a name of our own in a private temporary
folder, so nothing beside it can be reached. What is kept: see
:mod:`epoch_assay.engine.io.raw_mne` (signals in V, trigger channels as codes, annotations,
channel locations). Projectors stored in the file are not applied.
"""

from pathlib import Path

import mne

from epoch_assay.engine.errors import EpochSetFormatError
from epoch_assay.engine.io.detect import FileFormat, named_for_reader
from epoch_assay.engine.io.fif_safety import refuse_file_references
from epoch_assay.engine.io.raw_mne import ContinuousFile, continuous_from_raw, load_within

READER_NAME = "recording_raw.fif"
_SAVE_AGAIN = (
    "Save the recording again with mne.io.Raw.save (a file ending in _raw.fif) and upload that file; "
    "an epochs file (-epo.fif) goes to POST /v1/studies/{code}/epoch-sets"
)


def read_raw_fif(path: Path, *, max_array_bytes: int) -> ContinuousFile:
    """Read an MNE raw FIF recording; data as float64 in V, shape (1, n_channels, n_samples)."""
    refuse_file_references(path)
    with named_for_reader(path, READER_NAME) as named:
        # The file is untrusted and MNE's parser raises many types on damaged input; each one
        # means "not a readable raw file". Its text is not passed on (it can hold our path).
        try:
            raw = mne.io.read_raw_fif(named, preload=False, verbose="error")
        except Exception:
            raise EpochSetFormatError(
                "file", "the file starts like FIF but MNE cannot read it as a continuous recording", _SAVE_AGAIN
            ) from None
        load_within(raw, max_array_bytes, "the recording's data end before the file says they do", _SAVE_AGAIN)
    return continuous_from_raw(raw, FileFormat.FIF)
