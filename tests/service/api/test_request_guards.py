"""Checks made before a request's body is read: the API key; and with access control off, loopback only."""

import socket

import pytest

from tests.support.live import LiveService, start_service

BODY_BYTES = 100 * 1024 * 1024  # declared, never sent: below the upload limit, so only the key can stop it


def _status_of_unfinished_upload(service: LiveService, authorization: str | None) -> int:
    """Send an upload's headers and its first KiB only; the status the server answers with before the rest."""
    boundary = "hostileboundary"
    head = (
        f"POST /v1/studies/anything/epoch-sets HTTP/1.1\r\nHost: 127.0.0.1:{service.port}\r\n"
        f"Content-Type: multipart/form-data; boundary={boundary}\r\nContent-Length: {BODY_BYTES}\r\n"
        + (f"Authorization: {authorization}\r\n" if authorization else "")
        + "\r\n"
    ).encode()
    with socket.create_connection(("127.0.0.1", service.port), timeout=30.0) as connection:
        connection.sendall(head + f"--{boundary}\r\n".encode() + bytes(1024))
        status_line = connection.makefile("rb").readline().decode()
    return int(status_line.split()[1])


@pytest.mark.parametrize("authorization", [None, "Bearer not-a-key", "Basic dXNlcjpwYXNz"])
def test_an_upload_without_a_valid_key_is_refused_before_its_body_is_read(service, authorization):
    assert _status_of_unfinished_upload(service, authorization) == 401


def test_an_unauthenticated_post_is_a_problem_document_naming_the_fix(service):
    with service.client(None) as http:
        answer = http.post("/v1/studies", json={"code": "x", "title": "y"})
    assert answer.status_code == 401 and answer.headers["content-type"].startswith("application/problem+json")
    assert "Authorization: Bearer" in answer.json()["detail"]


@pytest.fixture(scope="module")
def open_service(tmp_path_factory) -> LiveService:
    live = start_service(tmp_path_factory.mktemp("open-guards"), n_workers=0, open="1")
    yield live
    live.stop()


def test_an_open_server_answers_requests_from_programs_on_this_machine(open_service):
    with open_service.client(None) as http:
        assert http.post("/v1/studies", json={"code": "local", "title": "from a program"}).status_code == 201
        assert http.get("/v1/studies", headers={"Host": f"localhost:{open_service.port}"}).status_code == 200


@pytest.mark.parametrize("host", ["evil.example", "evil.example:8000", "192.168.1.20", "127.0.0.1.evil.example"])
def test_an_open_server_refuses_a_host_header_that_is_not_loopback(open_service, host):
    # DNS rebinding: a page of evil.example whose name now points at 127.0.0.1 still sends its own Host.
    with open_service.client(None) as http:
        answer = http.get("/v1/studies", headers={"Host": host})
    assert answer.status_code == 421, answer.text


@pytest.mark.parametrize(
    "headers",
    [{"Origin": "http://evil.example"}, {"Sec-Fetch-Site": "cross-site"}, {"Origin": "null"}],
    ids=["foreign origin", "fetch metadata cross-site", "opaque origin"],
)
def test_an_open_server_refuses_a_cross_site_post(open_service, headers):
    with open_service.client(None) as http:
        answer = http.post("/v1/studies", data={"code": "csrf", "title": "forged"}, headers=headers)
        assert answer.status_code == 403, answer.text
        assert http.get("/v1/studies/csrf").status_code == 404


def test_an_open_server_accepts_a_post_from_its_own_pages(open_service):
    with open_service.client(None) as http:
        answer = http.post(
            "/v1/studies",
            json={"code": "same-origin", "title": "from its page"},
            headers={"Origin": f"http://127.0.0.1:{open_service.port}", "Sec-Fetch-Site": "same-origin"},
        )
    assert answer.status_code == 201, answer.text
