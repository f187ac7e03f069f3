"""The blob store contract, run on every store: a local folder, and fsspec URLs (file://, memory://, s3://).

The s3:// store talks to moto's S3-compatible server, a real process on 127.0.0.1. Every
expected name is the SHA-256 of the bytes as Python's hashlib computes it (standard library).
"""

import hashlib
import io
import os
import re
import threading
import uuid
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path

import pytest
from pydantic import ValidationError

from service.settings import Settings
from service.storage.blob_fsspec import FsspecBlobStore
from service.storage.blob_local import LocalBlobStore
from service.storage.blobs import BlobCorruptError, BlobStore, open_blob_store
from tests.support.s3_server import S3Server

BUCKET = "blobs"


@dataclass
class StoreUnderTest:
    """A store, a way to overwrite a stored blob's bytes, and every file or key the store holds."""

    store: BlobStore
    damage: Callable[[str, bytes], None]
    everything: Callable[[], list[str]]


@pytest.fixture(scope="session")
def s3_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[S3Server]:
    server = S3Server(tmp_path_factory.mktemp("s3") / "moto.log")
    server.start()
    try:
        server.create_bucket(BUCKET)
        with pytest.MonkeyPatch.context() as patch:
            for name, value in server.env.items():
                patch.setenv(name, value)
            yield server
    finally:
        server.stop()


def _local(tmp_path: Path) -> StoreUnderTest:
    store = LocalBlobStore(tmp_path / "blobs")
    return StoreUnderTest(
        store,
        lambda sha256, data: store.path(sha256).write_bytes(data),
        lambda: sorted(str(p) for p in store.root.rglob("*") if p.is_file()),
    )


def _fsspec(url: str, tmp_path: Path, cache_max_bytes: int = 10**9) -> StoreUnderTest:
    store = FsspecBlobStore.from_url(url, tmp_path / "blob-cache", cache_max_bytes)
    return StoreUnderTest(
        store,
        lambda sha256, data: store.fs.pipe_file(store.key(sha256), data),
        lambda: sorted(store.fs.find(store.root)),
    )


@pytest.fixture(params=["local", "file", "memory", "s3"])
def under_test(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[StoreUnderTest]:
    if request.param == "local":
        yield _local(tmp_path)
        return
    url = {
        "file": (tmp_path / "shared").as_uri(),
        "memory": f"memory://blobs-{uuid.uuid4().hex}",
        "s3": f"s3://{BUCKET}/{uuid.uuid4().hex}",
    }[request.param]
    if request.param == "s3":
        request.getfixturevalue("s3_server")
    subject = _fsspec(url, tmp_path)
    yield subject
    if request.param == "memory":
        subject.store.fs.rm(subject.store.root, recursive=True)


def _stored(store: BlobStore, content: bytes) -> str:
    with store.staged(io.BytesIO(content)) as staged:
        staged.commit()
        return staged.sha256


def _read(store: BlobStore, sha256: str) -> bytes:
    with store.local_copy(sha256) as path:
        return path.read_bytes()


class _FailingUpload(io.RawIOBase):
    """An upload whose connection drops after the first chunk."""

    def __init__(self) -> None:
        self.chunks = iter([b"x" * 1000])

    def read(self, size: int = -1) -> bytes:
        for chunk in self.chunks:
            return chunk
        raise ConnectionResetError("client went away")


def test_a_committed_blob_reads_back_under_its_sha256(under_test):
    sha256 = _stored(under_test.store, b"epochs")
    # Reference: hashlib.sha256 (Python standard library).
    assert sha256 == hashlib.sha256(b"epochs").hexdigest()
    assert under_test.store.exists(sha256)
    assert _read(under_test.store, sha256) == b"epochs"


def test_the_start_up_probe_writes_and_leaves_nothing(under_test):
    under_test.store.probe()
    assert under_test.everything() == []


def test_the_same_bytes_are_stored_once(under_test):
    first = _stored(under_test.store, b"same bytes")
    second = _stored(under_test.store, b"same bytes")
    other = _stored(under_test.store, b"other bytes")
    assert first == second != other
    assert len(under_test.everything()) == 2


def test_a_staged_blob_that_is_not_committed_leaves_nothing(under_test):
    with under_test.store.staged(io.BytesIO(b"never kept")) as staged:
        assert staged.path.read_bytes() == b"never kept"
        sha256 = staged.sha256
    assert not under_test.store.exists(sha256)
    assert under_test.everything() == []
    assert list(under_test.store.staging_dir.iterdir()) == []


def test_an_interrupted_upload_leaves_no_blob_and_no_temporary_file(under_test):
    with pytest.raises(ConnectionResetError), under_test.store.staged(_FailingUpload()) as staged:
        staged.commit()
    assert under_test.everything() == []
    assert list(under_test.store.staging_dir.iterdir()) == []


def test_a_blob_being_committed_is_never_seen_partly_written(under_test):
    store, content = under_test.store, os.urandom(20 * 1024 * 1024)
    with store.staged(io.BytesIO(content)) as staged:
        committing = threading.Thread(target=staged.commit)
        committing.start()
        seen_whole = False
        while committing.is_alive() and not seen_whole:
            # Read as soon as the name is there: a partial blob would fail its hash check.
            seen_whole = store.exists(staged.sha256) and _read(store, staged.sha256) == content
        committing.join()
    assert _read(store, staged.sha256) == content


def test_committing_twice_is_harmless_and_restores_a_removed_blob(under_test):
    store = under_test.store
    with store.staged(io.BytesIO(b"twice")) as staged:
        staged.commit()
        store.discard(staged.sha256, still_referenced=lambda: False)
        staged.commit()
    assert len(under_test.everything()) == 1
    assert _read(store, staged.sha256) == b"twice"


def test_discard_removes_a_blob_nothing_refers_to(under_test):
    sha256 = _stored(under_test.store, b"unused")
    assert under_test.store.discard(sha256, still_referenced=lambda: False)
    assert not under_test.store.exists(sha256)
    assert under_test.everything() == []


def test_discard_puts_back_a_blob_that_became_referenced_meanwhile(under_test):
    store = under_test.store
    sha256 = _stored(store, b"wanted again")
    seen_while_aside = []

    def still_referenced() -> bool:
        seen_while_aside.append(store.exists(sha256))
        return True

    assert not store.discard(sha256, still_referenced)
    assert seen_while_aside == [False]
    assert _read(store, sha256) == b"wanted again"
    assert len(under_test.everything()) == 1


def test_discard_of_a_missing_blob_does_nothing(under_test):
    assert not under_test.store.discard("0" * 64, still_referenced=lambda: False)


def test_reading_a_missing_blob_names_it(under_test):
    with pytest.raises(FileNotFoundError, match=r"No such file for blob 0{64} in "):
        _read(under_test.store, "0" * 64)


def test_a_damaged_blob_is_refused_on_read_naming_it(under_test):
    sha256 = _stored(under_test.store, b"good bytes")
    under_test.damage(sha256, b"bad bytes!")
    with pytest.raises(BlobCorruptError) as caught:
        _read(under_test.store, sha256)
    # Reference: hashlib.sha256 (Python standard library) of the damaged bytes.
    assert str(caught.value).startswith(
        f"blob {sha256} in {under_test.store.location} is damaged: its bytes hash "
        f"to {hashlib.sha256(b'bad bytes!').hexdigest()}"
    )


def test_a_name_that_is_not_a_sha256_is_refused(under_test):
    with pytest.raises(ValueError, match="lower-case hex SHA-256"):
        under_test.store.exists("../../etc/passwd")


def test_a_shared_blob_is_read_through_a_verified_local_copy_that_is_reused(tmp_path):
    store = _fsspec(f"memory://blobs-{uuid.uuid4().hex}", tmp_path).store
    sha256 = _stored(store, b"fetched once")
    assert _read(store, sha256) == b"fetched once"
    store.fs.rm_file(store.key(sha256))
    assert _read(store, sha256) == b"fetched once"
    assert list(store.cache.folder.glob("tmp/*")) == []


def test_a_damaged_local_copy_is_fetched_again(tmp_path):
    store = _fsspec(f"memory://blobs-{uuid.uuid4().hex}", tmp_path).store
    sha256 = _stored(store, b"fetched twice")
    _read(store, sha256)
    store.cache.entry(sha256).unlink()
    store.cache.entry(sha256).write_bytes(b"rotted on this disk")
    assert _read(store, sha256) == b"fetched twice"
    assert store.cache.entry(sha256).read_bytes() == b"fetched twice"


def test_the_local_copies_are_bounded_least_recently_used_out_first(tmp_path):
    store = _fsspec(f"memory://blobs-{uuid.uuid4().hex}", tmp_path, cache_max_bytes=2500).store
    names = [_stored(store, bytes([n]) * 1000) for n in range(3)]
    for name in names:
        _read(store, name)
    kept = sorted(path.name for path in store.cache.folder.glob("??/*"))
    assert kept == sorted(names[1:])
    assert _read(store, names[0]) == bytes([0]) * 1000


def test_a_local_copy_read_by_one_reader_survives_eviction_by_another(tmp_path):
    store = _fsspec(f"memory://blobs-{uuid.uuid4().hex}", tmp_path, cache_max_bytes=0).store
    first, second = _stored(store, b"first" * 100), _stored(store, b"second" * 100)
    with store.local_copy(first) as path:
        assert _read(store, second) == b"second" * 100
        assert path.read_bytes() == b"first" * 100
    assert list(store.cache.folder.glob("??/*")) == []


def test_the_settings_choose_the_store(tmp_path):
    assert isinstance(open_blob_store(Settings(data_dir=tmp_path)), LocalBlobStore)
    shared = open_blob_store(Settings(data_dir=tmp_path, blob_url=(tmp_path / "shared").as_uri()))
    assert isinstance(shared, FsspecBlobStore)
    assert shared.cache.folder == tmp_path / "blob-cache"


@pytest.mark.parametrize(
    ("url", "said"),
    [
        ("nosuch://bucket/blobs", "a protocol fsspec does not know ('nosuch')"),
        ("https://example.org/blobs", "not a place to keep blobs (protocol 'https')"),
        ("simplecache::s3://bucket", "not a place to keep blobs"),
        ("memory://blobs", "not a place to keep blobs (protocol 'memory')"),
        # gcsfs, fsspec's driver for gcs://, is not among the project's dependencies.
        ("gcs://bucket/blobs", "the driver for gcs:// URLs is not installed"),
    ],
)
def test_a_blob_url_that_cannot_keep_blobs_is_refused_with_the_reason(tmp_path, url, said):
    with pytest.raises(ValidationError, match=re.escape(said)) as caught:
        Settings(data_dir=tmp_path, blob_url=url)
    assert caught.value.errors()[0]["loc"] == ("blob_url",)
