"""Two hosts sharing a blob store: an API and a worker with their own data folders, one database and one blob URL.

The shared store is a folder (file://) or moto's S3-compatible server (s3://), each a real
process setup; the worker reads through its own verified local copies. Results are compared
with the session's service on the default local folder.
"""

import hashlib
import json
import os
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path

import httpx
import pytest

from tests.service.api.helpers import SCORING, run_and_wait, upload, without_timing
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import LiveService, free_port, run_cli, start_service, wait_for_run
from tests.support.s3_server import S3Server

BUCKET = "shared-blobs"
RAW = [{"name": "raw", "steps": []}]


@dataclass
class TwoHosts:
    service: LiveService
    worker_dir: Path
    damage: Callable[[str], None]
    holds: Callable[[str], bool]


def _on_folder(root: Path) -> tuple[str, Callable[[str], None], Callable[[str], bool]]:
    """The URL of a shared folder, and how to damage a blob there and see that it is there."""
    folder = root / "shared"

    def blob(sha256: str) -> Path:
        return folder / sha256[:2] / sha256

    return folder.as_uri(), lambda sha256: blob(sha256).write_bytes(b"damaged"), lambda sha256: blob(sha256).is_file()


def _on_s3(server: S3Server) -> tuple[str, Callable[[str], None], Callable[[str], bool]]:
    """The URL of a bucket prefix on the S3 server, and how to damage a blob there and see that it is there."""
    server.create_bucket(BUCKET)
    s3 = server.client()

    def damage(sha256: str) -> None:
        s3.put_object(Bucket=BUCKET, Key=f"blobs/{sha256[:2]}/{sha256}", Body=b"damaged")

    def holds(sha256: str) -> bool:
        return s3.list_objects_v2(Bucket=BUCKET, Prefix=f"blobs/{sha256[:2]}/{sha256}")["KeyCount"] == 1

    return f"s3://{BUCKET}/blobs", damage, holds


@pytest.fixture(scope="module", params=["file", "s3"])
def two_hosts(request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory) -> Iterator[TwoHosts]:
    root = tmp_path_factory.mktemp(f"two-hosts-{request.param}")
    for host in ("api-host", "worker-host"):
        (root / host).mkdir()
    server = S3Server(root / "moto.log") if request.param == "s3" else None
    service = None
    try:
        with pytest.MonkeyPatch.context() as patch:
            if server is None:
                url, damage, holds = _on_folder(root)
            else:
                server.start()
                url, damage, holds = _on_s3(server)
                for name, value in server.env.items():
                    patch.setenv(name, value)  # the processes find the store through the standard AWS variables
            service = start_service(root / "api-host", n_workers=0, blob_url=url)
        service.env["EPOCH_ASSAY_DATABASE_URL"] = service.database_url  # the other host's worker, the same database
        service.start_worker(data_dir=root / "worker-host")
        service.wait_ready()
        yield TwoHosts(service, root / "worker-host", damage, holds)
    finally:
        if service is not None:
            service.stop()
        if server is not None:
            server.stop()


@pytest.fixture()
def shared(two_hosts: TwoHosts, study: str) -> Iterator[httpx.Client]:
    """A client of the two-host service, with a study of the same code as the local service's ``study``."""
    with two_hosts.service.client() as http:
        assert http.post("/v1/studies", json={"code": study, "title": "on two hosts"}).status_code == 201
        yield http


def _comparable(document: dict, epoch_set_id: str) -> dict:
    """A result document minus what differs between two services: timings, the run id, the epoch set's id."""
    return without_timing(json.loads(json.dumps(document).replace(epoch_set_id, "EPOCH-SET")))


def _run(client: httpx.Client, study: str, epoch_set_id: str) -> httpx.Response:
    return client.post(
        "/v1/runs", json={"study": study, "epoch_sets": [epoch_set_id], "pipelines": RAW, "scoring": SCORING}
    )


def test_an_upload_to_one_host_is_run_by_another_with_the_result_of_the_local_store(two_hosts, shared, client, study):
    content = npz_bytes(small_epochs(seed=70))
    on_two_hosts = upload(shared, study, content).json()
    on_one_host = upload(client, study, content).json()
    assert two_hosts.holds(on_two_hosts["sha256"])
    assert not (two_hosts.service.data_dir / "blobs").exists()
    documents = [
        _comparable(
            run_and_wait(http, {"study": study, "epoch_sets": [epoch_set["id"]], "pipelines": RAW, "scoring": SCORING}),
            epoch_set["id"],
        )
        for http, epoch_set in ((shared, on_two_hosts), (client, on_one_host))
    ]
    assert documents[0] == documents[1]
    sha256 = on_two_hosts["sha256"]
    assert (two_hosts.worker_dir / "blob-cache" / sha256[:2] / sha256).read_bytes() == content


def test_a_blob_damaged_in_the_shared_store_fails_its_run_naming_the_blob(two_hosts, shared, study):
    epoch_set = upload(shared, study, npz_bytes(small_epochs(seed=71))).json()
    two_hosts.damage(epoch_set["sha256"])
    state = wait_for_run(shared, _run(shared, study, epoch_set["id"]).json()["id"])
    assert state["status"] == "failed"
    assert state["error"].startswith(f"the stored file {epoch_set['sha256']} failed its integrity check")
    assert "is damaged" in state["error"] and "upload the file again" in state["error"]
    # Damage does not pass with time: the first attempt is the last.
    [(attempts,)] = two_hosts.service.query("SELECT attempts FROM jobs WHERE run_id = :run", {"run": state["id"]})
    assert attempts == 1
    for path in (
        f"/v1/runs/{state['id']}",
        f"/v1/runs/{state['id']}/result",
        f"/v1/runs/{state['id']}/report",
        f"/v1/studies/{study}/report",
        f"/v1/studies/{study}/epoch-sets/{epoch_set['id']}",
    ):
        assert shared.get(path).status_code < 500, path


@pytest.mark.parametrize("command", ["api", "worker"])
def test_an_unusable_blob_url_stops_the_process_at_start_with_one_line(tmp_path, command):
    env = {key: value for key, value in os.environ.items() if not key.startswith("EPOCH_ASSAY_")}
    env["EPOCH_ASSAY_BLOB_URL"] = "nosuch://bucket/blobs"
    port = ["--port", str(free_port())] if command == "api" else []
    finished = run_cli([command, "--data-dir", str(tmp_path), *port], env, timeout_s=60)
    assert finished.returncode != 0
    [line] = finished.stderr.strip().splitlines()
    assert line.startswith("epoch-assay: invalid settings") and "blob_url" in line
    assert "a protocol fsspec does not know ('nosuch')" in line


def test_a_store_that_cannot_keep_a_file_answers_503_and_stores_nothing(tmp_path):
    shared = tmp_path / "shared"
    (tmp_path / "host").mkdir()
    service = start_service(tmp_path / "host", n_workers=0, blob_url=shared.as_uri())
    try:
        with service.client() as http:
            assert http.post("/v1/studies", json={"code": "FULL-01", "title": "store down"}).status_code == 201
            content = npz_bytes(small_epochs(seed=72))
            # A file where the blob's folder must go: every write of this blob fails, as on a full or gone mount.
            sha256 = hashlib.sha256(content).hexdigest()
            (shared / sha256[:2]).write_bytes(b"in the way")
            refused = upload(http, "FULL-01", content)
            assert refused.status_code == 503, refused.text
            assert refused.headers["content-type"].startswith("application/problem+json")
            assert "Retry-After" in refused.headers and "nothing was stored" in refused.json()["detail"]
            assert http.get("/v1/studies/FULL-01/epoch-sets").json() == []
            (shared / sha256[:2]).unlink()
            assert upload(http, "FULL-01", content).status_code == 201
    finally:
        service.stop()


@pytest.mark.parametrize("command", ["api", "worker"])
def test_a_store_that_cannot_be_written_stops_the_process_at_start_with_one_line(tmp_path, command):
    server = S3Server(tmp_path / "moto.log")
    server.start()
    try:
        env = {key: value for key, value in os.environ.items() if not key.startswith("EPOCH_ASSAY_")}
        env |= server.env | {"EPOCH_ASSAY_BLOB_URL": "s3://no-such-bucket/blobs", "EPOCH_ASSAY_LOG_LEVEL": "WARNING"}
        port = ["--port", str(free_port())] if command == "api" else []
        finished = run_cli([command, "--data-dir", str(tmp_path), *port], env, timeout_s=120)
    finally:
        server.stop()
    assert finished.returncode != 0
    [line] = finished.stderr.strip().splitlines()
    assert line.startswith(
        "epoch-assay: cannot write to the blob store (EPOCH_ASSAY_BLOB_URL=s3://no-such-bucket/blobs)"
    )
    assert "bucket" in line and "Traceback" not in finished.stderr
