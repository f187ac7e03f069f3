"""Continuous recordings: epoching by events and the two-stage pipeline."""

import numpy as np
import pytest
from pydantic import ValidationError

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import EpochSetFormatError
from epoch_assay.engine.io.detect import FileFormat
from epoch_assay.engine.io.events import events_from_lists
from epoch_assay.engine.io.npz import read_npz, write_npz
from epoch_assay.engine.pipeline import PipelineSpec, apply_pipeline
from epoch_assay.engine.recording import (
    ChannelSpec,
    ContinuousInput,
    EpochingSpec,
    RecordingRun,
    apply_channel_spec,
    apply_two_stage,
    epoch_recording,
)

SFREQ = 100.0
EPOCHING = EpochingSpec(tmin=-0.2, tmax=0.8, conditions={"A": ["1"], "B": ["2"]})


def _recording(signal_v: np.ndarray) -> EpochSet:
    """signal_v : array, shape (n_channels, n_samples), in V"""
    names = tuple(f"E{i}" for i in range(signal_v.shape[0]))
    return EpochSet(
        data=signal_v[np.newaxis],
        sfreq=SFREQ,
        tmin=0.0,
        ch_names=names,
        ch_types=("eeg",) * len(names),
        labels=np.array(["recording"]),
    )


def _events(onsets_s: list[float]):
    return events_from_lists(
        onsets_s, [0.0] * len(onsets_s), ["1" if i % 2 == 0 else "2" for i in range(len(onsets_s))]
    )


def _one_run(recording: EpochSet, events) -> ContinuousInput:
    return ContinuousInput(runs=(RecordingRun(recording, events, FileFormat.EDF, "events.tsv"),), epoching=EPOCHING)


def _noise(seconds: float = 30.0, n_channels: int = 3) -> np.ndarray:
    return np.random.default_rng(4).normal(0, 1e-5, (n_channels, int(seconds * SFREQ)))


def test_epochs_from_the_recording_agree_with_an_npz_cut_by_hand_when_nothing_is_filtered(tmp_path):
    # Reference: plain array slicing of the known signal, written and read back as an NPZ file.
    signal = _noise()
    onsets = [2.0 + 1.5 * i for i in range(12)]
    source = _one_run(_recording(signal), _events(onsets))
    pipeline = PipelineSpec(name="baseline only", steps=[{"step": "baseline", "window_s": [-0.2, 0.0]}])
    from_recording, _ = apply_two_stage(pipeline, source)

    starts = [round(onset * SFREQ) - 20 for onset in onsets]
    by_hand = EpochSet(
        data=np.stack([signal[:, s : s + 101] for s in starts]),
        sfreq=SFREQ,
        tmin=-0.2,
        ch_names=("E0", "E1", "E2"),
        ch_types=("eeg",) * 3,
        labels=np.array(["A", "B"] * 6),
    )
    write_npz(by_hand, tmp_path / "epochs.npz")
    from_npz, _ = apply_pipeline(pipeline, read_npz(tmp_path / "epochs.npz", max_array_bytes=10**9))
    np.testing.assert_allclose(from_recording.data, from_npz.data, rtol=0, atol=1e-18)
    assert from_recording.labels.tolist() == from_npz.labels.tolist()
    assert from_recording.times == pytest.approx(from_npz.times)


def test_a_low_high_pass_on_the_recording_removes_drift_without_edge_effects_where_epochs_warn():
    # Reference: a linear-phase high-pass passes components far above its cutoff with unit gain and removes
    # those far below (Oppenheim & Schafer, Discrete-Time Signal Processing, ch. 7); 10 Hz against a 0.1 Hz
    # cutoff, a 0.01 Hz drift.
    seconds = 120.0
    times = np.arange(int(seconds * SFREQ)) / SFREQ
    wanted = 5e-6 * np.sin(2 * np.pi * 10.0 * times)
    drift = 100e-6 * np.sin(2 * np.pi * 0.01 * times)
    onsets = [30.0 + 2.0 * i for i in range(20)]
    source = _one_run(_recording(np.tile(wanted + drift, (2, 1))), _events(onsets))
    pipeline = PipelineSpec(name="hp", steps=[{"step": "highpass", "cutoff_hz": 0.1}])

    continuous, continuous_records = apply_two_stage(pipeline, source)
    epoched, epoch_records = apply_pipeline(
        pipeline, epoch_recording(source.recording, source.runs[0].events, EPOCHING)
    )
    expected = epoch_recording(_recording(np.tile(wanted, (2, 1))), source.runs[0].events, EPOCHING).data

    assert continuous_records[0].warnings == [] and epoch_records[0].warnings
    continuous_error = np.abs(continuous.data - expected).max()
    epoch_error = np.abs(epoched.data - expected).max()
    assert continuous_error < 0.05 * 5e-6
    assert epoch_error > 10 * continuous_error


def test_continuous_steps_run_first_and_each_stage_keeps_the_written_order():
    source = _one_run(_recording(_noise()), _events([2.0 + 1.5 * i for i in range(10)]))
    pipeline = PipelineSpec(
        name="mixed",
        steps=[
            {"step": "baseline", "window_s": [-0.2, 0.0]},
            {"step": "lowpass", "cutoff_hz": 30.0},
            {"step": "highpass", "cutoff_hz": 0.5},
        ],
    )
    _, records = apply_two_stage(pipeline, source)
    assert [(record.step, record.stage) for record in records] == [
        ("lowpass", "continuous"),
        ("highpass", "continuous"),
        ("baseline", "epochs"),
    ]


def test_epochs_that_reach_past_the_recording_are_left_out():
    recording = _recording(_noise(seconds=10.0))
    epochs = epoch_recording(recording, _events([0.1, 2.0, 3.0, 4.0, 9.5]), EPOCHING)
    assert epochs.n_trials == 3 and epochs.labels.tolist() == ["B", "A", "B"]


# The malformed cases of a recording and its epoching, each refused with what is wrong and how to fix it.
@pytest.mark.parametrize(
    ("onsets", "values", "epoching", "fragment"),
    [
        ([2.0, 40.0], ["1", "2"], EPOCHING, "outside the recording"),
        ([2.0, 3.0], ["1", "1"], EPOCHING, "never occur"),
        ([2.0, 9.9], ["1", "2"], EPOCHING, "have no trials"),
    ],
)
def test_an_impossible_epoching_is_refused_saying_why(onsets, values, epoching, fragment):
    events = events_from_lists(onsets, [0.0] * len(onsets), values)
    with pytest.raises(EpochSetFormatError, match=fragment):
        epoch_recording(_recording(_noise(seconds=10.0)), events, epoching)


@pytest.mark.parametrize(
    "spec",
    [
        {"tmin": 0.5, "tmax": 0.1, "conditions": {"A": ["1"]}},
        {"tmin": -0.1, "tmax": 0.5, "conditions": {}},
        {"tmin": -0.1, "tmax": 0.5, "conditions": {"A": []}},
        {"tmin": -0.1, "tmax": 0.5, "conditions": {"A": ["1"], "B": ["1"]}},
    ],
)
def test_an_incoherent_epoching_spec_is_refused(spec):
    with pytest.raises(ValidationError):
        EpochingSpec.model_validate(spec)


def test_numeric_event_values_match_their_text():
    assert EpochingSpec.model_validate({"tmin": 0, "tmax": 1, "conditions": {"A": [1, 2]}}).conditions == {
        "A": ["1", "2"]
    }


def test_channel_types_and_positions_given_with_a_recording_are_applied():
    recording = apply_channel_spec(
        _recording(_noise()), ChannelSpec(types={"E2": "eog"}, positions={"E0": (0.0, 0.08, 0.02)})
    )
    assert recording.ch_types == ("eeg", "eeg", "eog")
    np.testing.assert_array_equal(recording.positions[0], [0.0, 0.08, 0.02])
    assert np.isnan(recording.positions[1:]).all()


def test_a_channel_spec_naming_a_channel_the_recording_lacks_is_refused():
    with pytest.raises(EpochSetFormatError, match="does not have"):
        apply_channel_spec(_recording(_noise()), ChannelSpec(types={"Cz": "eog"}))
