"""Bad input gets a clear 4xx problem+json that names the problem; nothing stored changes."""

import numpy as np
import pytest

from tests.service.api.helpers import SCORING, upload
from tests.support.epoch_files import CHANNELS, npz_bytes, raw_npz_bytes, small_epochs
from tests.support.live import start_service


def _good_arrays() -> dict:
    epochs = small_epochs(seed=10)
    return {
        "data": epochs.data,
        "sfreq": np.float64(100.0),
        "tmin": np.float64(-0.2),
        "ch_names": np.array(CHANNELS),
        "labels": epochs.labels,
    }


def _with(**changes) -> bytes:
    arrays = _good_arrays()
    for key, value in changes.items():
        if value is None:
            arrays.pop(key)
        else:
            arrays[key] = value
    return raw_npz_bytes(**arrays)


def _nan_data():
    data = _good_arrays()["data"].copy()
    data[3, 2, 5] = np.nan
    return data


BAD_FILES = {
    "wrong rank": (_with(data=np.zeros((60, 8))), "data"),
    "NaN in data": (_with(data=_nan_data()), "data"),
    "label count mismatch": (_with(labels=np.array(["a"] * 59)), "labels"),
    "duplicate channel names": (
        _with(ch_names=np.array(["Fz", "Fz", "Pz", "C3", "C4", "TP9", "TP10", "Oz"])),
        "ch_names",
    ),
    "non-positive sfreq": (_with(sfreq=np.float64(0.0)), "sfreq"),
    "microvolts declared as volts": (_with(data=_good_arrays()["data"] * 1e6), "data"),
    "missing labels": (_with(labels=None), "labels"),
    "unknown channel type": (_with(ch_types=np.array(["eeg"] * 7 + ["brain"])), "ch_types"),
    "not an npz file": (b"this is not a zip file at all", "file"),
}


@pytest.mark.parametrize("case", sorted(BAD_FILES))
def test_malformed_upload_is_refused_with_422_naming_the_field(client, study, case):
    content, field = BAD_FILES[case]
    answer = upload(client, study, content)
    assert answer.status_code == 422, answer.text
    assert answer.headers["content-type"].startswith("application/problem+json")
    problem = answer.json()
    assert problem["status"] == 422 and field in problem["detail"]
    assert client.get(f"/v1/studies/{study}/epoch-sets").json() == []


def test_upload_to_an_unknown_study_is_404(client):
    answer = upload(client, "NO-SUCH-STUDY", npz_bytes(small_epochs()))
    assert answer.status_code == 404 and "NO-SUCH-STUDY" in answer.json()["detail"]


def test_upload_without_a_subject_is_422(client, study):
    answer = client.post(f"/v1/studies/{study}/epoch-sets", files={"file": ("x.npz", npz_bytes(small_epochs()))})
    assert answer.status_code == 422 and "subject" in answer.json()["detail"]


def test_duplicate_study_code_is_409_and_the_first_study_is_kept(client, study):
    answer = client.post("/v1/studies", json={"code": study, "title": "another"})
    assert answer.status_code == 409
    assert (
        client.get(f"/v1/studies/{study}").json()["title"]
        == f"study of {test_duplicate_study_code_is_409_and_the_first_study_is_kept.__name__}"
    )


@pytest.mark.parametrize("code", ["", "-leading-dash", "has space", "x" * 65])
def test_study_code_that_breaks_the_pattern_is_422(client, code):
    assert client.post("/v1/studies", json={"code": code, "title": "t"}).status_code == 422


def _run_body(study: str, epoch_set: str, steps: list | None = None, **scoring) -> dict:
    return {
        "study": study,
        "epoch_sets": [epoch_set],
        "pipelines": [{"name": "p", "steps": steps or []}],
        "scoring": SCORING | scoring,
    }


# case: (steps of the one pipeline, changes to the scoring, text the answer must contain)
BAD_RUNS = {
    "cutoff at Nyquist": ([{"step": "highpass", "cutoff_hz": 50.0}], {}, "cutoff_hz"),
    "lowpass above Nyquist": ([{"step": "lowpass", "cutoff_hz": 80.0}], {}, "cutoff_hz"),
    "reference channel not in the set": ([{"step": "reference", "kind": "channels", "channels": ["M1"]}], {}, "M1"),
    "baseline outside the epoch": ([{"step": "baseline", "window_s": [-1.0, 0.0]}], {}, "window_s"),
    "scoring window outside the epoch": ([], {"window_s": [0.5, 2.0]}, "window_s"),
    "unknown condition": ([], {"conditions": ["a", "zzz"]}, "zzz"),
    "bootstrap asks for more trials than there are": (
        [],
        {"bootstrap": {"trials_per_condition": 500, "resamples": 100, "seed": 1}},
        "trials_per_condition",
    ),
    "unknown step": ([{"step": "make_it_significant"}], {}, "make_it_significant"),
    "high-pass whose three periods outlast the uploaded epochs": (
        [{"step": "highpass", "cutoff_hz": 1.0}],
        {},
        "/recordings",
    ),
    "bca on the significant fraction": (
        [],
        {"bootstrap": {"mode": "all", "ci": "bca", "resamples": 100}},
        "smooth statistic",
    ),
    "alpha out of range": ([], {"alpha": 1.5}, "alpha"),
}


@pytest.mark.parametrize("case", sorted(BAD_RUNS))
def test_impossible_run_spec_is_refused_at_creation_with_422(client, study, case):
    epoch_set = upload(client, study, npz_bytes(small_epochs(seed=11))).json()["id"]
    steps, scoring_changes, needle = BAD_RUNS[case]
    answer = client.post("/v1/runs", json=_run_body(study, epoch_set, steps, **scoring_changes))
    assert answer.status_code == 422, answer.text
    assert needle in answer.text
    assert client.get("/v1/runs", params={"study": study}).json()["runs"] == []


def test_run_on_an_epoch_set_of_another_study_is_422(client, study):
    other = client.post("/v1/studies", json={"code": f"{study}-other", "title": "other"})
    assert other.status_code == 201
    foreign = upload(client, f"{study}-other", npz_bytes(small_epochs(seed=12))).json()["id"]
    answer = client.post("/v1/runs", json=_run_body(study, foreign))
    assert answer.status_code == 422 and foreign in answer.json()["detail"]


def test_duplicate_pipeline_names_are_422(client, study):
    epoch_set = upload(client, study, npz_bytes(small_epochs(seed=13))).json()["id"]
    body = _run_body(study, epoch_set)
    body["pipelines"] = [{"name": "p", "steps": []}, {"name": "p", "steps": []}]
    answer = client.post("/v1/runs", json=body)
    assert answer.status_code == 422 and "unique" in answer.json()["detail"]


def test_unknown_run_is_404_and_result_of_unfinished_run_is_409(client):
    assert client.get("/v1/runs/run_doesnotexist").status_code == 404
    assert client.get("/v1/runs/run_doesnotexist/result").status_code == 404


def test_upload_over_the_size_limit_is_413(tmp_path):
    small_limit = start_service(tmp_path, n_workers=0, max_upload_bytes="20000")
    try:
        with small_limit.client() as http:
            assert http.post("/v1/studies", json={"code": "S", "title": "t"}).status_code == 201
            answer = upload(http, "S", npz_bytes(small_epochs(seed=14)))
            assert answer.status_code == 413, answer.text
            assert "EPOCH_ASSAY_MAX_UPLOAD_BYTES" in answer.json()["detail"]
            assert http.get("/v1/studies/S/epoch-sets").json() == []
    finally:
        small_limit.stop()


def test_a_method_the_path_does_not_serve_is_405_naming_every_allowed_method(client):
    answer = client.put("/v1/runs/run_doesnotexist")
    assert answer.status_code == 405
    assert {"GET", "DELETE"} <= {method.strip() for method in answer.headers["allow"].split(",")}
    assert answer.headers["content-type"].startswith("application/problem+json")


def test_a_json_body_that_is_not_json_is_400_saying_so(client):
    answer = client.post("/v1/runs", content=b"\xff\xfe not json", headers={"Content-Type": "application/json"})
    assert answer.status_code in (400, 422), answer.text
    assert "JSON" in answer.json()["detail"] or "json" in answer.json()["detail"]
