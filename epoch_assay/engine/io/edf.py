"""Continuous recordings in EDF, EDF+ (Kemp et al., 1992; Kemp & Olivan, 2003) or BDF (the 24-bit variant of EDF).

The header is parsed here first, before MNE reads anything, so that a damaged or hostile
file is refused cheaply: a declared size beyond the memory limit, a file shorter than its
header promises (truncated), or data signals sampled at different rates. The signals are
then read with ``mne.io.read_raw_edf`` / ``read_raw_bdf`` (which scales them by each
signal's physical dimension to V), with channel types taken from label prefixes such as
``EEG Fz`` or ``EOG L`` (the prefix is dropped from the name), and a channel named ``Status``
read as a trigger channel (see :mod:`epoch_assay.engine.io.raw_mne` for what is kept).
"""

import math
from dataclasses import dataclass
from pathlib import Path

import mne

from epoch_assay.engine.errors import EpochSetFormatError, EpochSetTooLargeError
from epoch_assay.engine.io.detect import FileFormat, named_for_reader
from epoch_assay.engine.io.raw_mne import ContinuousFile, continuous_from_raw

ANNOTATION_LABELS = ("EDF Annotations", "BDF Annotations")
BYTES_PER_SAMPLE = {FileFormat.EDF: 2, FileFormat.BDF: 3}
MAX_SIGNALS = 1024
_FIXED_HEADER_BYTES = 256
_SIGNAL_HEADER_BYTES = 256
# Per-signal header fields in file order, with their widths (Kemp et al., 1992, Table 1).
_SIGNAL_FIELDS = (
    ("label", 16),
    ("transducer", 80),
    ("dimension", 8),
    ("physical_min", 8),
    ("physical_max", 8),
    ("digital_min", 8),
    ("digital_max", 8),
    ("prefilter", 80),
    ("samples_per_record", 8),
    ("reserved", 32),
)
_FLOAT64_BYTES = 8
_EXPORT_AGAIN = "Export the recording again from the acquisition software and upload the complete file"


@dataclass(frozen=True)
class EdfHeader:
    """What an EDF/BDF header declares, checked against the file's size."""

    n_records: int
    record_seconds: float
    labels: tuple[str, ...]
    samples_per_record: tuple[int, ...]

    def data_signals(self) -> list[int]:
        return [i for i, label in enumerate(self.labels) if label not in ANNOTATION_LABELS]


def read_header(path: Path, file_format: FileFormat) -> EdfHeader:
    """Parse and check the header of an EDF or BDF file without reading its signals."""
    size = path.stat().st_size
    with open(path, "rb") as handle:
        fixed = handle.read(_FIXED_HEADER_BYTES)
        if len(fixed) < _FIXED_HEADER_BYTES:
            raise _truncated(f"the file has {len(fixed)} bytes, fewer than the 256 of a header")
        n_signals = _integer(fixed[252:256], "number of signals")
        if not 1 <= n_signals <= MAX_SIGNALS:
            raise EpochSetFormatError(
                "file", f"the header declares {n_signals} signals; 1 to {MAX_SIGNALS} are read", _EXPORT_AGAIN
            )
        signal_header = handle.read(_SIGNAL_HEADER_BYTES * n_signals)
    if len(signal_header) < _SIGNAL_HEADER_BYTES * n_signals:
        raise _truncated("the file ends inside its signal headers")
    header_bytes = _integer(fixed[184:192], "header size")
    if header_bytes != _FIXED_HEADER_BYTES * (n_signals + 1):
        raise EpochSetFormatError(
            "file",
            f"the header declares {header_bytes} header bytes, but {n_signals} "
            f"signals need {_FIXED_HEADER_BYTES * (n_signals + 1)}",
            _EXPORT_AGAIN,
        )
    fields = _signal_fields(signal_header, n_signals)
    samples = tuple(_integer(value, "samples per record") for value in fields["samples_per_record"])
    if min(samples) < 1:
        raise EpochSetFormatError("file", "a signal declares no samples per data record", _EXPORT_AGAIN)
    record_bytes = sum(samples) * BYTES_PER_SAMPLE[file_format]
    n_records = _integer(fixed[236:244], "number of data records")
    if n_records == -1:  # "unknown", allowed while recording: as many whole records as the file holds
        n_records = (size - header_bytes) // record_bytes
    if n_records < 1:
        raise _truncated("the file holds no complete data record")
    expected = header_bytes + n_records * record_bytes
    if size < expected:
        raise _truncated(
            f"the header declares {n_records} data records ({expected} bytes in all), but the file has {size} bytes"
        )
    record_seconds = _number(fixed[244:252], "data record duration")
    if not record_seconds > 0:
        raise EpochSetFormatError(
            "file", f"the data record duration is {record_seconds:g} s; it must be positive", _EXPORT_AGAIN
        )
    labels = tuple(label.decode("latin-1").strip() for label in fields["label"])
    return EdfHeader(n_records=n_records, record_seconds=record_seconds, labels=labels, samples_per_record=samples)


def check_header(header: EdfHeader, max_array_bytes: int) -> None:
    """Refuse data signals at different sampling rates and recordings beyond the memory limit."""
    signals = header.data_signals()
    if not signals:
        raise EpochSetFormatError("file", "the file holds annotations only, no signals", _EXPORT_AGAIN)
    rates = {header.labels[i]: header.samples_per_record[i] / header.record_seconds for i in signals}
    if len(set(rates.values())) > 1:
        shown = ", ".join(f"{name} {rate:g} Hz" for name, rate in list(rates.items())[:6])
        raise EpochSetFormatError(
            "file",
            f"the signals are sampled at different rates ({shown}…)"
            if len(rates) > 6
            else f"the signals are sampled at different rates ({shown})",
            "Resample every channel to one rate, or leave out the channels at other rates, and export again",
        )
    declared = len(signals) * header.n_records * header.samples_per_record[signals[0]] * _FLOAT64_BYTES
    if declared > max_array_bytes:
        raise EpochSetTooLargeError(declared, max_array_bytes)


def read_continuous(path: Path, file_format: FileFormat, *, max_array_bytes: int) -> ContinuousFile:
    """Read an EDF/EDF+ or BDF/BDF+ recording with its annotations (see the module docstring)."""
    check_header(read_header(path, file_format), max_array_bytes)
    return continuous_from_raw(_read_raw(path, file_format), file_format)


def _read_raw(path: Path, file_format: FileFormat) -> mne.io.BaseRaw:
    reader = mne.io.read_raw_edf if file_format == FileFormat.EDF else mne.io.read_raw_bdf
    with named_for_reader(path, f"recording.{file_format.value}") as named:
        # The header passed our checks, but the untrusted body may still break MNE's parser in
        # many ways (value, index, struct, OS errors...): each means "not a readable recording".
        try:
            return reader(named, preload=True, infer_types=True, verbose="error")
        except Exception:
            # MNE's message is not passed on: it names server paths.
            raise EpochSetFormatError(
                "file", "the recording's data cannot be read: the file is damaged or ends early", _EXPORT_AGAIN
            ) from None


def _signal_fields(signal_header: bytes, n_signals: int) -> dict[str, list[bytes]]:
    fields, offset = {}, 0
    for name, width in _SIGNAL_FIELDS:
        fields[name] = [signal_header[offset + i * width : offset + (i + 1) * width] for i in range(n_signals)]
        offset += width * n_signals
    return fields


def _integer(field: bytes, meaning: str) -> int:
    number = _number(field, meaning)
    if number != int(number):
        raise EpochSetFormatError("file", f"the header's {meaning} is {number:g}, not a whole number", _EXPORT_AGAIN)
    return int(number)


def _number(field: bytes, meaning: str) -> float:
    text = field.decode("latin-1").strip()
    try:
        number = float(text)
    except ValueError:
        number = math.nan
    if not math.isfinite(number):
        raise EpochSetFormatError("file", f"the header's {meaning} is {text!r}, not a number", _EXPORT_AGAIN)
    return number


def _truncated(problem: str) -> EpochSetFormatError:
    return EpochSetFormatError("file", f"the file is truncated: {problem}", _EXPORT_AGAIN)
