"""Sessions: several runs in one post, BIDS sidecars, renamed channels, and the stored bundle."""

import mne
import numpy as np
import pytest

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import EpochSetFormatError
from epoch_assay.engine.io.session_bundle import unpacked_bundle, write_bundle
from epoch_assay.engine.io.session_files import SessionFiles, UploadedPart, group_runs
from epoch_assay.engine.montage import builtin_montage_name
from epoch_assay.engine.pipeline import PipelineSpec, apply_pipeline
from epoch_assay.engine.recording import (
    ChannelSpec,
    EpochingSpec,
    apply_channel_spec,
    apply_two_stage,
    epoch_runs,
    load_recording,
    load_session,
)
from tests.support.recording_files import events_tsv, known_recording, recording_bytes

LIMIT = 1 << 28
EPOCHING = EpochingSpec(tmin=-0.2, tmax=0.6, conditions={"a": ["a"], "b": ["b"]})
HIGHPASS = PipelineSpec(name="hp", steps=[{"step": "highpass", "cutoff_hz": 0.5}])


def _edf(tmp_path, seed: int, name: str, **known):
    path = tmp_path / name
    path.write_bytes(recording_bytes(known_recording(seed=seed, **known), "edf"))
    return UploadedPart(path, name)


def _session(tmp_path, parts, events=(), **sidecars) -> SessionFiles:
    return SessionFiles(runs=group_runs(list(parts), list(events)), **sidecars)


def _tsv(tmp_path, name: str, text: str):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_two_runs_posted_together_give_the_trials_of_each_run_epoched_alone_and_concatenated(tmp_path):
    first, second = _edf(tmp_path, 31, "run-1.edf"), _edf(tmp_path, 32, "run-2.edf")
    together, _ = apply_two_stage(
        HIGHPASS, load_session(_session(tmp_path, [first, second]), EPOCHING, ChannelSpec(), max_array_bytes=LIMIT)
    )
    alone = [
        apply_two_stage(
            HIGHPASS, load_session(_session(tmp_path, [part]), EPOCHING, ChannelSpec(), max_array_bytes=LIMIT)
        )[0]
        for part in (first, second)
    ]
    # Reference: numpy.concatenate of each run's epochs, in run order.
    np.testing.assert_array_equal(together.data, np.concatenate([epochs.data for epochs in alone]))
    np.testing.assert_array_equal(together.labels, np.concatenate([epochs.labels for epochs in alone]))


def test_an_epoch_never_reaches_from_one_run_into_the_next(tmp_path):
    # Each 18 s run's last event is at 17 s: a window to 1.1 s after it would need the next run's samples.
    long_window = EPOCHING.model_copy(update={"tmax": 1.1})
    parts = [_edf(tmp_path, 33, "run-1.edf", seconds=18.0), _edf(tmp_path, 34, "run-2.edf", seconds=18.0)]
    source = load_session(_session(tmp_path, parts), long_window, ChannelSpec(), max_array_bytes=LIMIT)
    run = source.runs[0]
    assert run.events.onset_s[-1] + long_window.tmax > run.recording.n_times / run.recording.sfreq
    epochs = epoch_runs([(run.recording, run.events) for run in source.runs], long_window)
    assert epochs.n_trials == sum(run.events.n_events for run in source.runs) - 2


def test_continuous_steps_run_on_each_run_and_their_records_name_the_run(tmp_path):
    parts = [_edf(tmp_path, 35, "run-1.edf"), _edf(tmp_path, 36, "run-2.edf")]
    _, records = apply_two_stage(
        HIGHPASS, load_session(_session(tmp_path, parts), EPOCHING, ChannelSpec(), max_array_bytes=LIMIT)
    )
    assert [(record.step, record.run) for record in records] == [("highpass", 1), ("highpass", 2)]


def test_events_files_are_matched_to_runs_in_order_and_their_number_must_match(tmp_path):
    parts = [_edf(tmp_path, 37, "run-1.edf"), _edf(tmp_path, 38, "run-2.edf")]
    events = _tsv(tmp_path, "events.tsv", events_tsv((2.0, 3.0), ("a", "b")).decode())
    with pytest.raises(EpochSetFormatError, match="1 events file"):
        group_runs(parts, [events])


def test_a_bad_channel_in_channels_tsv_is_flagged_before_the_first_step(tmp_path):
    channels = _tsv(
        tmp_path, "channels.tsv", "name\ttype\tunits\tstatus\nFz\tEEG\tuV\tgood\nPz\tEEG\tuV\tbad\nL\tEOG\tuV\tn/a\n"
    )
    session = _session(tmp_path, [_edf(tmp_path, 39, "run.edf")], channels_tsv=channels)
    source = load_session(session, EPOCHING, ChannelSpec(), max_array_bytes=LIMIT)
    assert source.recording.bads == frozenset({"Pz"})
    assert dict(zip(source.recording.ch_names, source.recording.ch_types, strict=True))["L"] == "eog"


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("name\tunits\nFz\tuV\n", "no column"),
        ("name\ttype\nFz\tEEG\textra\n", "line 2 has 3"),
        ("name\ttype\nFz\tBRAIN\n", "not a BIDS channel type"),
        ("name\ttype\tstatus\nFz\tEEG\tbroken\n", "not good, bad or n/a"),
        ("name\ttype\nFz\tEEG\nFz\tEEG\n", "listed twice"),
        ("name\ttype\nT7\tEEG\n", "'T7'"),
    ],
)
def test_a_malformed_channels_tsv_is_refused_saying_what_is_wrong(tmp_path, text, fragment):
    session = _session(tmp_path, [_edf(tmp_path, 40, "run.edf")], channels_tsv=_tsv(tmp_path, "channels.tsv", text))
    with pytest.raises(EpochSetFormatError, match=fragment):
        load_session(session, EPOCHING, ChannelSpec(), max_array_bytes=LIMIT)


@pytest.mark.parametrize(("units", "per_metre"), [("mm", 1000.0), ("cm", 100.0), ("m", 1.0)])
def test_electrodes_tsv_positions_round_trip_in_the_units_coordsystem_declares(tmp_path, units, per_metre):
    # Reference: MNE's template 10-20 montage positions (head coordinates, m), written out and read back.
    montage = mne.channels.make_standard_montage(builtin_montage_name("standard_1020")).get_positions()["ch_pos"]
    rows = "".join(
        f"{name}\t" + "\t".join(f"{float(v) * per_metre!r}" for v in montage[name]) + "\n"
        for name in ("Fz", "Cz", "Pz")
    )
    electrodes = _tsv(tmp_path, "electrodes.tsv", "name\tx\ty\tz\n" + rows + "GND\tn/a\tn/a\tn/a\n")
    coordsystem = _tsv(
        tmp_path, "coordsystem.json", f'{{"EEGCoordinateSystem": "CapTrak", "EEGCoordinateUnits": "{units}"}}'
    )
    session = _session(tmp_path, [_edf(tmp_path, 41, "run.edf")], electrodes_tsv=electrodes, coordsystem=coordsystem)
    recording = load_session(session, EPOCHING, ChannelSpec(), max_array_bytes=LIMIT).recording
    for index, name in enumerate(("Fz", "Cz", "Pz")):
        np.testing.assert_allclose(recording.positions[index], montage[name], rtol=1e-12)
    assert np.isnan(recording.positions[3]).all()  # the EOG channel has no electrode row


def test_electrodes_without_their_coordsystem_are_refused(tmp_path):
    electrodes = _tsv(tmp_path, "electrodes.tsv", "name\tx\ty\tz\nFz\t0\t60\t80\n")
    session = _session(tmp_path, [_edf(tmp_path, 42, "run.edf")], electrodes_tsv=electrodes)
    with pytest.raises(EpochSetFormatError, match="coordsystem"):
        load_session(session, EPOCHING, ChannelSpec(), max_array_bytes=LIMIT)


def _recorded_as(names: tuple[str, ...]) -> EpochSet:
    signal = np.random.default_rng(43).normal(0.0, 1e-5, (len(names), 2000))
    return EpochSet(
        data=signal[np.newaxis],
        sfreq=100.0,
        tmin=0.0,
        ch_names=names,
        ch_types=("eeg",) * len(names),
        labels=np.array(["recording"]),
    )


def test_a_rename_map_makes_a_montage_match_and_the_rest_reference_run():
    # Names as one public motor-imagery dataset writes them (dots as padding).
    rename = {"Fc5.": "FC5", "Fcz.": "FCz", "Fc6.": "FC6", "C3..": "C3", "Cz..": "Cz", "C4..": "C4", "Pz..": "Pz"}
    recorded = tuple(rename)
    without = apply_channel_spec(_recorded_as(recorded), ChannelSpec(montage="standard_1020"))
    assert without.positions is None
    spec = ChannelSpec(montage="standard_1020", rename=rename)
    renamed = apply_channel_spec(_recorded_as(recorded), spec)
    assert np.isfinite(renamed.positions).all()
    rest = PipelineSpec(name="rest", steps=[{"step": "reference", "kind": "rest"}])
    referenced, records = apply_pipeline(rest, renamed)
    assert records[0].step == "reference" and referenced.ch_names == tuple(rename.values())


def test_types_and_positions_may_name_a_channel_by_its_file_name_or_its_new_name():
    spec = ChannelSpec(rename={"Cz..": "Cz"}, types={"Oz..": "misc", "Cz": "eog"})
    renamed = apply_channel_spec(_recorded_as(("Fz", "Cz..", "Oz..")), spec)
    assert renamed.ch_names == ("Fz", "Cz", "Oz..") and renamed.ch_types == ("eeg", "eog", "misc")


def test_an_unknown_rename_source_is_refused_naming_the_channels():
    with pytest.raises(EpochSetFormatError, match=r"'T7'.*Fz"):
        apply_channel_spec(_recorded_as(("Fz", "Cz")), ChannelSpec(rename={"T7": "T8"}))


@pytest.mark.parametrize("rename", [{"A": "C", "B": "C"}, {"A": "B", "B": "A"}, {"A": " "}])
def test_a_rename_map_that_is_not_one_step_per_channel_is_refused(rename):
    with pytest.raises(ValueError, match="rename"):
        ChannelSpec(rename=rename)


def test_a_bundle_gives_the_same_bytes_for_the_same_files_and_reads_back_as_posted(tmp_path):
    parts = [_edf(tmp_path, 44, "run-1.edf"), _edf(tmp_path, 45, "run-2.edf")]
    events = [_tsv(tmp_path, f"e{i}.tsv", events_tsv((2.0, 3.0), ("a", "b")).decode()) for i in (1, 2)]
    session = _session(tmp_path, parts, events)
    write_bundle(session, tmp_path / "one.zip")
    write_bundle(session, tmp_path / "two.zip")
    assert (tmp_path / "one.zip").read_bytes() == (tmp_path / "two.zip").read_bytes()
    with unpacked_bundle(tmp_path / "one.zip") as unpacked:
        assert [run.files["recording"].read_bytes() for run in unpacked.runs] == [p.path.read_bytes() for p in parts]
        assert [run.events.read_bytes() for run in unpacked.runs] == [e.read_bytes() for e in events]
    source = load_recording(tmp_path / "one.zip", None, EPOCHING, ChannelSpec(), max_array_bytes=LIMIT)
    assert [run.events_from for run in source.runs] == ["events.tsv", "events.tsv"]
