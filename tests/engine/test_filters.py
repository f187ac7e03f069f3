"""High-pass and low-pass filters: designed responses, applied responses, checks."""

import numpy as np
import pytest
from pydantic import ValidationError
from scipy import signal

from epoch_assay.engine.epochs import EpochSet, EpochSetMeta
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.steps.filters import (
    HighPass,
    LowPass,
    design_fir,
    design_iir,
    fir_max_cutoff_hz,
    fir_transition_hz,
    iir_padding_samples,
)
from tests.engine.conftest import random_epoch_set

SFREQ = 250.0
FIR_CASES = [("highpass", 0.5), ("highpass", 1.0), ("highpass", 10.0), ("lowpass", 20.0), ("lowpass", 40.0)]
METHODS = ["fir", "iir"]


def _fir_response_db(band: str, cutoff_hz: float) -> tuple[np.ndarray, np.ndarray]:
    # Reference: scipy.signal.freqz (Virtanen et al., 2020, SciPy 1.0)
    freqs, response = signal.freqz(design_fir(band, cutoff_hz, SFREQ), worN=2**16, fs=SFREQ)
    return freqs, 20 * np.log10(np.maximum(np.abs(response), 1e-12))


def _band_masks(band: str, cutoff_hz: float, freqs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Passband and stopband masks outside the transition band centred on the cutoff."""
    half = fir_transition_hz(cutoff_hz) / 2
    above, below = freqs >= cutoff_hz + half, freqs <= cutoff_hz - half
    return (above, below) if band == "highpass" else (below, above)


def _signal_epochs(waveform: np.ndarray, sfreq: float = SFREQ) -> EpochSet:
    """One trial, one EEG channel holding ``waveform`` (in V)."""
    return EpochSet(
        data=waveform.reshape(1, 1, -1),
        sfreq=sfreq,
        tmin=0.0,
        ch_names=("Cz",),
        ch_types=("eeg",),
        labels=np.array(["a"]),
    )


def _sinusoid_amplitude_after(step: HighPass | LowPass, freq_hz: float, duration_s: float = 8.0) -> float:
    """Amplitude of a unit sinusoid after ``step``, fitted by least squares over the middle half."""
    times = np.arange(int(duration_s * SFREQ)) / SFREQ
    filtered, _ = step.apply(_signal_epochs(np.sin(2 * np.pi * freq_hz * times)))
    middle = slice(times.size // 4, 3 * times.size // 4)
    basis = np.column_stack([np.sin(2 * np.pi * freq_hz * times[middle]), np.cos(2 * np.pi * freq_hz * times[middle])])
    coefficients, *_ = np.linalg.lstsq(basis, filtered.data[0, 0, middle], rcond=None)
    return float(np.hypot(*coefficients))


def _filter(band: str, cutoff_hz: float, method: str) -> HighPass | LowPass:
    cls = HighPass if band == "highpass" else LowPass
    return cls(cutoff_hz=cutoff_hz, method=method)


def _meta(sfreq: float) -> EpochSetMeta:
    return random_epoch_set(sfreq=sfreq).meta()


@pytest.mark.parametrize(("band", "cutoff_hz"), FIR_CASES)
def test_fir_design_is_minus_6_db_at_cutoff(band: str, cutoff_hz: float) -> None:
    # A windowed sinc has half amplitude (-6.02 dB) at its cutoff (Oppenheim & Schafer, 2010, sec. 7.5)
    freqs, response_db = _fir_response_db(band, cutoff_hz)
    assert response_db[np.argmin(np.abs(freqs - cutoff_hz))] == pytest.approx(-6.02, abs=0.15)


@pytest.mark.parametrize(("band", "cutoff_hz"), FIR_CASES)
def test_fir_design_passband_ripple_matches_hamming_window(band: str, cutoff_hz: float) -> None:
    # Hamming window: peak approximation error about 0.0022, i.e. 0.0194 dB passband ripple
    # (Harris, 1978; Oppenheim & Schafer, 2010, Table 7.2); the 3.3 / N width rule is
    # approximate at the band edges, hence the tolerance.
    freqs, response_db = _fir_response_db(band, cutoff_hz)
    passband, _ = _band_masks(band, cutoff_hz, freqs)
    assert np.abs(response_db[passband]).max() < 0.04


@pytest.mark.parametrize(("band", "cutoff_hz"), FIR_CASES)
def test_fir_design_stopband_attenuation_matches_hamming_window(band: str, cutoff_hz: float) -> None:
    # Hamming window: about -53 dB stopband attenuation (Harris, 1978; Oppenheim & Schafer, 2010, Table 7.2)
    freqs, response_db = _fir_response_db(band, cutoff_hz)
    _, stopband = _band_masks(band, cutoff_hz, freqs)
    assert response_db[stopband].max() < -50.0


@pytest.mark.parametrize("band", ["highpass", "lowpass"])
def test_iir_design_is_minus_3_db_per_pass_at_cutoff(band: str) -> None:
    # Butterworth filters are -3.01 dB at their cutoff (Butterworth, 1930);
    # reference: scipy.signal.sosfreqz (Virtanen et al., 2020, SciPy 1.0)
    cutoff_hz = 5.0
    _, response = signal.sosfreqz(design_iir(band, cutoff_hz, 4, SFREQ), worN=[cutoff_hz], fs=SFREQ)
    assert 20 * np.log10(np.abs(response[0])) == pytest.approx(-3.01, abs=0.01)


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize("band", ["highpass", "lowpass"])
def test_sinusoid_at_cutoff_comes_out_at_half_amplitude(band: str, method: str) -> None:
    # Zero-phase windowed sinc: -6 dB at the cutoff (Oppenheim & Schafer, 2010, sec. 7.5);
    # Butterworth forward and backward: -3.01 dB twice (Butterworth, 1930)
    assert _sinusoid_amplitude_after(_filter(band, 5.0, method), 5.0) == pytest.approx(0.5, abs=0.01)


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize(("band", "cutoff_hz"), [("highpass", 1.0), ("lowpass", 30.0)])
def test_passband_sinusoid_passes_unchanged(band: str, cutoff_hz: float, method: str) -> None:
    assert _sinusoid_amplitude_after(_filter(band, cutoff_hz, method), 10.0) == pytest.approx(1.0, rel=0.01)


def test_fir_stopband_sinusoid_is_attenuated_by_the_hamming_figure() -> None:
    # Hamming window: about -53 dB in the stopband (Harris, 1978); -50 dB allows for the band edge
    amplitude = _sinusoid_amplitude_after(LowPass(cutoff_hz=20.0), 45.0)
    assert amplitude < 10 ** (-50 / 20)


def test_iir_stopband_sinusoid_is_attenuated_as_the_squared_butterworth_response() -> None:
    # Reference: scipy.signal.sosfreqz (Virtanen et al., 2020, SciPy 1.0); forward and backward
    # passes multiply the magnitude by itself
    _, response = signal.sosfreqz(design_iir("lowpass", 20.0, 4, SFREQ), worN=[45.0], fs=SFREQ)
    amplitude = _sinusoid_amplitude_after(LowPass(cutoff_hz=20.0, method="iir"), 45.0)
    assert amplitude == pytest.approx(np.abs(response[0]) ** 2, rel=0.02)


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize(("band", "cutoff_hz"), [("highpass", 1.0), ("lowpass", 15.0)])
def test_zero_phase_filter_keeps_a_central_peak_in_place(band: str, cutoff_hz: float, method: str) -> None:
    times = np.arange(int(6 * SFREQ)) / SFREQ
    bump = np.exp(-0.5 * ((times - 3.0) / 0.02) ** 2)
    filtered, _ = _filter(band, cutoff_hz, method).apply(_signal_epochs(bump))
    assert np.argmax(filtered.data[0, 0]) == np.argmax(bump)


def test_highpass_warns_when_epoch_is_shorter_than_three_cutoff_periods() -> None:
    epochs = random_epoch_set(n_times=100, sfreq=100.0)  # 1 s, while 3 / 1 Hz = 3 s
    _, record = HighPass(cutoff_hz=1.0).apply(epochs)
    assert len(record.warnings) == 1
    assert "1 s" in record.warnings[0] and "3 s" in record.warnings[0]
    assert "continuous recording" in record.warnings[0]


def test_highpass_does_not_warn_on_long_enough_epoch() -> None:
    epochs = random_epoch_set(n_times=400, sfreq=100.0)  # 4 s, while 3 / 1 Hz = 3 s
    _, record = HighPass(cutoff_hz=1.0).apply(epochs)
    assert record.warnings == []


def test_lowpass_does_not_warn_on_short_epoch() -> None:
    _, record = LowPass(cutoff_hz=1.0, method="iir").apply(random_epoch_set(n_times=20, sfreq=100.0))
    assert record.warnings == []


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize("cls", [HighPass, LowPass])
@pytest.mark.parametrize("cutoff_hz", [50.0, 80.0])
def test_check_rejects_cutoff_at_or_above_nyquist(cls: type, cutoff_hz: float, method: str) -> None:
    with pytest.raises(SpecError) as caught:
        cls(cutoff_hz=cutoff_hz, method=method).check(_meta(100.0))
    assert caught.value.loc == ("cutoff_hz",)
    assert "Nyquist is 50 Hz" in caught.value.message


def test_check_rejects_fir_lowpass_whose_transition_band_passes_nyquist() -> None:
    # 48 Hz cutoff: 12 Hz transition band centred on it ends at 54 Hz > 50 Hz
    with pytest.raises(SpecError) as caught:
        LowPass(cutoff_hz=48.0).check(_meta(100.0))
    assert caught.value.loc == ("cutoff_hz",)
    assert "54 Hz" in caught.value.message and "at most 44.44 Hz" in caught.value.message


def test_suggested_fir_max_cutoff_passes_check() -> None:
    meta = _meta(100.0)
    assert LowPass(cutoff_hz=fir_max_cutoff_hz(meta.nyquist)).check(meta) == meta


def test_iir_lowpass_close_to_nyquist_passes_check() -> None:
    meta = _meta(100.0)
    assert LowPass(cutoff_hz=48.0, method="iir").check(meta) == meta


def test_cutoff_must_be_positive() -> None:
    with pytest.raises(ValidationError):
        HighPass.model_validate({"step": "highpass", "cutoff_hz": 0.0})


def test_filters_leave_misc_channels_and_the_input_unchanged() -> None:
    epochs = random_epoch_set(n_channels=3, ch_types=("eeg", "eog", "misc"), n_times=200)
    original = epochs.data.copy()
    filtered, _ = HighPass(cutoff_hz=5.0).apply(epochs)
    np.testing.assert_array_equal(epochs.data, original)
    np.testing.assert_array_equal(filtered.data[:, 2], original[:, 2])
    assert not np.allclose(filtered.data[:, :2], original[:, :2])


@pytest.mark.parametrize(
    ("band", "cutoff_hz", "order"), [("highpass", 0.1, 4), ("lowpass", 30.0, 4), ("lowpass", 1.0, 8)]
)
def test_iir_padding_outlasts_the_impulse_response(band: str, cutoff_hz: float, order: int) -> None:
    # Reference: impulse response computed by scipy.signal.sosfilt (Virtanen et al., 2020, SciPy 1.0)
    sos = design_iir(band, cutoff_hz, order, SFREQ)
    n_pad = iir_padding_samples(sos)
    impulse = np.zeros(4 * n_pad)
    impulse[0] = 1.0
    response = np.abs(signal.sosfilt(sos, impulse))
    assert response[n_pad:].max() < 1e-3 * response.max()


def test_filters_belong_to_the_continuous_stage() -> None:
    assert HighPass.stage == LowPass.stage == "continuous"
