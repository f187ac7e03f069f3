"""FIF epochs files that refer to other files: MNE's own split files, and one of them edited.

Built with MNE's writer (``mne.Epochs.save`` with a small ``split_size`` writes a FIFFB_REF
block holding FIFF_REF_FILE_NAME, FIFF_REF_FILE_NUM and FIFF_REF_ROLE, as ``mne/epochs.py``
does), so the references are exactly those MNE itself would follow.
"""

import tempfile
from functools import cache
from pathlib import Path

import mne
import numpy as np

# 14 characters each, so one can replace the other in the file without moving any tag.
_NEXT_PART_NAME = b"abcd-epo-1.fif"
# The name the engine gives an upload when handing it to MNE (epoch_assay.engine.io.fif).
SELF_NAME = b"upload-epo.fif"
MISSING_NAME = b"../nofile-.fif"


@cache
def split_first_part() -> bytes:
    """The first file of an epochs file saved in parts: it names the next part (abcd-epo-1.fif)."""
    rng = np.random.default_rng(15)
    info = mne.create_info(["Fz", "Cz", "Pz", "Oz"], 500.0, "eeg")
    n_trials = 400
    events = np.column_stack([np.arange(n_trials) * 1000, np.zeros(n_trials, int), 1 + np.arange(n_trials) % 2])
    epochs = mne.EpochsArray(
        rng.normal(0, 1e-5, (n_trials, 4, 501)),
        info,
        events=events,
        event_id={"a": 1, "b": 2},
        tmin=-0.2,
        verbose="error",
    )
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "abcd-epo.fif"
        epochs.save(path, split_size="2MB", verbose="error")
        first = path.read_bytes()
    assert _NEXT_PART_NAME in first, "MNE did not write a split file"
    return first


def referring_to(name: bytes) -> bytes:
    """The first part of a split file, its reference edited to ``name`` (14 bytes)."""
    assert len(name) == len(_NEXT_PART_NAME)
    return split_first_part().replace(_NEXT_PART_NAME, name)
