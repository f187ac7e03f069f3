"""VHDR recordings: a header (``.vhdr``), a data file and a marker file (Brain Products,
VHDR Core Data Format 1.0; one of the EEG formats the BIDS specification names).

The header names its data and marker files (``DataFile=`` and ``MarkerFile=`` in its
``[Common Infos]`` section). Those names are only ever compared with the names the client
gave its uploads: they never reach the file system. To read a set, the three files are placed
in a private temporary folder under names of our own, the header's two references rewritten
to those names, and the set read with ``mne.io.read_raw_brainvision``. MNE's own error text is
not passed on (it can hold the private folder's path). A reference with a path
separator or ``..`` (a header pointing elsewhere) is refused.

Markers become events named as MNE names them: ``<type>/<description>``, e.g.
``Stimulus/S  1`` (the description keeps its padding).
"""

import re
import shutil
from dataclasses import dataclass
from pathlib import Path

import mne

from epoch_assay.engine.errors import EpochSetFormatError
from epoch_assay.engine.io.detect import FileFormat
from epoch_assay.engine.io.raw_mne import ContinuousFile, continuous_from_raw, load_within

HEADER_NAME, DATA_NAME, MARKERS_NAME = "recording.vhdr", "recording.eeg", "recording.vmrk"
MAX_REFERENCE_CHARS = 255
_REFERENCE = re.compile(rb"^(DataFile|MarkerFile)=([^\r\n]*)", re.MULTILINE)
_WRITE_AGAIN = "Export the recording again as VHDR and upload its .vhdr, .eeg and .vmrk files unchanged"


@dataclass(frozen=True)
class HeaderReferences:
    """The file names a VHDR header refers to; ``marker_file`` is None when it names none."""

    data_file: str
    marker_file: str | None


def header_references(header: bytes) -> HeaderReferences:
    """The data and marker file names ``header`` (a .vhdr file's bytes) refers to, checked to be bare names."""
    found: dict[str, str] = {}
    for key, value in _REFERENCE.findall(header):
        name = value.decode("utf-8", errors="replace").strip()
        found.setdefault(key.decode(), name)
    if not found.get("DataFile"):
        raise EpochSetFormatError("file", "the VHDR header has no DataFile= line naming its data file", _WRITE_AGAIN)
    for key, name in found.items():
        _check_bare_name(key, name)
    return HeaderReferences(data_file=found["DataFile"], marker_file=found.get("MarkerFile") or None)


def _check_bare_name(key: str, name: str) -> None:
    if "/" in name or "\\" in name or name in (".", "..") or "\x00" in name or len(name) > MAX_REFERENCE_CHARS:
        raise EpochSetFormatError(
            "file",
            f"the VHDR header's {key}= is {name[:80]!r}, which points outside the set of uploaded files",
            f"Write {key}= as the bare name of the uploaded file (no folders, no '..'), or export the set again",
        )


def read_vhdr_set(
    header: Path, data: Path, markers: Path | None, folder: Path, *, max_array_bytes: int
) -> ContinuousFile:
    """Read a VHDR set from its three files, placed in ``folder`` (private, empty) under our own names.

    The recording's data are in V, shape (1, n_channels, n_samples); its markers are its annotations.
    """
    content = header.read_bytes()
    header_references(content)
    renamed = {b"DataFile": DATA_NAME.encode(), b"MarkerFile": MARKERS_NAME.encode() if markers else b""}
    (folder / HEADER_NAME).write_bytes(_REFERENCE.sub(lambda match: match[1] + b"=" + renamed[match[1]], content))
    shutil.copyfile(data, folder / DATA_NAME)
    if markers is not None:
        shutil.copyfile(markers, folder / MARKERS_NAME)
    # The files are untrusted and MNE's parser raises many types on damaged input (value, key,
    # index, configparser, OS errors...): each means "not a readable VHDR set".
    try:
        raw = mne.io.read_raw_brainvision(folder / HEADER_NAME, preload=False, verbose="error")
    except Exception:
        raise EpochSetFormatError("file", "MNE cannot read the VHDR header or markers", _WRITE_AGAIN) from None
    load_within(raw, max_array_bytes, "the VHDR data file is shorter or other than its header declares", _WRITE_AGAIN)
    return continuous_from_raw(raw, FileFormat.VHDR_SET)
