"""On-disk cache of step outputs, addressed by content, bounded in size, least recently used out first.

Each entry is one uncompressed NumPy ``.npz`` file named after its key (see
:func:`epoch_assay.engine.tree.prefix_cache_key`: the input, the steps, their versions and the
versions of the packages they use) holding the output epoch set's arrays and the step's
provenance record as JSON. It is read back with ``allow_pickle=False`` and the record is
validated into its step's typed model, so an entry can never run code. An entry is written to a temporary file and renamed into place, so a
reader (in this or another worker process) sees a whole entry or none. The file's
modification time is its last use: a hit touches it, and when the entries together exceed
``max_bytes`` the oldest are deleted. An unreadable entry counts as a miss and is removed.

Writing an output costs about as much as reading it back, and on a busy disk more than a cheap
step (a re-reference, a baseline) takes to recompute it; such outputs would also push the
costly ones (filters, ICA) out of the size bound. So an output is stored only when its step
took at least ``min_step_seconds``; with 0 every output is stored.
"""

import os
import tempfile
import time
import zipfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from pydantic import TypeAdapter

from epoch_assay.engine.epochs import TRIAL_ARRAY_PREFIX, EpochSet
from epoch_assay.engine.steps import StepProvenance
from epoch_assay.engine.tree import StepOutput

ENTRY_SUFFIX = ".npz"
# pydantic's ValidationError is a ValueError: a record of a shape no step has now is a miss.
_UNREADABLE = (OSError, ValueError, KeyError, TypeError, zipfile.BadZipFile)
_RECORD = TypeAdapter(StepProvenance)


@dataclass(frozen=True)
class CacheStats:
    """Lookups answered from the cache (hits) and not (misses) since the cache object was made."""

    hits: int
    misses: int

    def __add__(self, other: "CacheStats") -> "CacheStats":
        return CacheStats(hits=self.hits + other.hits, misses=self.misses + other.misses)


class DiskStepCache:
    """A :class:`~epoch_assay.engine.tree.StepCache` in ``folder``, holding at most ``max_bytes`` of entries
    made by steps that took at least ``min_step_seconds``."""

    def __init__(self, folder: Path, max_bytes: int, min_step_seconds: float = 0.0) -> None:
        if max_bytes <= 0:
            raise ValueError("max_bytes must be positive")
        if min_step_seconds < 0:
            raise ValueError("min_step_seconds must be zero or positive")
        self.folder = Path(folder)
        self.max_bytes = max_bytes
        self.min_step_seconds = min_step_seconds
        self.folder.mkdir(parents=True, exist_ok=True)
        self._hits = 0
        self._misses = 0

    def stats(self) -> CacheStats:
        return CacheStats(hits=self._hits, misses=self._misses)

    def get(self, key: str) -> StepOutput | None:
        path = self._path(key)
        try:
            with np.load(path, allow_pickle=False) as archive:
                output = _output_from_arrays({name: archive[name] for name in archive.files})
            _touch(path)
        except FileNotFoundError:
            self._misses += 1
            return None
        except _UNREADABLE:
            path.unlink(missing_ok=True)
            self._misses += 1
            return None
        self._hits += 1
        return output

    def put(self, key: str, output: StepOutput) -> None:
        if output.record.seconds < self.min_step_seconds:
            return
        arrays: dict[str, Any] = _arrays_from_output(output)  # Any: savez takes the names as keywords
        if sum(array.nbytes for array in arrays.values()) > self.max_bytes:
            return
        handle, temporary = tempfile.mkstemp(dir=self.folder, prefix=f".{key}.", suffix=".tmp")
        try:
            with os.fdopen(handle, "wb") as stream:
                np.savez(stream, allow_pickle=False, **arrays)
            os.replace(temporary, self._path(key))
        except BaseException:
            Path(temporary).unlink(missing_ok=True)
            raise
        _touch(self._path(key))
        self.evict()

    def total_bytes(self) -> int:
        """Bytes taken by the entries now in the folder."""
        return sum(size for _, _, size in self._entries())

    def evict(self) -> None:
        """Delete least recently used entries until the rest fit in ``max_bytes``."""
        entries = sorted(self._entries(), key=lambda entry: entry[1])
        total = sum(size for _, _, size in entries)
        for path, _, size in entries:
            if total <= self.max_bytes:
                break
            path.unlink(missing_ok=True)
            total -= size

    def _path(self, key: str) -> Path:
        if not key or not key.isalnum():
            raise ValueError(f"cache keys are hex digests; got {key!r}")
        return self.folder / f"{key}{ENTRY_SUFFIX}"

    def _entries(self) -> list[tuple[Path, int, int]]:
        """(path, last use in ns, size in bytes) of every entry; entries deleted meanwhile are skipped."""
        entries = []
        for path in self.folder.glob(f"*{ENTRY_SUFFIX}"):
            try:
                status = path.stat()
            except FileNotFoundError:
                continue
            entries.append((path, status.st_mtime_ns, status.st_size))
        return entries


def _touch(path: Path) -> None:
    now = time.time_ns()
    os.utime(path, ns=(now, now))


def _arrays_from_output(output: StepOutput) -> dict[str, np.ndarray]:
    epochs = output.epochs
    arrays = {
        "data": epochs.data,
        "sfreq": np.array(epochs.sfreq),
        "tmin": np.array(epochs.tmin),
        "ch_names": np.array(epochs.ch_names, dtype=str),
        "ch_types": np.array(epochs.ch_types, dtype=str),
        "labels": np.asarray(epochs.labels, dtype=str),
        "bads": np.array(sorted(epochs.bads), dtype=str),
        "record": np.array(output.record.model_dump_json()),
    }
    if epochs.positions is not None:
        arrays["positions"] = epochs.positions
    return arrays | epochs.trial_arrays


def _output_from_arrays(arrays: dict[str, np.ndarray]) -> StepOutput:
    epochs = EpochSet(
        data=arrays["data"],
        sfreq=float(arrays["sfreq"]),
        tmin=float(arrays["tmin"]),
        ch_names=tuple(arrays["ch_names"].tolist()),
        ch_types=tuple(arrays["ch_types"].tolist()),
        labels=arrays["labels"],
        positions=arrays.get("positions"),
        bads=frozenset(arrays["bads"].tolist()),
        trial_arrays={key: array for key, array in arrays.items() if key.startswith(TRIAL_ARRAY_PREFIX)},
    )
    return StepOutput(epochs=epochs, record=_RECORD.validate_json(str(arrays["record"])))
