"""Zero-phase high-pass and low-pass filters: windowed-sinc FIR or Butterworth IIR.

Filters act on the channels of type eeg and eog, bad ones included (a bad channel may be
interpolated or restored later and must then have been filtered like its neighbours);
stim and misc channels pass through unchanged. Filtering belongs on the continuous
recording (``stage = "continuous"``); on epochs it works, with each epoch padded by
reflection so that its edges are not filtered against zeros.

FIR design
    A windowed sinc (``scipy.signal.firwin``, Hamming window) whose half-amplitude
    (-6 dB) point is the cutoff; the transition band is centred on the cutoff.

    * Transition bandwidth ``min(max(0.25 * cutoff, 2 Hz), cutoff)``: a quarter of the
      cutoff but at least 2 Hz (common practice), capped at the cutoff so that the
      band, centred on the cutoff, stays above 0 Hz. The band must also end below the
      Nyquist frequency; ``check`` refuses cutoffs for which it would not.
    * Length ``3.3 / transition_bandwidth`` seconds, rounded up to an odd number of taps:
      the transition width of a Hamming-windowed sinc is about 3.3 / N of the sampling
      rate (Harris, 1978; Oppenheim & Schafer, Discrete-Time Signal Processing, Table 7.2).
      The passband ripple is then about 0.02 dB and the stopband about -53 dB.

    The symmetric odd-length kernel is applied once, by overlap-add convolution
    (``scipy.signal.oaconvolve``) in "same" mode, which removes its (N - 1) / 2 sample
    delay exactly: the result has zero phase and the designed magnitude response. A
    forward-backward pass (``filtfilt``) is not used because it squares the magnitude,
    doubling the attenuation and moving the -6 dB point away from the cutoff.

IIR design
    A Butterworth filter of ``order`` as second-order sections, run forward and backward
    (``scipy.signal.sosfiltfilt``): zero phase, -3 dB at the cutoff per pass and so
    -6 dB overall, with twice the roll-off of one pass.

Padding
    Each epoch is extended at both ends by even reflection (``numpy.pad`` mode
    "reflect") and the padding is cut off after filtering. FIR: by the kernel length.
    IIR: by the number of samples over which the impulse response of the slowest pole
    decays to 1e-4 of its start, ``ceil(ln(1e4) / -ln|p|)`` for the pole ``p`` of
    largest modulus; that leaves the whole impulse response below about 1e-3 of its peak.
"""

import math
from typing import ClassVar, Literal

import numpy as np
from pydantic import Field
from scipy import signal
from scipy.optimize import brentq

from worker.engine.epochs import EpochSet, EpochSetMeta
from worker.engine.errors import SpecError
from worker.engine.provenance import StepRecord
from worker.engine.steps.base import Step

FILTERED_CHANNEL_TYPES = ("eeg", "eog")

# common practice: a quarter of the cutoff, but at least 2 Hz
_TRANSITION_FRACTION = 0.25
_MIN_TRANSITION_HZ = 2.0
# Hamming window: transition width ~ 3.3 * sfreq / n_taps (Harris, 1978; Oppenheim & Schafer, Table 7.2)
_HAMMING_TRANSITION_WIDTH = 3.3
# The IIR padding outlasts the slowest pole's decay to this fraction of its start.
_IIR_PADDING_DECAY = 1e-4
# common practice: an epoch should hold about three periods of a high-pass cutoff
_HIGHPASS_PERIODS_PER_EPOCH = 3.0

FilterBand = Literal["highpass", "lowpass"]


def fir_transition_hz(cutoff_hz: float) -> float:
    """Width of the FIR transition band, in Hz, centred on ``cutoff_hz``."""
    return min(max(_TRANSITION_FRACTION * cutoff_hz, _MIN_TRANSITION_HZ), cutoff_hz)


def fir_max_cutoff_hz(nyquist_hz: float) -> float:
    """Highest cutoff, in Hz, whose FIR transition band still ends at or below ``nyquist_hz``."""
    return float(brentq(lambda cutoff: cutoff + fir_transition_hz(cutoff) / 2 - nyquist_hz, 0.0, nyquist_hz))


def fir_n_taps(transition_hz: float, sfreq: float) -> int:
    """Odd number of taps of a Hamming-windowed sinc with this transition width (in Hz)."""
    n_taps = math.ceil(_HAMMING_TRANSITION_WIDTH * sfreq / transition_hz)
    return n_taps + 1 - n_taps % 2


def design_fir(band: FilterBand, cutoff_hz: float, sfreq: float) -> np.ndarray:
    """Symmetric windowed-sinc kernel, shape (n_taps,), n_taps odd, -6 dB at ``cutoff_hz``."""
    n_taps = fir_n_taps(fir_transition_hz(cutoff_hz), sfreq)
    return signal.firwin(n_taps, cutoff_hz, window="hamming", pass_zero=band, fs=sfreq)


def design_iir(band: FilterBand, cutoff_hz: float, order: int, sfreq: float) -> np.ndarray:
    """Butterworth second-order sections, shape (n_sections, 6), -3 dB at ``cutoff_hz`` per pass."""
    return signal.butter(order, cutoff_hz, btype=band, output="sos", fs=sfreq)


def iir_padding_samples(sos: np.ndarray) -> int:
    """Samples over which the envelope of the slowest pole of ``sos`` decays to 1e-4 of its start."""
    # Poles straight from each section's denominator: sos2zpk would also factor the
    # numerators, which are badly conditioned for low cutoffs.
    poles = np.concatenate([np.roots(section[3:]) for section in sos])
    slowest = float(np.max(np.abs(poles)))
    return max(1, math.ceil(math.log(_IIR_PADDING_DECAY) / math.log(slowest)))


def _reflect_pad(data: np.ndarray, n_pad: int) -> np.ndarray:
    return np.pad(data, [(0, 0)] * (data.ndim - 1) + [(n_pad, n_pad)], mode="reflect")


def fir_zero_phase(data: np.ndarray, kernel: np.ndarray) -> np.ndarray:
    """Filter along the last axis with a symmetric odd-length kernel, delay removed.

    data : array, shape (..., n_times); returned with the same shape, as float64.
    """
    n_pad = kernel.size
    padded = _reflect_pad(np.asarray(data, dtype=np.float64), n_pad)
    kernel_nd = kernel.reshape((1,) * (data.ndim - 1) + (-1,))
    filtered = signal.oaconvolve(padded, kernel_nd, mode="same", axes=-1)
    return filtered[..., n_pad : n_pad + data.shape[-1]]


def iir_zero_phase(data: np.ndarray, sos: np.ndarray) -> np.ndarray:
    """Filter along the last axis forward and backward with ``sos``.

    data : array, shape (..., n_times); returned with the same shape, as float64.
    """
    n_pad = iir_padding_samples(sos)
    padded = _reflect_pad(np.asarray(data, dtype=np.float64), n_pad)
    filtered = signal.sosfiltfilt(sos, padded, axis=-1, padtype=None)
    return filtered[..., n_pad : n_pad + data.shape[-1]]


class _CutoffFilter(Step):
    """A zero-phase filter with one cutoff; subclasses set ``band`` and ``step``."""

    stage: ClassVar[str] = "continuous"
    band: ClassVar[FilterBand]

    cutoff_hz: float = Field(gt=0.0, allow_inf_nan=False, description="Cutoff frequency, in Hz (-6 dB point).")
    method: Literal["fir", "iir"] = Field("fir", description="Windowed-sinc FIR or Butterworth IIR.")
    order: int = Field(4, ge=1, le=10, description="Butterworth order of each pass (iir only).")

    def check(self, meta: EpochSetMeta) -> EpochSetMeta:
        nyquist = meta.nyquist
        if self.cutoff_hz >= nyquist:
            raise SpecError(
                ("cutoff_hz",),
                f"cutoff {self.cutoff_hz:g} Hz is not below the Nyquist frequency: Nyquist is {nyquist:g} Hz "
                f"at this sampling rate ({meta.sfreq:g} Hz); choose a cutoff below it",
            )
        if self.method == "fir":
            transition_hz = fir_transition_hz(self.cutoff_hz)
            band_end_hz = self.cutoff_hz + transition_hz / 2
            if band_end_hz > nyquist:
                raise SpecError(
                    ("cutoff_hz",),
                    f"the FIR transition band of a {self.cutoff_hz:g} Hz cutoff is {transition_hz:.3g} Hz wide and "
                    f"would end at {band_end_hz:.4g} Hz, above the Nyquist frequency of {nyquist:g} Hz; "
                    f"choose a cutoff of at most {fir_max_cutoff_hz(nyquist):.4g} Hz, or method 'iir'",
                )
        return meta

    def apply(self, epochs: EpochSet) -> tuple[EpochSet, StepRecord]:
        picks = epochs.picks(FILTERED_CHANNEL_TYPES, exclude_bads=False)
        data = epochs.data.astype(np.float64, copy=True)
        if picks.size:
            data[:, picks] = self._filter(epochs.data[:, picks], epochs.sfreq)
        return epochs.with_changes(data=data), self.record(warnings=self._warnings(epochs))

    def _filter(self, data: np.ndarray, sfreq: float) -> np.ndarray:
        if self.method == "fir":
            return fir_zero_phase(data, design_fir(self.band, self.cutoff_hz, sfreq))
        return iir_zero_phase(data, design_iir(self.band, self.cutoff_hz, self.order, sfreq))

    def _warnings(self, epochs: EpochSet) -> list[str]:
        return []


class HighPass(_CutoffFilter):
    """Zero-phase high-pass filter of EEG and EOG channels."""

    step: Literal["highpass"] = "highpass"
    band: ClassVar[FilterBand] = "highpass"

    def _warnings(self, epochs: EpochSet) -> list[str]:
        duration_s = epochs.n_times / epochs.sfreq
        needed_s = _HIGHPASS_PERIODS_PER_EPOCH / self.cutoff_hz
        if duration_s >= needed_s:
            return []
        return [
            f"each epoch lasts {duration_s:.3g} s, shorter than three periods of the {self.cutoff_hz:g} Hz "
            f"high-pass cutoff ({needed_s:.3g} s), so the filtered epochs depend on the edge padding; "
            "filtering the continuous recording before epoching is better"
        ]


class LowPass(_CutoffFilter):
    """Zero-phase low-pass filter of EEG and EOG channels."""

    step: Literal["lowpass"] = "lowpass"
    band: ClassVar[FilterBand] = "lowpass"
