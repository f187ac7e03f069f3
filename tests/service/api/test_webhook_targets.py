"""Webhooks reach only public addresses (or networks the operator allows), checked at registration and
again on the address each attempt connects to; a cap per study; fair delivery; generic errors in the log."""

import threading
import time

import pytest

from tests.service.api.helpers import SCORING, upload
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import LOOPBACK_NETWORK, LiveService, start_service, wait_for_run
from tests.support.receiver import Receiver

# Addresses a webhook must not reach (Python's ipaddress properties; IANA special-purpose registries,
# RFC 6890): loopback, cloud metadata (link-local), IPv6 loopback, loopback written in hex, a name
# standing for loopback, private ranges, IPv4-mapped loopback, unspecified and multicast.
INTERNAL_URLS = (
    "http://127.0.0.1:8000/hook",
    "http://169.254.169.254/latest/meta-data/",
    "http://[::1]:5432/",
    "http://0x7f000001/",
    "http://localhost:9/",
    "http://10.1.2.3/hook",
    "http://192.168.0.1/hook",
    "http://172.16.5.4/hook",
    "http://[::ffff:127.0.0.1]/hook",
    "http://0.0.0.0:80/",
    "http://224.0.0.1/",
)
# TEST-NET-1 (RFC 5737): reserved for documentation, so refused unless allowed; this server allows it.
ALLOWED_NETWORK = "192.0.2.0/24"


@pytest.fixture(scope="module")
def strict(tmp_path_factory) -> LiveService:
    """An API with one allowed network (TEST-NET-1) and at most two webhooks per study."""
    live = start_service(
        tmp_path_factory.mktemp("strict-webhooks"),
        n_workers=0,
        webhook_allowed_networks=ALLOWED_NETWORK,
        max_webhooks_per_study="2",
    )
    yield live
    live.stop()


def _study(http, code: str) -> str:
    assert http.post("/v1/studies", json={"code": code, "title": "webhooks"}).status_code == 201
    return code


@pytest.mark.parametrize("url", INTERNAL_URLS)
def test_a_webhook_to_an_internal_address_is_refused_at_registration(strict, url):
    with strict.client() as http:
        code = f"internal-{abs(hash(url)) % 10**8}"
        _study(http, code)
        answer = http.post(f"/v1/studies/{code}/webhooks", json={"url": url})
        assert answer.status_code == 422, answer.text
        assert "may not reach" in answer.text or "url" in answer.json()["detail"]
        assert http.get(f"/v1/studies/{code}/webhooks").json() == []


def test_an_address_in_an_allowed_network_is_accepted(strict):
    with strict.client() as http:
        code = _study(http, "allowed-net")
        answer = http.post(f"/v1/studies/{code}/webhooks", json={"url": "http://192.0.2.10/hook"})
        assert answer.status_code == 201, answer.text


def test_a_study_may_have_at_most_the_configured_number_of_webhooks(strict):
    with strict.client() as http:
        code = _study(http, "capped")
        for index in range(2):
            assert (
                http.post(f"/v1/studies/{code}/webhooks", json={"url": f"http://192.0.2.{index + 1}/"}).status_code
                == 201
            )
        answer = http.post(f"/v1/studies/{code}/webhooks", json={"url": "http://192.0.2.9/"})
        assert answer.status_code == 409, answer.text
        assert "EPOCH_ASSAY_MAX_WEBHOOKS_PER_STUDY" in answer.json()["detail"]
        assert len(http.get(f"/v1/studies/{code}/webhooks").json()) == 2


def _run(http, study: str, seed: int) -> str:
    epoch_set = upload(http, study, npz_bytes(small_epochs(seed=seed))).json()["id"]
    body = {"study": study, "epoch_sets": [epoch_set], "scoring": SCORING, "pipelines": [{"name": "raw", "steps": []}]}
    created = http.post("/v1/runs", json=body)
    assert created.status_code == 202, created.text
    return created.json()["id"]


def _first_attempt(http, study: str, hook: str, timeout_s: float = 60.0) -> dict:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        deliveries = http.get(f"/v1/studies/{study}/webhooks/{hook}/deliveries").json()["deliveries"]
        if deliveries and deliveries[0]["log"]:
            return deliveries[0]["log"][0]
        time.sleep(0.1)
    raise TimeoutError("no delivery attempt was logged")


def test_the_address_is_checked_again_on_each_attempt(tmp_path):
    # The API allows loopback (registration passes); the worker that sends does not: it must not connect.
    live = start_service(tmp_path, n_workers=0, webhook_allowed_networks=LOOPBACK_NETWORK)
    try:
        with Receiver() as receiver, live.client() as http:
            code = _study(http, "send-time")
            hook = http.post(f"/v1/studies/{code}/webhooks", json={"url": receiver.url}).json()["id"]
            live.env = {**live.env, "EPOCH_ASSAY_WEBHOOK_ALLOWED_NETWORKS": ""}
            live.start_worker()
            assert wait_for_run(http, _run(http, code, seed=61))["status"] == "succeeded"
            attempt = _first_attempt(http, code, hook)
            assert attempt["error"] == "not sent: the URL's host is not public"
            assert attempt["status_code"] is None
            assert receiver.received == []
    finally:
        live.stop()


def test_the_delivery_log_names_a_generic_class_of_failure(client, study):
    # 127.0.0.1:9 (discard) is closed: the attempt fails to connect; the log must not carry the OS's text.
    hook = client.post(f"/v1/studies/{study}/webhooks", json={"url": "http://127.0.0.1:9/hook"}).json()["id"]
    assert wait_for_run(client, _run(client, study, seed=62))["status"] == "succeeded"
    attempt = _first_attempt(client, study, hook)
    assert attempt["error"] == "could not connect (refused, unreachable or TLS failed)"


def test_a_slow_receiver_of_one_study_does_not_hold_up_another_study(tmp_path):
    live = start_service(tmp_path, webhook_allowed_networks=LOOPBACK_NETWORK, webhook_timeout_seconds="120")
    release = threading.Event()
    try:
        with Receiver(hold=release) as slow, Receiver() as fast, live.client() as http:
            slow_study, fast_study = _study(http, "slow-receiver"), _study(http, "fast-receiver")
            http.post(f"/v1/studies/{slow_study}/webhooks", json={"url": slow.url})
            http.post(f"/v1/studies/{fast_study}/webhooks", json={"url": fast.url})
            assert wait_for_run(http, _run(http, slow_study, seed=63))["status"] == "succeeded"
            slow.wait_for(1)  # the slow receiver holds this request unanswered until released
            assert wait_for_run(http, _run(http, fast_study, seed=64))["status"] == "succeeded"
            fast.wait_for(1)
            assert not release.is_set()  # the fast study's event arrived while the slow one was still held
    finally:
        release.set()
        live.stop()
