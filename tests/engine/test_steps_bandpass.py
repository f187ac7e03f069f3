"""Band-pass filter and blocked filtering: responses against scipy, zero phase, checks."""

import numpy as np
import pytest
from pydantic import ValidationError
from scipy import signal

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.steps import filters
from epoch_assay.engine.steps.filters import BandPass, HighPass, design_fir, design_iir, fir_transition_hz
from tests.engine.conftest import random_epoch_set

SFREQ = 250.0
LOW, HIGH = 1.0, 30.0


def _epochs(waveform: np.ndarray) -> EpochSet:
    return EpochSet(
        data=waveform.reshape(1, 1, -1),
        sfreq=SFREQ,
        tmin=0.0,
        ch_names=("Cz",),
        ch_types=("eeg",),
        labels=np.array(["a"]),
    )


def _amplitude_after(step: BandPass, freq_hz: float) -> float:
    times = np.arange(int(20 * SFREQ)) / SFREQ
    filtered, _ = step.apply(_epochs(np.sin(2 * np.pi * freq_hz * times)))
    middle = filtered.data[0, 0, times.size // 4 : 3 * times.size // 4]
    return float(np.sqrt(2) * middle.std())


def test_fir_bandpass_is_minus_6_db_at_both_cutoffs() -> None:
    # Reference: scipy.signal.freqz (Virtanen et al., 2020); a windowed sinc has half
    # amplitude at its cutoff (Oppenheim & Schafer, 2010, sec. 7.5)
    freqs, response = signal.freqz(design_fir("bandpass", (LOW, HIGH), SFREQ), worN=2**17, fs=SFREQ)
    response_db = 20 * np.log10(np.abs(response))
    for cutoff in (LOW, HIGH):
        assert response_db[np.argmin(np.abs(freqs - cutoff))] == pytest.approx(-6.02, abs=0.2)


def test_fir_bandpass_passband_and_stopband_match_hamming_figures() -> None:
    # Hamming window: ~0.02 dB passband ripple, ~-53 dB stopband (Harris, 1978; Oppenheim & Schafer, 2010, Table 7.2)
    freqs, response = signal.freqz(design_fir("bandpass", (LOW, HIGH), SFREQ), worN=2**17, fs=SFREQ)
    response_db = 20 * np.log10(np.maximum(np.abs(response), 1e-12))
    half = fir_transition_hz(LOW) / 2
    passband = (freqs >= LOW + half) & (freqs <= HIGH - half)
    stopband = (freqs <= LOW - half) | (freqs >= HIGH + half)
    assert np.max(np.abs(response_db[passband])) < 0.05
    assert np.max(response_db[stopband]) < -50.0


def test_iir_bandpass_is_minus_6_db_at_cutoffs_after_two_passes() -> None:
    # Reference: scipy.signal.sosfreqz; a Butterworth is -3 dB at its cutoff per pass (Butterworth, 1930)
    freqs, response = signal.sosfreqz(design_iir("bandpass", (LOW, HIGH), 4, SFREQ), worN=2**17, fs=SFREQ)
    two_pass_db = 20 * np.log10(np.maximum(np.abs(response), 1e-12) ** 2)
    for cutoff in (LOW, HIGH):
        assert two_pass_db[np.argmin(np.abs(freqs - cutoff))] == pytest.approx(-6.02, abs=0.05)


@pytest.mark.parametrize("method", ["fir", "iir"])
def test_bandpass_passes_mid_band_and_attenuates_outside(method: str) -> None:
    step = BandPass(low_hz=LOW, high_hz=HIGH, method=method)
    assert _amplitude_after(step, 10.0) == pytest.approx(1.0, abs=0.01)
    assert _amplitude_after(step, 60.0) < 0.01
    assert _amplitude_after(step, 0.2) < 0.05


@pytest.mark.parametrize("method", ["fir", "iir"])
def test_bandpass_has_zero_phase(method: str) -> None:
    times = np.arange(int(10 * SFREQ)) / SFREQ
    bump = np.exp(-0.5 * ((times - 5.0) / 0.05) ** 2)
    filtered, _ = BandPass(low_hz=LOW, high_hz=HIGH, method=method).apply(_epochs(bump))
    assert np.argmax(filtered.data[0, 0]) == np.argmax(bump)


def test_blocked_filtering_equals_filtering_all_rows_at_once(monkeypatch: pytest.MonkeyPatch) -> None:
    epochs = random_epoch_set(n_trials=7, n_channels=3, n_times=100, sfreq=SFREQ)
    kernel = design_fir("highpass", 0.5, SFREQ)
    # Reference: scipy.signal.oaconvolve on the whole reflection-padded array (Virtanen et al., 2020)
    padded = np.pad(epochs.data, [(0, 0), (0, 0), (kernel.size, kernel.size)], mode="reflect")
    whole = signal.oaconvolve(padded, kernel[None, None], mode="same", axes=-1)[..., kernel.size : -kernel.size]
    monkeypatch.setattr(filters, "FILTER_BLOCK_BYTES", 1)
    blocked, _ = HighPass(cutoff_hz=0.5).apply(epochs)
    np.testing.assert_allclose(blocked.data, whole, rtol=1e-10, atol=1e-20)


def test_bandpass_warns_on_epochs_shorter_than_three_high_pass_periods() -> None:
    _, record = BandPass(low_hz=0.5, high_hz=30.0).apply(random_epoch_set(n_times=250, sfreq=SFREQ))
    assert len(record.warnings) == 1 and "three periods" in record.warnings[0]


def test_bandpass_with_low_above_high_is_refused() -> None:
    with pytest.raises(ValidationError, match="low_hz must be below high_hz"):
        BandPass(low_hz=30.0, high_hz=10.0)


def test_bandpass_high_cutoff_at_nyquist_is_refused() -> None:
    with pytest.raises(SpecError) as error:
        BandPass(low_hz=1.0, high_hz=125.0).check(random_epoch_set(sfreq=SFREQ).meta())
    assert error.value.loc == ("high_hz",)


def test_fir_bandpass_narrower_than_its_transition_band_is_refused() -> None:
    with pytest.raises(SpecError, match="narrower than the FIR transition band"):
        BandPass(low_hz=10.0, high_hz=11.0).check(random_epoch_set(sfreq=SFREQ).meta())
