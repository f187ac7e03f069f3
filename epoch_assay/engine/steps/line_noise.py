"""Removal of mains interference at the line frequency and its harmonics below Nyquist.

``notch``
    One second-order IIR notch per harmonic (``scipy.signal.iirnotch``, quality factor
    ``f / bandwidth_hz``), all run as second-order sections forward and backward
    (``sosfiltfilt``) with reflection padding as in :mod:`epoch_assay.engine.steps.filters`:
    zero phase, -6 dB at ``f ± bandwidth_hz / 2`` (-3 dB per pass).

``spectrum_interpolation``
    Per trial and channel, the Fourier amplitude of every bin within ``bandwidth_hz / 2``
    of a harmonic is replaced by the mean amplitude of the bins in the
    ``NEIGHBOUR_BAND_HZ`` on either side, keeping each bin's phase (Leske & Abbasi, 2019,
    NeuroImage 189: 763-776). Nothing outside the line bands changes, and a line
    component whose amplitude or phase wanders is still removed, which a notch of fixed
    width may not do on short segments.

Both act on EEG and EOG channels, bad ones included.
"""

from typing import Any, ClassVar, Literal

import numpy as np
from pydantic import Field, field_validator
from scipy import fft, signal

from epoch_assay.engine.epochs import EpochSet, EpochSetMeta
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.provenance import Stage, StepProvenanceBase
from epoch_assay.engine.steps.base import Step
from epoch_assay.engine.steps.filters import (
    FILTERED_CHANNEL_TYPES,
    filter_rows_in_blocks,
    iir_padding_samples,
    iir_zero_phase,
)

LINE_FREQUENCIES_HZ = (50.0, 60.0)
# Width of the bands beside each line band whose mean amplitude replaces it (Leske & Abbasi, 2019, used 2 Hz).
NEIGHBOUR_BAND_HZ = 2.0


def line_harmonics_hz(freq_hz: float, sfreq: float, bandwidth_hz: float) -> np.ndarray:
    """Multiples of ``freq_hz`` whose line band ends below the Nyquist frequency, in Hz."""
    harmonics = freq_hz * np.arange(1, int(sfreq / 2.0 // freq_hz) + 1)
    return harmonics[harmonics + bandwidth_hz / 2.0 < sfreq / 2.0]


def design_notches(harmonics_hz: np.ndarray, bandwidth_hz: float, sfreq: float) -> np.ndarray:
    """Second-order sections, shape (n_harmonics, 6), one notch of width ``bandwidth_hz`` per harmonic."""
    sections = [signal.tf2sos(*signal.iirnotch(f, f / bandwidth_hz, fs=sfreq)) for f in harmonics_hz]
    return np.vstack(sections)


def interpolate_line_spectrum(
    rows: np.ndarray, sfreq: float, harmonics_hz: np.ndarray, bandwidth_hz: float
) -> np.ndarray:
    """Rows with the amplitude at each line band replaced by that of its neighbours, phase kept.

    rows : array, shape (n_rows, n_times), in V; returned with the same shape.
    """
    n_times = rows.shape[-1]
    spectrum = fft.rfft(rows, axis=-1)
    freqs = fft.rfftfreq(n_times, 1.0 / sfreq)
    amplitude = np.abs(spectrum)
    for harmonic in harmonics_hz:
        distance = np.abs(freqs - harmonic)
        in_line = distance <= bandwidth_hz / 2.0
        beside = (distance > bandwidth_hz / 2.0) & (distance <= bandwidth_hz / 2.0 + NEIGHBOUR_BAND_HZ)
        target = amplitude[:, beside].mean(axis=-1, keepdims=True)
        # A bin of zero amplitude has no phase to keep; it stays zero.
        scale = np.divide(
            target, amplitude[:, in_line], out=np.zeros_like(amplitude[:, in_line]), where=amplitude[:, in_line] > 0
        )
        spectrum[:, in_line] *= scale
    return fft.irfft(spectrum, n=n_times, axis=-1)


class LineNoise(Step):
    """Remove the line frequency ``freq_hz`` and its harmonics from EEG and EOG channels."""

    step: Literal["line_noise"] = "line_noise"
    stage: ClassVar[Stage] = Stage.CONTINUOUS
    examples: ClassVar[tuple[dict[str, Any], ...]] = (
        {"freq_hz": 50.0},
        {"freq_hz": 60.0, "method": "spectrum_interpolation", "bandwidth_hz": 2.0},
    )

    freq_hz: float = Field(50.0, description="Mains frequency, 50 or 60 Hz.")
    method: Literal["notch", "spectrum_interpolation"] = Field("notch", description="How the line is removed.")
    bandwidth_hz: float = Field(
        1.0, gt=0.0, le=5.0, allow_inf_nan=False, description="Width of the band removed around each harmonic, in Hz."
    )

    @field_validator("freq_hz")
    @classmethod
    def _mains_frequency(cls, value: float) -> float:
        if value not in LINE_FREQUENCIES_HZ:
            raise ValueError("freq_hz is the mains frequency: 50 (Europe, Asia, Africa) or 60 (the Americas)")
        return value

    def check(self, meta: EpochSetMeta) -> EpochSetMeta:
        if self.freq_hz + self.bandwidth_hz / 2.0 >= meta.nyquist:
            raise SpecError(
                ("freq_hz",),
                f"the line band at {self.freq_hz:g} Hz is not below the Nyquist frequency of {meta.nyquist:g} Hz "
                f"(sampling at {meta.sfreq:g} Hz cannot record it, so there is nothing to remove); "
                "remove the line_noise step",
            )
        if self.method == "spectrum_interpolation":
            resolution_hz = meta.sfreq / meta.n_times
            if resolution_hz > NEIGHBOUR_BAND_HZ:
                raise SpecError(
                    ("method",),
                    f"an epoch of {meta.n_times / meta.sfreq:.3g} s has a frequency resolution of {resolution_hz:.3g} "
                    f"Hz, coarser than the {NEIGHBOUR_BAND_HZ:g} Hz neighbour bands spectrum interpolation needs; "
                    f"use method 'notch', or epochs of at least {1.0 / NEIGHBOUR_BAND_HZ:g} s",
                )
        return meta

    def apply(self, epochs: EpochSet) -> tuple[EpochSet, StepProvenanceBase]:
        picks = epochs.picks(FILTERED_CHANNEL_TYPES, exclude_bads=False)
        harmonics = line_harmonics_hz(self.freq_hz, epochs.sfreq, self.bandwidth_hz)
        data = epochs.data.astype(np.float64, copy=True)
        warnings: list[str] = []
        if self.method == "notch":
            sos = design_notches(harmonics, self.bandwidth_hz, epochs.sfreq)
            if picks.size:
                data[:, picks] = iir_zero_phase(epochs.data[:, picks], sos)
            warnings = self._short_epoch_warnings(epochs, iir_padding_samples(sos))
        elif picks.size:
            data[:, picks] = filter_rows_in_blocks(
                epochs.data[:, picks],
                0,
                lambda rows: interpolate_line_spectrum(rows, epochs.sfreq, harmonics, self.bandwidth_hz),
            )
        return epochs.with_changes(data=data), self.record(warnings=warnings)

    def _short_epoch_warnings(self, epochs: EpochSet, ringing_samples: int) -> list[str]:
        if epochs.n_times >= ringing_samples:
            return []
        return [
            f"each epoch lasts {epochs.n_times / epochs.sfreq:.3g} s, shorter than the "
            f"{ringing_samples / epochs.sfreq:.3g} s the {self.bandwidth_hz:g} Hz wide notch takes to settle, so "
            "line noise is only partly removed; use method 'spectrum_interpolation' or notch the continuous recording"
        ]
