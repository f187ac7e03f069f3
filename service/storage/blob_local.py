"""The blob store on a local folder (the default): ``<root>/<sha[:2]>/<sha>``.

Atomic by hard links: an upload is staged in ``<root>/tmp`` (the same file system) and
linked into place whole, so a reader never sees a half-written blob and an interrupted upload
leaves nothing behind. Discarding moves the blob aside with ``os.replace`` (atomic).

Every read hashes the whole file again (about 0.08 s per 100 MB here, see
``tests/benchmarks/bench_blobs.py``), once per epoch set per run: nothing is memoised, so a
file damaged on disk after it was stored is caught on the next read.
"""

import os
import secrets
from collections.abc import Callable, Iterator
from contextlib import contextmanager, suppress
from pathlib import Path

from service.storage.blobs import BlobStore, StagedBlob, blob_not_found, check_blob_name, verify


class LocalBlobStore(BlobStore):
    def __init__(self, root: Path) -> None:
        super().__init__(f"the blob folder {root}", root / "tmp")
        self.root = root

    def path(self, sha256: str) -> Path:
        """Where the blob named ``sha256`` lives (it may not exist)."""
        return self.root / sha256[:2] / check_blob_name(sha256)

    def exists(self, sha256: str) -> bool:
        return self.path(sha256).is_file()

    def probe(self) -> None:
        probe = self.staging_dir / f"probe-{secrets.token_hex(8)}"
        probe.write_bytes(b"probe")
        probe.unlink()

    def commit(self, staged: StagedBlob) -> None:
        target = self.path(staged.sha256)
        target.parent.mkdir(parents=True, exist_ok=True)
        with suppress(FileExistsError):
            os.link(staged.path, target)

    @contextmanager
    def local_copy(self, sha256: str) -> Iterator[Path]:
        path = self.path(sha256)
        try:
            verify(path, sha256, self.location)
        except FileNotFoundError:
            raise blob_not_found(sha256, self.location) from None
        yield path

    def discard(self, sha256: str, still_referenced: Callable[[], bool]) -> bool:
        target = self.path(sha256)
        aside = self.staging_dir / f"discard-{sha256}-{secrets.token_hex(4)}"
        try:
            os.replace(target, aside)
        except FileNotFoundError:
            return False
        if still_referenced():
            os.replace(aside, target)
            return False
        aside.unlink()
        return True
