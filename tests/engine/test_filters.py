"""High-pass and low-pass filters: designed responses, applied responses, checks."""

import numpy as np
import pytest
from pydantic import ValidationError
from scipy import signal

from epoch_assay.engine.epochs import EpochSet, EpochSetMeta
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.steps.baseline import Baseline
from epoch_assay.engine.steps.filters import (
    MATRIX_FILTER_ROWS_PER_SAMPLE,
    BandPass,
    FilterEdge,
    HighPass,
    LowPass,
    check_highpass_fits_epochs,
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


def _meta_lasting(duration_s: float, sfreq: float = SFREQ) -> EpochSetMeta:
    return EpochSetMeta(
        sfreq=sfreq,
        tmin=0.0,
        n_times=round(duration_s * sfreq),
        ch_names=("Cz",),
        ch_types=("eeg",),
        condition_counts={"a": 1},
    )


def test_highpass_on_epochs_shorter_than_three_periods_is_refused_saying_why() -> None:
    with pytest.raises(SpecError) as caught:
        check_highpass_fits_epochs([HighPass(cutoff_hz=0.1)], _meta_lasting(1.0))
    assert caught.value.loc == ("steps", 0, "cutoff_hz")
    assert "30 s" in caught.value.message and "1 s" in caught.value.message
    assert "padding" in caught.value.message and "continuous recording" in caught.value.message


def test_bandpass_low_edge_on_short_epochs_is_refused_at_its_own_field() -> None:
    steps = [Baseline(window_s=(0.0, 0.1)), BandPass(low_hz=0.5, high_hz=30.0)]
    with pytest.raises(SpecError) as caught:
        check_highpass_fits_epochs(steps, _meta_lasting(2.0))
    assert caught.value.loc == ("steps", 1, "low_hz")


def test_allow_short_epochs_lets_the_filter_run_and_warns() -> None:
    step = HighPass(cutoff_hz=0.1, allow_short_epochs=True)
    check_highpass_fits_epochs([step], _meta_lasting(1.0))
    _, record = step.apply(random_epoch_set(n_times=250, sfreq=SFREQ))
    assert len(record.warnings) == 1 and "mean" in record.warnings[0]


@pytest.mark.parametrize("step", [HighPass(cutoff_hz=1.0), LowPass(cutoff_hz=1.0)], ids=["highpass", "lowpass"])
def test_epochs_of_three_periods_and_low_passes_are_accepted(step) -> None:
    check_highpass_fits_epochs([step], _meta_lasting(3.0))


def test_a_slow_highpass_on_a_short_epoch_is_close_to_subtracting_the_epoch_mean() -> None:
    # 1 s of a 5 µV ERP-like bump plus a 2 µV offset: the 0.1 Hz high-pass (FIR, 8,251 taps at
    # 250 Hz) sees the epoch mirrored over and over, whose slowest content is the mean itself.
    times = np.arange(250) / SFREQ
    waveform = 5e-6 * np.exp(-0.5 * ((times - 0.4) / 0.1) ** 2) + 2e-6
    filtered, _ = HighPass(cutoff_hz=0.1, allow_short_epochs=True).apply(_signal_epochs(waveform))
    demeaned = waveform - waveform.mean()
    # measured: 9.1e-9 V against a 3.7e-6 V peak (0.25 %)
    assert np.max(np.abs(filtered.data[0, 0] - demeaned)) < 0.005 * np.max(np.abs(demeaned))


def test_fir_provenance_records_the_minus_6_db_point_and_the_passband_edge() -> None:
    _, record = HighPass(cutoff_hz=4.0).apply(random_epoch_set(n_times=1000, sfreq=SFREQ))
    # transition min(max(0.25 * 4, 2), 4) = 2 Hz, centred on the cutoff: passband from 5 Hz
    assert record.filter_edges == [FilterEdge(side="low", minus_6db_hz=4.0, passband_edge_hz=5.0)]
    # Reference: scipy.signal.freqz (Virtanen et al., 2020): at the passband edge the kernel is within a
    # few hundredths of a dB of unity (Hamming ripple about 0.02 dB, Oppenheim & Schafer, 2010, Table 7.2),
    # at the cutoff at half amplitude (-6.02 dB; tolerance as in test_fir_design_is_minus_6_db_at_cutoff)
    _, response = signal.freqz(design_fir("highpass", 4.0, SFREQ), worN=[5.0, 4.0], fs=SFREQ)
    assert abs(20 * np.log10(abs(response[0]))) < 0.05
    assert 20 * np.log10(abs(response[1])) == pytest.approx(-6.02, abs=0.15)


def test_fir_bandpass_provenance_has_both_edges() -> None:
    _, record = BandPass(low_hz=1.0, high_hz=30.0).apply(random_epoch_set(n_times=1000, sfreq=SFREQ))
    # one transition width, that of the lower cutoff: min(max(0.25, 2), 1) = 1 Hz
    assert record.filter_edges == [
        FilterEdge(side="low", minus_6db_hz=1.0, passband_edge_hz=1.5),
        FilterEdge(side="high", minus_6db_hz=30.0, passband_edge_hz=29.5),
    ]


@pytest.mark.parametrize(("step", "band"), [(HighPass, "highpass"), (LowPass, "lowpass")])
def test_iir_passband_edge_is_where_the_two_pass_butterworth_gain_is_minus_0_02_db(step, band) -> None:
    cutoff_hz, order = 10.0, 4
    _, record = step(cutoff_hz=cutoff_hz, method="iir", order=order).apply(random_epoch_set(n_times=500, sfreq=SFREQ))
    (edge,) = record.filter_edges
    # Reference: the digital Butterworth response by the bilinear transform (Butterworth, 1930;
    # Oppenheim & Schafer, 2010, §7.1): one pass |H|^2 = 1 / (1 + (w / wc)^(2N)) with w = tan(pi f / fs)
    # for a low-pass and (wc / w) for a high-pass; forward and backward square the magnitude again.
    ratio = np.tan(np.pi * edge.passband_edge_hz / SFREQ) / np.tan(np.pi * cutoff_hz / SFREQ)
    ratio = ratio if band == "lowpass" else 1 / ratio
    two_pass_db = 20 * np.log10(1 / (1 + ratio ** (2 * order)))
    assert edge.minus_6db_hz == cutoff_hz and two_pass_db == pytest.approx(-0.02, abs=1e-6)


def _gain_db(kernel: np.ndarray, freqs: list[float]) -> np.ndarray:
    # Reference: scipy.signal.freqz (Virtanen et al., 2020)
    _, response = signal.freqz(kernel, worN=freqs, fs=SFREQ)
    return 20 * np.log10(np.abs(response))


@pytest.mark.parametrize(("l_freq", "l_trans"), [(1.0, 1.0), (0.1, 0.1), (8.0, 2.0)])
def test_mne_l_freq_minus_half_its_transition_is_our_cutoff(l_freq: float, l_trans: float) -> None:
    mne = pytest.importorskip("mne")
    # Reference: mne.filter.create_filter (Gramfort et al., 2013, MNE-Python), FIR "firwin" design with
    # its automatic transition band min(max(0.25 l_freq, 2), l_freq), which l_trans spells out.
    kernel = mne.filter.create_filter(
        None, SFREQ, l_freq=l_freq, h_freq=None, fir_design="firwin", phase="zero", verbose=False
    )
    ours = l_freq - l_trans / 2
    mne_db = _gain_db(kernel, [ours, l_freq])
    # MNE's l_freq is its passband edge (within 0.05 dB of unity); our cutoff is where both kernels are
    # at half amplitude (-6.02 dB, tolerance as in test_fir_design_is_minus_6_db_at_cutoff).
    assert mne_db[0] == pytest.approx(-6.02, abs=0.15) and abs(mne_db[1]) < 0.05
    assert _gain_db(design_fir("highpass", ours, SFREQ), [ours])[0] == pytest.approx(-6.02, abs=0.15)


def test_mne_h_freq_plus_half_its_transition_is_our_cutoff() -> None:
    mne = pytest.importorskip("mne")
    # Reference: mne.filter.create_filter (Gramfort et al., 2013), low-pass at h_freq = 40 Hz with an explicit
    # 10 Hz transition band: its -6 dB point is h_freq + 5 Hz.
    kernel = mne.filter.create_filter(
        None, SFREQ, l_freq=None, h_freq=40.0, h_trans_bandwidth=10.0, fir_design="firwin", phase="zero", verbose=False
    )
    mne_db = _gain_db(kernel, [45.0, 40.0])
    assert mne_db[0] == pytest.approx(-6.02, abs=0.15) and abs(mne_db[1]) < 0.05
    assert _gain_db(design_fir("lowpass", 45.0, SFREQ), [45.0])[0] == pytest.approx(-6.02, abs=0.15)


@pytest.mark.parametrize(("method", "cutoff_hz"), [("fir", 0.5), ("iir", 0.1), ("fir", 8.0)])
def test_many_short_epochs_filter_like_scipy_on_each_padded_row(method: str, cutoff_hz: float) -> None:
    # Enough rows per sample that the step filters them by one matrix product (MATRIX_FILTER_ROWS_PER_SAMPLE).
    # Reference: each row padded by numpy.pad "reflect" and filtered by scipy.signal.oaconvolve (FIR) or
    # sosfiltfilt (IIR) (Virtanen et al., 2020, SciPy 1.0), one row at a time, then the padding cut off.
    epochs = random_epoch_set(n_trials=60, n_channels=4, n_times=50, sfreq=SFREQ, seed=3)
    assert epochs.data.shape[0] * epochs.data.shape[1] >= MATRIX_FILTER_ROWS_PER_SAMPLE * epochs.n_times
    step = HighPass(cutoff_hz=cutoff_hz, method=method, allow_short_epochs=True)
    filtered, _ = step.apply(epochs)
    if method == "fir":
        kernel = design_fir("highpass", cutoff_hz, SFREQ)
        n_pad = kernel.size

        def one_row(padded: np.ndarray) -> np.ndarray:
            return signal.oaconvolve(padded, kernel, mode="same")
    else:
        sos = design_iir("highpass", cutoff_hz, 4, SFREQ)
        n_pad = iir_padding_samples(sos)

        def one_row(padded: np.ndarray) -> np.ndarray:
            return signal.sosfiltfilt(sos, padded, padtype=None)

    rows = epochs.data.reshape(-1, epochs.n_times)
    expected = np.array([one_row(np.pad(row, n_pad, mode="reflect"))[n_pad:-n_pad] for row in rows])
    np.testing.assert_allclose(
        filtered.data.reshape(expected.shape), expected, rtol=0, atol=1e-10 * np.abs(expected).max()
    )
