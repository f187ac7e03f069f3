"""Idempotency-Key: a retried POST gets the first answer again; the same key with another body is 409."""

import threading
import uuid
from concurrent.futures import ThreadPoolExecutor

from tests.service.api.helpers import SCORING, upload
from tests.support.epoch_files import npz_bytes, small_epochs

REPLAYED = "idempotent-replayed"


def _key() -> dict[str, str]:
    return {"Idempotency-Key": str(uuid.uuid4())}


def _run_body(study: str, epoch_set: str, name: str = "raw") -> dict:
    return {"study": study, "epoch_sets": [epoch_set], "pipelines": [{"name": name, "steps": []}], "scoring": SCORING}


def test_a_retried_study_creation_returns_the_first_answer_and_creates_one_study(client, study):
    headers, body = _key(), {"code": f"{study[:50]}-i", "title": "retried"}
    first = client.post("/v1/studies", json=body, headers=headers)
    again = client.post("/v1/studies", json=body, headers=headers)
    assert (first.status_code, again.status_code) == (201, 201)
    assert again.json() == first.json() and again.headers[REPLAYED] == "true" and REPLAYED not in first.headers
    assert again.headers["location"] == first.headers["location"]
    assert [s["code"] for s in client.get("/v1/studies").json()].count(f"{study[:50]}-i") == 1


def test_the_same_key_with_another_body_is_409(client, study):
    headers = _key()
    assert (
        client.post("/v1/studies", json={"code": f"{study[:50]}-j", "title": "t"}, headers=headers).status_code == 201
    )
    answer = client.post("/v1/studies", json={"code": f"{study[:50]}-k", "title": "t"}, headers=headers)
    assert answer.status_code == 409 and "Idempotency-Key" in answer.json()["detail"]
    assert client.get(f"/v1/studies/{study}-k").status_code == 404


def test_a_retried_upload_is_replayed_although_its_multipart_boundary_differs(client, study):
    headers, content = _key(), npz_bytes(small_epochs(seed=60))
    first = client.post(
        f"/v1/studies/{study}/epoch-sets",
        data={"subject": "sub-01"},
        headers=headers,
        files={"file": ("e.npz", content)},
    )
    again = client.post(
        f"/v1/studies/{study}/epoch-sets",
        data={"subject": "sub-01"},
        headers=headers,
        files={"file": ("e.npz", content)},
    )
    assert first.request.headers["content-type"] != again.request.headers["content-type"]
    assert (first.status_code, again.status_code) == (201, 201)
    assert again.json()["id"] == first.json()["id"] and again.headers[REPLAYED] == "true"
    assert len(client.get(f"/v1/studies/{study}/epoch-sets").json()) == 1


def test_the_same_key_on_an_upload_of_other_bytes_is_409(client, study):
    headers = _key()
    assert upload(client, study, npz_bytes(small_epochs(seed=61))).status_code == 201
    first = client.post(
        f"/v1/studies/{study}/epoch-sets",
        data={"subject": "sub-02"},
        headers=headers,
        files={"file": ("e.npz", npz_bytes(small_epochs(seed=62)))},
    )
    other = client.post(
        f"/v1/studies/{study}/epoch-sets",
        data={"subject": "sub-02"},
        headers=headers,
        files={"file": ("e.npz", npz_bytes(small_epochs(seed=63)))},
    )
    assert (first.status_code, other.status_code) == (201, 409)
    assert len(client.get(f"/v1/studies/{study}/epoch-sets").json()) == 2


def test_a_retried_run_creation_queues_one_run(client, study):
    epoch_set = upload(client, study, npz_bytes(small_epochs(seed=64))).json()["id"]
    headers = _key()
    first = client.post("/v1/runs", json=_run_body(study, epoch_set), headers=headers)
    again = client.post("/v1/runs", json=_run_body(study, epoch_set), headers=headers)
    assert (first.status_code, again.status_code) == (202, 202)
    assert again.json()["id"] == first.json()["id"]
    assert [run["id"] for run in client.get("/v1/runs", params={"study": study}).json()["runs"]] == [first.json()["id"]]


def upload_with(client, study: str, content: bytes, headers: dict[str, str]):
    return client.post(
        f"/v1/studies/{study}/epoch-sets",
        data={"subject": "sub-01"},
        headers=headers,
        files={"file": ("e.npz", content)},
    )


def test_a_refused_request_is_not_kept_so_its_retry_is_carried_out(client, study):
    headers, code = _key(), f"{study[:50]}-later"
    content = npz_bytes(small_epochs(seed=65))
    refused = upload_with(client, code, content, headers)
    assert refused.status_code == 404
    assert client.post("/v1/studies", json={"code": code, "title": "made after"}).status_code == 201
    retried = upload_with(client, code, content, headers)
    assert retried.status_code == 201 and REPLAYED not in retried.headers


def test_keys_of_two_callers_do_not_collide(client, study, service):
    epoch_set = upload(client, study, npz_bytes(small_epochs(seed=66))).json()["id"]
    headers = _key()
    with service.client(service.create_key("write", study)) as writer:
        theirs = writer.post("/v1/runs", json=_run_body(study, epoch_set, "theirs"), headers=headers)
    mine = client.post("/v1/runs", json=_run_body(study, epoch_set, "mine"), headers=headers)
    assert (theirs.status_code, mine.status_code) == (202, 202)
    assert theirs.json()["id"] != mine.json()["id"]


def test_concurrent_tries_with_one_key_create_one_run(client, study, service):
    epoch_set = upload(client, study, npz_bytes(small_epochs(seed=67))).json()["id"]
    headers, start = _key(), threading.Barrier(6)

    def post(_: int):
        with service.client() as http:
            start.wait()
            return http.post("/v1/runs", json=_run_body(study, epoch_set), headers=headers)

    with ThreadPoolExecutor(max_workers=6) as pool:
        answers = list(pool.map(post, range(6)))
    assert {answer.status_code for answer in answers} == {202}
    assert len({answer.json()["id"] for answer in answers}) == 1
    assert len(client.get("/v1/runs", params={"study": study}).json()["runs"]) == 1


def test_an_idempotency_key_with_spaces_is_422(client, study):
    answer = client.post(
        "/v1/studies", json={"code": f"{study[:50]}-s", "title": "t"}, headers={"Idempotency-Key": "has spaces in it"}
    )
    assert answer.status_code == 422 and "Idempotency-Key" in answer.text
