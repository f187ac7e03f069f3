"""The blob store: staged uploads linked in under their hash, and removal that never strands a stored row."""

import hashlib
import io

from service.storage.blobs import BlobStore


def _stored(store: BlobStore, content: bytes) -> str:
    with store.staged(io.BytesIO(content)) as staged:
        staged.commit()
        return staged.sha256


def test_a_committed_blob_is_stored_under_its_sha256(tmp_path):
    store = BlobStore(tmp_path)
    sha256 = _stored(store, b"epochs")
    # Reference: hashlib.sha256 (Python standard library).
    assert sha256 == hashlib.sha256(b"epochs").hexdigest()
    assert store.path(sha256).read_bytes() == b"epochs"


def test_a_staged_blob_that_is_not_committed_leaves_nothing(tmp_path):
    store = BlobStore(tmp_path)
    with store.staged(io.BytesIO(b"never kept")) as staged:
        sha256 = staged.sha256
    assert not store.exists(sha256)
    assert list((tmp_path / "tmp").iterdir()) == []


def test_committing_twice_is_harmless_and_restores_a_removed_blob(tmp_path):
    store = BlobStore(tmp_path)
    with store.staged(io.BytesIO(b"twice")) as staged:
        staged.commit()
        store.discard(staged.sha256, still_referenced=lambda: False)
        staged.commit()
    assert store.path(staged.sha256).read_bytes() == b"twice"


def test_discard_removes_a_blob_nothing_refers_to(tmp_path):
    store = BlobStore(tmp_path)
    sha256 = _stored(store, b"unused")
    assert store.discard(sha256, still_referenced=lambda: False)
    assert not store.exists(sha256)
    assert list((tmp_path / "tmp").iterdir()) == []


def test_discard_puts_back_a_blob_that_became_referenced_meanwhile(tmp_path):
    store = BlobStore(tmp_path)
    sha256 = _stored(store, b"wanted again")
    seen_while_aside = []

    def still_referenced() -> bool:
        seen_while_aside.append(store.exists(sha256))
        return True

    assert not store.discard(sha256, still_referenced)
    assert seen_while_aside == [False]
    assert store.path(sha256).read_bytes() == b"wanted again"


def test_discard_of_a_missing_blob_does_nothing(tmp_path):
    assert not BlobStore(tmp_path).discard("0" * 64, still_referenced=lambda: False)
