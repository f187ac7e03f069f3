"""The NPZ epoch-set file: see "Epoch-set file (NPZ)" in docs/inputs.md.

An NPZ file is a zip archive of ``.npy`` members, one per key:

* ``data``: float32 or float64, shape (n_trials, n_channels, n_times), in ``unit``
* ``sfreq``: sampling frequency, in Hz, a positive finite number
* ``tmin``: time of the first sample relative to the event, in s, a finite number
* ``ch_names``: str, shape (n_channels,), unique and non-empty
* ``labels``: str, shape (n_trials,), the non-empty condition label of each trial
* ``ch_types`` (optional): str, shape (n_channels,), each ``eeg``, ``eog``, ``misc`` or
  ``stim``; all ``eeg`` when absent
* ``unit`` (optional): a single str, ``"V"`` (the default) or ``"uV"``
* ``positions`` (optional): float, shape (n_channels, 3), in m (head coordinates), NaN
  where unknown
* ``montage`` (optional): a single str, the name of a standard montage that gives the
  positions of the channels it knows (explicit ``positions`` win where both know one)
* ``trial_*`` (optional, any number): per-trial arrays, shape (n_trials,), numbers or str,
  e.g. ``trial_onset_s``, ``trial_id``; kept with the trials (``trial_id`` names each trial
  in the provenance of trial rejection)

Uploads are untrusted: every member's header is read and checked (no object dtypes,
declared sizes within the memory limit, members as long as their headers promise)
before any array is loaded, and arrays are loaded without pickles.
"""

import math
import struct
import zipfile
import zlib
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.lib import format as npy_format

from epoch_assay.engine.epochs import TRIAL_ARRAY_PREFIX, TRIAL_ID_KEY, EpochSet
from epoch_assay.engine.errors import EpochSetFormatError, EpochSetTooLargeError
from epoch_assay.engine.io.channels import checked_positions, merged_positions, positions_from_montage
from epoch_assay.engine.units import VOLTS_PER_MICROVOLT

REQUIRED_KEYS = ("data", "sfreq", "tmin", "ch_names", "labels")
OPTIONAL_KEYS = ("ch_types", "unit", "positions", "montage")
FILE_CHANNEL_TYPES = ("eeg", "eog", "misc", "stim")
VOLTS_PER_UNIT = {"V": 1.0, "uV": VOLTS_PER_MICROVOLT}

# common practice: EEG channels have standard deviations of roughly 1 to 100 uV; far
# outside the plausible bounds the stated unit is almost certainly wrong.
TYPICAL_EEG_STD_V = (1e-6, 1e-4)
PLAUSIBLE_EEG_STD_V = (1e-8, 5e-3)

# Most members a valid file can have (one per key) and the largest central directory they need
# (46 fixed bytes per entry, a short name and small extra fields; 64 KiB leaves ample room).
MAX_MEMBERS = len(REQUIRED_KEYS) + len(OPTIONAL_KEYS)
MAX_CENTRAL_DIRECTORY_BYTES = 64 * 1024
# Uncompressed bytes always allowed whatever the ratio: the small arrays of a tiny file.
RATIO_FREE_BYTES = 1024 * 1024
# How far recorded EEG compresses with numpy.savez_compressed, measured on our own simulated files:
# 1.04x (float64) and 1.08x (float32) for noise-like data, 3.7x for 16-bit samples stored as float64
# (as converted from EDF). The default limit of 10x leaves room above the most compressible of these;
# an archive of mostly zeros or repeated values goes far beyond it (zip bombs, about 1000x).
DEFAULT_MAX_COMPRESSION_RATIO = 10.0
# End-of-central-directory records (PKWARE APPNOTE 6.3.10, sections 4.3.14 to 4.3.16).
_EOCD = struct.Struct("<4s4H2LH")
_EOCD_SIGNATURE = b"PK\x05\x06"
_ZIP64_LOCATOR = struct.Struct("<4sLQL")
_ZIP64_EOCD = struct.Struct("<4sQ2H2L4Q")
_MAX_ZIP_COMMENT = 0xFFFF

_NPY_SUFFIX = ".npy"
_UNIT_WORDS = {"V": "volts", "uV": "microvolts"}
# What reading a damaged or encrypted member can raise besides BadZipFile (bad CRC, handled by the caller).
_MEMBER_READ_ERRORS = (ValueError, EOFError, OSError, RuntimeError, zlib.error, NotImplementedError)
_SAVE_AGAIN = "Save the epoch set again with numpy.savez or numpy.savez_compressed and upload the new file"


@dataclass(frozen=True)
class _MemberHeader:
    """What a ``.npy`` member declares about its array, read before the array itself."""

    key: str
    member: zipfile.ZipInfo
    shape: tuple[int, ...]
    dtype: np.dtype
    header_bytes: int

    @property
    def array_bytes(self) -> int:
        return math.prod(self.shape) * self.dtype.itemsize


def write_npz(epochs: EpochSet, path: Path) -> None:
    """Write ``epochs`` as an NPZ epoch-set file (data in V, unit "V", positions when known)."""
    with open(path, "wb") as handle:
        np.savez(
            handle,
            allow_pickle=False,
            data=epochs.data,
            sfreq=np.float64(epochs.sfreq),
            tmin=np.float64(epochs.tmin),
            ch_names=np.array(epochs.ch_names, dtype=str),
            ch_types=np.array(epochs.ch_types, dtype=str),
            labels=np.asarray(epochs.labels, dtype=str),
            unit=np.array("V"),
            **({} if epochs.positions is None else {"positions": epochs.positions}),
            **epochs.trial_arrays,
        )


def read_npz(
    path: Path, *, max_array_bytes: int, max_compression_ratio: float = DEFAULT_MAX_COMPRESSION_RATIO
) -> EpochSet:
    """Read and validate an NPZ epoch-set file.

    Returns an epoch set with data as float64 in V, shape (n_trials, n_channels, n_times),
    labels as a str array, no channel positions and no bad channels. Raises
    :class:`EpochSetTooLargeError` when the arrays would take more than
    ``max_array_bytes`` in memory, or more than ``max_compression_ratio`` times the
    file's size (plus 1 MiB), both checked before any array is loaded, and
    :class:`EpochSetFormatError` for anything malformed. The number of members and the
    size of the zip directory are checked before the zip directory is parsed.
    """
    _check_zip_directory_size(path)
    try:
        with zipfile.ZipFile(path) as archive:
            members = _members_by_key(archive)
            headers = {key: _read_header(archive, key, member) for key, member in members.items()}
            declared_bytes = sum(header.array_bytes for header in headers.values())
            if declared_bytes > max_array_bytes:
                raise EpochSetTooLargeError(declared_bytes, max_array_bytes)
            _check_compression_ratio(declared_bytes, path.stat().st_size, max_compression_ratio)
            for header in headers.values():
                _check_complete(header)
            arrays = {key: _load_array(archive, header) for key, header in headers.items()}
    except zipfile.BadZipFile:
        raise EpochSetFormatError(
            "file", "the file is not a readable NPZ (zip) archive: its structure or a checksum is damaged", _SAVE_AGAIN
        ) from None
    return epoch_set_from_arrays(arrays)


_REQUIRED_FIXES = {
    "data": "Add data: the epochs as one float array of shape (n_trials, n_channels, n_times)",
    "sfreq": "Add sfreq: the sampling frequency in Hz",
    "tmin": "Add tmin: the time of the first sample relative to the event, in s",
    "ch_names": "Add ch_names: one name per channel",
    "labels": "Add labels: one condition label per trial",
}


def _check_zip_directory_size(path: Path) -> None:
    """Refuse an archive with more members than keys, or a large directory, from its end record alone.

    zipfile parses the whole central directory when it opens an archive, so a file of many
    tiny members would cost time and memory before any other check could run.
    """
    with open(path, "rb") as handle:
        handle.seek(0, 2)
        size = handle.tell()
        tail_start = max(0, size - _EOCD.size - _MAX_ZIP_COMMENT)
        handle.seek(tail_start)
        tail = handle.read()
        at = tail.rfind(_EOCD_SIGNATURE)
        if at < 0 or at + _EOCD.size > len(tail):
            raise EpochSetFormatError(
                "file", "the file is not a readable NPZ (zip) archive: it has no end record", _SAVE_AGAIN
            )
        _sig, _disk, _cd_disk, _on_disk, n_members, directory_bytes, _offset, _comment = _EOCD.unpack_from(tail, at)
        if n_members == 0xFFFF or directory_bytes == 0xFFFFFFFF:
            n_members, directory_bytes = _zip64_counts(handle, tail, at, tail_start)
    if n_members > MAX_MEMBERS:
        raise EpochSetFormatError(
            "file",
            f"the archive declares {n_members} members; an epoch-set file has at most {MAX_MEMBERS}, one per key",
            f"Keep only the keys {', '.join(REQUIRED_KEYS + OPTIONAL_KEYS)}",
        )
    if directory_bytes > MAX_CENTRAL_DIRECTORY_BYTES:
        raise EpochSetFormatError(
            "file",
            f"the archive's directory takes {directory_bytes} bytes, more than {MAX_CENTRAL_DIRECTORY_BYTES} "
            f"(at most {MAX_MEMBERS} short member names are expected)",
            _SAVE_AGAIN,
        )


def _zip64_counts(handle, tail: bytes, eocd_at: int, tail_start: int) -> tuple[int, int]:  # type: ignore[no-untyped-def]
    """Member count and directory size from the Zip64 end record (APPNOTE 4.3.14 and 4.3.15)."""
    locator_at = eocd_at - _ZIP64_LOCATOR.size
    if locator_at < 0:
        raise EpochSetFormatError("file", "the zip archive's Zip64 end record is missing", _SAVE_AGAIN)
    _sig, _disk, record_offset, _disks = _ZIP64_LOCATOR.unpack_from(tail, locator_at)
    handle.seek(record_offset)
    record = handle.read(_ZIP64_EOCD.size)
    if len(record) < _ZIP64_EOCD.size or not record.startswith(b"PK\x06\x06"):
        raise EpochSetFormatError("file", "the zip archive's Zip64 end record is damaged", _SAVE_AGAIN)
    fields = _ZIP64_EOCD.unpack(record)
    return fields[7], fields[8]


def _check_compression_ratio(declared_bytes: int, file_bytes: int, max_ratio: float) -> None:
    """Refuse arrays declaring far more memory than the file's size could plausibly hold."""
    allowed = max_ratio * file_bytes + RATIO_FREE_BYTES
    if declared_bytes > allowed:
        raise EpochSetFormatError(
            "file",
            f"the arrays declare {declared_bytes} bytes, {declared_bytes / file_bytes:.0f} times the file's "
            f"{file_bytes} bytes; more than {max_ratio:g} times is not read, as recorded EEG does not compress so far",
            "Upload the data uncompressed (numpy.savez) or ask the operator to raise EPOCH_ASSAY_MAX_COMPRESSION_RATIO",
        )


def _members_by_key(archive: zipfile.ZipFile) -> dict[str, zipfile.ZipInfo]:
    """The archive's members by NPZ key, refusing repeated, unknown and missing keys."""
    members = archive.infolist()
    keys = [member.filename.removesuffix(_NPY_SUFFIX) for member in members]
    repeated = sorted(key for key, count in Counter(keys).items() if count > 1)
    if repeated:
        raise EpochSetFormatError(
            "file", f"the archive holds more than one member for key(s) {', '.join(repeated)}", _SAVE_AGAIN
        )
    by_key = dict(zip(keys, members, strict=False))
    unknown = sorted(
        key for key in by_key if key not in REQUIRED_KEYS + OPTIONAL_KEYS and not key.startswith(TRIAL_ARRAY_PREFIX)
    )
    if unknown:
        raise EpochSetFormatError(
            unknown[0],
            f"unknown key(s) {', '.join(repr(key) for key in unknown)}",
            f"Remove them, or name per-trial arrays {TRIAL_ARRAY_PREFIX}<name>; the keys read are "
            f"{', '.join(REQUIRED_KEYS)} and optionally {', '.join(OPTIONAL_KEYS)} and {TRIAL_ARRAY_PREFIX}*",
        )
    for key in REQUIRED_KEYS:
        if key not in by_key:
            raise EpochSetFormatError(key, f"the file has no {key!r} array", _REQUIRED_FIXES[key])
    return by_key


def _read_header(archive: zipfile.ZipFile, key: str, member: zipfile.ZipInfo) -> _MemberHeader:
    """Parse the ``.npy`` header of ``member`` without reading its array."""
    try:
        with archive.open(member) as handle:
            version = npy_format.read_magic(handle)
            if version == (1, 0):
                shape, _, dtype = npy_format.read_array_header_1_0(handle)
            elif version == (2, 0):
                shape, _, dtype = npy_format.read_array_header_2_0(handle)
            else:
                raise ValueError(f"unsupported .npy format version {version[0]}.{version[1]}")
            header_bytes = handle.tell()
    except _MEMBER_READ_ERRORS:
        raise EpochSetFormatError(
            "file", f"member {member.filename} is not a valid .npy array (its header cannot be read)", _SAVE_AGAIN
        ) from None
    if dtype.hasobject:
        raise EpochSetFormatError(
            key,
            f"holds Python objects (dtype {dtype}), which would need pickles to load and are refused",
            "Store numbers as float arrays and text as numpy.array([...], dtype=str)",
        )
    if any(length < 0 for length in shape):
        raise EpochSetFormatError("file", f"member {member.filename} declares a negative shape {shape}", _SAVE_AGAIN)
    return _MemberHeader(key, member, shape, dtype, header_bytes)


def _check_complete(header: _MemberHeader) -> None:
    """Refuse a member shorter than its header promises, before reading it."""
    expected = header.header_bytes + header.array_bytes
    if header.member.file_size < expected:
        raise EpochSetFormatError(
            "file",
            f"member {header.member.filename} is truncated: its header declares shape {header.shape} "
            f"({header.array_bytes} bytes) but it holds {header.member.file_size - header.header_bytes} bytes of data",
            _SAVE_AGAIN,
        )


def _load_array(archive: zipfile.ZipFile, header: _MemberHeader) -> np.ndarray:
    try:
        with archive.open(header.member) as handle:
            return npy_format.read_array(handle, allow_pickle=False)
    except _MEMBER_READ_ERRORS:
        raise EpochSetFormatError(
            "file", f"member {header.member.filename} could not be read (damaged or encrypted)", _SAVE_AGAIN
        ) from None


def epoch_set_from_arrays(arrays: dict[str, np.ndarray]) -> EpochSet:
    """Check the arrays of an epoch set by the rules of an NPZ file (keys as in the module docstring)."""
    data = _data_array(arrays["data"])
    n_trials, n_channels, _ = data.shape
    sfreq = _finite_number(arrays["sfreq"], "sfreq", "the sampling frequency in Hz")
    if sfreq <= 0:
        raise EpochSetFormatError(
            "sfreq", f"is {sfreq:g}, not a positive frequency", "Give the sampling frequency in Hz"
        )
    tmin = _finite_number(arrays["tmin"], "tmin", "the time of the first sample in s")
    ch_names = _string_vector(arrays["ch_names"], "ch_names", n_channels, "channel")
    _check_unique(ch_names)
    labels = _string_vector(arrays["labels"], "labels", n_trials, "trial")
    ch_types = _channel_types(arrays.get("ch_types"), n_channels)
    unit = _unit(arrays.get("unit"))
    _check_finite(data, ch_names)
    data_v = data.astype(np.float64, copy=False)
    data_v *= VOLTS_PER_UNIT[unit]
    _check_amplitude_scale(data_v, ch_types, unit)
    names = tuple(ch_names.tolist())
    return EpochSet(
        data=data_v,
        sfreq=sfreq,
        tmin=tmin,
        ch_names=names,
        ch_types=ch_types,
        labels=labels,
        positions=_positions(arrays.get("positions"), arrays.get("montage"), names),
        trial_arrays=_trial_arrays(arrays, n_trials),
    )


def _trial_arrays(arrays: dict[str, np.ndarray], n_trials: int) -> dict[str, np.ndarray]:
    """The ``trial_*`` arrays, each checked to hold one number or text per trial; trial ids must be unique."""
    kept = {}
    for key in sorted(key for key in arrays if key.startswith(TRIAL_ARRAY_PREFIX)):
        value = arrays[key]
        if value.ndim != 1 or value.shape[0] != n_trials or value.dtype.kind not in "biufU":
            raise EpochSetFormatError(
                key,
                f"is a per-trial array but has shape {value.shape} and dtype {value.dtype}",
                f"Give one number or string per trial ({n_trials} entries), or leave it out",
            )
        kept[key] = value
    ids = kept.get(TRIAL_ID_KEY)
    if ids is not None and np.unique(ids).size != n_trials:
        raise EpochSetFormatError(TRIAL_ID_KEY, "names some trials more than once", "Give every trial its own id")
    return kept


def _positions(
    positions: np.ndarray | None, montage: np.ndarray | None, ch_names: tuple[str, ...]
) -> np.ndarray | None:
    explicit = None if positions is None else checked_positions(positions, len(ch_names))
    if montage is None:
        return explicit
    if montage.dtype.kind != "U" or montage.ndim != 0:
        raise EpochSetFormatError(
            "montage",
            f"must be a single string, got shape {montage.shape} and dtype {montage.dtype}",
            "Store it as numpy.array('standard_1020')",
        )
    return merged_positions(explicit, checked_positions(positions_from_montage(ch_names, str(montage)), len(ch_names)))


def _data_array(data: np.ndarray) -> np.ndarray:
    if data.dtype.kind != "f" or data.dtype.itemsize not in (4, 8):
        raise EpochSetFormatError(
            "data",
            f"has dtype {data.dtype}; float32 or float64 is needed",
            "Convert it with data.astype(numpy.float64)",
        )
    if data.ndim != 3:
        raise EpochSetFormatError(
            "data",
            f"has {data.ndim} dimension(s), shape {data.shape}; 3 are needed: (n_trials, n_channels, n_times)",
            "Stack the epochs into one array of shape (n_trials, n_channels, n_times)",
        )
    n_trials, n_channels, n_times = data.shape
    if n_trials == 0:
        raise EpochSetFormatError("data", "holds no trials (n_trials is 0)", "Upload at least one trial per condition")
    if n_channels == 0:
        raise EpochSetFormatError("data", "holds no channels (n_channels is 0)", "Include the EEG channels")
    if n_times < 2:
        raise EpochSetFormatError(
            "data", f"has {n_times} sample(s) per epoch; at least 2 are needed", "Export epochs of at least 2 samples"
        )
    return data


def _finite_number(value: np.ndarray, key: str, meaning: str) -> float:
    if value.ndim != 0 or value.dtype.kind not in "iuf":
        raise EpochSetFormatError(
            key,
            f"must be a single number, got an array of shape {value.shape} and dtype {value.dtype}",
            f"Store {meaning} as one number, e.g. numpy.float64(...)",
        )
    number = float(value)
    if not math.isfinite(number):
        raise EpochSetFormatError(key, f"is {number}, not a finite number", f"Store {meaning} as a finite number")
    return number


def _string_vector(value: np.ndarray, key: str, length: int, item: str) -> np.ndarray:
    """A 1-D str array with ``length`` non-empty entries, one per ``item``."""
    if value.dtype.kind != "U" or value.ndim != 1:
        raise EpochSetFormatError(
            key,
            f"must be a 1-D array of strings, got shape {value.shape} and dtype {value.dtype}",
            f"Store it as numpy.array([...], dtype=str) with one entry per {item}",
        )
    if value.shape[0] != length:
        raise EpochSetFormatError(
            key, f"has {value.shape[0]} entries but data has {length} {item}s", f"Give exactly one entry per {item}"
        )
    empty = np.flatnonzero(np.char.str_len(np.char.strip(value)) == 0)
    if empty.size:
        raise EpochSetFormatError(
            key,
            f"has {empty.size} empty entr{'y' if empty.size == 1 else 'ies'}, the first for {item} {int(empty[0])}",
            f"Give every {item} a non-empty entry in {key}",
        )
    return value


def _check_unique(ch_names: np.ndarray) -> None:
    names, counts = np.unique(ch_names, return_counts=True)
    repeated = names[counts > 1].tolist()
    if repeated:
        raise EpochSetFormatError(
            "ch_names",
            f"names {', '.join(repr(name) for name in repeated)} appear more than once",
            "Give every channel a unique name",
        )


def _channel_types(value: np.ndarray | None, n_channels: int) -> tuple[str, ...]:
    if value is None:
        return ("eeg",) * n_channels
    ch_types = _string_vector(value, "ch_types", n_channels, "channel")
    invalid = sorted(set(ch_types.tolist()) - set(FILE_CHANNEL_TYPES))
    if invalid:
        raise EpochSetFormatError(
            "ch_types",
            f"has unknown channel type(s) {', '.join(repr(kind) for kind in invalid)}",
            f"Use one of {', '.join(FILE_CHANNEL_TYPES)} for every channel",
        )
    if "eeg" not in ch_types:
        raise EpochSetFormatError("ch_types", "marks no channel as 'eeg'", "Include at least one EEG channel")
    return tuple(ch_types.tolist())


def _unit(value: np.ndarray | None) -> str:
    if value is None:
        return "V"
    if value.dtype.kind != "U" or value.ndim != 0 or str(value) not in VOLTS_PER_UNIT:
        shown = repr(str(value)) if value.dtype.kind == "U" and value.ndim == 0 else f"an array of shape {value.shape}"
        raise EpochSetFormatError(
            "unit",
            f"is {shown}; it must be one of {', '.join(repr(unit) for unit in VOLTS_PER_UNIT)}",
            "Store it as numpy.array('V') or numpy.array('uV'), or leave it out for volts",
        )
    return str(value)


def _check_finite(data: np.ndarray, ch_names: np.ndarray) -> None:
    finite = np.isfinite(data)
    n_bad = int(finite.size - np.count_nonzero(finite))
    if n_bad:
        channel = int(np.flatnonzero(~finite.all(axis=(0, 2)))[0])
        trial = int(np.flatnonzero(~finite[:, channel].all(axis=-1))[0])
        raise EpochSetFormatError(
            "data",
            f"holds {n_bad} NaN or infinite value(s); the first channel with one is {str(ch_names[channel])!r} "
            f"(trial {trial})",
            "Drop or repair those trials or channels before uploading",
        )


def _check_amplitude_scale(data_v: np.ndarray, ch_types: tuple[str, ...], unit: str) -> None:
    """Refuse data whose median EEG channel standard deviation is implausible for ``unit``.

    data_v : array, shape (n_trials, n_channels, n_times), in V
    """
    eeg = np.array([kind == "eeg" for kind in ch_types])
    median_std_v = float(np.median(data_v[:, eeg].std(axis=(0, 2))))
    low, high = PLAUSIBLE_EEG_STD_V
    if low <= median_std_v <= high:
        return
    if unit == "V" and median_std_v > high:
        fix = "If the data are in microvolts, add unit='uV'"
    elif unit == "uV" and median_std_v < low:
        fix = "If the data are in volts, set unit='V' or leave unit out"
    else:
        fix = "Check that the data are EEG in volts (unit='V') or microvolts (unit='uV') and rescale them"
    typical_low, typical_high = TYPICAL_EEG_STD_V
    raise EpochSetFormatError(
        "data",
        f"the median channel standard deviation is {median_std_v:.1e} V, implausible for EEG in "
        f"{_UNIT_WORDS[unit]} (expected roughly {typical_low:.0e} to {typical_high:.0e} V)",
        fix,
    )
