"""Electrode positions from MNE's standard montages by channel name."""

import mne
import numpy as np

from epoch_assay.engine.montage import (
    builtin_montage_name,
    eeg_channels_without_position,
    epoch_set_positions,
    montage_positions,
)
from tests.engine.conftest import random_epoch_set


def test_positions_match_mne_montage_in_head_coordinates() -> None:
    # Reference: MNE-Python's 10-20 template montage set on an Info (Gramfort et al., 2013)
    info = mne.create_info(["Fz", "Cz", "Pz"], 250.0, "eeg")
    info.set_montage(mne.channels.make_standard_montage(builtin_montage_name("standard_1020")))
    expected = np.array([channel["loc"][:3] for channel in info["chs"]])
    np.testing.assert_allclose(montage_positions(["Fz", "Cz", "Pz"]), expected)


def test_names_match_regardless_of_case() -> None:
    np.testing.assert_allclose(montage_positions(["CZ", "fp1"]), montage_positions(["Cz", "Fp1"]))


def test_unknown_names_get_nan() -> None:
    positions = montage_positions(["Cz", "VEOG"])
    assert np.isfinite(positions[0]).all() and np.isnan(positions[1]).all()


def test_own_positions_preferred_over_montage() -> None:
    own = np.array([[0.01, 0.02, 0.09], [np.nan, np.nan, np.nan]])
    epochs = random_epoch_set(n_channels=2, ch_names=("Cz", "Pz")).with_changes(positions=own)
    positions = epoch_set_positions(epochs)
    np.testing.assert_allclose(positions[0], own[0])
    np.testing.assert_allclose(positions[1], montage_positions(["Pz"])[0])


def test_channels_without_any_position_are_listed() -> None:
    meta = random_epoch_set(n_channels=3, ch_names=("Cz", "E7", "HEOG"), ch_types=("eeg", "eeg", "eog")).meta()
    assert eeg_channels_without_position(meta) == ["E7"]
