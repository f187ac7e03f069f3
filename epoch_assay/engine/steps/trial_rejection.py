"""Rejection of artifact trials by amplitude and spectral criteria.

Each criterion scores every trial on every EEG channel not marked bad and every EOG
channel, and rejects the trial if any channel passes its threshold:

``peak_to_peak_uv``
    largest minus smallest sample above the threshold, in µV (common practice).
``amplitude_z``
    robust z (median / MAD over trials, per channel) of the trial's standard deviation.
``high_frequency_z``
    robust z of log10 of the trial's power above 40 Hz (muscle, electrode noise).
``low_frequency_z``
    robust z of log10 of the trial's power between its lowest frequency bin and 3 Hz
    (movement, sweat, electrode drift).

Spectral power is taken from the Hann-tapered, mean-removed epoch.
"""

from typing import Any, ClassVar, Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, model_validator
from scipy import fft, signal

from epoch_assay.engine.epochs import TRIAL_ID_KEY, EpochSet, EpochSetMeta
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.provenance import StepOutputs, StepProvenanceBase
from epoch_assay.engine.steps.base import DataDependentField, Step
from epoch_assay.engine.steps.spectra import robust_z
from epoch_assay.engine.units import uv_to_v

HIGH_FREQUENCY_HZ = 40.0
LOW_FREQUENCY_HZ = 3.0
# Trials whose spectra are taken at once stay below this many bytes (complex128).
SPECTRUM_BLOCK_BYTES = 64 * 2**20
# A condition that loses more than this share of its trials is worth a warning.
WARN_REMOVED_FRACTION = 0.5


class TrialCriteria(BaseModel):
    """Thresholds of the criteria to apply; at least one."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    peak_to_peak_uv: float | None = Field(None, gt=0.0, allow_inf_nan=False, description="Largest range, in µV.")
    amplitude_z: float | None = Field(None, gt=0.0, allow_inf_nan=False)
    high_frequency_z: float | None = Field(None, gt=0.0, allow_inf_nan=False)
    low_frequency_z: float | None = Field(None, gt=0.0, allow_inf_nan=False)

    @model_validator(mode="after")
    def _at_least_one(self) -> "TrialCriteria":
        if all(getattr(self, name) is None for name in type(self).model_fields):
            raise ValueError(f"give at least one criterion: {', '.join(type(self).model_fields)}")
        return self


def band_power(data: np.ndarray, sfreq: float, band_hz: tuple[float, float]) -> np.ndarray:
    """Power of each trial and channel in ``band_hz`` (ends included), shape (n_trials, n_channels), in V².

    data : array, shape (n_trials, n_channels, n_times), in V
    """
    n_trials, n_channels, n_times = data.shape
    freqs = fft.rfftfreq(n_times, 1.0 / sfreq)
    in_band = (freqs >= band_hz[0]) & (freqs <= band_hz[1])
    taper = signal.windows.hann(n_times, sym=False)
    power = np.empty((n_trials, n_channels))
    trials_per_block = max(1, SPECTRUM_BLOCK_BYTES // (n_channels * freqs.size * 16))
    for start in range(0, n_trials, trials_per_block):
        block = data[start : start + trials_per_block]
        spectrum = fft.rfft((block - block.mean(axis=-1, keepdims=True)) * taper, axis=-1)
        power[start : start + trials_per_block] = np.sum(np.abs(spectrum[..., in_band]) ** 2, axis=-1)
    return power


def _lowest_bin_hz(n_times: int, sfreq: float) -> float:
    return sfreq / n_times


def rejected_trials(epochs: EpochSet, criteria: TrialCriteria) -> dict[str, np.ndarray]:
    """Boolean mask, shape (n_trials,), of the trials each criterion rejects."""
    picks = np.union1d(epochs.picks(("eeg",)), epochs.picks(("eog",)))
    data = np.asarray(epochs.data[:, picks], dtype=np.float64)
    masks: dict[str, np.ndarray] = {}
    if criteria.peak_to_peak_uv is not None:
        masks["peak_to_peak_uv"] = np.ptp(data, axis=-1).max(axis=-1) > uv_to_v(criteria.peak_to_peak_uv)
    if criteria.amplitude_z is not None:
        masks["amplitude_z"] = robust_z(data.std(axis=-1), axis=0).max(axis=-1) > criteria.amplitude_z
    if criteria.high_frequency_z is not None:
        power = band_power(data, epochs.sfreq, (HIGH_FREQUENCY_HZ, epochs.sfreq / 2.0))
        masks["high_frequency_z"] = robust_z(np.log10(power), axis=0).max(axis=-1) > criteria.high_frequency_z
    if criteria.low_frequency_z is not None:
        lowest = _lowest_bin_hz(epochs.n_times, epochs.sfreq)
        power = band_power(data, epochs.sfreq, (lowest, LOW_FREQUENCY_HZ))
        masks["low_frequency_z"] = robust_z(np.log10(power), axis=0).max(axis=-1) > criteria.low_frequency_z
    return masks


class TrialRejectionOutputs(StepOutputs):
    """What trial rejection reports."""

    trials_removed: dict[str, int] = Field(
        default_factory=dict, description="Trials removed, by condition label; conditions that lost none are left out."
    )
    trials_removed_ids: list[str] = Field(
        default_factory=list,
        description="The trial_id of each removed trial, when the upload gave trial ids (NPZ trial_id); else empty.",
    )


class TrialRejection(Step):
    """Remove trials that any chosen criterion marks as artifacts."""

    step: Literal["trial_rejection"] = "trial_rejection"
    Outputs: ClassVar[type[StepOutputs]] = TrialRejectionOutputs
    examples: ClassVar[tuple[dict[str, Any], ...]] = (
        {"criteria": {"peak_to_peak_uv": 350.0}},
        {"criteria": {"amplitude_z": 3.0, "high_frequency_z": 3.0, "low_frequency_z": 3.0}},
    )

    criteria: TrialCriteria = Field(description="Criteria and thresholds; a trial failing any is removed.")

    def check(self, meta: EpochSetMeta) -> EpochSetMeta:
        if self.criteria.high_frequency_z is not None and meta.nyquist <= HIGH_FREQUENCY_HZ + 5.0:
            raise SpecError(
                ("criteria", "high_frequency_z"),
                f"this criterion measures power above {HIGH_FREQUENCY_HZ:g} Hz, which needs a Nyquist frequency "
                f"above {HIGH_FREQUENCY_HZ + 5.0:g} Hz (this set's is {meta.nyquist:g} Hz); remove it",
            )
        if self.criteria.low_frequency_z is not None and _lowest_bin_hz(meta.n_times, meta.sfreq) > LOW_FREQUENCY_HZ:
            raise SpecError(
                ("criteria", "low_frequency_z"),
                f"an epoch of {meta.n_times / meta.sfreq:.3g} s has no frequency bin at or below "
                f"{LOW_FREQUENCY_HZ:g} Hz; use epochs of at least {1.0 / LOW_FREQUENCY_HZ:.3g} s or remove it",
            )
        return meta

    def data_dependent(self) -> frozenset[DataDependentField]:
        return frozenset({"condition_counts"})

    def apply(self, epochs: EpochSet) -> tuple[EpochSet, StepProvenanceBase]:
        masks = rejected_trials(epochs, self.criteria)
        rejected = np.logical_or.reduce(list(masks.values()))
        before = epochs.condition_counts()
        removed_labels, counts = np.unique(epochs.labels[rejected], return_counts=True)
        removed = {str(label): int(count) for label, count in zip(removed_labels, counts, strict=False)}
        warnings = [
            f"{count} of {before[label]} trials of condition {label!r} were removed "
            f"(by criterion: {', '.join(f'{name} {int(mask.sum())}' for name, mask in masks.items())}); "
            "check the thresholds"
            for label, count in removed.items()
            if count > WARN_REMOVED_FRACTION * before[label]
        ]
        ids = epochs.trial_arrays.get(TRIAL_ID_KEY)
        removed_ids = [] if ids is None else [str(value) for value in ids[rejected].tolist()]
        return epochs.select_trials(~rejected), self.record(
            trials_removed=removed, trials_removed_ids=removed_ids, warnings=warnings
        )
