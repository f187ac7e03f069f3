"""Detection of bad EEG channels, then flagging, interpolating or dropping them.

Each criterion computes one statistic per EEG channel not already marked bad, over all
trials (each trial's mean removed first, so offsets between epochs do not count as
signal), and flags the channels beyond its threshold:

``near_silent``
    standard deviation below ``std_below_uv``: an electrode that records almost nothing.
``amplitude_outlier``
    robust z (median / MAD over channels) of the channel's robust amplitude
    (interquartile range / 1.349) above ``robust_z_above``: a channel much larger than
    the others (the deviation measure of Bigdely-Shamlo et al., 2015).
``partner_agreement``
    mean of a channel's ``n_partners`` highest correlations with the other channels
    below ``mean_r_below``: a channel that does not share the signal volume conduction
    spreads over the scalp (a decoupled or wandering electrode).
``mains_excess``
    robust z of log10 of the power in the mains band over the power of the bands beside
    it, above ``robust_z_above``.
``fast_power_excess``
    robust z of log10 of the median power above 40 Hz over the median power in 1-40 Hz,
    above ``robust_z_above`` (the median keeps narrow line peaks out): muscle or a
    loose contact.
``bridged_pair``
    electrical distance (variance of the difference of two channels; Tenke & Kayser,
    2001) below ``distance_below_ratio`` times its median over all pairs: two electrodes
    joined by gel record the same signal. Both channels of such a pair are flagged.

The default thresholds were chosen on the project's own simulated faults
(``tests/benchmarks/bench_bad_channels.py``; recall and false-positive rates in
``docs/steps.md``). Robust z scores of log ratios use a spread of at least
``MIN_LOG_SPREAD`` decades, so that on a set where all channels look alike tiny
differences are not called outliers. Criterion names used before this vocabulary are
refused with a message naming their successors (``RENAMED_CRITERIA``).

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
from epoch_assay.engine.provenance import LEGACY_RECORD_RENAMES, Stage, StepOutputs, StepProvenanceBase
from epoch_assay.engine.steps.base import DataDependentField, Step
from epoch_assay.engine.steps.line_noise import LINE_FREQUENCIES_HZ
from epoch_assay.engine.steps.mne_bridge import MNE_QUIET, to_mne_epochs
from epoch_assay.engine.steps.spectra import mean_channel_psd, robust_z
from epoch_assay.engine.units import uv_to_v

FAST_POWER_FROM_HZ = 40.0
SLOW_POWER_FROM_HZ = 1.0
MIN_LOG_SPREAD = 0.05
# Half-width of the mains band, and the bands beside it, in Hz (plus half a frequency bin).
MAINS_BAND_HALF_WIDTH_HZ = 1.0
MAINS_NEIGHBOURS_HZ = (2.0, 6.0)
# Robust z needs a few channels to estimate a median and spread from.
MIN_EEG_CHANNELS = 5

# Criterion names of earlier releases, refused with the name and fields that replace them.
RENAMED_CRITERIA = {
    "flat": "near_silent {std_below_uv}",
    "deviation": "amplitude_outlier {robust_z_above}",
    "correlation": "partner_agreement {mean_r_below, n_partners}",
    "line_noise": "mains_excess {robust_z_above, mains_hz}",
    "high_frequency": "fast_power_excess {robust_z_above}",
    "bridged": "bridged_pair {distance_below_ratio}",
}

# How a record stored under the earlier names reads today: criterion and field names, in that order.
_LEGACY_NAMES = {
    "flat": ("near_silent", {"min_std_uv": "std_below_uv"}),
    "deviation": ("amplitude_outlier", {"z": "robust_z_above"}),
    "correlation": ("partner_agreement", {"min_r": "mean_r_below", "n_best": "n_partners"}),
    "line_noise": ("mains_excess", {"z": "robust_z_above", "freq_hz": "mains_hz"}),
    "high_frequency": ("fast_power_excess", {"z": "robust_z_above"}),
    "bridged": ("bridged_pair", {"max_ratio": "distance_below_ratio"}),
}


def legacy_record_in_current_names(record: dict[str, Any]) -> dict[str, Any]:
    """A stored bad-channel record (result documents of schema version 1) with its criteria in today's names.

    Only names change: the record still says what version 1 of the step computed, with the
    thresholds it used then (``version`` stays 1).
    """

    def renamed(name: str) -> str:
        return _LEGACY_NAMES[name][0] if name in _LEGACY_NAMES else name

    params = dict(record.get("params", {}))
    criteria = {}
    for name, fields in (params.get("criteria") or {}).items():
        fields_renamed = _LEGACY_NAMES.get(name, (name, {}))[1]
        criteria[renamed(name)] = {fields_renamed.get(key, key): value for key, value in (fields or {}).items()}
    flagged = {
        channel: [renamed(name) for name in names] for channel, names in (record.get("channels_flagged") or {}).items()
    }
    upgraded = {**record, "params": {**params, "criteria": criteria}}
    if "channels_flagged" in record:
        upgraded["channels_flagged"] = flagged
    return upgraded


class _Criterion(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class NearSilentCriterion(_Criterion):
    """A channel whose standard deviation is below a floor."""

    model_config = ConfigDict(title="Near-silent channel")

    std_below_uv: float = Field(
        1.0, gt=0.0, allow_inf_nan=False, description="Flag a channel whose standard deviation is below this, in µV."
    )

    def flags(self, std: np.ndarray) -> np.ndarray:
        """Mask of channels whose standard deviation (shape (n_channels,), in V) is below the floor."""
        return std < uv_to_v(self.std_below_uv)


class AmplitudeOutlierCriterion(_Criterion):
    """A channel whose robust amplitude is far above the others' (Bigdely-Shamlo et al., 2015)."""

    model_config = ConfigDict(title="Amplitude outlier")

    robust_z_above: float = Field(
        4.0, gt=0.0, allow_inf_nan=False, description="Flag a channel whose amplitude has a robust z above this."
    )

    def flags(self, z: np.ndarray) -> np.ndarray:
        """Mask of channels whose amplitude robust z (shape (n_channels,)) is above the threshold."""
        return z > self.robust_z_above


class PartnerAgreementCriterion(_Criterion):
    """A channel that agrees too little with the channels it agrees with best."""

    model_config = ConfigDict(title="Agreement with partner channels")

    mean_r_below: float = Field(
        0.2, gt=-1.0, lt=1.0, description="Flag a channel whose mean correlation with its partners is below this."
    )
    n_partners: int = Field(3, ge=1, le=10, description="How many best-correlated channels are its partners.")

    def flags(self, mean_r: np.ndarray) -> np.ndarray:
        """Mask of channels whose mean partner correlation (shape (n_channels,)) is below the threshold."""
        return mean_r < self.mean_r_below


class MainsExcessCriterion(_Criterion):
    """A channel with much more power at the mains frequency than the others."""

    model_config = ConfigDict(title="Mains power excess")

    robust_z_above: float = Field(
        2.5,
        gt=0.0,
        allow_inf_nan=False,
        description="Flag a channel whose mains-power ratio has a robust z above this.",
    )
    mains_hz: float = Field(50.0, description="Mains frequency, 50 or 60 Hz.")

    @model_validator(mode="after")
    def _mains_frequency(self) -> "MainsExcessCriterion":
        if self.mains_hz not in LINE_FREQUENCIES_HZ:
            raise ValueError("mains_hz is the mains frequency: 50 or 60")
        return self

    def flags(self, z: np.ndarray) -> np.ndarray:
        """Mask of channels whose mains-ratio robust z (shape (n_channels,)) is above the threshold."""
        return z > self.robust_z_above


class FastPowerExcessCriterion(_Criterion):
    """A channel with much more power above 40 Hz, relative to its power below, than the others."""

    model_config = ConfigDict(title="Fast power excess")

    robust_z_above: float = Field(
        2.0, gt=0.0, allow_inf_nan=False, description="Flag a channel whose fast-power ratio has a robust z above this."
    )

    def flags(self, z: np.ndarray) -> np.ndarray:
        """Mask of channels whose fast-power robust z (shape (n_channels,)) is above the threshold."""
        return z > self.robust_z_above


class BridgedPairCriterion(_Criterion):
    """Two channels whose difference is almost nothing (Tenke & Kayser, 2001)."""

    model_config = ConfigDict(title="Bridged pair")

    distance_below_ratio: float = Field(
        0.05, gt=0.0, lt=1.0, description="Flag a pair whose electrical distance is below this fraction of the median."
    )

    def flags(self, ratio: np.ndarray) -> np.ndarray:
        """Mask of channels whose smallest distance ratio (shape (n_channels,)) is below the threshold."""
        return ratio < self.distance_below_ratio


class BadChannelCriteria(_Criterion):
    """Which criteria to apply; at least one."""

    model_config = ConfigDict(title="Bad-channel criteria")

    near_silent: NearSilentCriterion | None = None
    amplitude_outlier: AmplitudeOutlierCriterion | None = None
    partner_agreement: PartnerAgreementCriterion | None = None
    mains_excess: MainsExcessCriterion | None = None
    fast_power_excess: FastPowerExcessCriterion | None = None
    bridged_pair: BridgedPairCriterion | None = None

    @model_validator(mode="before")
    @classmethod
    def _renamed(cls, data: Any) -> Any:
        if isinstance(data, dict):
            old = [name for name in data if name in RENAMED_CRITERIA]
            if old:
                renamed = "; ".join(f"'{name}' is now {RENAMED_CRITERIA[name]}" for name in old)
                raise ValueError(f"bad-channel criteria were renamed: {renamed}")
        return data

    @model_validator(mode="after")
    def _at_least_one(self) -> "BadChannelCriteria":
        if all(getattr(self, name) is None for name in type(self).model_fields):
            raise ValueError(f"give at least one criterion: {', '.join(type(self).model_fields)}")
        return self


def _demeaned_rows(data: np.ndarray) -> np.ndarray:
    """Channels × all samples, each trial's mean removed; data shape (n_trials, n_channels, n_times)."""
    centred = data - data.mean(axis=-1, keepdims=True)
    return centred.transpose(1, 0, 2).reshape(data.shape[1], -1)


def channel_std(rows: np.ndarray) -> np.ndarray:
    """Standard deviation per channel, shape (n_channels,), in V; rows shape (n_channels, n_samples) in V."""
    return rows.std(axis=-1)


def amplitude_robust_z(rows: np.ndarray) -> np.ndarray:
    """Robust z over channels of each channel's robust amplitude, shape (n_channels,)."""
    quartiles = np.percentile(rows, [25.0, 75.0], axis=-1)
    # IQR / 1.349 estimates the standard deviation of normal data.
    amplitude = (quartiles[1] - quartiles[0]) / 1.349
    return robust_z(amplitude)


def partner_correlation(rows: np.ndarray, n_partners: int) -> np.ndarray:
    """Mean of each channel's ``n_partners`` highest correlations with the others, shape (n_channels,)."""
    correlation = np.corrcoef(rows)
    np.fill_diagonal(correlation, -np.inf)
    correlation = np.nan_to_num(correlation, nan=0.0)
    n_best = min(n_partners, rows.shape[0] - 1)
    best = -np.sort(-correlation, axis=-1)[:, :n_best]
    return best.mean(axis=-1)


def bridge_distance_ratio(rows: np.ndarray) -> np.ndarray:
    """Each channel's smallest electrical distance to another, over the median of all pairs, shape (n_channels,)."""
    covariance = np.cov(rows)
    variance = np.diag(covariance)
    distance = variance[:, None] + variance[None, :] - 2.0 * covariance
    median = np.median(distance[np.triu_indices(rows.shape[0], k=1)])
    np.fill_diagonal(distance, np.inf)
    return distance.min(axis=-1) / median


def mains_ratio_z(freqs: np.ndarray, psd: np.ndarray, mains_hz: float) -> np.ndarray:
    """Robust z of log10 mains-band over neighbouring-band power, shape (n_channels,); psd in V²/Hz."""
    half_bin = (freqs[1] - freqs[0]) / 2.0
    distance = np.abs(freqs - mains_hz)
    in_band = distance <= MAINS_BAND_HALF_WIDTH_HZ + half_bin
    beside = (distance >= MAINS_NEIGHBOURS_HZ[0] + half_bin) & (distance <= MAINS_NEIGHBOURS_HZ[1] + half_bin)
    ratio = psd[:, in_band].mean(axis=-1) / np.median(psd[:, beside], axis=-1)
    return robust_z(np.log10(ratio), min_scale=MIN_LOG_SPREAD)


def fast_power_ratio_z(freqs: np.ndarray, psd: np.ndarray) -> np.ndarray:
    """Robust z of log10 median power above 40 Hz over median power in 1-40 Hz, shape (n_channels,)."""
    fast = np.median(psd[:, freqs >= FAST_POWER_FROM_HZ], axis=-1)
    slow = np.median(psd[:, (freqs >= SLOW_POWER_FROM_HZ) & (freqs < FAST_POWER_FROM_HZ)], axis=-1)
    return robust_z(np.log10(fast / slow), min_scale=MIN_LOG_SPREAD)


def criterion_statistics(epochs: EpochSet, criteria: BadChannelCriteria) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Indices of the good EEG channels of ``epochs`` and, per chosen criterion, its statistic on them.

    Each statistic has shape (n_picks,); the criterion's ``flags`` turns it into a mask.
    """
    picks = epochs.picks(SCORED_CHANNEL_TYPES, exclude_bads=True)
    rows = _demeaned_rows(np.asarray(epochs.data[:, picks], dtype=np.float64))
    statistics: dict[str, np.ndarray] = {}
    if criteria.near_silent:
        statistics["near_silent"] = channel_std(rows)
    if criteria.amplitude_outlier:
        statistics["amplitude_outlier"] = amplitude_robust_z(rows)
    if criteria.partner_agreement:
        statistics["partner_agreement"] = partner_correlation(rows, criteria.partner_agreement.n_partners)
    if criteria.bridged_pair:
        statistics["bridged_pair"] = bridge_distance_ratio(rows)
    if criteria.mains_excess or criteria.fast_power_excess:
        freqs, psd = mean_channel_psd(epochs.data[:, picks], epochs.sfreq)
        if criteria.mains_excess:
            statistics["mains_excess"] = mains_ratio_z(freqs, psd, criteria.mains_excess.mains_hz)
        if criteria.fast_power_excess:
            statistics["fast_power_excess"] = fast_power_ratio_z(freqs, psd)
    return picks, statistics


def detect_bad_channels(epochs: EpochSet, criteria: BadChannelCriteria) -> dict[str, list[str]]:
    """Good EEG channels of ``epochs`` that fail a criterion, with the criteria each fails."""
    picks, statistics = criterion_statistics(epochs, criteria)
    flagged: dict[str, list[str]] = {}
    for name, values in statistics.items():
        for index in picks[getattr(criteria, name).flags(values)]:
            flagged.setdefault(epochs.ch_names[index], []).append(name)
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
        {"criteria": {"near_silent": {}, "amplitude_outlier": {}, "partner_agreement": {}}, "action": "flag"},
        {
            "criteria": {"amplitude_outlier": {"robust_z_above": 3.0}, "mains_excess": {}, "fast_power_excess": {}},
            "action": "interpolate",
        },
        {
            "criteria": {"near_silent": {}, "amplitude_outlier": {"robust_z_above": 3.0}, "bridged_pair": {}},
            "action": "drop",
        },
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
        mains = self.criteria.mains_excess
        if mains and mains.mains_hz + MAINS_NEIGHBOURS_HZ[1] >= meta.nyquist:
            raise SpecError(
                ("criteria", "mains_excess", "mains_hz"),
                f"the mains frequency {mains.mains_hz:g} Hz and the bands beside it are not below "
                f"the Nyquist frequency of {meta.nyquist:g} Hz; remove the mains_excess criterion",
            )
        if self.criteria.fast_power_excess and meta.nyquist <= FAST_POWER_FROM_HZ + 5.0:
            raise SpecError(
                ("criteria", "fast_power_excess"),
                f"the fast_power_excess criterion measures power above {FAST_POWER_FROM_HZ:g} Hz, which needs a "
                f"Nyquist frequency above {FAST_POWER_FROM_HZ + 5.0:g} Hz (this set's is {meta.nyquist:g} Hz); "
                "remove it",
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


LEGACY_RECORD_RENAMES["bad_channels"] = legacy_record_in_current_names
