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

Band-pass
    FIR: one windowed sinc with both cutoffs (``firwin`` with ``pass_zero="bandpass"``),
    whose length follows the rule above for the narrower of the two transition bands,
    so both edges get that width. IIR: a Butterworth band-pass of ``order`` (``order``
    poles per edge), forward and backward.

Edges in provenance
    Each record lists, per edge, the -6 dB frequency (the step's cutoff) and the passband
    edge: for FIR the end of the transition band (cutoff + half the transition width for a
    high-pass edge, minus for a low-pass edge); for IIR the frequency from which the
    zero-phase response stays within the FIR's passband ripple of 0.02 dB. MNE-Python's
    ``l_freq``/``h_freq`` are passband edges of FIR filters, so MNE's ``l_freq = L`` with
    transition ``T`` is our ``cutoff_hz = L - T / 2`` (``h_freq = H``: ``H + T / 2``); see
    docs/methods.md.

Short uploaded epochs
    A high-pass edge whose three periods (``3 / cutoff``, common practice) outlast an
    uploaded epoch filters mostly the padding: the result is close to subtracting each
    epoch's mean. :func:`check_highpass_fits_epochs` refuses it at run creation unless the
    step sets ``allow_short_epochs``; the step then warns in every record.

Padding
    Each epoch is extended at both ends by even reflection (``numpy.pad`` mode
    "reflect") and the padding is cut off after filtering. FIR: by the kernel length.
    IIR: by the number of samples over which the impulse response of the slowest pole
    decays to 1e-4 of its start, ``ceil(ln(1e4) / -ln|p|)`` for the pole ``p`` of
    largest modulus; that leaves the whole impulse response below about 1e-3 of its peak.

Memory
    Rows (one channel of one trial) are filtered in blocks whose padded copy stays under
    ``FILTER_BLOCK_BYTES``: many short epochs each padded by a long kernel (a 0.1 Hz
    high-pass at 500 Hz has 16 501 taps) would otherwise need many times the data's size.

Many short rows
    Padding, filtering and cutting is linear in each row (:func:`filter_linear_rows`). When an epoch set has at least
    ``MATRIX_FILTER_ROWS_PER_SAMPLE`` rows per sample and epochs of at most
    ``MATRIX_FILTER_MAX_SAMPLES`` samples, the filter's response to each unit impulse of the
    epoch is computed as above, and every row is filtered by one matrix product with that
    (n_times, n_times) matrix. Same output to about 1e-12 relative; on 300 trials × 64
    channels × 250 samples a 0.5 Hz FIR high-pass went from 1.7 s to 0.05 s and a 0.1 Hz IIR
    from 3.2 s to 0.25 s on this project's 2-core machine.
"""

import math
from collections.abc import Callable, Sequence
from typing import Annotated, Any, ClassVar, Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, model_validator
from scipy import signal
from scipy.optimize import brentq

from epoch_assay.engine.epochs import EpochSet, EpochSetMeta
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.provenance import Stage, StepOutputs, StepProvenanceBase
from epoch_assay.engine.steps.base import Step
from epoch_assay.engine.steps.channel_data import channel_rows, replace_channels

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
# Passband ripple of a Hamming-windowed sinc, about 0.02 dB (Oppenheim & Schafer, Table 7.2);
# the IIR passband edge is where the zero-phase response comes this close to unity.
_PASSBAND_RIPPLE_DB = 0.02

# Padded rows filtered at once stay below this size (float64); see "Memory" above.
FILTER_BLOCK_BYTES = 64 * 2**20
# Rows of at most this many samples, at least this many rows per sample, are filtered by one matrix
# product (see filter_linear_rows). Both measured on this project's 2-core machines: the product's
# cost per row grows as n_times², the impulse responses cost n_times rows of filtering.
MATRIX_FILTER_MAX_SAMPLES = 1024
MATRIX_FILTER_ROWS_PER_SAMPLE = 4

FilterBand = Literal["highpass", "lowpass", "bandpass"]


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


def design_fir(band: FilterBand, cutoff_hz: float | tuple[float, float], sfreq: float) -> np.ndarray:
    """Symmetric windowed-sinc kernel, shape (n_taps,), n_taps odd, -6 dB at each cutoff (in Hz).

    ``cutoff_hz`` is one frequency, or (low, high) for ``band="bandpass"``.
    """
    n_taps = fir_n_taps(fir_transition_hz(float(np.min(cutoff_hz))), sfreq)
    return signal.firwin(n_taps, cutoff_hz, window="hamming", pass_zero=band, fs=sfreq)


def design_iir(band: FilterBand, cutoff_hz: float | tuple[float, float], order: int, sfreq: float) -> np.ndarray:
    """Butterworth second-order sections, shape (n_sections, 6), -3 dB at each cutoff (in Hz) per pass."""
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


def filter_rows_in_blocks(
    data: np.ndarray, n_pad: int, filter_padded: Callable[[np.ndarray], np.ndarray]
) -> np.ndarray:
    """Apply ``filter_padded`` to reflection-padded blocks of rows and cut the padding off.

    data : array, shape (..., n_times); returned with the same shape, as float64.
    filter_padded : filters an array of shape (n_rows, n_times + 2 * n_pad) along its last axis.
    """
    n_times = data.shape[-1]
    rows = data.reshape(-1, n_times)
    filtered = np.empty(rows.shape, dtype=np.float64)
    rows_per_block = max(1, FILTER_BLOCK_BYTES // ((n_times + 2 * n_pad) * 8))
    for start in range(0, rows.shape[0], rows_per_block):
        block = _reflect_pad(np.asarray(rows[start : start + rows_per_block], dtype=np.float64), n_pad)
        filtered[start : start + rows_per_block] = filter_padded(block)[:, n_pad : n_pad + n_times]
    return filtered.reshape(data.shape)


def filter_linear_rows(data: np.ndarray, n_pad: int, filter_padded: Callable[[np.ndarray], np.ndarray]) -> np.ndarray:
    """:func:`filter_rows_in_blocks` for a ``filter_padded`` that is linear in each row (FIR, IIR).

    Padding, filtering and cutting a row is then linear in it, so when there are many short rows
    (the trials × channels of an epoch set) it is one matrix: the response to each of the
    ``n_times`` unit impulses, shape (n_times, n_times), computed the same way and applied to every
    row by one matrix product. Same output, to rounding (about 1e-12 relative), for far less work
    than padding every row to the length of a long kernel or of an IIR filter's decay.
    """
    n_times = data.shape[-1]
    n_rows = data.size // n_times if n_times else 0
    if n_times <= MATRIX_FILTER_MAX_SAMPLES and n_rows >= MATRIX_FILTER_ROWS_PER_SAMPLE * n_times > 0:
        response = filter_rows_in_blocks(np.eye(n_times), n_pad, filter_padded)
        rows = np.asarray(data, dtype=np.float64).reshape(n_rows, n_times)
        return (rows @ response).reshape(data.shape)
    return filter_rows_in_blocks(data, n_pad, filter_padded)


def fir_zero_phase(data: np.ndarray, kernel: np.ndarray) -> np.ndarray:
    """Filter along the last axis with a symmetric odd-length kernel, delay removed.

    data : array, shape (..., n_times); returned with the same shape, as float64.
    """
    kernel_2d = kernel.reshape(1, -1)
    return filter_linear_rows(
        data, kernel.size, lambda padded: signal.oaconvolve(padded, kernel_2d, mode="same", axes=-1)
    )


def iir_zero_phase(data: np.ndarray, sos: np.ndarray) -> np.ndarray:
    """Filter along the last axis forward and backward with ``sos``.

    data : array, shape (..., n_times); returned with the same shape, as float64.
    """
    return filter_linear_rows(
        data, iir_padding_samples(sos), lambda padded: signal.sosfiltfilt(sos, padded, axis=-1, padtype=None)
    )


def _check_below_nyquist(loc: tuple[str, ...], cutoff_hz: float, meta: EpochSetMeta) -> None:
    if cutoff_hz >= meta.nyquist:
        raise SpecError(
            loc,
            f"cutoff {cutoff_hz:g} Hz is not below the Nyquist frequency: Nyquist is {meta.nyquist:g} Hz "
            f"at this sampling rate ({meta.sfreq:g} Hz); choose a cutoff below it",
        )


def _check_fir_band_ends_below_nyquist(
    loc: tuple[str, ...], cutoff_hz: float, transition_hz: float, meta: EpochSetMeta
) -> None:
    band_end_hz = cutoff_hz + transition_hz / 2
    if band_end_hz > meta.nyquist:
        raise SpecError(
            loc,
            f"the FIR transition band of a {cutoff_hz:g} Hz cutoff is {transition_hz:.3g} Hz wide and "
            f"would end at {band_end_hz:.4g} Hz, above the Nyquist frequency of {meta.nyquist:g} Hz; "
            f"choose a cutoff of at most {fir_max_cutoff_hz(meta.nyquist):.4g} Hz, or method 'iir'",
        )


class FilterEdge(BaseModel):
    """One edge of a filter's passband, in Hz."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    side: Literal["low", "high"] = Field(
        description="low: the edge of a high-pass or a band-pass's lower edge; high: a low-pass edge."
    )
    minus_6db_hz: float = Field(description="Where the zero-phase response is at half amplitude (the cutoff), in Hz.")
    passband_edge_hz: float | None = Field(
        description="Where the passband begins, in Hz: FIR, the end of the transition band (MNE's l_freq/h_freq "
        "for its FIR filters); IIR, where the zero-phase gain comes within 0.02 dB of unity; null when an IIR "
        "band never does."
    )


class FilterOutputs(StepOutputs):
    """What a filter reports: its edges."""

    filter_edges: list[FilterEdge] = Field(
        default_factory=list, description="The -6 dB frequency and passband edge of each edge of the filter."
    )


def _edge(side: Literal["low", "high"], minus_6db_hz: float, passband_edge_hz: float | None) -> FilterEdge:
    return FilterEdge(side=side, minus_6db_hz=minus_6db_hz, passband_edge_hz=passband_edge_hz)


def fir_edges(band: FilterBand, cutoff_hz: float | tuple[float, float]) -> list[FilterEdge]:
    """The -6 dB frequency and passband edge of each edge of the FIR design of :func:`design_fir`, in Hz."""
    half_transition = fir_transition_hz(float(np.min(cutoff_hz))) / 2
    low, high = _edge_cutoffs(band, cutoff_hz)
    edges = [] if low is None else [_edge("low", low, low + half_transition)]
    return edges + ([] if high is None else [_edge("high", high, high - half_transition)])


def iir_edges(
    band: FilterBand, cutoff_hz: float | tuple[float, float], sos: np.ndarray, sfreq: float
) -> list[FilterEdge]:
    """The -6 dB frequency and passband edge of each edge of a forward-backward IIR filter, in Hz.

    The passband edge is where the zero-phase gain (the squared magnitude of one pass) is
    ``-_PASSBAND_RIPPLE_DB``, found between the cutoff and the middle of the passband.
    """
    nyquist = sfreq / 2

    def gain_db(frequency: float) -> float:
        _, response = signal.freqz_sos(sos, worN=[frequency], fs=sfreq)
        return float(20.0 * np.log10(np.abs(response[0]) ** 2)) + _PASSBAND_RIPPLE_DB

    def edge_toward(cutoff: float, inside: float) -> float | None:
        if gain_db(inside) < 0.0:
            return None
        return float(brentq(gain_db, min(cutoff, inside), max(cutoff, inside), xtol=1e-9 * nyquist))

    low, high = _edge_cutoffs(band, cutoff_hz)
    # The middle of the passband: geometric for a band, well inside it for one edge.
    if low is not None and high is not None:
        centre = math.sqrt(low * high)
    else:
        centre = (low + nyquist) / 2 if low is not None else (high or 0.0) / 100
    edges = [] if low is None else [_edge("low", low, edge_toward(low, centre))]
    return edges + ([] if high is None else [_edge("high", high, edge_toward(high, centre))])


def _edge_cutoffs(band: FilterBand, cutoff_hz: float | tuple[float, float]) -> tuple[float | None, float | None]:
    """(high-pass edge, low-pass edge) of a design, in Hz; None where the band has no such edge."""
    if band == "bandpass":
        low, high = cutoff_hz  # type: ignore[misc]
        return float(low), float(high)
    return (float(cutoff_hz), None) if band == "highpass" else (None, float(cutoff_hz))  # type: ignore[arg-type]


def shortest_epoch_s(highpass_hz: float) -> float:
    """Shortest epoch, in s, that holds three periods of a high-pass edge at ``highpass_hz``."""
    return _HIGHPASS_PERIODS_PER_EPOCH / highpass_hz


def short_epoch_warnings(epochs: EpochSet, highpass_hz: float) -> list[str]:
    """A warning when each epoch is shorter than three periods of a high-pass cutoff (in Hz)."""
    duration_s = epochs.n_times / epochs.sfreq
    needed_s = shortest_epoch_s(highpass_hz)
    if duration_s >= needed_s:
        return []
    return [
        f"each epoch lasts {duration_s:.3g} s, shorter than three periods of the {highpass_hz:g} Hz "
        f"high-pass cutoff ({needed_s:.3g} s): the filter saw mostly the edge padding, and its output is close "
        "to each epoch minus its mean; filter the continuous recording before epoching instead"
    ]


def check_highpass_fits_epochs(steps: Sequence[Step], meta: EpochSetMeta) -> None:
    """Refuse a high-pass edge whose three periods outlast uploaded epochs of ``meta``.

    Each step sees the metadata its predecessors produce. Raises ``SpecError`` located at
    ``("steps", index, field)`` for the first filter whose ``3 / cutoff`` (in s) is longer
    than the epoch and that does not set ``allow_short_epochs``. Only for epochs uploaded as
    such: a recording is filtered before epoching, where the rule does not apply.
    """
    for index, step in enumerate(steps):
        highpass_hz = step.highpass_hz() if isinstance(step, _ZeroPhaseFilter) else None
        if highpass_hz is not None and not step.allow_short_epochs:  # type: ignore[attr-defined]
            duration_s = meta.n_times / meta.sfreq
            needed_s = shortest_epoch_s(highpass_hz)
            if duration_s < needed_s:
                raise SpecError(
                    ("steps", index, step.highpass_field),  # type: ignore[attr-defined]
                    f"a {highpass_hz:g} Hz high-pass edge needs epochs of at least 3 / {highpass_hz:g} Hz = "
                    f"{needed_s:.3g} s (three periods of the cutoff, common practice), and these uploaded epochs "
                    f"last {duration_s:.3g} s: the filter would see mostly the padding added at the epoch edges, "
                    "and its output would be close to subtracting each epoch's mean (a 0.1 Hz high-pass on a 1 s "
                    "epoch is). Upload the continuous recording instead, so that the filter runs before epoching, "
                    "or set allow_short_epochs to true on this step to run it anyway (every entry of the pipeline "
                    "then carries a warning)",
                )
        meta = step.check(meta)


AllowShortEpochs = Annotated[
    bool,
    Field(
        description="Run the high-pass edge on uploaded epochs shorter than three periods of its cutoff, which "
        "is otherwise refused at run creation; every entry of the pipeline then carries a warning."
    ),
]


class _ZeroPhaseFilter(Step):
    """A zero-phase filter of EEG and EOG channels; subclasses set ``band``, ``step`` and the cutoffs."""

    stage: ClassVar[Stage] = Stage.CONTINUOUS
    # 2: records the filter's edges (filter_edges)
    version: ClassVar[int] = 2
    Outputs: ClassVar[type[StepOutputs]] = FilterOutputs
    band: ClassVar[FilterBand]

    method: Literal["fir", "iir"] = Field("fir", description="Windowed-sinc FIR or Butterworth IIR.")
    order: int = Field(4, ge=1, le=10, description="Butterworth order of each pass (iir only).")

    def apply(self, epochs: EpochSet) -> tuple[EpochSet, StepProvenanceBase]:
        picks = epochs.picks(FILTERED_CHANNEL_TYPES, exclude_bads=False)
        rows = channel_rows(epochs.data, picks)
        if self.method == "fir":
            kernel = design_fir(self.band, self._cutoffs(), epochs.sfreq)
            edges = fir_edges(self.band, self._cutoffs())
            filtered = fir_zero_phase(rows, kernel)
        else:
            sos = design_iir(self.band, self._cutoffs(), self.order, epochs.sfreq)
            edges = iir_edges(self.band, self._cutoffs(), sos, epochs.sfreq)
            filtered = iir_zero_phase(rows, sos)
        data = replace_channels(epochs.data, picks, filtered)
        highpass_hz = self.highpass_hz()
        warnings = [] if highpass_hz is None else short_epoch_warnings(epochs, highpass_hz)
        return epochs.with_changes(data=data), self.record(filter_edges=edges, warnings=warnings)

    def _cutoffs(self) -> float | tuple[float, float]:
        raise NotImplementedError

    def highpass_hz(self) -> float | None:
        """The cutoff below which the filter removes, in Hz; None for a low-pass."""
        raise NotImplementedError


class _CutoffFilter(_ZeroPhaseFilter):
    """A zero-phase filter with one cutoff."""

    cutoff_hz: float = Field(
        gt=0.0,
        allow_inf_nan=False,
        description="Cutoff frequency, in Hz: the -6 dB point. MNE's l_freq/h_freq is the FIR passband edge "
        "instead; docs/methods.md gives the conversion.",
    )

    def check(self, meta: EpochSetMeta) -> EpochSetMeta:
        _check_below_nyquist(("cutoff_hz",), self.cutoff_hz, meta)
        if self.method == "fir":
            _check_fir_band_ends_below_nyquist(("cutoff_hz",), self.cutoff_hz, fir_transition_hz(self.cutoff_hz), meta)
        return meta

    def _cutoffs(self) -> float:
        return self.cutoff_hz


class HighPass(_CutoffFilter):
    """Zero-phase high-pass filter of EEG and EOG channels."""

    step: Literal["highpass"] = "highpass"
    band: ClassVar[FilterBand] = "highpass"
    examples: ClassVar[tuple[dict[str, Any], ...]] = (
        {"cutoff_hz": 1.0},
        {"cutoff_hz": 0.5, "method": "iir", "order": 2},
    )
    highpass_field: ClassVar[str] = "cutoff_hz"

    allow_short_epochs: AllowShortEpochs = False

    def highpass_hz(self) -> float | None:
        return self.cutoff_hz


class LowPass(_CutoffFilter):
    """Zero-phase low-pass filter of EEG and EOG channels."""

    step: Literal["lowpass"] = "lowpass"
    band: ClassVar[FilterBand] = "lowpass"
    examples: ClassVar[tuple[dict[str, Any], ...]] = ({"cutoff_hz": 30.0}, {"cutoff_hz": 40.0, "method": "iir"})

    def highpass_hz(self) -> float | None:
        return None


class BandPass(_ZeroPhaseFilter):
    """Zero-phase band-pass filter of EEG and EOG channels, -6 dB at ``low_hz`` and ``high_hz``."""

    step: Literal["bandpass"] = "bandpass"
    band: ClassVar[FilterBand] = "bandpass"
    examples: ClassVar[tuple[dict[str, Any], ...]] = (
        {"low_hz": 1.0, "high_hz": 30.0},
        {"low_hz": 0.5, "high_hz": 40.0, "method": "iir", "order": 3},
    )
    highpass_field: ClassVar[str] = "low_hz"

    low_hz: float = Field(gt=0.0, allow_inf_nan=False, description="Lower cutoff, in Hz (-6 dB point).")
    high_hz: float = Field(gt=0.0, allow_inf_nan=False, description="Upper cutoff, in Hz (-6 dB point).")
    allow_short_epochs: AllowShortEpochs = False

    @model_validator(mode="after")
    def _ordered_cutoffs(self) -> "BandPass":
        if not self.low_hz < self.high_hz:
            raise ValueError("low_hz must be below high_hz; for a band-stop use a line_noise step or two filters")
        return self

    def check(self, meta: EpochSetMeta) -> EpochSetMeta:
        _check_below_nyquist(("high_hz",), self.high_hz, meta)
        if self.method == "fir":
            transition_hz = fir_transition_hz(self.low_hz)
            _check_fir_band_ends_below_nyquist(("high_hz",), self.high_hz, transition_hz, meta)
            if self.low_hz + transition_hz / 2 >= self.high_hz - transition_hz / 2:
                raise SpecError(
                    ("high_hz",),
                    f"the passband [{self.low_hz:g}, {self.high_hz:g}] Hz is narrower than the FIR transition band "
                    f"of {transition_hz:.3g} Hz at each edge; move high_hz to at least "
                    f"{self.low_hz + transition_hz:.4g} Hz, or use method 'iir'",
                )
        return meta

    def _cutoffs(self) -> tuple[float, float]:
        return (self.low_hz, self.high_hz)

    def highpass_hz(self) -> float | None:
        return self.low_hz
