"""The blob store at an fsspec URL, shared by several hosts: ``<root>/<sha[:2]>/<sha>``.

``file:///mnt/shared/blobs`` is a folder every host mounts; ``s3://bucket/prefix`` an
S3-compatible object store (the driver ``s3fs``, extra ``epoch-assay[s3]``; endpoint and keys
from the standard variables ``AWS_ENDPOINT_URL``, ``AWS_ACCESS_KEY_ID``,
``AWS_SECRET_ACCESS_KEY``, ``AWS_DEFAULT_REGION``).

Atomic commits, in one of two ways:

- object stores (S3, GCS, Azure) show an object only once its PUT (or multipart upload) has
  completed, so the blob is written straight to its key;
- on file systems (a shared mount, ``memory://``) it is written to ``<root>/tmp/…`` and then
  moved to its key, a rename within one file system.

Discarding moves the blob aside to ``<root>/tmp/discard-…`` (on an object store a copy and a
delete) before the database is asked. Reads go through a local cache under ``data_dir``
(:class:`service.storage.blob_cache.BlobReadCache`), which checks each SHA-256 when it fetches.
"""

import secrets
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path

import fsspec
from fsspec import AbstractFileSystem
from fsspec.core import split_protocol

from service.storage.blob_cache import BlobReadCache
from service.storage.blobs import BlobStore, StagedBlob, blob_not_found, check_blob_name

# Protocols whose PUT is atomic (no rename there: a move is a copy and a delete).
OBJECT_STORE_PROTOCOLS = frozenset({"s3", "s3a", "gs", "gcs", "abfs", "abfss", "az"})
# Known to fsspec but no place to keep blobs: read-only, archives, or layers over another URL.
# memory:// is private to one process, so the API and the workers would not share it (tests build it directly).
UNSUITABLE_PROTOCOLS = frozenset(
    {
        "http",
        "https",
        "zip",
        "tar",
        "libarchive",
        "github",
        "git",
        "reference",
        "data",
        "simplecache",
        "filecache",
        "blockcache",
        "cached",
        "dir",
        "memory",
    }
)


def check_blob_url(url: str) -> str:
    """``url`` when fsspec can keep blobs there with a driver that is installed; else ValueError saying why."""
    protocol = split_protocol(url)[0] or "file"
    hint = "give file:///path/to/shared/folder or s3://bucket/prefix"
    if "::" in url or protocol in UNSUITABLE_PROTOCOLS:
        raise ValueError(f"{url!r} is not a place to keep blobs (protocol {protocol!r}); {hint}")
    try:
        fsspec.get_filesystem_class(protocol)
    except ImportError as error:
        raise ValueError(
            f"the driver for {protocol}:// URLs is not installed ({error}); install it, e.g. "
            "pip install 'epoch-assay[s3]' for s3://"
        ) from None
    except ValueError:
        raise ValueError(f"{url!r} has a protocol fsspec does not know ({protocol!r}); {hint}") from None
    return url


class FsspecBlobStore(BlobStore):
    def __init__(self, fs: AbstractFileSystem, root: str, cache: BlobReadCache) -> None:
        super().__init__(f"the blob store {fs.unstrip_protocol(root)}", cache.folder / "tmp")
        self.fs = fs
        self.root = root.rstrip("/")
        self.cache = cache
        self._atomic_put = bool(OBJECT_STORE_PROTOCOLS.intersection(_protocols(fs)))
        if not self._atomic_put:
            fs.makedirs(f"{self.root}/tmp", exist_ok=True)

    @classmethod
    def from_url(cls, url: str, cache_dir: Path, cache_max_bytes: int) -> "FsspecBlobStore":
        """The store at ``url`` (checked by the settings), read through a bounded cache in ``cache_dir``."""
        # Other hosts add blobs at any time, so a listing is never answered from memory.
        fs, root = fsspec.core.url_to_fs(url, use_listings_cache=False)
        return cls(fs, root, BlobReadCache(cache_dir, cache_max_bytes))

    def key(self, sha256: str) -> str:
        """The key (path in the file system) of the blob named ``sha256``."""
        return f"{self.root}/{sha256[:2]}/{check_blob_name(sha256)}"

    def exists(self, sha256: str) -> bool:
        return self.fs.isfile(self.key(sha256))

    def probe(self) -> None:
        probe = self._aside("probe", "start")
        self.fs.pipe_file(probe, b"probe")
        self.fs.rm_file(probe)

    def commit(self, staged: StagedBlob) -> None:
        target = self.key(staged.sha256)
        if self.fs.isfile(target):
            return
        if self._atomic_put:
            self.fs.put_file(str(staged.path), target)
            return
        self.fs.makedirs(target.rsplit("/", 1)[0], exist_ok=True)
        upload = self._aside("upload", staged.sha256)
        try:
            self.fs.put_file(str(staged.path), upload)
            self.fs.mv(upload, target)
        except BaseException:
            if self.fs.exists(upload):
                self.fs.rm_file(upload)
            raise

    @contextmanager
    def local_copy(self, sha256: str) -> Iterator[Path]:
        with self.cache.copy(sha256, self._fetcher(sha256), self.location) as path:
            yield path

    def discard(self, sha256: str, still_referenced: Callable[[], bool]) -> bool:
        target = self.key(sha256)
        aside = self._aside("discard", sha256)
        try:
            self.fs.mv(target, aside)
        except FileNotFoundError:
            return False
        if still_referenced():
            self.fs.mv(aside, target)
            return False
        self.fs.rm_file(aside)
        return True

    def _aside(self, purpose: str, sha256: str) -> str:
        return f"{self.root}/tmp/{purpose}-{sha256}-{secrets.token_hex(4)}"

    def _fetcher(self, sha256: str) -> Callable[[Path], None]:
        def fetch(destination: Path) -> None:
            try:
                self.fs.get_file(self.key(sha256), str(destination))
            except FileNotFoundError:
                raise blob_not_found(sha256, self.location) from None

        return fetch


def _protocols(fs: AbstractFileSystem) -> tuple[str, ...]:
    return (fs.protocol,) if isinstance(fs.protocol, str) else tuple(fs.protocol)
