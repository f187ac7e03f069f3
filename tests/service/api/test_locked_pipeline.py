"""Locking a study's pipeline: stored with its hash, then every new epoch set is scored with it."""

from epoch_assay.engine.pipeline import PipelineSpec
from tests.service.api.helpers import SCORING, run_and_wait, upload
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import wait_for_run

PIPELINE = {
    "name": "hp1-avg",
    "steps": [
        {"step": "highpass", "cutoff_hz": 1.0, "allow_short_epochs": True},
        {"step": "reference", "kind": "average"},
    ],
}


def runs_of(client, study) -> list[dict]:
    return client.get("/v1/runs", params={"study": study}).json()["runs"]


def test_locked_pipeline_is_stored_with_its_hash(client, study):
    answer = client.post(f"/v1/studies/{study}/locked-pipeline", json={"pipeline": PIPELINE, "scoring": SCORING})
    assert answer.status_code == 201, answer.text
    assert answer.json()["pipeline_hash"] == PipelineSpec.model_validate(PIPELINE).spec_hash()
    assert client.get(f"/v1/studies/{study}/locked-pipeline").json()["pipeline"]["name"] == "hp1-avg"


def test_a_study_without_a_locked_pipeline_answers_404(client, study):
    assert client.get(f"/v1/studies/{study}/locked-pipeline").status_code == 404


def test_each_new_epoch_set_is_scored_with_the_locked_pipeline(client, study):
    client.post(f"/v1/studies/{study}/locked-pipeline", json={"pipeline": PIPELINE, "scoring": SCORING})
    epoch_set = upload(client, study, npz_bytes(small_epochs(seed=40))).json()
    (run,) = runs_of(client, study)
    assert run["epoch_sets"] == [epoch_set["id"]] and run["pipelines"] == ["hp1-avg"]
    state = wait_for_run(client, run["id"])
    assert state["status"] == "succeeded", state
    (entry,) = client.get(f"/v1/runs/{run['id']}/result").json()["results"]
    assert entry["median_sme_uv"] and entry["channels_kept"] == 8 and entry["n_trials"] == {"a": 30, "b": 30}


def test_a_runs_selection_winner_can_be_locked(client, study):
    ids = [
        upload(client, study, npz_bytes(small_epochs(seed=50 + i)), subject=f"sub-{i + 1:02d}").json()["id"]
        for i in range(3)
    ]
    body = {
        "study": study,
        "epoch_sets": ids,
        "scoring": SCORING,
        "pipelines": [{"name": "raw", "steps": []}, PIPELINE],
        "selection": {"rule": "contrast_blind", "metric": "median_sme"},
    }
    document = run_and_wait(client, body)
    created = client.get("/v1/runs", params={"study": study}).json()["runs"][0]["id"]
    answer = client.post(f"/v1/studies/{study}/locked-pipeline", json={"run": created})
    assert answer.status_code == 201, answer.text
    assert answer.json()["pipeline"]["name"] == document["selection"]["winner"]
    assert answer.json()["source_run"] == created


def test_a_run_without_selection_has_no_winner_to_lock(client, study):
    ids = [upload(client, study, npz_bytes(small_epochs(seed=60))).json()["id"]]
    run_and_wait(client, {"study": study, "epoch_sets": ids, "scoring": SCORING, "pipelines": [PIPELINE]})
    run_id = runs_of(client, study)[0]["id"]
    answer = client.post(f"/v1/studies/{study}/locked-pipeline", json={"run": run_id})
    assert answer.status_code == 422 and "no winner" in answer.json()["detail"]


def test_a_json_epoch_set_posted_to_a_locked_study_is_scored_on_arrival(client, study):
    client.post(f"/v1/studies/{study}/locked-pipeline", json={"pipeline": PIPELINE, "scoring": SCORING})
    epochs = small_epochs(seed=41)
    body = {
        "data": epochs.data.tolist(),
        "sfreq": epochs.sfreq,
        "tmin": epochs.tmin,
        "ch_names": list(epochs.ch_names),
        "labels": epochs.labels.tolist(),
        "subject": "sub-03",
    }
    epoch_set = client.post(f"/v1/studies/{study}/epoch-sets", json=body)
    assert epoch_set.status_code == 201, epoch_set.text
    (run,) = runs_of(client, study)
    assert run["epoch_sets"] == [epoch_set.json()["id"]]
    assert wait_for_run(client, run["id"])["status"] == "succeeded"
