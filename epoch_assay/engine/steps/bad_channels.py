"""Detection of bad EEG channels, then flagging, interpolating or dropping them.

Each criterion looks at the EEG channels not already marked bad, over all trials (each
trial's mean removed first, so offsets between epochs do not count as signal):

``flat``
    standard deviation below ``min_std_uv``: an electrode that records nothing.
``deviation``
    robust z (median / MAD over channels) of the channel's robust amplitude
    (interquartile range / 1.349) above ``z``: a channel much larger than the others
    (Bigdely-Shamlo et al., 2015, "deviation criterion").
``correlation``
    mean of a channel's ``n_best`` highest correlations with the other channels below
    ``min_r``: a channel that does not share the spatially smooth signal of the scalp
    (after Bigdely-Shamlo et al., 2015, who use the highest correlation).
``line_noise``
    robust z of log10 of the line-band power over the power of the bands beside it,
    above ``z``.
``high_frequency``
    robust z of log10 of the median power above 40 Hz over the median power in 1-40 Hz,
    above ``z`` (the median keeps narrow line peaks out).
``bridged``
    electrical distance (variance of the difference of two channels; Tenke & Kayser,
    2001) below ``max_ratio`` times its median over all pairs: two electrodes joined by
    gel record the same signal. Both channels of such a pair are flagged.

Robust z scores of log ratios use a spread of at least ``MIN_LOG_SPREAD`` decades, so
that on a set where all channels look alike tiny differences are not called outliers.

Action on the channels flagged now and on EEG channels already marked bad:
``flag`` adds them to ``bads`` (left out of references and scoring); ``interpolate``
replaces them by spherical-spline interpolation from the good channels (MNE's
``interpolate_bads``, Perrin et al., 1989) and clears the flag; ``drop`` removes them.
Which channels a drop removes depends on the data, so ``check`` returns the metadata
unchanged.
"""

from typing import Any, ClassVar, Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, model_validator

from epoch_assay.engine.epochs import SCORED_CHANNEL_TYPES, EpochSet, EpochSetMeta
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.montage import eeg_channels_without_position, epoch_set_positions, missing_positions_error
from epoch_assay.engine.provenance import Stage, StepOutputs, StepProvenanceBase
from epoch_assay.engine.steps.base import DataDependentField, Step
from epoch_assay.engine.steps.line_noise import LINE_FREQUENCIES_HZ
from epoch_assay.engine.steps.mne_bridge import MNE_QUIET, to_mne_epochs
from epoch_assay.engine.steps.spectra import mean_channel_psd, robust_z
from epoch_assay.engine.units import uv_to_v

HIGH_FREQUENCY_HZ = 40.0
LOW_FREQUENCY_HZ = 1.0
MIN_LOG_SPREAD = 0.05
# Half-width of the line band, and the bands beside it, in Hz (plus half a frequency bin).
LINE_BAND_HALF_WIDTH_HZ = 1.0
LINE_NEIGHBOURS_HZ = (2.0, 6.0)
# Robust z needs a few channels to estimate a median and spread from.
MIN_EEG_CHANNELS = 5


class _Criterion(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class FlatCriterion(_Criterion):
    min_std_uv: float = Field(0.5, gt=0.0, allow_inf_nan=False, description="Lowest standard deviation, in µV.")


class DeviationCriterion(_Criterion):
    z: float = Field(5.0, gt=0.0, allow_inf_nan=False, description="Highest robust z of the channel amplitude.")


class CorrelationCriterion(_Criterion):
    min_r: float = Field(0.4, gt=-1.0, lt=1.0, description="Lowest mean correlation with the best-correlated channels.")
    n_best: int = Field(3, ge=1, le=10, description="How many best-correlated channels are averaged.")


class LineNoiseCriterion(_Criterion):
    z: float = Field(5.0, gt=0.0, allow_inf_nan=False, description="Highest robust z of the line-power ratio.")
    freq_hz: float = Field(50.0, description="Mains frequency, 50 or 60 Hz.")

    @model_validator(mode="after")
    def _mains_frequency(self) -> "LineNoiseCriterion":
        if self.freq_hz not in LINE_FREQUENCIES_HZ:
            raise ValueError("freq_hz is the mains frequency: 50 or 60")
        return self


class HighFrequencyCriterion(_Criterion):
    z: float = Field(5.0, gt=0.0, allow_inf_nan=False, description="Highest robust z of the high-frequency ratio.")


class BridgedCriterion(_Criterion):
    max_ratio: float = Field(
        0.01, gt=0.0, lt=1.0, description="Highest electrical distance of a pair, as a fraction of the median."
    )


class BadChannelCriteria(_Criterion):
    """Which criteria to apply; at least one."""

    flat: FlatCriterion | None = None
    deviation: DeviationCriterion | None = None
    correlation: CorrelationCriterion | None = None
    line_noise: LineNoiseCriterion | None = None
    high_frequency: HighFrequencyCriterion | None = None
    bridged: BridgedCriterion | None = None

    @model_validator(mode="after")
    def _at_least_one(self) -> "BadChannelCriteria":
        if all(getattr(self, name) is None for name in type(self).model_fields):
            raise ValueError(f"give at least one criterion: {', '.join(type(self).model_fields)}")
        return self


def _demeaned_rows(data: np.ndarray) -> np.ndarray:
    """Channels × all samples, each trial's mean removed; data shape (n_trials, n_channels, n_times)."""
    centred = data - data.mean(axis=-1, keepdims=True)
    return centred.transpose(1, 0, 2).reshape(data.shape[1], -1)


def flat_channels(rows: np.ndarray, criterion: FlatCriterion) -> np.ndarray:
    """Mask, shape (n_channels,), of channels whose std (rows in V) is below the floor."""
    return rows.std(axis=-1) < uv_to_v(criterion.min_std_uv)


def deviating_channels(rows: np.ndarray, criterion: DeviationCriterion) -> np.ndarray:
    """Mask of channels whose robust amplitude has a robust z above the threshold."""
    quartiles = np.percentile(rows, [25.0, 75.0], axis=-1)
    # IQR / 1.349 estimates the standard deviation of normal data.
    amplitude = (quartiles[1] - quartiles[0]) / 1.349
    return robust_z(amplitude) > criterion.z


def uncorrelated_channels(rows: np.ndarray, criterion: CorrelationCriterion) -> np.ndarray:
    """Mask of channels whose mean correlation with their ``n_best`` best partners is below ``min_r``."""
    correlation = np.corrcoef(rows)
    np.fill_diagonal(correlation, -np.inf)
    correlation = np.nan_to_num(correlation, nan=0.0)
    n_best = min(criterion.n_best, rows.shape[0] - 1)
    best = -np.sort(-correlation, axis=-1)[:, :n_best]
    return best.mean(axis=-1) < criterion.min_r


def bridged_channels(rows: np.ndarray, criterion: BridgedCriterion) -> np.ndarray:
    """Mask of channels in a pair whose electrical distance is below ``max_ratio`` of the median."""
    covariance = np.cov(rows)
    variance = np.diag(covariance)
    distance = variance[:, None] + variance[None, :] - 2.0 * covariance
    pairs = np.triu_indices(rows.shape[0], k=1)
    threshold = criterion.max_ratio * np.median(distance[pairs])
    bridged = distance < threshold
    np.fill_diagonal(bridged, False)
    return bridged.any(axis=-1)


def line_noise_channels(freqs: np.ndarray, psd: np.ndarray, criterion: LineNoiseCriterion) -> np.ndarray:
    """Mask of channels whose line-power ratio has a robust z above the threshold (psd in V²/Hz)."""
    half_bin = (freqs[1] - freqs[0]) / 2.0
    distance = np.abs(freqs - criterion.freq_hz)
    in_line = distance <= LINE_BAND_HALF_WIDTH_HZ + half_bin
    beside = (distance >= LINE_NEIGHBOURS_HZ[0] + half_bin) & (distance <= LINE_NEIGHBOURS_HZ[1] + half_bin)
    ratio = psd[:, in_line].mean(axis=-1) / np.median(psd[:, beside], axis=-1)
    return robust_z(np.log10(ratio), min_scale=MIN_LOG_SPREAD) > criterion.z


def high_frequency_channels(freqs: np.ndarray, psd: np.ndarray, criterion: HighFrequencyCriterion) -> np.ndarray:
    """Mask of channels whose high- over low-frequency power has a robust z above the threshold."""
    high = np.median(psd[:, freqs >= HIGH_FREQUENCY_HZ], axis=-1)
    low = np.median(psd[:, (freqs >= LOW_FREQUENCY_HZ) & (freqs < HIGH_FREQUENCY_HZ)], axis=-1)
    return robust_z(np.log10(high / low), min_scale=MIN_LOG_SPREAD) > criterion.z


def detect_bad_channels(epochs: EpochSet, criteria: BadChannelCriteria) -> dict[str, list[str]]:
    """Good EEG channels of ``epochs`` that fail a criterion, with the criteria each fails."""
    picks = epochs.picks(SCORED_CHANNEL_TYPES, exclude_bads=True)
    rows = _demeaned_rows(np.asarray(epochs.data[:, picks], dtype=np.float64))
    masks: dict[str, np.ndarray] = {}
    if criteria.flat:
        masks["flat"] = flat_channels(rows, criteria.flat)
    if criteria.deviation:
        masks["deviation"] = deviating_channels(rows, criteria.deviation)
    if criteria.correlation:
        masks["correlation"] = uncorrelated_channels(rows, criteria.correlation)
    if criteria.bridged:
        masks["bridged"] = bridged_channels(rows, criteria.bridged)
    if criteria.line_noise or criteria.high_frequency:
        freqs, psd = mean_channel_psd(epochs.data[:, picks], epochs.sfreq)
        if criteria.line_noise:
            masks["line_noise"] = line_noise_channels(freqs, psd, criteria.line_noise)
        if criteria.high_frequency:
            masks["high_frequency"] = high_frequency_channels(freqs, psd, criteria.high_frequency)
    flagged: dict[str, list[str]] = {}
    for criterion, mask in masks.items():
        for index in picks[mask]:
            flagged.setdefault(epochs.ch_names[index], []).append(criterion)
    return flagged


def interpolate_channels(epochs: EpochSet, names: list[str]) -> EpochSet:
    """``epochs`` with the EEG channels ``names`` replaced by spherical-spline interpolation.

    Uses MNE's ``interpolate_bads`` (Perrin et al., 1989) from the other EEG channels not
    marked bad; the interpolated channels are no longer marked bad.
    """
    eeg = epochs.picks(SCORED_CHANNEL_TYPES, exclude_bads=False)
    positions = epoch_set_positions(epochs)
    marked = epochs.with_changes(bads=epochs.bads | frozenset(names))
    mne_epochs = to_mne_epochs(marked, eeg, positions)
    mne_epochs.interpolate_bads(reset_bads=True, mode="accurate", origin="auto", verbose=MNE_QUIET)
    data = epochs.data.astype(np.float64, copy=True)
    data[:, eeg] = mne_epochs.get_data()
    return epochs.with_changes(data=data, bads=epochs.bads - frozenset(names))


def drop_channels(epochs: EpochSet, names: list[str]) -> EpochSet:
    """``epochs`` without the channels ``names`` (data, names, types, positions and flags)."""
    keep = np.array([i for i, name in enumerate(epochs.ch_names) if name not in names], dtype=int)
    return epochs.with_changes(
        data=epochs.data[:, keep],
        ch_names=tuple(epochs.ch_names[i] for i in keep),
        ch_types=tuple(epochs.ch_types[i] for i in keep),
        positions=None if epochs.positions is None else epochs.positions[keep],
        bads=epochs.bads - frozenset(names),
    )


class BadChannelsOutputs(StepOutputs):
    """What bad-channel detection reports."""

    channels_flagged: dict[str, list[str]] = Field(
        default_factory=dict, description="EEG channels found bad now, each with the criteria it failed."
    )
    channels_interpolated: list[str] = Field(
        default_factory=list, description="EEG channels replaced by interpolation (found now or marked bad before)."
    )
    channels_dropped: list[str] = Field(
        default_factory=list, description="EEG channels removed (found now or marked bad before)."
    )


class BadChannels(Step):
    """Find bad EEG channels by the chosen criteria, then flag, interpolate or drop them."""

    step: Literal["bad_channels"] = "bad_channels"
    stage: ClassVar[Stage] = Stage.CONTINUOUS
    Outputs: ClassVar[type[StepOutputs]] = BadChannelsOutputs
    examples: ClassVar[tuple[dict[str, Any], ...]] = (
        {"criteria": {"flat": {}, "deviation": {}, "correlation": {}}, "action": "flag"},
        {"criteria": {"deviation": {"z": 3.0}, "line_noise": {}, "high_frequency": {}}, "action": "interpolate"},
        {"criteria": {"flat": {}, "deviation": {"z": 3.0}, "bridged": {}}, "action": "drop"},
    )

    criteria: BadChannelCriteria = Field(description="Which criteria to apply, with their thresholds.")
    action: Literal["flag", "interpolate", "drop"] = Field(
        "interpolate", description="What happens to bad channels (found now or already marked bad)."
    )

    def check(self, meta: EpochSetMeta) -> EpochSetMeta:
        n_eeg = sum(kind in SCORED_CHANNEL_TYPES for kind in meta.ch_types)
        if n_eeg < MIN_EEG_CHANNELS:
            raise SpecError(
                ("criteria",),
                f"bad channels are found by comparing channels, which needs at least {MIN_EEG_CHANNELS} EEG "
                f"channels; this set has {n_eeg}: remove the bad_channels step",
            )
        if self.criteria.line_noise and self.criteria.line_noise.freq_hz + LINE_NEIGHBOURS_HZ[1] >= meta.nyquist:
            raise SpecError(
                ("criteria", "line_noise", "freq_hz"),
                f"the line frequency {self.criteria.line_noise.freq_hz:g} Hz and the bands beside it are not below "
                f"the Nyquist frequency of {meta.nyquist:g} Hz; remove the line_noise criterion",
            )
        if self.criteria.high_frequency and meta.nyquist <= HIGH_FREQUENCY_HZ + 5.0:
            raise SpecError(
                ("criteria", "high_frequency"),
                f"the high-frequency criterion measures power above {HIGH_FREQUENCY_HZ:g} Hz, which needs a Nyquist "
                f"frequency above {HIGH_FREQUENCY_HZ + 5.0:g} Hz (this set's is {meta.nyquist:g} Hz); remove it",
            )
        if self.action == "interpolate":
            unplaced = eeg_channels_without_position(meta)
            if unplaced:
                raise missing_positions_error(("action",), "interpolation", unplaced, "action 'flag' or 'drop'")
        return meta

    def data_dependent(self) -> frozenset[DataDependentField]:
        # Which channels are bad is what the step finds out; a drop removes them.
        return frozenset({"ch_names", "bads"} if self.action == "drop" else {"bads"})

    def apply(self, epochs: EpochSet) -> tuple[EpochSet, StepProvenanceBase]:
        flagged = detect_bad_channels(epochs, self.criteria)
        bad_eeg = [
            name
            for name, kind in zip(epochs.ch_names, epochs.ch_types, strict=False)
            if kind in SCORED_CHANNEL_TYPES and (name in flagged or name in epochs.bads)
        ]
        good_left = sum(kind in SCORED_CHANNEL_TYPES for kind in epochs.ch_types) - len(bad_eeg)
        if self.action == "flag" or not bad_eeg:
            result = epochs.with_changes(bads=epochs.bads | frozenset(flagged))
            return result, self.record(channels_flagged=flagged)
        if self.action == "interpolate" and good_left < MIN_EEG_CHANNELS:
            warning = (
                f"only {good_left} good EEG channels are left, too few to interpolate {len(bad_eeg)} from; "
                "the bad channels were flagged instead"
            )
            result = epochs.with_changes(bads=epochs.bads | frozenset(flagged))
            return result, self.record(channels_flagged=flagged, warnings=[warning])
        if self.action == "interpolate":
            return interpolate_channels(epochs, bad_eeg), self.record(
                channels_flagged=flagged, channels_interpolated=bad_eeg
            )
        return drop_channels(epochs, bad_eeg), self.record(channels_flagged=flagged, channels_dropped=bad_eeg)
