"""Epochs files written by MNE, read back by the engine."""

import mne
import numpy as np
import pytest

from epoch_assay.engine.errors import EpochSetFormatError, EpochSetTooLargeError
from epoch_assay.engine.io.fif import read_fif_epochs

LIMIT = 10**9


def _mne_epochs(with_montage: bool = False) -> mne.EpochsArray:
    rng = np.random.default_rng(3)
    info = mne.create_info(["Fz", "Cz", "Pz", "HEOG", "ECG"], 200.0, ["eeg", "eeg", "eeg", "eog", "ecg"])
    events = np.array([[100 * i, 0, 1 + i % 2] for i in range(6)])
    epochs = mne.EpochsArray(
        rng.normal(0, 1e-5, (6, 5, 40)), info, events=events, event_id={"go": 1, "stop": 2}, tmin=-0.05, verbose="error"
    )
    if with_montage:
        epochs.set_montage("standard_1020", on_missing="ignore", verbose="error")
    return epochs


def _saved(tmp_path, epochs: mne.EpochsArray):
    path = tmp_path / "x-epo.fif"
    epochs.save(path, verbose="error")
    blob = tmp_path / "blob"  # stored under its hash, without the suffix MNE expects
    blob.write_bytes(path.read_bytes())
    return blob


def test_data_times_and_conditions_equal_what_mne_wrote(tmp_path):
    # Reference: mne.EpochsArray / Epochs.save (Gramfort et al., 2013, MNE-Python); FIF stores float32 by default.
    written = _mne_epochs()
    read = read_fif_epochs(_saved(tmp_path, written), max_array_bytes=LIMIT)
    np.testing.assert_allclose(read.data, written.get_data(), rtol=1e-6)
    assert read.labels.tolist() == ["go", "stop"] * 3
    assert read.tmin == pytest.approx(-0.05) and read.sfreq == 200.0
    assert read.ch_types == ("eeg", "eeg", "eeg", "eog", "misc")


def test_positions_from_the_file_are_kept_in_metres(tmp_path):
    written = _mne_epochs(with_montage=True)
    read = read_fif_epochs(_saved(tmp_path, written), max_array_bytes=LIMIT)
    expected = np.array([ch["loc"][:3] for ch in written.info["chs"][:3]])
    np.testing.assert_allclose(read.positions[:3], expected)
    assert np.isnan(read.positions[3:]).all()


def test_a_file_declaring_more_than_the_memory_limit_is_refused(tmp_path):
    with pytest.raises(EpochSetTooLargeError):
        read_fif_epochs(_saved(tmp_path, _mne_epochs()), max_array_bytes=100)


def test_a_damaged_fif_file_is_refused_as_unreadable(tmp_path):
    blob = _saved(tmp_path, _mne_epochs())
    blob.write_bytes(blob.read_bytes()[:200])
    with pytest.raises(EpochSetFormatError, match="not a complete, readable MNE epochs file") as refused:
        read_fif_epochs(blob, max_array_bytes=LIMIT)
    assert str(tmp_path) not in str(refused.value)  # MNE's message, which names the path, is not passed on
