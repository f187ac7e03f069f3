"""Detrending against a least-squares fit, resampling against scipy, and their checks."""

import numpy as np
import pytest
from scipy import signal

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.steps.detrend import Detrend
from epoch_assay.engine.steps.resample import Resample
from tests.engine.conftest import random_epoch_set

SFREQ = 500.0


def _sine_epochs(freq_hz: float, n_trials: int = 3, duration_s: float = 4.0) -> EpochSet:
    times = np.arange(int(duration_s * SFREQ)) / SFREQ
    data = np.tile(np.sin(2 * np.pi * freq_hz * times), (n_trials, 2, 1))
    return EpochSet(
        data=data,
        sfreq=SFREQ,
        tmin=-0.2,
        ch_names=("Cz", "Pz"),
        ch_types=("eeg", "eeg"),
        labels=np.array(["a", "b", "a"][:n_trials]),
    )


def test_linear_detrend_leaves_residual_of_least_squares_line() -> None:
    epochs = random_epoch_set(n_trials=3, n_channels=2, n_times=80)
    ramp = np.linspace(-1e-4, 2e-4, 80)
    tilted = epochs.with_changes(data=epochs.data + ramp)
    detrended, _ = Detrend(kind="linear").apply(tilted)
    # Reference: numpy.polyfit degree-1 least-squares fit (Harris et al., 2020, NumPy)
    x = np.arange(80)
    for trial in range(3):
        for channel in range(2):
            fit = np.polyval(np.polyfit(x, tilted.data[trial, channel], 1), x)
            np.testing.assert_allclose(detrended.data[trial, channel], tilted.data[trial, channel] - fit, atol=1e-18)


def test_constant_detrend_removes_each_epoch_mean() -> None:
    epochs = random_epoch_set(n_trials=3, n_channels=2, n_times=80)
    detrended, _ = Detrend(kind="constant").apply(epochs.with_changes(data=epochs.data + 5e-5))
    np.testing.assert_allclose(detrended.data.mean(axis=-1), 0.0, atol=1e-20)


def test_detrend_leaves_misc_channels_unchanged() -> None:
    epochs = random_epoch_set(n_channels=2, ch_types=("eeg", "misc"))
    detrended, _ = Detrend().apply(epochs)
    np.testing.assert_array_equal(detrended.data[:, 1], epochs.data[:, 1])


def test_resample_matches_scipy_resample_poly() -> None:
    epochs = random_epoch_set(n_trials=2, n_channels=2, n_times=300, sfreq=SFREQ)
    resampled, _ = Resample(sfreq=200.0).apply(epochs)
    # Reference: scipy.signal.resample_poly (Virtanen et al., 2020), up 2, down 5
    expected = signal.resample_poly(epochs.data, 2, 5, axis=-1, padtype="line")
    np.testing.assert_allclose(resampled.data, expected, rtol=1e-12, atol=1e-20)
    assert resampled.sfreq == 200.0 and resampled.tmin == epochs.tmin


def test_resample_keeps_passband_sinusoid() -> None:
    resampled, _ = Resample(sfreq=250.0).apply(_sine_epochs(20.0))
    middle = resampled.data[0, 0, 200:-200]
    times = np.arange(resampled.n_times)[200:-200] / 250.0
    np.testing.assert_allclose(middle, np.sin(2 * np.pi * 20.0 * times), atol=0.01)


def test_resample_removes_frequency_above_new_nyquist_instead_of_aliasing() -> None:
    # Without the anti-aliasing filter a 200 Hz sine sampled at 250 Hz would reappear at 50 Hz
    # at full amplitude (Shannon, 1949).
    resampled, _ = Resample(sfreq=250.0).apply(_sine_epochs(200.0))
    assert np.abs(resampled.data[0, 0, 200:-200]).max() < 0.01


def test_resample_check_returns_new_rate_and_length() -> None:
    meta = random_epoch_set(n_times=600, sfreq=SFREQ).meta()
    out = Resample(sfreq=250.0).check(meta)
    assert (out.sfreq, out.n_times, out.tmin) == (250.0, 300, meta.tmin)


def test_resample_above_input_rate_is_refused() -> None:
    with pytest.raises(SpecError, match="upsampling") as error:
        Resample(sfreq=1000.0).check(random_epoch_set(sfreq=SFREQ).meta())
    assert error.value.loc == ("sfreq",)


def test_resample_to_awkward_ratio_is_refused() -> None:
    with pytest.raises(SpecError, match="simple fraction"):
        Resample(sfreq=123.4567).check(random_epoch_set(sfreq=SFREQ).meta())


def test_non_positive_rate_is_refused() -> None:
    with pytest.raises(ValueError):
        Resample(sfreq=0.0)
