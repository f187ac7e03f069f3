"""Line-noise removal: notch response against scipy, spectrum interpolation by its formula, checks."""

import numpy as np
import pytest
from pydantic import ValidationError
from scipy import fft, signal

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.steps.line_noise import NEIGHBOUR_BAND_HZ, LineNoise, design_notches, line_harmonics_hz
from tests.engine.conftest import random_epoch_set

SFREQ = 500.0


def _epochs(data: np.ndarray) -> EpochSet:
    n_trials = data.shape[0]
    return EpochSet(
        data=data, sfreq=SFREQ, tmin=0.0, ch_names=("Cz",), ch_types=("eeg",), labels=np.array(["a"] * n_trials)
    )


def _line_plus_alpha(duration_s: float, n_trials: int = 1) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    times = np.arange(int(duration_s * SFREQ)) / SFREQ
    alpha = np.sin(2 * np.pi * 10.0 * times + 0.3)
    line = sum(np.sin(2 * np.pi * f * times + f / 7) for f in (50.0, 100.0, 150.0, 200.0))
    return times, np.tile(alpha + line, (n_trials, 1, 1)), alpha


def _amplitude(waveform: np.ndarray, freq_hz: float, times: np.ndarray) -> float:
    basis = np.column_stack([np.sin(2 * np.pi * freq_hz * times), np.cos(2 * np.pi * freq_hz * times)])
    coefficients, *_ = np.linalg.lstsq(basis, waveform, rcond=None)
    return float(np.hypot(*coefficients))


def test_harmonics_stop_below_nyquist() -> None:
    np.testing.assert_allclose(line_harmonics_hz(50.0, SFREQ, 1.0), [50.0, 100.0, 150.0, 200.0])
    np.testing.assert_allclose(line_harmonics_hz(60.0, SFREQ, 1.0), [60.0, 120.0, 180.0, 240.0])


def test_notch_is_minus_6_db_at_band_edges_after_two_passes() -> None:
    # Reference: scipy.signal.iirnotch / sosfreqz: -3 dB at f0 ± f0/(2Q) per pass (Virtanen et al., 2020)
    freqs, response = signal.sosfreqz(design_notches(np.array([50.0]), 1.0, SFREQ), worN=2**18, fs=SFREQ)
    two_pass_db = 20 * np.log10(np.abs(response) ** 2)
    for edge in (49.5, 50.5):
        assert two_pass_db[np.argmin(np.abs(freqs - edge))] == pytest.approx(-6.02, abs=0.1)


@pytest.mark.parametrize("method", ["notch", "spectrum_interpolation"])
def test_line_and_harmonics_removed_and_alpha_kept(method: str) -> None:
    times, data, _ = _line_plus_alpha(10.0)
    cleaned, _ = LineNoise(freq_hz=50, method=method).apply(_epochs(data))
    middle = slice(times.size // 4, 3 * times.size // 4)
    result = cleaned.data[0, 0, middle]
    for harmonic in (50.0, 100.0, 150.0, 200.0):
        assert _amplitude(result, harmonic, times[middle]) < 0.01
    assert _amplitude(result, 10.0, times[middle]) == pytest.approx(1.0, abs=0.01)


def test_spectrum_interpolation_sets_line_amplitude_to_neighbour_mean_keeping_phase() -> None:
    # Leske & Abbasi (2019), NeuroImage 189: 763-776: line-band amplitudes replaced by the
    # mean amplitude of the neighbouring bands, phases unchanged.
    rng = np.random.default_rng(3)
    data = rng.standard_normal((1, 1, 1000)) + 5 * np.sin(2 * np.pi * 50.0 * np.arange(1000) / SFREQ)
    cleaned, _ = LineNoise(freq_hz=50, method="spectrum_interpolation").apply(_epochs(data))
    freqs = fft.rfftfreq(1000, 1 / SFREQ)
    before, after = fft.rfft(data[0, 0]), fft.rfft(cleaned.data[0, 0])
    distance = np.abs(freqs - 50.0)
    in_line = distance <= 0.5
    beside = (distance > 0.5) & (distance <= 0.5 + NEIGHBOUR_BAND_HZ)
    np.testing.assert_allclose(np.abs(after[in_line]), np.abs(before[beside]).mean(), rtol=1e-9)
    np.testing.assert_allclose(np.angle(after[in_line]), np.angle(before[in_line]), atol=1e-9)
    outside = np.abs(freqs - 50.0 * np.round(freqs / 50.0)) > 5.0
    np.testing.assert_allclose(after[outside], before[outside], atol=1e-9)


def test_spectrum_interpolation_works_on_many_short_epochs() -> None:
    _times, data, alpha = _line_plus_alpha(1.2, n_trials=5)
    cleaned, _ = LineNoise(freq_hz=50, method="spectrum_interpolation").apply(_epochs(data))
    residual = cleaned.data[:, 0] - alpha
    assert np.sqrt(np.mean(residual**2)) < 0.05


def test_notch_warns_on_epochs_shorter_than_its_ringing() -> None:
    _, data, _ = _line_plus_alpha(1.2, n_trials=2)
    _, record = LineNoise(freq_hz=50, method="notch").apply(_epochs(data))
    assert len(record.warnings) == 1 and "spectrum_interpolation" in record.warnings[0]


def test_notch_does_not_warn_on_a_long_recording() -> None:
    _, data, _ = _line_plus_alpha(20.0)
    _, record = LineNoise(freq_hz=50, method="notch").apply(_epochs(data))
    assert record.warnings == []


def test_line_frequency_other_than_mains_is_refused() -> None:
    with pytest.raises(ValidationError, match="50"):
        LineNoise(freq_hz=55)


def test_line_frequency_at_nyquist_is_refused() -> None:
    with pytest.raises(SpecError) as error:
        LineNoise(freq_hz=50).check(random_epoch_set(sfreq=100.0).meta())
    assert error.value.loc == ("freq_hz",)


def test_spectrum_interpolation_on_too_short_epochs_is_refused() -> None:
    with pytest.raises(SpecError, match="frequency resolution") as error:
        LineNoise(method="spectrum_interpolation").check(random_epoch_set(sfreq=SFREQ, n_times=100).meta())
    assert error.value.loc == ("method",)
