"""Wall time of storing and reading one large blob: the local folder and a shared folder through fsspec (file://).

Each read checks the blob's SHA-256. The script prints seconds and MB/s of each operation,
and the cost of that check as a multiple of reading the same file without hashing it.

    python tests/benchmarks/bench_blobs.py          # a 100 MB blob
    python tests/benchmarks/bench_blobs.py --quick  # 1 MB, a smoke run
"""

import argparse
import io
import os
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from service.storage.blob_fsspec import FsspecBlobStore
from service.storage.blob_local import LocalBlobStore
from service.storage.blobs import BlobStore

MB = 1_000_000


def timed(action: Callable[[], object], repeats: int) -> float:
    """The fastest of ``repeats`` runs of ``action``, in s."""
    best = float("inf")
    for _ in range(repeats):
        start = time.perf_counter()
        action()
        best = min(best, time.perf_counter() - start)
    return best


def store_once(store: BlobStore, content: bytes) -> str:
    with store.staged(io.BytesIO(content)) as staged:
        staged.commit()
        return staged.sha256


def read_verified(store: BlobStore, sha256: str) -> None:
    with store.local_copy(sha256):
        pass


def read_plain(path: Path) -> None:
    with open(path, "rb") as handle:
        while handle.read(1024 * 1024):
            pass


def report(name: str, seconds: float, size: int) -> None:
    print(f"{name:<46} {seconds:8.4f} s  {size / MB / seconds:8.0f} MB/s")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="a 1 MB blob, one repeat")
    parser.add_argument("--mb", type=int, default=100, help="size of the blob in MB (default 100)")
    args = parser.parse_args()
    size = (1 if args.quick else args.mb) * MB
    repeats = 1 if args.quick else 3
    content = os.urandom(size)
    with tempfile.TemporaryDirectory() as folder:
        root = Path(folder)
        local = LocalBlobStore(root / "blobs")
        stored = timed(lambda: store_once(local, content), 1)
        sha256 = store_once(local, content)
        plain = timed(lambda: read_plain(local.path(sha256)), repeats)
        verified = timed(lambda: read_verified(local, sha256), repeats)
        print(f"blob of {size / MB:.0f} MB, best of {repeats} (page cache warm)")
        report("local folder: stage and commit", stored, size)
        report("local folder: read without hashing", plain, size)
        report("local folder: read, SHA-256 verified", verified, size)

        shared = FsspecBlobStore.from_url((root / "shared").as_uri(), root / "blob-cache", 10 * size)
        uploaded = timed(lambda: store_once(shared, content), 1)
        fetched = timed(
            lambda: (shared.cache.entry(sha256).unlink(missing_ok=True), read_verified(shared, sha256)), repeats
        )
        cached = timed(lambda: read_verified(shared, sha256), repeats)
        report("file:// via fsspec: stage, upload and move", uploaded, size)
        report("file:// via fsspec: fetch, verify, keep a copy", fetched, size)
        report("file:// via fsspec: read the verified copy", cached, size)
        print(f"verification / plain read, local folder: {verified / plain:.2f}")
        print(f"first read / cached read, file:// via fsspec: {fetched / cached:.2f}")


if __name__ == "__main__":
    main()
