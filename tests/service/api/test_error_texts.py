"""Answers about the server's own trouble are in our words: no server path, no driver message."""

import hashlib

from tests.service.api.helpers import upload
from tests.support.epoch_files import npz_bytes, small_epochs


def test_a_blob_store_that_cannot_keep_a_file_answers_503_without_its_location(client, study, service):
    # A plain file where the store wants the blob's folder: keeping the upload fails inside the store.
    # (An epoch set whose hash starts with digits no stored blob has, so its folder does not exist yet.)
    for seed in range(17, 1000):
        content = npz_bytes(small_epochs(seed=seed))
        sha256 = hashlib.sha256(content).hexdigest()
        blocker = service.data_dir / "blobs" / sha256[:2]
        if not blocker.exists():
            break
    blocker.write_bytes(b"in the way")
    try:
        answer = upload(client, study, content)
        assert answer.status_code == 503, answer.text
        assert answer.headers["Retry-After"] == "30"
        assert str(service.data_dir) not in answer.text and "Errno" not in answer.text
    finally:
        blocker.unlink()
    assert upload(client, study, content).status_code == 201  # nothing was lost: the same upload now succeeds
