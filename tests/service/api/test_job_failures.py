"""A job that raises ends as failed with a readable error, and the worker goes on."""

from tests.service.api.helpers import SCORING, run_and_wait, upload
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import wait_for_run


def test_a_failing_job_is_failed_with_its_reason_and_the_next_job_still_runs(client, study, service):
    broken = upload(client, study, npz_bytes(small_epochs(seed=20)), subject="sub-01").json()
    healthy = upload(client, study, npz_bytes(small_epochs(seed=21)), subject="sub-02").json()
    blob = next((service.data_dir / "blobs").glob(f"*/{broken['sha256']}"))
    blob.unlink()

    failed = client.post(
        "/v1/runs",
        json={
            "study": study,
            "epoch_sets": [broken["id"]],
            "pipelines": [{"name": "raw", "steps": []}],
            "scoring": SCORING,
        },
    )
    state = wait_for_run(client, failed.json()["id"])
    assert state["status"] == "failed"
    assert "no longer stored" in state["error"]  # in our own words, without the server path
    assert client.get(f"/v1/runs/{state['id']}/result").status_code == 409

    document = run_and_wait(
        client,
        {
            "study": study,
            "epoch_sets": [healthy["id"]],
            "pipelines": [{"name": "raw", "steps": []}],
            "scoring": SCORING,
        },
    )
    assert document["results"][0]["subject"] == "sub-02"
