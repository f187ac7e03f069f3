"""Webhooks: signed events on run success and failure, retried with backoff, with a delivery log."""

import base64
import json
import time

from standardwebhooks.webhooks import Webhook, WebhookVerificationError

from tests.service.api.helpers import SCORING, upload
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import free_port, wait_for_run
from tests.support.receiver import Received, Receiver


def _hook(client, study: str, url: str, **fields) -> dict:
    answer = client.post(f"/v1/studies/{study}/webhooks", json={"url": url} | fields)
    assert answer.status_code == 201, answer.text
    return answer.json()


def _run(client, study: str, seed: int) -> tuple[str, dict]:
    epoch_set = upload(client, study, npz_bytes(small_epochs(seed=seed))).json()
    created = client.post(
        "/v1/runs",
        json={
            "study": study,
            "epoch_sets": [epoch_set["id"]],
            "scoring": SCORING,
            "pipelines": [{"name": "raw", "steps": []}],
        },
    )
    return created.json()["id"], epoch_set


def _verified(request: Received, secret: str) -> bool:
    """The check a receiver makes with a verifier the project did not write.

    Reference: the `standardwebhooks` package (Standard Webhooks specification, v1 signatures;
    it also refuses timestamps more than five minutes from its clock).
    """
    try:
        Webhook(secret).verify(request.body, dict(request.headers))
    except WebhookVerificationError:
        return False
    return True


def _deliveries(client, study: str, hook_id: str) -> list[dict]:
    answer = client.get(f"/v1/studies/{study}/webhooks/{hook_id}/deliveries")
    assert answer.status_code == 200, answer.text
    return answer.json()["deliveries"]


def _wait_for_delivery(client, study: str, hook_id: str, status: str, timeout_s: float = 60.0) -> dict:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        deliveries = _deliveries(client, study, hook_id)
        if deliveries and deliveries[0]["status"] == status:
            return deliveries[0]
        time.sleep(0.1)
    raise TimeoutError(f"no {status} delivery within {timeout_s} s: {deliveries}")


def test_a_succeeded_run_sends_an_event_whose_signature_verifies(client, study):
    with Receiver() as receiver:
        hook = _hook(client, study, receiver.url)
        run_id, _ = _run(client, study, seed=80)
        (request,) = receiver.wait_for(1)
    assert _verified(request, hook["secret"])
    assert not _verified(request, "whsec_" + "A" * 44)
    event = json.loads(request.body)
    assert event["type"] == "run.succeeded" and request.headers["epoch-assay-event"] == "run.succeeded"
    assert event["data"]["run"]["id"] == run_id and event["data"]["run"]["status"] == "succeeded"
    assert event["data"]["links"]["result"] == f"/v1/runs/{run_id}/result"


def upload_then_break(client, study: str, service) -> tuple[str, dict]:
    """A run on an epoch set whose stored file was removed behind the service's back."""
    epoch_set = upload(client, study, npz_bytes(small_epochs(seed=81))).json()
    next((service.data_dir / "blobs").glob(f"*/{epoch_set['sha256']}")).unlink()
    created = client.post(
        "/v1/runs",
        json={
            "study": study,
            "epoch_sets": [epoch_set["id"]],
            "scoring": SCORING,
            "pipelines": [{"name": "raw", "steps": []}],
        },
    )
    return created.json()["id"], epoch_set


def test_a_failed_run_sends_run_failed_with_the_reason(client, study, service):
    with Receiver() as receiver:
        hook = _hook(client, study, receiver.url)
        run_id, _ = upload_then_break(client, study, service)
        (request,) = receiver.wait_for(1)
    event = json.loads(request.body)
    assert _verified(request, hook["secret"])
    assert event["type"] == "run.failed" and event["data"]["run"]["id"] == run_id
    assert "no longer stored" in event["data"]["run"]["error"]  # the run's error in our words, without a path


def test_a_receiver_that_fails_twice_gets_the_event_on_the_third_attempt(client, study):
    with Receiver(fail_first=2) as receiver:
        hook = _hook(client, study, receiver.url)
        _run(client, study, seed=82)
        requests = receiver.wait_for(3)
        delivery = _wait_for_delivery(client, study, hook["id"], "delivered")
    assert len({request.headers["webhook-id"] for request in requests}) == 1
    assert len({json.loads(request.body)["id"] for request in requests}) == 1
    assert [attempt["status_code"] for attempt in delivery["log"]] == [500, 500, 200]
    assert delivery["attempts"] == 3 and delivery["next_attempt_at"] is None


def test_a_receiver_that_is_down_gets_the_event_once_it_is_up(client, study):
    port = free_port()
    hook = _hook(client, study, f"http://127.0.0.1:{port}/hook")
    _run(client, study, seed=83)
    deadline = time.monotonic() + 60
    while not (log := (_deliveries(client, study, hook["id"]) or [{"log": []}])[0]["log"]) or len(log) < 2:
        assert time.monotonic() < deadline, "two failed attempts were expected by now"
        time.sleep(0.05)
    assert all(attempt["status_code"] is None and attempt["error"] for attempt in log)
    with Receiver(port=port) as receiver:
        (request,) = receiver.wait_for(1)
        delivery = _wait_for_delivery(client, study, hook["id"], "delivered")
    assert json.loads(request.body)["type"] == "run.succeeded"
    assert delivery["attempts"] >= 3 and delivery["log"][-1]["status_code"] == 200


def test_a_delivery_that_keeps_failing_gives_up_after_the_last_attempt(client, study):
    with Receiver(fail_first=1000) as receiver:
        hook = _hook(client, study, receiver.url)
        _run(client, study, seed=84)
        delivery = _wait_for_delivery(client, study, hook["id"], "failed")
    assert delivery["attempts"] == 5 and len(receiver.received) == 5  # EPOCH_ASSAY_WEBHOOK_MAX_ATTEMPTS in the tests
    assert "gave up after 5 attempts" in delivery["last_error"]


def test_an_event_the_webhook_did_not_ask_for_is_not_queued(client, study):
    hook = _hook(client, study, "http://127.0.0.1:9/hook", events=["run.failed"])
    run_id, _ = _run(client, study, seed=85)
    assert wait_for_run(client, run_id)["status"] == "succeeded"
    assert _deliveries(client, study, hook["id"]) == []


def test_the_secret_is_shown_only_when_the_webhook_is_made(client, study):
    hook = _hook(client, study, "http://127.0.0.1:9/hook")
    assert hook["secret"].startswith("whsec_")
    shown = client.get(f"/v1/studies/{study}/webhooks/{hook['id']}").json()
    listed = client.get(f"/v1/studies/{study}/webhooks").json()
    assert "secret" not in shown and all("secret" not in item for item in listed)


def test_the_secret_is_whsec_and_the_base64_of_a_key_of_24_to_64_bytes(client, study):
    # Reference: Standard Webhooks specification, "Symmetric signatures": secrets are base64
    # with a whsec_ prefix, keys between 24 and 64 bytes.
    secret = _hook(client, study, "http://127.0.0.1:9/hook")["secret"]
    assert 24 <= len(base64.b64decode(secret.removeprefix("whsec_"), validate=True)) <= 64


def test_a_deleted_webhook_is_gone_with_its_log(client, study):
    hook = _hook(client, study, "http://127.0.0.1:9/hook")
    assert client.delete(f"/v1/studies/{study}/webhooks/{hook['id']}").status_code == 204
    assert client.get(f"/v1/studies/{study}/webhooks/{hook['id']}/deliveries").status_code == 404


def test_a_url_that_is_not_http_is_422(client, study):
    answer = client.post(f"/v1/studies/{study}/webhooks", json={"url": "ftp://127.0.0.1/hook"})
    assert answer.status_code == 422 and "url" in answer.json()["detail"]
