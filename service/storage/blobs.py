"""Content-addressed blob store on a local folder.

A blob is stored under ``<root>/<sha[:2]>/<sha>``; it is written to a temporary file in
``<root>/tmp`` first and hard-linked into place, so a reader never sees a half-written blob
and an interrupted upload leaves nothing behind but a temp file.

Removing a blob races with an upload of the same bytes to another study. Both sides are
ordered so that no stored epoch set ever loses its blob: an upload links the blob before
committing its row and links it again after (a no-op when it is there), and
:meth:`BlobStore.discard` moves the blob aside, checks the database, and puts it back when
a row names it. Putting back is always right because the store is content-addressed.
"""

import hashlib
import os
import secrets
import tempfile
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import BinaryIO

CHUNK_BYTES = 1024 * 1024


class BlobStore:
    def __init__(self, root: Path) -> None:
        self.root = root
        self._tmp = root / "tmp"
        self._tmp.mkdir(parents=True, exist_ok=True)

    def path(self, sha256: str) -> Path:
        """Where the blob named ``sha256`` lives (it may not exist)."""
        if len(sha256) != 64 or any(c not in "0123456789abcdef" for c in sha256):
            raise ValueError("a blob name is a lower-case hex SHA-256")
        return self.root / sha256[:2] / sha256

    def exists(self, sha256: str) -> bool:
        return self.path(sha256).is_file()

    @contextmanager
    def staged(self, source: BinaryIO) -> Iterator["StagedBlob"]:
        """Copy ``source`` to a temporary file while hashing it.

        The caller inspects ``staged.path`` (e.g. validates it) and calls ``commit()`` to keep
        it under its hash; the temporary name is removed on exit.
        """
        handle, name = tempfile.mkstemp(dir=self._tmp)
        staged = StagedBlob(self, Path(name))
        try:
            digest = hashlib.sha256()
            size = 0
            with os.fdopen(handle, "wb") as out:
                while chunk := source.read(CHUNK_BYTES):
                    digest.update(chunk)
                    size += len(chunk)
                    out.write(chunk)
            staged.sha256 = digest.hexdigest()
            staged.size = size
            yield staged
        finally:
            staged.path.unlink(missing_ok=True)

    def discard(self, sha256: str, still_referenced: Callable[[], bool]) -> bool:
        """Remove the blob unless ``still_referenced()`` (asked after it is out of sight) is true.

        Returns True when the blob was removed.
        """
        target = self.path(sha256)
        aside = self._tmp / f"discard-{sha256}-{secrets.token_hex(4)}"
        try:
            os.replace(target, aside)
        except FileNotFoundError:
            return False
        if still_referenced():
            os.replace(aside, target)
            return False
        aside.unlink()
        return True


class StagedBlob:
    """A hashed temporary copy of an upload, not yet in the store."""

    def __init__(self, store: BlobStore, path: Path) -> None:
        self.store = store
        self.path = path
        self.sha256 = ""
        self.size = 0

    def commit(self) -> Path:
        """Link the staged file into the store under its hash (a no-op if already there); may be repeated."""
        target = self.store.path(self.sha256)
        target.parent.mkdir(parents=True, exist_ok=True)
        try:
            os.link(self.path, target)
        except FileExistsError:
            pass
        return target
