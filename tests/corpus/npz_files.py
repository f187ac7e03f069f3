"""Hostile NPZ (zip) files: many members, arrays declaring far more than the file holds, odd member names."""

import io
import warnings
import zipfile

import numpy as np
from numpy.lib import format as npy_format


def many_members(n_members: int = 16_000, name: str | None = None) -> bytes:
    """A zip of ``n_members`` empty members, named ``m<i>.npy`` or all ``name`` (repeated keys)."""
    buffer = io.BytesIO()
    with warnings.catch_warnings(), zipfile.ZipFile(buffer, "w", zipfile.ZIP_STORED) as archive:
        warnings.simplefilter("ignore", UserWarning)  # zipfile warns of each repeated name: that is the point
        for index in range(n_members):
            archive.writestr(name or f"m{index}.npy", b"")
    return buffer.getvalue()


def _npy(array: np.ndarray) -> bytes:
    buffer = io.BytesIO()
    npy_format.write_array(buffer, array, allow_pickle=False)
    return buffer.getvalue()


def declaring_zeros(shape: tuple[int, int, int] = (50, 128, 1280), chunk_bytes: int = 1 << 22) -> bytes:
    """An epoch-set NPZ whose ``data`` (float64 zeros, 62.5 MiB by default) compresses about 1000-fold.

    Written in chunks, so building it takes little memory.
    """
    n_trials, n_channels, _ = shape
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", zipfile.ZIP_DEFLATED) as archive:
        with archive.open("data.npy", "w", force_zip64=True) as member:
            header = io.BytesIO()
            npy_format.write_array_header_1_0(header, {"descr": "<f8", "fortran_order": False, "shape": shape})
            member.write(header.getvalue())
            remaining = int(np.prod(shape)) * 8
            zeros = bytes(chunk_bytes)
            while remaining > 0:
                member.write(zeros[: min(chunk_bytes, remaining)])
                remaining -= chunk_bytes
        small = {
            "sfreq": np.float64(1000.0),
            "tmin": np.float64(-0.2),
            "ch_names": np.array([f"E{i}" for i in range(n_channels)]),
            "labels": np.array(["a", "b"] * (n_trials // 2)),
        }
        for key, value in small.items():
            archive.writestr(f"{key}.npy", _npy(value))
    return buffer.getvalue()


def named_members(names: tuple[str, ...]) -> bytes:
    """A zip whose members carry the given names (path-like, absolute, maths) with tiny arrays."""
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w") as archive:
        for name in names:
            archive.writestr(name, _npy(np.float64(1.0)))
    return buffer.getvalue()


def with_object_array() -> bytes:
    """An NPZ whose labels need pickles to load."""
    buffer = io.BytesIO()
    np.savez(
        buffer,
        data=np.zeros((2, 1, 4)),
        sfreq=np.float64(100.0),
        tmin=np.float64(0.0),
        ch_names=np.array(["Cz"]),
        labels=np.array([{"a": 1}, None], dtype=object),
    )
    return buffer.getvalue()
