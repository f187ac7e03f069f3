"""Continuous recordings: epoching by events, and pipelines run in two stages around it.

A recording is an :class:`EpochSet` with one trial spanning the whole recording (data shape
(1, n_channels, n_samples), in V, tmin 0 s), so that every step runs on it unchanged. Steps
whose ``stage`` is "continuous" (filters, re-referencing, ...) run on the recording; the
recording is then cut into epochs around its events; the "epochs" steps run last. Within
each stage the steps keep the order the user wrote.

A session may hold several runs (recordings of one cap, one after the other). Each run is
read, renamed and described the same way, gets its own events, and runs the continuous
stage on its own; each is then epoched on its own, so that no epoch crosses from one run into
the next, and the epochs are concatenated in run order before the epochs stage.

Channel names: ``channels.rename`` renames the recording's channels first. Every other name
given with a post (the JSON spec's ``types`` and ``positions``, a channels.tsv, an
electrodes.tsv, ``events_from``) may be the channel's name in the file or its new name.
"""

import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import EpochSetFormatError, EpochSetTooLargeError
from epoch_assay.engine.io.bids_sidecars import read_channels_tsv, read_coordinate_units, read_electrodes_tsv
from epoch_assay.engine.io.channels import checked_positions, merged_positions, positions_from_montage
from epoch_assay.engine.io.detect import RECORDING_FORMATS, FileFormat, detect_format
from epoch_assay.engine.io.edf import read_continuous
from epoch_assay.engine.io.events import Events, read_events_tsv
from epoch_assay.engine.io.raw_fif import read_raw_fif
from epoch_assay.engine.io.raw_mne import ContinuousFile
from epoch_assay.engine.io.session_bundle import is_bundle, unpacked_bundle
from epoch_assay.engine.io.session_files import DATA, HEADER, MARKERS, RECORDING, RunFiles, SessionFiles
from epoch_assay.engine.io.triggers import (
    ANNOTATIONS,
    CHANNEL_PREFIX,
    EVENTS_FROM_PATTERN,
    default_trigger_channel,
    default_trigger_mask,
    trigger_events,
)
from epoch_assay.engine.io.vhdr_set import read_vhdr_set
from epoch_assay.engine.pipeline import PipelineSpec, apply_pipeline
from epoch_assay.engine.provenance import Stage, StepProvenanceBase

ChannelType = Literal["eeg", "eog", "misc", "stim"]


class EpochingSpec(BaseModel):
    """How a recording is cut into epochs: a window around each event, and which events make which condition."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    tmin: float = Field(allow_inf_nan=False, description="Start of each epoch relative to its event, s.")
    tmax: float = Field(allow_inf_nan=False, description="End of each epoch relative to its event, s (included).")
    conditions: dict[str, list[str]] = Field(min_length=1, description="Condition label → event values.")
    events_from: str | None = Field(
        None,
        pattern=EVENTS_FROM_PATTERN.pattern,
        description='"annotations", or "channel:<name>" for a trigger channel. Default: a Status/trigger '
        "channel when the recording has one, else the annotations. Not given with events.tsv files.",
    )
    trigger_mask: int | None = Field(
        None,
        ge=1,
        le=2**31 - 1,
        description="Bits of a trigger channel's codes that carry triggers (bitwise AND). Default: 65535 "
        "(0xFFFF) for BDF, every bit otherwise.",
    )

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
    rename: dict[str, str] = Field(
        default_factory=dict, description="Channel name in the file → new name; applied before everything else."
    )

    @model_validator(mode="after")
    def _renames_are_one_step(self) -> "ChannelSpec":
        targets = list(self.rename.values())
        if any(not name.strip() for name in targets):
            raise ValueError("rename gives a channel an empty name")
        repeated = sorted({name for name in targets if targets.count(name) > 1})
        if repeated:
            raise ValueError(f"rename gives more than one channel the name(s) {', '.join(repeated)}")
        chained = sorted(set(targets) & set(self.rename))
        if chained:
            raise ValueError(
                f"rename uses {', '.join(chained)} both as an old and a new name; rename each channel in one step"
            )
        return self

    def current_name(self, name: str) -> str:
        """The channel's name after renaming, whether ``name`` is its name in the file or its new one."""
        return self.rename.get(name, name)


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
class RecordingRun:
    """One run of a session: the recording (renamed and described), its events, and where they came from.

    events_from : "events.tsv", "annotations" or "channel:<name>"
    """

    recording: EpochSet
    events: Events
    file_format: FileFormat
    events_from: str


@dataclass(frozen=True)
class ContinuousInput:
    """What a run needs of a session: its runs in order, and how to epoch them."""

    runs: tuple[RecordingRun, ...]
    epoching: EpochingSpec

    @property
    def recording(self) -> EpochSet:
        """The first run's recording; every run has the same channels."""
        return self.runs[0].recording

    @property
    def file_format(self) -> FileFormat:
        return self.runs[0].file_format


@dataclass(frozen=True)
class SessionSidecars:
    """What BIDS sidecars say about the channels, by name in the file or new name."""

    types: dict[str, str]
    bads: tuple[str, ...]
    positions: dict[str, tuple[float, float, float]]


NO_SIDECARS = SessionSidecars(types={}, bads=(), positions={})


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


def check_epochs_size(n_trials: int, n_channels: int, n_times: int, max_array_bytes: int) -> None:
    """Refuse a cut whose epochs (float64, n_trials × n_channels × n_times) would exceed ``max_array_bytes``."""
    declared = n_trials * n_channels * n_times * _EPOCH_BYTES_PER_SAMPLE
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


def epoch_runs(runs: list[tuple[EpochSet, Events]], epoching: EpochingSpec) -> EpochSet:
    """Epoch each run on its own and concatenate the epochs in run order, shape (n_trials, n_channels, n_times).

    The runs must agree on channels, types and rate (checked when the session is read); bad
    channels are those of any run.
    """
    epochs = [epoch_recording(recording, events, epoching) for recording, events in runs]
    first = epochs[0]
    if len(epochs) == 1:
        return first
    differing = [i + 1 for i, each in enumerate(epochs) if each.ch_names != first.ch_names]
    if differing:
        raise EpochSetFormatError(
            "file",
            f"after the continuous steps run {differing[0]} has other channels than run 1",
            "Use steps that keep the same channels in every run",
        )
    return first.with_changes(
        data=np.concatenate([each.data for each in epochs]),
        labels=np.concatenate([each.labels for each in epochs]),
        bads=frozenset().union(*(each.bads for each in epochs)),
    )


def renamed(recording: EpochSet, channels: ChannelSpec) -> EpochSet:
    """The recording with ``channels.rename`` applied; a name it does not have is refused."""
    unknown = sorted(set(channels.rename) - set(recording.ch_names))
    if unknown:
        raise EpochSetFormatError(
            "channels",
            f"rename names channel(s) {', '.join(repr(n) for n in unknown)} that the recording does not have; "
            f"it has {', '.join(recording.ch_names)}",
            "Rename channels by their names in the file",
        )
    new_names = tuple(channels.current_name(name) for name in recording.ch_names)
    clashing = sorted({name for name in new_names if new_names.count(name) > 1})
    if clashing:
        raise EpochSetFormatError(
            "channels",
            f"after renaming, more than one channel is named {', '.join(repr(n) for n in clashing)}",
            "Give every channel a name no other channel has",
        )
    return recording.with_changes(
        ch_names=new_names, bads=frozenset(channels.current_name(name) for name in recording.bads)
    )


def apply_channel_spec(recording: EpochSet, channels: ChannelSpec, sidecars: SessionSidecars = NO_SIDECARS) -> EpochSet:
    """The recording renamed, then with the sidecars' and the spec's types, bad channels and positions.

    The spec wins over the sidecars where both name a channel; a montage fills positions still unknown.
    """
    recording = renamed(recording, channels)

    def known(names: list[str], source: str, fix: str) -> dict[str, str]:
        current = {name: channels.current_name(name) for name in names}
        unknown = sorted(name for name, new in current.items() if new not in recording.ch_names)
        if unknown:
            raise EpochSetFormatError(
                "channels",
                f"{source} names channel(s) {', '.join(repr(n) for n in unknown)} that the recording does not "
                f"have; it has {', '.join(recording.ch_names)}",
                fix,
            )
        return current

    use_names = "Use the recording's channel names (as in the file, or as renamed)"
    types = {new: sidecars.types[old] for old, new in known(list(sidecars.types), "channels.tsv", use_names).items()}
    types |= {new: channels.types[old] for old, new in known(list(channels.types), "types", use_names).items()}
    bads = frozenset(known(list(sidecars.bads), "channels.tsv", use_names).values())
    spec_positions = {channels.current_name(name): xyz for name, xyz in channels.positions.items()}
    known(list(channels.positions), "positions", use_names)
    sidecar_positions = {channels.current_name(name): xyz for name, xyz in sidecars.positions.items()}
    if sidecar_positions and not set(sidecar_positions) & set(recording.ch_names):
        raise EpochSetFormatError(
            "electrodes",
            "names none of the recording's channels",
            "Send the electrodes.tsv of this recording, or rename the channels to its names",
        )
    ch_types = tuple(types.get(name, kind) for name, kind in zip(recording.ch_names, recording.ch_types, strict=True))
    if "eeg" not in ch_types:
        raise EpochSetFormatError("channels", "leaves no channel of type 'eeg'", "Keep at least one EEG channel")
    positions = recording.positions
    for given in (sidecar_positions, spec_positions):
        explicit = np.array([given.get(name, (np.nan,) * 3) for name in recording.ch_names], dtype=float)
        positions = merged_positions(checked_positions(explicit, recording.n_channels), positions)
    if channels.montage is not None:
        from_montage = checked_positions(
            positions_from_montage(recording.ch_names, channels.montage), recording.n_channels
        )
        positions = merged_positions(positions, from_montage)
    return recording.with_changes(ch_types=ch_types, positions=positions, bads=recording.bads | bads)


def read_sidecars(session: SessionFiles) -> SessionSidecars:
    """The channel types, bad channels and positions that a session's BIDS sidecars give."""
    types: dict[str, str] = {}
    bads: tuple[str, ...] = ()
    positions: dict[str, tuple[float, float, float]] = {}
    if session.channels_tsv is not None:
        described = read_channels_tsv(session.channels_tsv)
        types, bads = described.types, described.bads
    if session.electrodes_tsv is not None:
        if session.coordsystem is None:
            raise EpochSetFormatError(
                "coordsystem",
                "an electrodes.tsv was sent without the coordsystem.json that gives its units",
                "Send the coordsystem.json in the 'coordsystem' field, with \"EEGCoordinateUnits\"",
            )
        positions = read_electrodes_tsv(session.electrodes_tsv, read_coordinate_units(session.coordsystem))
    return SessionSidecars(types=types, bads=bads, positions=positions)


def read_run_file(run: RunFiles, *, max_array_bytes: int) -> ContinuousFile:
    """Read one run's recording, whatever its format."""
    if run.file_format == FileFormat.VHDR_SET:
        with tempfile.TemporaryDirectory(prefix="epoch-assay-vhdr-") as folder:
            return read_vhdr_set(
                run.files[HEADER],
                run.files[DATA],
                run.files.get(MARKERS),
                Path(folder),
                max_array_bytes=max_array_bytes,
            )
    path = run.files[RECORDING]
    if run.file_format == FileFormat.FIF:
        return read_raw_fif(path, max_array_bytes=max_array_bytes)
    return read_continuous(path, run.file_format, max_array_bytes=max_array_bytes)


def run_events(
    continuous: ContinuousFile,
    recording: EpochSet,
    events_path: Path | None,
    epoching: EpochingSpec,
    channels: ChannelSpec,
) -> tuple[Events, str]:
    """A run's events, and where they came from (see ``EpochingSpec.events_from``)."""
    if events_path is not None:
        return read_events_tsv(events_path), "events.tsv"
    source = epoching.events_from
    if source is None:
        found = default_trigger_channel(recording)
        source = ANNOTATIONS if found is None else CHANNEL_PREFIX + found
    if source == ANNOTATIONS:
        if continuous.annotations.n_events == 0:
            raise EpochSetFormatError(
                "events",
                "the recording has no annotations and no events file was sent",
                "Send the events as an events.tsv in the 'events' field, or name a trigger channel "
                'with "events_from": "channel:<name>"',
            )
        return continuous.annotations, ANNOTATIONS
    channel = channels.current_name(source.removeprefix(CHANNEL_PREFIX))
    mask = epoching.trigger_mask if epoching.trigger_mask is not None else default_trigger_mask(continuous.file_format)
    events = trigger_events(recording, channel, mask)
    if events.n_events == 0:
        masked = "" if mask is None else f" under mask {mask:#x}"
        raise EpochSetFormatError(
            "events",
            f"trigger channel {channel!r} holds no trigger code{masked}",
            'Set "events_from" to "annotations" or another channel, change "trigger_mask", or send an events.tsv',
        )
    return events, CHANNEL_PREFIX + channel


def load_session(
    session: SessionFiles, epoching: EpochingSpec, channels: ChannelSpec, *, max_array_bytes: int
) -> ContinuousInput:
    """Read every run of a session with its events and sidecars; check that each can be epoched alike."""
    if epoching.events_from is not None and any(run.events is not None for run in session.runs):
        raise EpochSetFormatError(
            "events_from",
            f"is {epoching.events_from!r}, but events.tsv files were sent too",
            "Take the events from the events.tsv files (leave events_from out) or from the recordings (send none)",
        )
    sidecars = read_sidecars(session)
    runs: list[RecordingRun] = []
    total_bytes = 0
    planned_trials = 0
    for number, files in enumerate(session.runs, start=1):
        continuous = read_run_file(files, max_array_bytes=max_array_bytes)
        recording = apply_channel_spec(continuous.recording, channels, sidecars)
        total_bytes += recording.data.nbytes
        if total_bytes > max_array_bytes:
            raise EpochSetTooLargeError(total_bytes, max_array_bytes)
        events, events_from = run_events(continuous, recording, files.events, epoching, channels)
        _check_like_first(runs[0].recording if runs else recording, recording, number)
        plan = plan_epochs(recording, events, epoching)
        # The epochs of every run together are bounded before any is cut.
        planned_trials += plan.labels.size
        check_epochs_size(planned_trials, recording.n_channels, plan.n_times, max_array_bytes)
        runs.append(RecordingRun(recording, events, continuous.file_format, events_from))
    return ContinuousInput(runs=tuple(runs), epoching=epoching)


def _check_like_first(first: EpochSet, recording: EpochSet, number: int) -> None:
    for what, mine, theirs in (
        ("channels", recording.ch_names, first.ch_names),
        ("channel types", recording.ch_types, first.ch_types),
        ("sampling rate", recording.sfreq, first.sfreq),
    ):
        if mine != theirs:
            raise EpochSetFormatError(
                "file",
                f"run {number} has other {what} than run 1 ({mine} against {theirs})",
                "Post together only runs recorded with the same channels at the same rate (rename channels if needed)",
            )


def load_recording(
    path: Path, events_path: Path | None, epoching: EpochingSpec, channels: ChannelSpec, *, max_array_bytes: int
) -> ContinuousInput:
    """Read a stored recording: a session bundle, or a bare EDF/BDF file with an optional events.tsv."""
    if is_bundle(path):
        with unpacked_bundle(path) as session:
            return load_session(session, epoching, channels, max_array_bytes=max_array_bytes)
    run = RunFiles(detect_format(path, RECORDING_FORMATS), {RECORDING: path}, events_path)
    return load_session(SessionFiles(runs=(run,)), epoching, channels, max_array_bytes=max_array_bytes)


def apply_two_stage(pipeline: PipelineSpec, source: ContinuousInput) -> tuple[EpochSet, list[StepProvenanceBase]]:
    """Run the continuous-stage steps on each run, epoch each run, concatenate, then run the epochs-stage steps.

    With several runs, each continuous-stage record says which run (1-based) it belongs to.
    """
    continuous_steps = [step for step in pipeline.steps if step.stage == Stage.CONTINUOUS]
    epochs_steps = [step for step in pipeline.steps if step.stage != Stage.CONTINUOUS]
    processed, continuous_records = [], []
    for number, run in enumerate(source.runs, start=1):
        recording, records = apply_pipeline(pipeline.model_copy(update={"steps": continuous_steps}), run.recording)
        for record in records:
            record.stage = Stage.CONTINUOUS
            record.run = number if len(source.runs) > 1 else None
        processed.append((recording, run.events))
        continuous_records += records
    epochs = epoch_runs(processed, source.epoching)
    epochs, epochs_records = apply_pipeline(pipeline.model_copy(update={"steps": epochs_steps}), epochs)
    for record in epochs_records:
        record.stage = Stage.EPOCHS
    return epochs, continuous_records + epochs_records
