"""Baseline correction and its checks."""

import numpy as np
import pytest
from mne.baseline import rescale
from pydantic import ValidationError

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.steps.baseline import Baseline
from tests.engine.conftest import random_epoch_set

# Window ends fall between samples (100 Hz, tmin -0.1 s) so that every definition of
# "inside the window" picks the same samples, -0.09 s to -0.01 s.
WINDOW_S = (-0.095, -0.005)


def _epochs() -> EpochSet:
    return random_epoch_set(n_channels=3, ch_types=("eeg", "eog", "misc"), sfreq=100.0, tmin=-0.1)


def test_baseline_window_mean_becomes_zero() -> None:
    epochs = _epochs()
    corrected, _ = Baseline(window_s=WINDOW_S).apply(epochs)
    in_window = (epochs.times > WINDOW_S[0]) & (epochs.times < WINDOW_S[1])
    np.testing.assert_allclose(corrected.data[:, :2][:, :, in_window].mean(axis=-1), 0.0, atol=1e-20)


def test_baseline_matches_mne_rescale_mean() -> None:
    # Reference: mne.baseline.rescale(mode="mean") (Gramfort et al., 2013, MNE-Python)
    epochs = _epochs()
    corrected, _ = Baseline(window_s=WINDOW_S).apply(epochs)
    expected = rescale(epochs.data[:, :2], epochs.times, WINDOW_S, mode="mean", verbose=False)
    np.testing.assert_allclose(corrected.data[:, :2], expected, atol=1e-20)


def test_baseline_leaves_misc_channels_and_the_input_unchanged() -> None:
    epochs = _epochs()
    original = epochs.data.copy()
    corrected, _ = Baseline(window_s=WINDOW_S).apply(epochs)
    np.testing.assert_array_equal(epochs.data, original)
    np.testing.assert_array_equal(corrected.data[:, 2], original[:, 2])


def test_baseline_window_includes_samples_on_its_ends() -> None:
    epochs = _epochs()
    corrected, _ = Baseline(window_s=(-0.1, -0.05)).apply(epochs)
    by_hand = epochs.data[:, 0, :6].mean(axis=-1)  # samples at -0.10, -0.09, ..., -0.05 s
    np.testing.assert_allclose(corrected.data[:, 0, 0], epochs.data[:, 0, 0] - by_hand, atol=1e-20)


def test_check_refuses_window_outside_the_epoch() -> None:
    meta = _epochs().meta()
    with pytest.raises(SpecError) as caught:
        Baseline(window_s=(-0.5, 0.0)).check(meta)
    assert caught.value.loc == ("window_s",)
    assert "outside the epoch [-0.1, 0.39] s" in caught.value.message


def test_check_refuses_window_without_a_sample() -> None:
    meta = _epochs().meta()
    with pytest.raises(SpecError) as caught:
        Baseline(window_s=(0.001, 0.004)).check(meta)
    assert caught.value.loc == ("window_s",)
    assert "contains no sample at 100 Hz" in caught.value.message


def test_check_accepts_window_inside_the_epoch() -> None:
    meta = _epochs().meta()
    assert Baseline(window_s=WINDOW_S).check(meta) == meta


@pytest.mark.parametrize("window_s", [[0.0, 0.0], [0.1, -0.1]])
def test_window_must_start_before_it_ends(window_s: list[float]) -> None:
    with pytest.raises(ValidationError) as caught:
        Baseline.model_validate({"step": "baseline", "window_s": window_s})
    assert "start < end" in str(caught.value)
