"""Tell uploaded file formats apart by their first bytes; the client's file name is never consulted."""

import os
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from enum import StrEnum
from pathlib import Path

from epoch_assay.engine.errors import EpochSetFormatError


class FileFormat(StrEnum):
    NPZ = "npz"
    FIF = "fif"
    JSON = "json"
    EDF = "edf"
    BDF = "bdf"
    VHDR_SET = "vhdr"
    VHDR_MARKERS = "vmrk"


EPOCH_FILE_FORMATS = (FileFormat.NPZ, FileFormat.FIF, FileFormat.JSON)
RECORDING_FORMATS = (FileFormat.EDF, FileFormat.BDF, FileFormat.FIF, FileFormat.VHDR_SET)

# Zip local-file header and empty-archive end record (PKWARE APPNOTE 4.3.7, 4.3.16).
_ZIP_MAGICS = (b"PK\x03\x04", b"PK\x05\x06")
# A FIF file opens with a FIFF_FILE_ID tag: kind 100, type 31 (id struct), size 20, big-endian int32s.
_FIF_MAGIC = b"\x00\x00\x00\x64\x00\x00\x00\x1f\x00\x00\x00\x14"
# EDF header version field: "0" and seven spaces (Kemp et al., 1992); BDF: byte 255, then the
# seven-letter identifier of the BDF header, written as bytes.
_EDF_MAGIC = b"0       "
_BDF_MAGIC = b"\xff\x42\x49\x4f\x53\x45\x4d\x49"
_JSON_OPENERS = (b"{",)
# The first line of a VHDR header or marker file (Brain Products, VHDR Core Data
# Format 1.0) names the vendor and the file's role, e.g. "Brain Vision Data Exchange Header File
# Version 1.0"; writers vary the middle words ("Core", "V-Amp"), so only the ends are compared.
_VHDR_VENDORS = (b"Brain Vision", b"VHDR")
_UTF8_BOM = b"\xef\xbb\xbf"
_HEAD_BYTES = 64


def sniff(head: bytes) -> FileFormat | None:
    """The format whose magic bytes ``head`` (the file's first bytes) starts with, or None."""
    if head.startswith(_ZIP_MAGICS):
        return FileFormat.NPZ
    if head.startswith(_FIF_MAGIC):
        return FileFormat.FIF
    if head.startswith(_EDF_MAGIC):
        return FileFormat.EDF
    if head.startswith(_BDF_MAGIC):
        return FileFormat.BDF
    if head.lstrip().startswith(_JSON_OPENERS):
        return FileFormat.JSON
    first_line = head.removeprefix(_UTF8_BOM).split(b"\n", 1)[0]
    if first_line.startswith(_VHDR_VENDORS):
        if b"Header File" in first_line:
            return FileFormat.VHDR_SET
        if b"Marker File" in first_line:
            return FileFormat.VHDR_MARKERS
    return None


def detect_format(path: Path, allowed: tuple[FileFormat, ...]) -> FileFormat:
    """The format of the file at ``path``, refused unless it is one of ``allowed``."""
    with open(path, "rb") as handle:
        found = sniff(handle.read(_HEAD_BYTES))
    names = ", ".join(fmt.value.upper() for fmt in allowed)
    if found is None:
        raise EpochSetFormatError(
            "file",
            f"the file's first bytes match none of the formats read here ({names})",
            "Upload the file as written by its program, unchanged; see docs/inputs.md",
        )
    if found not in allowed:
        raise EpochSetFormatError(
            "file", f"the file is {found.value.upper()}, but this endpoint reads {names}", _elsewhere(found)
        )
    return found


def _elsewhere(found: FileFormat) -> str:
    if found in RECORDING_FORMATS:
        return "Upload continuous recordings to POST /v1/studies/{code}/recordings, with an epoching spec"
    return "Upload epoch sets to POST /v1/studies/{code}/epoch-sets"


@contextmanager
def named_for_reader(path: Path, file_name: str) -> Iterator[Path]:
    """A link to ``path`` named ``file_name`` in a private temporary folder, for readers that check suffixes.

    MNE's readers insist on a suffix; blobs are stored under their hash, and a client's
    name is never used, so the reader gets a fixed name of our choosing.
    """
    with tempfile.TemporaryDirectory(prefix="epoch-assay-read-") as folder:
        link = Path(folder) / file_name
        os.symlink(Path(path).resolve(), link)
        yield link
