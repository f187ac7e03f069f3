"""Operations: readiness, request ids, JSON logs and Prometheus metrics."""

import json
import time

from prometheus_client.parser import text_string_to_metric_families

from tests.service.api.helpers import SCORING, run_and_wait, upload
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import wait_for_run


def test_readyz_is_200_while_a_worker_is_alive(client):
    answer = client.get("/readyz")
    assert answer.status_code == 200 and answer.json()["workers"] >= 1


def test_readyz_is_503_when_no_worker_was_heard_from(idle_service):
    with idle_service.client(token=None) as http:
        answer = http.get("/readyz")
    assert answer.status_code == 503 and "worker" in answer.json()["detail"]
    assert answer.headers["content-type"].startswith("application/problem+json")


def test_a_request_id_sent_by_the_client_is_echoed(client):
    assert client.get("/healthz", headers={"X-Request-ID": "lims-7f3a"}).headers["x-request-id"] == "lims-7f3a"


def test_a_request_without_an_id_gets_a_fresh_one(client):
    first, second = (client.get("/healthz").headers["x-request-id"] for _ in range(2))
    assert first != second and len(first) == 32


def test_an_unacceptable_request_id_is_replaced_not_echoed(client):
    answer = client.get("/healthz", headers={"X-Request-ID": "x" * 500})
    assert answer.headers["x-request-id"] != "x" * 500


def _log_entries(service, request_id: str, timeout_s: float = 10.0) -> list[dict]:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        entries = [json.loads(line) for line in service.log_path.read_text().splitlines() if line.startswith("{")]
        matching = [entry for entry in entries if entry.get("request_id") == request_id]
        if matching:
            return matching
        time.sleep(0.1)
    return []


def test_each_request_is_logged_as_one_json_line_with_its_request_id(idle_service):
    with idle_service.client() as http:
        http.get("/v1/studies/NO-SUCH", headers={"X-Request-ID": "trace-404-check"})
    (entry,) = _log_entries(idle_service, "trace-404-check")
    assert entry["logger"] == "epoch_assay.access" and entry["status"] == 404
    assert entry["route"] == "/v1/studies/{code}" and entry["caller"].startswith("key_")


def _metrics(client) -> dict[tuple[str, tuple], float]:
    answer = client.get("/metrics")
    assert answer.status_code == 200 and answer.headers["content-type"].startswith("text/plain")
    return {
        (sample.name, tuple(sorted(sample.labels.items()))): sample.value
        for family in text_string_to_metric_families(answer.text)
        for sample in family.samples
    }


def test_metrics_need_a_key(service):
    with service.client(token=None) as http:
        assert http.get("/metrics").status_code == 401


def test_metrics_count_finished_runs_and_their_durations(client, study):
    epoch_set = upload(client, study, npz_bytes(small_epochs(seed=95))).json()["id"]
    before = _metrics(client)
    run_and_wait(
        client,
        {"study": study, "epoch_sets": [epoch_set], "scoring": SCORING, "pipelines": [{"name": "raw", "steps": []}]},
    )
    after = _metrics(client)
    key = ("epoch_assay_runs_finished_total", (("status", "succeeded"),))
    duration = ("epoch_assay_run_duration_seconds_count", (("status", "succeeded"),))
    assert after[key] == before.get(key, 0) + 1
    assert after[duration] == before.get(duration, 0) + 1
    assert ("epoch_assay_queue_depth", ()) in after


def test_metrics_count_failed_runs(client, study, service):
    epoch_set = upload(client, study, npz_bytes(small_epochs(seed=96))).json()
    next((service.data_dir / "blobs").glob(f"*/{epoch_set['sha256']}")).unlink()
    before = _metrics(client)
    created = client.post(
        "/v1/runs",
        json={
            "study": study,
            "epoch_sets": [epoch_set["id"]],
            "scoring": SCORING,
            "pipelines": [{"name": "raw", "steps": []}],
        },
    )
    assert wait_for_run(client, created.json()["id"])["status"] == "failed"
    key = ("epoch_assay_runs_finished_total", (("status", "failed"),))
    assert _metrics(client)[key] == before.get(key, 0) + 1


def test_metrics_count_requests_by_route_template(client, study):
    client.get(f"/v1/studies/{study}")
    requests = _metrics(client)
    assert any(
        name == "epoch_assay_http_requests_total" and dict(labels).get("route") == "/v1/studies/{code}"
        for name, labels in requests
    )
    assert not any(dict(labels).get("route") == f"/v1/studies/{study}" for _name, labels in requests)
