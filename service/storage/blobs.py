"""The blob store: content-addressed files named by their SHA-256, behind one interface.

Two implementations, chosen by :func:`open_blob_store` from the settings:

- ``service.storage.blob_local.LocalBlobStore``: a folder on this host (``data_dir/blobs``),
  the default;
- ``service.storage.blob_fsspec.FsspecBlobStore``: an fsspec URL (``blob_url``) that several
  hosts share, a mounted folder (``file:///mnt/shared/blobs``) or an S3-compatible store
  (``s3://bucket/prefix``, endpoint and keys from the standard ``AWS_*`` variables).

Every store keeps the same contract:

- :meth:`BlobStore.staged` copies an upload to a local temporary file while hashing it, so
  the API can check the file before anything is kept;
- :meth:`StagedBlob.commit` keeps it under its hash, atomically: a reader sees the whole
  blob or none (each implementation says how), and committing again is a no-op;
- :meth:`BlobStore.local_copy` hands a reader a local file whose SHA-256 has been checked
  against its name on this read; a mismatch raises :class:`BlobCorruptError`;
- :meth:`BlobStore.discard` removes a blob without ever stranding a stored row.

Removing a blob races with an upload of the same bytes to another study. Both sides are
ordered so that no stored epoch set loses its blob: an upload commits the blob before
committing its row and commits it again after (a no-op when it is there), and ``discard``
moves the blob aside, checks the database, and puts it back when a row names it. Putting back
is always right because the store is content-addressed.
"""

import hashlib
import logging
import tempfile
from abc import ABC, abstractmethod
from collections.abc import Callable, Iterator
from contextlib import AbstractContextManager, contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, BinaryIO

if TYPE_CHECKING:
    from service.settings import Settings

CHUNK_BYTES = 1024 * 1024
log = logging.getLogger("epoch_assay.blobs")
_HEX = frozenset("0123456789abcdef")


class BlobCorruptError(Exception):
    """A stored blob's bytes no longer hash to its name: retrying cannot help."""

    def __init__(self, sha256: str, location: str, actual_sha256: str) -> None:
        super().__init__(
            f"blob {sha256} in {location} is damaged: its bytes hash to {actual_sha256}. Restore that file from a "
            "backup of the blob store, or delete the runs that use its epoch set, delete the epoch set and upload "
            "the file again"
        )
        self.sha256 = sha256


class BlobStoreUnavailable(Exception):
    """The store could not keep a blob (unreachable, full, refused): nothing was kept; a retry may succeed."""

    def __init__(self, location: str, reason: BaseException) -> None:
        super().__init__(
            f"{location} could not keep the file ({type(reason).__name__}: {reason}); nothing was stored. Retry "
            "later; if this goes on, the operator should check that the store is reachable and has room "
            "(EPOCH_ASSAY_BLOB_URL, or the data folder)"
        )


def check_blob_name(sha256: str) -> str:
    """``sha256`` itself when it is a lower-case hex SHA-256 (the only names a store holds); else ValueError."""
    if len(sha256) != 64 or not _HEX.issuperset(sha256):
        raise ValueError(f"a blob name is a lower-case hex SHA-256; got {sha256!r}")
    return sha256


def file_sha256(path: Path) -> str:
    """The hex SHA-256 of the file at ``path``, read in chunks."""
    with open(path, "rb") as handle:
        return hashlib.file_digest(handle, "sha256").hexdigest()


def verify(path: Path, sha256: str, location: str) -> None:
    """Raise :class:`BlobCorruptError` unless the file at ``path`` hashes to ``sha256``."""
    actual = file_sha256(path)
    if actual != sha256:
        raise BlobCorruptError(sha256, location, actual)


def blob_not_found(sha256: str, location: str) -> FileNotFoundError:
    """The error a read of a blob that is not stored raises (permanent for the worker)."""
    return FileNotFoundError(
        f"No such file for blob {sha256} in {location}: its epoch set's file is gone from the "
        "blob store; upload it again"
    )


class BlobStore(ABC):
    """Content-addressed blobs; see the module docstring for the contract every store keeps."""

    def __init__(self, location: str, staging_dir: Path) -> None:
        self.location = location
        self.staging_dir = staging_dir
        self.staging_dir.mkdir(parents=True, exist_ok=True)

    @contextmanager
    def staged(self, source: BinaryIO) -> Iterator["StagedBlob"]:
        """Copy ``source`` to a local temporary file while hashing it.

        The caller inspects ``staged.path`` (e.g. validates it) and calls ``commit()`` to keep
        it under its hash; the temporary file is removed on exit, also when the copy is interrupted.
        """
        with tempfile.NamedTemporaryFile(dir=self.staging_dir, prefix="upload-") as out:
            digest = hashlib.sha256()
            size = 0
            while chunk := source.read(CHUNK_BYTES):
                digest.update(chunk)
                size += len(chunk)
                out.write(chunk)
            out.flush()
            yield StagedBlob(self, Path(out.name), digest.hexdigest(), size)

    @abstractmethod
    def commit(self, staged: "StagedBlob") -> None:
        """Keep ``staged`` under its hash, atomically; a no-op when that blob is already stored."""

    @abstractmethod
    def exists(self, sha256: str) -> bool:
        """Whether the blob named ``sha256`` is stored."""

    @abstractmethod
    def local_copy(self, sha256: str) -> AbstractContextManager[Path]:
        """A local file with the blob's bytes, verified against ``sha256`` on this read, for the ``with`` block.

        Raises :class:`BlobCorruptError` when the bytes do not hash to the name and
        FileNotFoundError when the blob is not stored.
        """

    @abstractmethod
    def probe(self) -> None:
        """Write a few bytes in the store's ``tmp`` area and remove them, so a store that is unreachable, refuses
        the credentials or cannot be written is found when a process starts rather than at the first upload;
        raises what the store's driver raised."""

    @abstractmethod
    def discard(self, sha256: str, still_referenced: Callable[[], bool]) -> bool:
        """Remove the blob unless ``still_referenced()`` (asked after it is out of sight) is true.

        Returns True when the blob was removed.
        """


class StagedBlob:
    """A hashed local temporary copy of an upload, not yet in the store.

    ``path``: the temporary file; ``sha256``: hex digest of its bytes; ``size``: in bytes.
    """

    def __init__(self, store: BlobStore, path: Path, sha256: str, size: int) -> None:
        self.store = store
        self.path = path
        self.sha256 = sha256
        self.size = size

    def commit(self) -> None:
        """Keep the staged file in the store under its hash (a no-op if already there); may be repeated.

        Raises :class:`BlobStoreUnavailable` when the store fails, whatever its driver raised.
        """
        try:
            self.store.commit(self)
        except Exception as error:
            log.warning("blob store %s failed to keep %s", self.store.location, self.sha256, exc_info=True)
            raise BlobStoreUnavailable(self.store.location, error) from error


def open_blob_store(settings: "Settings") -> BlobStore:
    """The store the settings name: the fsspec URL ``blob_url`` when set, else the folder ``data_dir/blobs``."""
    if settings.blob_url is None:
        from service.storage.blob_local import LocalBlobStore

        return LocalBlobStore(settings.blob_dir)
    # Imported only here, so the default store never loads fsspec.
    from service.storage.blob_fsspec import FsspecBlobStore

    return FsspecBlobStore.from_url(settings.blob_url, settings.blob_cache_dir, settings.blob_cache_max_bytes)
