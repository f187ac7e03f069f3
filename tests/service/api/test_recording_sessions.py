"""Recordings as labs have them, through a real server and worker: VHDR, raw FIF, BDF Status
triggers, BIDS sidecars, renamed channels and several runs in one post."""

import json

import mne
import numpy as np
import pytest
from scipy import stats

from tests.service.api.helpers import SCORING, run_and_wait
from tests.support.epoch_files import small_epochs
from tests.support.recording_files import events_tsv, known_recording, mne_epochs_bytes, recording_bytes
from tests.support.session_files import bdf_bytes, status_words, write_brainvision, write_raw_fif

EPOCHING = {"tmin": -0.2, "tmax": 0.6, "conditions": {"a": ["1"], "b": ["2"]}}
VHDR_EPOCHING = EPOCHING | {"conditions": {"a": ["Stimulus/S  1"], "b": ["Stimulus/S  2"]}}
ANNOTATION_EPOCHING = EPOCHING | {"conditions": {"a": ["a"], "b": ["b"]}}


def post_session(client, study, files: list[tuple[str, str, bytes]], epoching: dict = EPOCHING, **fields):
    """POST the ``(field, file name, bytes)`` parts as multipart, with the epoching and other text fields."""
    data = {"subject": "sub-01", "epoching": json.dumps(epoching)} | fields
    parts = [(field, (name, content, "application/octet-stream")) for field, name, content in files]
    return client.post(f"/v1/studies/{study}/recordings", data=data, files=parts)


def _brainvision_parts(tmp_path, seed: int, name: str = "rec", **known) -> list[tuple[str, str, bytes]]:
    files = write_brainvision(known_recording(seed=seed, **known), tmp_path, name)
    return [("file", path.name, path.read_bytes()) for path in files.values()]


def _welch_t_of_mne_epochs(epochs: mne.Epochs, codes: dict[str, int]) -> np.ndarray:
    # Reference: scipy.stats.ttest_ind(equal_var=False), Welch's t-test (Virtanen et al., 2020, SciPy 1.0),
    # on window means (0.3-0.5 s) of the epochs MNE cut (Gramfort et al., 2013, MNE-Python).
    data = epochs.get_data(picks="eeg", copy=True)
    window = (epochs.times >= 0.3 - 1e-9) & (epochs.times <= 0.5 + 1e-9)
    means = data[:, :, window].mean(axis=2)
    condition = epochs.events[:, 2]
    return stats.ttest_ind(means[condition == codes["a"]], means[condition == codes["b"]], equal_var=False).statistic


def _scored_t(client, study, epoch_set_id: str) -> np.ndarray:
    document = run_and_wait(
        client,
        {"study": study, "epoch_sets": [epoch_set_id], "pipelines": [{"name": "raw", "steps": []}], "scoring": SCORING},
    )
    (entry,) = document["results"]
    return np.array([channel["statistic"] for channel in entry["channels"]])


def test_a_pybv_vhdr_set_scores_as_mne_reads_and_epochs_it(client, study, tmp_path):
    files = write_brainvision(known_recording(seed=51, effect_uv=8.0), tmp_path)
    parts = [("file", path.name, path.read_bytes()) for path in files.values()]
    answer = post_session(client, study, parts, VHDR_EPOCHING)
    assert answer.status_code == 201, answer.text
    assert answer.json()["runs"][0] | {"events_found": None} == {
        "run": 1,
        "file_format": "vhdr",
        "events_from": "annotations",
        "n_trials": 16,
        "events_found": None,
        "dropped_at_edges": {"a": 0, "b": 0},
    }
    raw = mne.io.read_raw_brainvision(files["vhdr"], preload=True, verbose="error")
    events, ids = mne.events_from_annotations(raw, verbose="error")
    codes = {"a": ids["Stimulus/S  1"], "b": ids["Stimulus/S  2"]}
    reference = mne.Epochs(raw, events, codes, tmin=-0.2, tmax=0.6, baseline=None, preload=True, verbose="error")
    np.testing.assert_allclose(
        _scored_t(client, study, answer.json()["id"]), _welch_t_of_mne_epochs(reference, codes), rtol=1e-9
    )


def test_a_raw_fif_file_scores_as_mne_reads_and_epochs_it(client, study, tmp_path):
    path = write_raw_fif(known_recording(seed=52, effect_uv=8.0), tmp_path / "sub-01_raw.fif", first_samp=300)
    answer = post_session(client, study, [("file", path.name, path.read_bytes())])
    assert answer.status_code == 201, answer.text
    assert (answer.json()["file_format"], answer.json()["runs"][0]["events_from"]) == ("fif", "channel:STI 014")
    raw = mne.io.read_raw_fif(path, preload=True, verbose="error")
    events = mne.find_events(raw, stim_channel="STI 014", consecutive=True, shortest_event=1, verbose="error")
    reference = mne.Epochs(
        raw, events, {"a": 1, "b": 2}, tmin=-0.2, tmax=0.6, baseline=None, preload=True, verbose="error"
    )
    np.testing.assert_allclose(
        _scored_t(client, study, answer.json()["id"]), _welch_t_of_mne_epochs(reference, {"a": 1, "b": 2}), rtol=1e-9
    )


def test_bdf_status_triggers_give_the_events_per_condition_mne_find_events_gives(client, study, tmp_path):
    known = known_recording(seed=53)
    content = bdf_bytes(known, status_words(known, high_bits=1 << 16))
    answer = post_session(client, study, [("file", "sub-01.bdf", content)])
    assert answer.status_code == 201, answer.text
    (tmp_path / "status.bdf").write_bytes(content)
    raw = mne.io.read_raw_bdf(tmp_path / "status.bdf", verbose="error")
    # Reference: mne.find_events with the BDF trigger mask (Gramfort et al., 2013, MNE-Python).
    events = mne.find_events(raw, mask=0xFFFF, mask_type="and", consecutive=True, shortest_event=1, verbose="error")
    expected = {"a": int(np.sum(events[:, 2] == 1)), "b": int(np.sum(events[:, 2] == 2))}
    assert answer.json()["events_found"] == expected
    assert answer.json()["runs"][0]["events_from"] == "channel:Status"


def test_two_runs_in_one_post_give_one_epoch_set_with_the_trials_of_both_in_order(client, study, tmp_path):
    runs = [recording_bytes(known_recording(seed=seed), "edf") for seed in (54, 55)]
    together = post_session(
        client, study, [("file", f"run-{i}.edf", content) for i, content in enumerate(runs, 1)], ANNOTATION_EPOCHING
    )
    alone = [post_session(client, study, [("file", "run.edf", content)], ANNOTATION_EPOCHING) for content in runs]
    assert together.status_code == 201, together.text
    body = together.json()
    assert [run["run"] for run in body["runs"]] == [1, 2]
    assert body["n_trials"] == sum(answer.json()["n_trials"] for answer in alone)
    assert body["conditions"] == {
        label: sum(answer.json()["conditions"][label] for answer in alone) for label in ("a", "b")
    }


def test_runs_with_their_own_events_files_are_epoched_each_with_its_own(client, study):
    known = known_recording(seed=56)
    content = recording_bytes(known, "edf", annotate=False)
    files = [
        ("file", "run-1.edf", content),
        ("file", "run-2.edf", content),
        ("events", "run-1_events.tsv", events_tsv(known.onset_s[:4], ("a", "b", "a", "b"))),
        ("events", "run-2_events.tsv", events_tsv(known.onset_s[:6], ("a", "b") * 3)),
    ]
    answer = post_session(client, study, files, ANNOTATION_EPOCHING)
    assert answer.status_code == 201, answer.text
    assert [run["n_trials"] for run in answer.json()["runs"]] == [4, 6]


def test_sidecars_and_a_rename_map_are_applied_and_reported(client, study, tmp_path):
    channels_tsv = b"name\ttype\tunits\tstatus\nFz\tEEG\tuV\tgood\nCz\tEEG\tuV\tbad\nPz\tEEG\tuV\tgood\n"
    electrodes = b"name\tx\ty\tz\nFz\t0.3\t58.5\t66.5\nCz\t0.4\t-9.1\t100.2\nPz\t0.3\t-81.2\t82.6\n"
    coordsystem = b'{"EEGCoordinateSystem": "CapTrak", "EEGCoordinateUnits": "mm"}'
    files = [
        *_brainvision_parts(tmp_path, 57),
        ("channels", "channels.tsv", channels_tsv),
        ("electrodes", "electrodes.tsv", electrodes),
        ("coordsystem", "coordsystem.json", coordsystem),
    ]
    answer = post_session(client, study, files, VHDR_EPOCHING, channels=json.dumps({"rename": {"Pz": "POz"}}))
    assert answer.status_code == 201, answer.text
    assert answer.json()["sidecars"] == ["channels.tsv", "electrodes.tsv", "coordsystem.json"]
    document = run_and_wait(
        client,
        {
            "study": study,
            "epoch_sets": [answer.json()["id"]],
            "pipelines": [{"name": "average", "steps": [{"step": "reference", "kind": "average"}]}],
            "scoring": SCORING,
        },
    )
    (entry,) = document["results"]
    assert entry["error"] is None, entry
    assert [channel["name"] for channel in entry["channels"]] == ["Fz", "POz"]  # Cz flagged bad, not scored


def _bad_inputs(tmp_path) -> list[tuple[str, list, dict, dict, str]]:
    bv = {path_name: content for _, path_name, content in _brainvision_parts(tmp_path, 58)}
    elsewhere = bv["rec.vhdr"].replace(b"DataFile=rec.eeg", b"DataFile=../../etc/passwd")
    edf = recording_bytes(known_recording(seed=59), "edf")
    return [
        (
            "a missing member of a VHDR set",
            [("file", n, bv[n]) for n in ("rec.vhdr", "rec.vmrk")],
            VHDR_EPOCHING,
            {},
            "'rec.eeg', which was not sent",
        ),
        (
            "a header pointing elsewhere",
            [("file", "rec.vhdr", elsewhere), ("file", "rec.eeg", bv["rec.eeg"])],
            VHDR_EPOCHING,
            {},
            "points outside",
        ),
        (
            "a trigger channel that does not exist",
            [("file", "r.edf", edf)],
            ANNOTATION_EPOCHING | {"events_from": "channel:Status"},
            {},
            "'Status'",
        ),
        (
            "an unknown rename source",
            [("file", "r.edf", edf)],
            ANNOTATION_EPOCHING,
            {"channels": '{"rename": {"Oz": "O1"}}'},
            "'Oz'",
        ),
        (
            "a malformed channels.tsv",
            [("file", "r.edf", edf), ("channels", "channels.tsv", b"name\ttype\nFz\n")],
            ANNOTATION_EPOCHING,
            {},
            "channels.tsv",
        ),
        (
            "more events files than runs",
            [
                ("file", "r.edf", edf),
                ("events", "1.tsv", b"onset\tduration\ttrial_type\n2\t0\ta\n"),
                ("events", "2.tsv", b"onset\tduration\ttrial_type\n2\t0\ta\n"),
            ],
            ANNOTATION_EPOCHING,
            {},
            "2 events file(s) were sent for 1 run",
        ),
    ]


@pytest.mark.parametrize("index", range(6))
def test_a_bad_session_input_is_refused_with_422_saying_what_to_fix_and_no_server_path(client, study, tmp_path, index):
    case, files, epoching, fields, fragment = _bad_inputs(tmp_path)[index]
    answer = post_session(client, study, files, epoching, **fields)
    assert answer.status_code == 422, (case, answer.text)
    detail = answer.json()["detail"]
    assert fragment in detail, (case, detail)
    assert "/tmp" not in detail and "epoch-assay-" not in detail, (case, detail)


def test_a_channel_spec_sent_as_a_json_file_part_is_read_as_the_spec(client, study, tmp_path):
    spec = json.dumps({"rename": {"Pz": "POz"}, "types": {"Fz": "eog"}}).encode()
    files = [*_brainvision_parts(tmp_path, 60), ("channels", "channels.json", spec)]
    answer = post_session(client, study, files, VHDR_EPOCHING)
    assert answer.status_code == 201, answer.text
    assert answer.json()["ch_names"] == ["Fz", "Cz", "POz"] and answer.json()["sidecars"] == []


def test_an_epochs_file_sent_as_a_recording_is_refused_pointing_to_the_epoch_sets_route(client, study, tmp_path):
    answer = post_session(client, study, [("file", "x-epo.fif", mne_epochs_bytes(small_epochs(seed=61), tmp_path))])
    assert answer.status_code == 422 and "epoch-sets" in answer.json()["detail"]
