"""Local copies of blobs from a shared store, by content, bounded in bytes, least recently used out first.

A copy is kept as ``<folder>/<sha[:2]>/<sha>`` only after its bytes hashed to its name, and it
is hashed again on every later read (a file on this disk can be damaged too); a cached copy
that fails is dropped and fetched again. Readers get a private hard link in ``<folder>/tmp``,
so another process evicting the entry meanwhile does not take the file away from them.

The cache is shared by the processes of one host (one ``data_dir``). After each fetch,
entries are deleted, least recently used first, until the rest fit in ``max_bytes``;
``max_bytes=0`` keeps no copy past the read that fetched it. Files a process left in ``tmp``
when it was killed are not counted and not cleaned up.
"""

import os
import secrets
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path

from service.storage.blobs import file_sha256, verify


class BlobReadCache:
    def __init__(self, folder: Path, max_bytes: int) -> None:
        self.folder = folder
        self.max_bytes = max_bytes
        self._tmp = folder / "tmp"
        self._tmp.mkdir(parents=True, exist_ok=True)

    @contextmanager
    def copy(self, sha256: str, fetch: Callable[[Path], None], location: str) -> Iterator[Path]:
        """A verified local file with the blob's bytes for the ``with`` block; ``fetch(dest)`` downloads it.

        Raises ``BlobCorruptError`` (naming ``location``) when freshly fetched bytes do not
        hash to ``sha256``.
        """
        reading = self._tmp / f"read-{sha256}-{secrets.token_hex(4)}"
        try:
            if not self._reuse(sha256, reading):
                fetch(reading)
                verify(reading, sha256, location)
                self._keep(sha256, reading)
            yield reading
        finally:
            reading.unlink(missing_ok=True)

    def entry(self, sha256: str) -> Path:
        """Where the cached copy of ``sha256`` is kept (it may not exist)."""
        return self.folder / sha256[:2] / sha256

    def _reuse(self, sha256: str, reading: Path) -> bool:
        """Link the cached copy to ``reading`` when there is one that still hashes right."""
        try:
            os.link(self.entry(sha256), reading)
        except FileNotFoundError:
            return False
        if file_sha256(reading) == sha256:
            _touch(reading)
            return True
        self.entry(sha256).unlink(missing_ok=True)
        reading.unlink()
        return False

    def _keep(self, sha256: str, verified: Path) -> None:
        _touch(verified)
        entry = self.entry(sha256)
        entry.parent.mkdir(exist_ok=True)
        try:
            os.link(verified, entry)
        except FileExistsError:
            pass  # another process of this host kept the same bytes first
        self._evict()

    def _evict(self) -> None:
        """Delete the least recently used entries until the rest fit in ``max_bytes``."""
        entries = []
        for path in self.folder.glob("??/*"):
            try:
                status = path.stat()
            except FileNotFoundError:
                continue  # evicted by another process meanwhile
            entries.append((status.st_mtime_ns, status.st_size, path))
        total = sum(size for _, size, _ in entries)
        for _, size, path in sorted(entries):
            if total <= self.max_bytes:
                return
            path.unlink(missing_ok=True)
            total -= size


def _touch(path: Path) -> None:
    """Mark the file (and every link to it) as just used."""
    now = time.time_ns()
    os.utime(path, ns=(now, now))
