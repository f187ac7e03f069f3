"""Continuous recordings: epoching by events, and pipelines run in two stages around it.

A recording is an :class:`EpochSet` with one trial spanning the whole recording (data shape
(1, n_channels, n_samples), in V, tmin 0 s), so that every step runs on it unchanged. Steps
whose ``stage`` is "continuous" (filters, re-referencing, ...) run on the recording; the
recording is then cut into epochs around its events; the "epochs" steps run last. Within
each stage the steps keep the order the user wrote.
"""

from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import EpochSetFormatError, EpochSetTooLargeError
from epoch_assay.engine.io.channels import checked_positions, merged_positions, positions_from_montage
from epoch_assay.engine.io.detect import RECORDING_FORMATS, FileFormat, detect_format
from epoch_assay.engine.io.edf import read_continuous
from epoch_assay.engine.io.events import Events, read_events_tsv
from epoch_assay.engine.pipeline import PipelineSpec, apply_pipeline
from epoch_assay.engine.provenance import StepRecord

CONTINUOUS_STAGE = "continuous"
EPOCHS_STAGE = "epochs"
ChannelType = Literal["eeg", "eog", "misc", "stim"]


class EpochingSpec(BaseModel):
    """How a recording is cut into epochs: a window around each event, and which events make which condition."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    tmin: float = Field(allow_inf_nan=False, description="Start of each epoch relative to its event, s.")
    tmax: float = Field(allow_inf_nan=False, description="End of each epoch relative to its event, s (included).")
    conditions: dict[str, list[str]] = Field(min_length=1, description="Condition label → event values.")

    @field_validator("conditions", mode="before")
    @classmethod
    def _values_as_text(cls, conditions: object) -> object:
        # Event values are compared as text: an events.tsv or annotation has no numbers, only strings.
        if isinstance(conditions, dict):
            return {
                label: [str(value) for value in values] if isinstance(values, list) else values
                for label, values in conditions.items()
            }
        return conditions

    @model_validator(mode="after")
    def _coherent(self) -> "EpochingSpec":
        if not self.tmin < self.tmax:
            raise ValueError(f"tmin ({self.tmin:g} s) must be before tmax ({self.tmax:g} s)")
        owners: dict[str, str] = {}
        for label, values in self.conditions.items():
            if not label.strip():
                raise ValueError("a condition label is empty; give every condition a name")
            if not values:
                raise ValueError(f"condition {label!r} lists no event values; list at least one")
            for value in values:
                if value in owners and owners[value] != label:
                    raise ValueError(
                        f"event value {value!r} is listed under both {owners[value]!r} and {label!r}; "
                        "list each value under one condition"
                    )
                owners[value] = label
        return self


class ChannelSpec(BaseModel):
    """Channel types and positions given with a recording (the file's own are used otherwise)."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    types: dict[str, ChannelType] = Field(default_factory=dict, description="Channel name → type.")
    montage: str | None = Field(None, description="A standard montage by name, for the channels it knows.")
    positions: dict[str, tuple[float, float, float]] = Field(
        default_factory=dict, description="Channel name → [x, y, z], in m."
    )


@dataclass(frozen=True)
class EpochPlan:
    """Which samples of a recording become which trials.

    first_samples : array of int, shape (n_trials,), the first sample of each epoch
    labels : array of str, shape (n_trials,), the condition of each epoch
    """

    first_samples: np.ndarray
    labels: np.ndarray
    n_times: int
    tmin: float
    events_found: dict[str, int]
    dropped_at_edges: dict[str, int]


@dataclass(frozen=True)
class ContinuousInput:
    """What a run needs of a recording: the recording, its events, and how to epoch it."""

    recording: EpochSet
    events: Events
    epoching: EpochingSpec
    file_format: FileFormat


def plan_epochs(recording: EpochSet, events: Events, epoching: EpochingSpec) -> EpochPlan:
    """Place an epoch around every event that a condition names; refuse what cannot be epoched.

    Epochs that would reach past either end of the recording are left out (counted in
    ``dropped_at_edges``). Refused: events outside the recording, a condition value that no
    event has, and a condition left without trials.
    """
    n_samples, sfreq = recording.n_times, recording.sfreq
    duration_s = n_samples / sfreq
    outside = np.flatnonzero((events.onset_s < 0) | (events.onset_s >= duration_s))
    if outside.size:
        first = int(outside[0])
        raise EpochSetFormatError(
            "events",
            f"{outside.size} event(s) lie outside the recording, which lasts "
            f"{duration_s:g} s; the first is {events.values[first]!r} at "
            f"{events.onset_s[first]:g} s",
            "Check that the events file belongs to this recording and gives onsets in s from its start",
        )
    counts = events.value_counts()
    for label, values in epoching.conditions.items():
        missing = [value for value in values if value not in counts]
        if missing:
            raise EpochSetFormatError(
                "epoching",
                f"condition {label!r} maps event value(s) "
                f"{', '.join(repr(v) for v in missing)} that never occur; the "
                f"events have values {', '.join(repr(v) for v in sorted(counts))}",
                "Map each condition to event values that the events actually have",
            )
    offset_first, offset_last = round(epoching.tmin * sfreq), round(epoching.tmax * sfreq)
    label_of = {value: label for label, values in epoching.conditions.items() for value in values}
    wanted = np.array([value in label_of for value in events.values.tolist()], dtype=bool)
    onsets = np.round(events.onset_s[wanted] * sfreq).astype(int)
    labels = np.array([label_of[value] for value in events.values[wanted].tolist()], dtype=str)
    inside = (onsets + offset_first >= 0) & (onsets + offset_last < n_samples)
    found = {label: int(np.sum(labels == label)) for label in epoching.conditions}
    dropped = {label: int(np.sum((labels == label) & ~inside)) for label in epoching.conditions}
    empty = [label for label in epoching.conditions if found[label] == dropped[label]]
    if empty:
        raise EpochSetFormatError(
            "epoching",
            f"condition(s) {', '.join(repr(label) for label in empty)} have no "
            f"trials: every epoch from {epoching.tmin:g} to {epoching.tmax:g} s "
            "around their events reaches past the recording's ends",
            "Shorten the epoch window, or use a recording with room around its events",
        )
    return EpochPlan(
        first_samples=onsets[inside] + offset_first,
        labels=labels[inside],
        n_times=offset_last - offset_first + 1,
        tmin=offset_first / sfreq,
        events_found=found,
        dropped_at_edges=dropped,
    )


_EPOCH_BYTES_PER_SAMPLE = 8  # float64


def check_epochs_size(plan: EpochPlan, n_channels: int, max_array_bytes: int) -> None:
    """Refuse a cut whose epochs (float64, n_trials × n_channels × n_times) would exceed ``max_array_bytes``."""
    declared = plan.first_samples.shape[0] * n_channels * plan.n_times * _EPOCH_BYTES_PER_SAMPLE
    if declared > max_array_bytes:
        raise EpochSetTooLargeError(declared, max_array_bytes)


def epoch_recording(recording: EpochSet, events: Events, epoching: EpochingSpec) -> EpochSet:
    """Cut a one-trial recording into epochs, shape (n_trials, n_channels, n_times), in V.

    Epoch times are whole samples from the event's sample: the first is ``round(tmin * sfreq)``
    samples from it, the last ``round(tmax * sfreq)``.
    """
    plan = plan_epochs(recording, events, epoching)
    index = plan.first_samples[:, np.newaxis] + np.arange(plan.n_times)
    data = recording.data[0][:, index].transpose(1, 0, 2)
    return recording.with_changes(data=data, tmin=plan.tmin, labels=plan.labels)


def apply_channel_spec(recording: EpochSet, channels: ChannelSpec) -> EpochSet:
    """The recording with the given channel types and positions applied."""
    unknown = sorted((set(channels.types) | set(channels.positions)) - set(recording.ch_names))
    if unknown:
        raise EpochSetFormatError(
            "channels",
            f"names channel(s) {', '.join(repr(n) for n in unknown)} that the "
            f"recording does not have; it has {', '.join(recording.ch_names)}",
            "Use the recording's channel names",
        )
    ch_types = tuple(
        channels.types.get(name, kind) for name, kind in zip(recording.ch_names, recording.ch_types, strict=False)
    )
    if "eeg" not in ch_types:
        raise EpochSetFormatError("channels", "leaves no channel of type 'eeg'", "Keep at least one EEG channel")
    explicit = np.array([channels.positions.get(name, (np.nan,) * 3) for name in recording.ch_names], dtype=float)
    positions = merged_positions(recording.positions, checked_positions(explicit, recording.n_channels))
    if channels.montage is not None:
        from_montage = checked_positions(
            positions_from_montage(recording.ch_names, channels.montage), recording.n_channels
        )
        positions = merged_positions(positions, from_montage)
    return recording.with_changes(ch_types=ch_types, positions=positions)


def load_recording(
    path: Path, events_path: Path | None, epoching: EpochingSpec, channels: ChannelSpec, *, max_array_bytes: int
) -> ContinuousInput:
    """Read a recording file (EDF/BDF, told apart by content) and its events; check that it can be epoched.

    Events come from ``events_path`` (an events.tsv) when given, else from the file's annotations.
    The epochs the cut would make are bounded by ``max_array_bytes`` before any is made.
    """
    continuous = read_continuous(path, detect_format(path, RECORDING_FORMATS), max_array_bytes=max_array_bytes)
    events = read_events_tsv(events_path) if events_path is not None else continuous.annotations
    if events.n_events == 0:
        raise EpochSetFormatError(
            "events",
            "the recording has no annotations and no events file was sent",
            "Send the events as an events.tsv in the 'events' field",
        )
    recording = apply_channel_spec(continuous.recording, channels)
    check_epochs_size(plan_epochs(recording, events, epoching), recording.n_channels, max_array_bytes)
    return ContinuousInput(recording=recording, events=events, epoching=epoching, file_format=continuous.file_format)


def apply_two_stage(pipeline: PipelineSpec, source: ContinuousInput) -> tuple[EpochSet, list[StepRecord]]:
    """Run the continuous-stage steps on the recording, epoch it, then run the epochs-stage steps."""
    continuous_steps = [step for step in pipeline.steps if step.stage == CONTINUOUS_STAGE]
    epochs_steps = [step for step in pipeline.steps if step.stage != CONTINUOUS_STAGE]
    recording, continuous_records = apply_pipeline(
        pipeline.model_copy(update={"steps": continuous_steps}), source.recording
    )
    for record in continuous_records:
        record.stage = CONTINUOUS_STAGE
    epochs = epoch_recording(recording, source.events, source.epoching)
    epochs, epochs_records = apply_pipeline(pipeline.model_copy(update={"steps": epochs_steps}), epochs)
    for record in epochs_records:
        record.stage = EPOCHS_STAGE
    return epochs, continuous_records + epochs_records
