"""Epoch sets from MNE epochs files and JSON bodies, and continuous recordings, through real processes."""

import json

import numpy as np
import pytest
from scipy import stats

from tests.service.api.helpers import SCORING, run_and_wait, upload
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.recording_files import events_tsv, known_recording, mne_epochs_bytes, recording_bytes

EPOCHING = {"tmin": -0.2, "tmax": 0.6, "conditions": {"a": ["a"], "b": ["b"]}}
RECORDING_SCORING = SCORING | {"window_s": [0.3, 0.5]}


def _json_body(**changes) -> dict:
    epochs = small_epochs(seed=8, n_per_condition=10)
    return {
        "data": epochs.data.tolist(),
        "sfreq": epochs.sfreq,
        "tmin": epochs.tmin,
        "ch_names": list(epochs.ch_names),
        "labels": epochs.labels.tolist(),
        "subject": "sub-02",
    } | changes


def post_recording(
    client,
    study,
    content: bytes,
    epoching: dict | str = EPOCHING,
    events: bytes | None = None,
    name: str = "recording.edf",
    **fields: str,
):
    files = {"file": (name, content, "application/octet-stream")}
    if events is not None:
        files["events"] = ("events.tsv", events, "text/tab-separated-values")
    data = {"subject": "sub-01", "epoching": epoching if isinstance(epoching, str) else json.dumps(epoching)} | fields
    return client.post(f"/v1/studies/{study}/recordings", data=data, files=files)


def test_an_mne_epochs_file_is_read_with_its_conditions_whatever_its_name(client, study, tmp_path):
    answer = upload(client, study, mne_epochs_bytes(small_epochs(seed=7), tmp_path), filename="data.npz")
    assert answer.status_code == 201, answer.text
    assert answer.json()["conditions"] == {"a": 30, "b": 30}


def test_a_json_epoch_set_is_stored_and_the_same_bytes_give_the_same_epoch_set(client, study):
    body = json.dumps(_json_body()).encode()
    headers = {"Content-Type": "application/json"}
    first = client.post(f"/v1/studies/{study}/epoch-sets", content=body, headers=headers)
    second = client.post(f"/v1/studies/{study}/epoch-sets", content=body, headers=headers)
    assert (first.status_code, second.status_code) == (201, 200), first.text
    assert first.json()["id"] == second.json()["id"]
    assert first.json()["subject"] == "sub-02" and first.json()["conditions"] == {"a": 10, "b": 10}


def test_a_json_epoch_set_without_a_subject_is_422(client, study):
    body = _json_body()
    del body["subject"]
    answer = client.post(f"/v1/studies/{study}/epoch-sets", json=body)
    assert answer.status_code == 422 and "subject" in answer.json()["detail"]


def test_a_json_body_over_the_size_cap_is_413(client, study):
    # The default JSON body cap is 8 MiB (settings table in docs/operations.md).
    answer = client.post(
        f"/v1/studies/{study}/epoch-sets",
        content=b'{"data": [' + b"0.0," * (3 * 1024 * 1024) + b"0]}",
        headers={"Content-Type": "application/json"},
    )
    assert answer.status_code == 413


def test_a_recording_answers_with_its_epochs_and_the_events_found(client, study):
    answer = post_recording(client, study, recording_bytes(known_recording(), "edf"))
    assert answer.status_code == 201, answer.text
    body = answer.json()
    assert body["source"] == "recording" and body["file_format"] == "edf"
    assert body["events_found"] == {"a": 8, "b": 8} and body["conditions"] == {"a": 8, "b": 8}
    assert (body["n_times"], body["tmin"]) == (81, pytest.approx(-0.2))


def test_the_same_recording_twice_gives_the_same_epoch_set_and_another_epoching_a_new_one(client, study):
    content = recording_bytes(known_recording(seed=1), "bdf")
    first, second = post_recording(client, study, content), post_recording(client, study, content)
    other = post_recording(client, study, content, epoching=EPOCHING | {"tmax": 0.5})
    assert (first.status_code, second.status_code, other.status_code) == (201, 200, 201)
    assert first.json()["id"] == second.json()["id"] != other.json()["id"]


def test_an_events_file_replaces_the_annotations(client, study):
    known = known_recording(seed=2)
    events = events_tsv(known.onset_s[:6], ("go",) * 3 + ("stop",) * 3)
    answer = post_recording(
        client,
        study,
        recording_bytes(known, "bdf", annotate=False),
        events=events,
        epoching={"tmin": -0.1, "tmax": 0.5, "conditions": {"a": ["go"], "b": ["stop"]}},
    )
    assert answer.status_code == 201, answer.text
    assert answer.json()["events_found"] == {"a": 3, "b": 3}


def test_a_run_on_a_recording_scores_the_epochs_the_known_signal_gives(client, study):
    known = known_recording(seed=3, effect_uv=20.0)
    epoch_set = post_recording(client, study, recording_bytes(known, "edf")).json()
    document = run_and_wait(
        client,
        {
            "study": study,
            "epoch_sets": [epoch_set["id"]],
            "pipelines": [{"name": "raw", "steps": []}],
            "scoring": RECORDING_SCORING,
        },
    )
    (entry,) = document["results"]
    starts = [round(onset * known.sfreq) - 20 for onset in known.onset_s]
    epochs = np.stack([known.signal_v[:3, s : s + 81] for s in starts])  # the EEG channels Fz, Cz, Pz
    times = -0.2 + np.arange(81) / known.sfreq
    means = epochs[:, :, (times >= 0.3 - 1e-9) & (times <= 0.5 + 1e-9)].mean(axis=2)
    labels = np.array(known.values)
    # Reference: scipy.stats.ttest_ind(equal_var=False), Welch's t-test (Virtanen et al., 2020, SciPy 1.0), on
    # the signal as written; EDF quantisation (one digital step) bounds the difference.
    expected = stats.ttest_ind(means[labels == "a"], means[labels == "b"], equal_var=False)
    np.testing.assert_allclose([c["statistic"] for c in entry["channels"]], expected.statistic, rtol=1e-3)


def test_a_run_on_a_recording_filters_before_epoching_and_says_so(client, study):
    epoch_set = post_recording(
        client, study, recording_bytes(known_recording(seed=4, seconds=40.0, n_events=30), "edf")
    ).json()
    steps = [{"step": "baseline", "window_s": [-0.2, 0.0]}, {"step": "highpass", "cutoff_hz": 0.1}]
    document = run_and_wait(
        client,
        {
            "study": study,
            "epoch_sets": [epoch_set["id"]],
            "pipelines": [{"name": "hp", "steps": steps}],
            "scoring": RECORDING_SCORING,
        },
    )
    provenance = document["results"][0]["provenance"]
    assert [(record["step"], record["stage"]) for record in provenance] == [
        ("highpass", "continuous"),
        ("baseline", "epochs"),
    ]
    assert document["results"][0]["warnings"] == []


def _rates_differ(content: bytes) -> bytes:
    changed = bytearray(content)
    n_signals = int(changed[252:256].decode())
    offset = 256 + 216 * n_signals  # samples-per-record fields (Kemp et al., 1992)
    changed[offset : offset + 8] = str(int(changed[offset : offset + 8].decode()) // 2).ljust(8).encode()
    return bytes(changed)


EDF = recording_bytes(known_recording(seconds=10.0, n_events=6), "edf")

# The malformed cases of a recording upload: each is 422 with a detail saying what is wrong.
MALFORMED_RECORDINGS = [
    ("truncated file", dict(content=EDF[:-300]), "truncated"),
    ("wrong magic", dict(content=b"RIFF" + EDF[4:]), "match none"),
    ("an epoch file sent as a recording", dict(content=b"PK\x03\x04" + EDF[4:]), "epoch-sets"),
    ("events outside the recording", dict(content=EDF, events=events_tsv((2.0, 30.0), ("a", "b"))), "outside"),
    (
        "a mapping to an event that never occurs",
        dict(content=EDF, epoching={"tmin": -0.2, "tmax": 0.6, "conditions": {"a": ["a"], "b": ["x"]}}),
        "never occur",
    ),
    ("a condition with no trials", dict(content=EDF, events=events_tsv((2.0, 9.9), ("a", "b"))), "no trials"),
    ("mismatched sampling rates", dict(content=_rates_differ(EDF)), "different rates"),
    ("an events file without a trial_type column", dict(content=EDF, events=b"onset\tduration\n1\t0\n"), "trial_type"),
    ("epoching that is not JSON", dict(content=EDF, epoching="tmin=-0.2"), "epoching"),
    (
        "epoching with tmin after tmax",
        dict(content=EDF, epoching={"tmin": 1, "tmax": 0, "conditions": {"a": ["a"]}}),
        "tmin",
    ),
    (
        "no annotations and no events file",
        dict(content=recording_bytes(known_recording(seconds=10.0, n_events=6), "edf", annotate=False)),
        "no annotations",
    ),
    ("channel types naming a missing channel", dict(content=EDF, channels='{"types": {"Oz": "eog"}}'), "Oz"),
]


@pytest.mark.parametrize(
    ("case", "arguments", "fragment"), MALFORMED_RECORDINGS, ids=[c[0] for c in MALFORMED_RECORDINGS]
)
def test_a_malformed_recording_is_refused_with_422_saying_what_is_wrong(client, study, case, arguments, fragment):
    arguments = dict(arguments)
    content = arguments.pop("content")
    answer = post_recording(client, study, content, **arguments)
    assert answer.status_code == 422, answer.text
    assert fragment in answer.json()["detail"]


def test_a_client_file_name_never_becomes_a_path(client, service, study, tmp_path):
    answer = upload(
        client, study, mne_epochs_bytes(small_epochs(seed=7), tmp_path), filename="../../../../tmp/evil-epo.fif"
    )
    assert answer.status_code == 201, answer.text
    assert not any("evil" in path.name for path in service.data_dir.rglob("*"))


def test_trial_ids_of_an_npz_name_the_trials_a_run_rejected(client, study):
    epochs = small_epochs(seed=62)
    data = epochs.data.copy()
    data[[3, 40], 0, 40:] += 300e-6  # two electrode pops, far above a 150 µV peak-to-peak limit
    ids = np.array([f"trial-{i:02d}" for i in range(epochs.n_trials)])
    with_ids = epochs.with_changes(data=data, trial_arrays={"trial_id": ids, "trial_onset_s": np.arange(60) * 2.0})
    stored = upload(client, study, npz_bytes(with_ids))
    assert stored.status_code == 201, stored.text
    step = {"step": "trial_rejection", "criteria": {"peak_to_peak_uv": 150.0}}
    document = run_and_wait(
        client,
        {
            "study": study,
            "epoch_sets": [stored.json()["id"]],
            "pipelines": [{"name": "p2p", "steps": [step]}],
            "scoring": SCORING,
        },
    )
    (record,) = document["results"][0]["provenance"]
    # Reference: numpy.ptp (Harris et al., 2020, NumPy) finds exactly the two trials given the pops.
    assert (
        record["trials_removed_ids"]
        == ids[np.ptp(data, axis=-1).max(axis=-1) > 150e-6].tolist()
        == ["trial-03", "trial-40"]
    )
