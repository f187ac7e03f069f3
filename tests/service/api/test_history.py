"""History: runs found by study, subject, session, status, pipeline and time, page by page; CSV; deletes."""

import csv
import io

import pytest

from tests.service.api.helpers import SCORING, run_and_wait, upload
from tests.support.epoch_files import CHANNELS, npz_bytes, small_epochs
from tests.support.live import wait_for_run


def _run(client, study: str, epoch_sets: list[str], pipelines: tuple[str, ...] = ("raw",)) -> dict:
    body = {
        "study": study,
        "epoch_sets": epoch_sets,
        "scoring": SCORING,
        "pipelines": [
            {"name": name, "steps": [] if name == "raw" else [{"step": "lowpass", "cutoff_hz": 30.0}]}
            for name in pipelines
        ],
    }
    answer = client.post("/v1/runs", json=body)
    assert answer.status_code == 202, answer.text
    return client.get(f"/v1/runs/{answer.json()['id']}").json()


def _ids(client, **params) -> list[str]:
    answer = client.get("/v1/runs", params=params)
    assert answer.status_code == 200, answer.text
    return [run["id"] for run in answer.json()["runs"]]


@pytest.fixture()
def history(client, study):
    """Three runs: on sub-01/ses-01, on sub-02/ses-02 (pipeline "lp30"), and on both."""
    one = upload(client, study, npz_bytes(small_epochs(seed=70)), subject="sub-01", session="ses-01").json()["id"]
    two = upload(client, study, npz_bytes(small_epochs(seed=71)), subject="sub-02", session="ses-02").json()["id"]
    return study, [_run(client, study, [one]), _run(client, study, [two], ("lp30",)), _run(client, study, [one, two])]


def test_runs_are_found_by_subject(client, history):
    study, (first, _second, both) = history
    assert _ids(client, study=study, subject="sub-01") == [both["id"], first["id"]]


def test_runs_are_found_by_session(client, history):
    study, (_first, second, both) = history
    assert _ids(client, study=study, session="ses-02") == [both["id"], second["id"]]


def test_runs_are_found_by_pipeline_name(client, history):
    study, (_first, second, _both) = history
    assert _ids(client, study=study, pipeline="lp30") == [second["id"]]


def test_runs_are_found_by_status(client, history):
    study, runs = history
    for run in runs:
        wait_for_run(client, run["id"])
    assert _ids(client, study=study, status="succeeded") == [run["id"] for run in reversed(runs)]
    assert _ids(client, study=study, status="failed") == []


def test_created_after_includes_its_bound_and_created_before_excludes_it(client, history):
    study, (first, second, both) = history
    assert _ids(client, study=study, created_after=second["created_at"]) == [both["id"], second["id"]]
    assert _ids(client, study=study, created_before=second["created_at"]) == [first["id"]]


def test_pages_follow_each_other_without_gap_or_repeat(client, history):
    study, runs = history
    runs.extend(_run(client, study, runs[0]["epoch_sets"]) for _ in range(2))
    seen, cursor, pages = [], None, 0
    while True:
        page = client.get(
            "/v1/runs", params={"study": study, "limit": 2} | ({"cursor": cursor} if cursor else {})
        ).json()
        seen.extend(run["id"] for run in page["runs"])
        pages += 1
        cursor = page["next_cursor"]
        if cursor is None:
            break
    assert pages == 3
    assert seen == [run["id"] for run in reversed(runs)]


def test_a_cursor_the_server_did_not_hand_out_is_422(client):
    answer = client.get("/v1/runs", params={"cursor": "bm90LWEtY3Vyc29y"})
    assert answer.status_code == 422 and "cursor" in answer.json()["detail"]
    assert answer.headers["content-type"].startswith("application/problem+json")


def test_a_run_lists_its_pipelines_and_epoch_sets(client, history):
    _study, (_first, second, _both) = history
    listed = client.get(f"/v1/runs/{second['id']}").json()
    assert listed["pipelines"] == ["lp30"] and len(listed["epoch_sets"]) == 1


@pytest.fixture()
def scored(client, study):
    """A succeeded run of two pipelines on two epoch sets, and its JSON result."""
    epoch_sets = [
        upload(client, study, npz_bytes(small_epochs(seed=seed)), subject=f"sub-{seed}").json()["id"]
        for seed in (72, 73)
    ]
    body = {
        "study": study,
        "epoch_sets": epoch_sets,
        "scoring": SCORING,
        "pipelines": [{"name": "raw", "steps": []}, {"name": "lp30", "steps": [{"step": "lowpass", "cutoff_hz": 30}]}],
    }
    return run_and_wait(client, body)


def _csv_rows(text: str) -> list[dict[str, str]]:
    return list(csv.DictReader(io.StringIO(text)))


def test_the_csv_result_has_one_row_per_pipeline_epoch_set_and_channel(client, scored):
    answer = client.get(f"/v1/runs/{scored['run']}/result", headers={"Accept": "text/csv"})
    assert answer.status_code == 200 and answer.headers["content-type"].startswith("text/csv")
    rows = _csv_rows(answer.text)
    assert len(rows) == 2 * 2 * len(CHANNELS)
    expected = {
        (entry["pipeline"], entry["epoch_set"], channel["name"]): channel
        for entry in scored["results"]
        for channel in entry["channels"]
    }
    assert {(row["pipeline"], row["epoch_set"], row["channel"]) for row in rows} == set(expected)
    for row in rows:
        channel = expected[(row["pipeline"], row["epoch_set"], row["channel"])]
        assert float(row["p"]) == channel["p"] and float(row["statistic"]) == channel["statistic"]
        assert row["significant"] == str(channel["significant"]).lower()


def test_format_csv_in_the_query_overrides_accept(client, scored):
    answer = client.get(
        f"/v1/runs/{scored['run']}/result", params={"format": "csv"}, headers={"Accept": "application/json"}
    )
    assert answer.headers["content-type"].startswith("text/csv")
    assert answer.text.startswith("run,study,pipeline,")


def test_an_accept_header_that_takes_neither_json_nor_csv_is_406(client, scored):
    answer = client.get(f"/v1/runs/{scored['run']}/result", headers={"Accept": "application/xml"})
    assert answer.status_code == 406 and "text/csv" in answer.json()["detail"]


def _blob(service, sha256: str):
    return service.data_dir / "blobs" / sha256[:2] / sha256


def test_an_epoch_set_a_run_refers_to_cannot_be_deleted(client, study):
    epoch_set = upload(client, study, npz_bytes(small_epochs(seed=74))).json()
    run = _run(client, study, [epoch_set["id"]])
    answer = client.delete(f"/v1/studies/{study}/epoch-sets/{epoch_set['id']}")
    assert answer.status_code == 409 and run["id"] in answer.json()["detail"]
    assert client.get(f"/v1/studies/{study}/epoch-sets/{epoch_set['id']}").status_code == 200


def test_deleting_the_run_then_the_epoch_set_removes_both_and_the_file(client, study, service):
    epoch_set = upload(client, study, npz_bytes(small_epochs(seed=75))).json()
    run = _run(client, study, [epoch_set["id"]])
    wait_for_run(client, run["id"])
    assert client.delete(f"/v1/runs/{run['id']}").status_code == 204
    assert client.get(f"/v1/runs/{run['id']}").status_code == 404
    assert client.get(f"/v1/runs/{run['id']}/result").status_code == 404
    assert client.delete(f"/v1/studies/{study}/epoch-sets/{epoch_set['id']}").status_code == 204
    assert client.get(f"/v1/studies/{study}/epoch-sets/{epoch_set['id']}").status_code == 404
    assert not _blob(service, epoch_set["sha256"]).exists()


def test_a_file_stays_while_another_study_has_the_same_bytes(client, study, service):
    other = f"{study[:50]}-twin"
    assert client.post("/v1/studies", json={"code": other, "title": "twin"}).status_code == 201
    content = npz_bytes(small_epochs(seed=76))
    mine, theirs = upload(client, study, content).json(), upload(client, other, content).json()
    assert client.delete(f"/v1/studies/{study}/epoch-sets/{mine['id']}").status_code == 204
    assert _blob(service, mine["sha256"]).exists()
    assert client.delete(f"/v1/studies/{other}/epoch-sets/{theirs['id']}").status_code == 204
    assert not _blob(service, mine["sha256"]).exists()


def test_deleting_a_run_the_worker_may_be_running_leaves_the_worker_working(client, study):
    epoch_set = upload(client, study, npz_bytes(small_epochs(seed=77))).json()["id"]
    doomed = _run(client, study, [epoch_set], ("raw", "lp30"))
    assert client.delete(f"/v1/runs/{doomed['id']}").status_code == 204
    after = run_and_wait(
        client,
        {"study": study, "epoch_sets": [epoch_set], "scoring": SCORING, "pipelines": [{"name": "raw", "steps": []}]},
    )
    assert after["results"][0]["epoch_set"] == epoch_set
