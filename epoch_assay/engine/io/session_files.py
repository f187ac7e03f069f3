"""The files of one recording session as uploaded: runs (recordings with their events) and sidecars.

A post carries its files as repeated ``file`` parts and, when events come from events.tsv
files, as many ``events`` parts. Recordings are told apart by content: an EDF, BDF or raw
FIF file is a run of its own; a VHDR header is a run together with the data and marker
files it names (``DataFile=``, ``MarkerFile=``), found among the other parts by the name the
client gave them (only the last path component of that name is compared; it is never used
to store or open anything). Runs keep the order of their recording (or header) parts; the
``i``-th ``events`` part belongs to the ``i``-th run.
"""

from dataclasses import dataclass
from pathlib import Path

from epoch_assay.engine.errors import EpochSetFormatError
from epoch_assay.engine.io.detect import RECORDING_FORMATS, FileFormat, detect_format, sniff
from epoch_assay.engine.io.vhdr_set import header_references

# Roles of a run's files: a single-file recording, or a VHDR header with its data and markers.
RECORDING, HEADER, DATA, MARKERS = "recording", "header", "data", "markers"
MAX_RUNS = 64
_SNIFF_BYTES = 64


@dataclass(frozen=True)
class UploadedPart:
    """One uploaded file: where its bytes are, and the name the client gave it (a label only)."""

    path: Path
    client_name: str

    @property
    def label(self) -> str:
        """The last component of the client's name, the only part compared with a header's references."""
        return self.client_name.replace("\\", "/").rsplit("/", 1)[-1]


@dataclass(frozen=True)
class RunFiles:
    """One run: its recording's files by role, its format, and its events.tsv when one was sent."""

    file_format: FileFormat
    files: dict[str, Path]
    events: Path | None = None


@dataclass(frozen=True)
class SessionFiles:
    """Every file of a session post; sidecars apply to every run."""

    runs: tuple[RunFiles, ...]
    channels_tsv: Path | None = None
    electrodes_tsv: Path | None = None
    coordsystem: Path | None = None


def group_runs(parts: list[UploadedPart], events: list[Path]) -> tuple[RunFiles, ...]:
    """The runs that ``parts`` make, in order, each with its events part (see the module docstring)."""
    formats = [_part_format(part) for part in parts]
    claimed: dict[int, str] = {}
    header_files: dict[int, dict[str, Path]] = {}
    for index, (part, found) in enumerate(zip(parts, formats, strict=True)):
        if found == FileFormat.VHDR_SET:
            references = header_references(part.path.read_bytes())
            header_files[index] = {HEADER: part.path}
            for role, name in ((DATA, references.data_file), (MARKERS, references.marker_file)):
                if name is not None:
                    match = _claim(parts, name, part.label, claimed)
                    claimed[match] = part.label
                    header_files[index][role] = parts[match].path
    runs = []
    for index, (part, found) in enumerate(zip(parts, formats, strict=True)):
        if index in header_files:
            runs.append(RunFiles(file_format=FileFormat.VHDR_SET, files=header_files[index]))
            claimed[index] = part.label
        elif found in RECORDING_FORMATS and index not in claimed:
            runs.append(RunFiles(file_format=found, files={RECORDING: part.path}))
            claimed[index] = part.label
    unclaimed = [part.label for index, part in enumerate(parts) if index not in claimed]
    if unclaimed:
        raise EpochSetFormatError(
            "file",
            f"file(s) {', '.join(repr(name) for name in unclaimed)} match none of the recording formats read here "
            "(EDF, BDF, MNE raw FIF, VHDR header), and no uploaded VHDR header names them",
            "Upload each recording as written by its program, unchanged; with a VHDR header, also the data "
            "and marker files it names, under those names (see docs/inputs.md)",
        )
    if not runs:
        raise EpochSetFormatError("file", "no recording was sent", "Send the recording as a 'file' part")
    if len(runs) > MAX_RUNS:
        raise EpochSetFormatError(
            "file", f"{len(runs)} runs were sent; one post takes at most {MAX_RUNS}", "Post the session in parts"
        )
    if events and len(events) != len(runs):
        raise EpochSetFormatError(
            "events",
            f"{len(events)} events file(s) were sent for {len(runs)} run(s)",
            "Send one events.tsv per run, in the order of the runs, or none (events from the recordings)",
        )
    if events:
        return tuple(RunFiles(run.file_format, run.files, path) for run, path in zip(runs, events, strict=True))
    return tuple(runs)


def _part_format(part: UploadedPart) -> FileFormat | None:
    with open(part.path, "rb") as handle:
        found = sniff(handle.read(_SNIFF_BYTES))
    if found in (FileFormat.NPZ, FileFormat.JSON):
        detect_format(part.path, RECORDING_FORMATS)  # refused, pointing to the epoch-sets route
    return found


def _claim(parts: list[UploadedPart], name: str, header: str, claimed: dict[int, str]) -> int:
    matches = [index for index, part in enumerate(parts) if part.label == name]
    sent = ", ".join(repr(part.label) for part in parts)
    if not matches:
        raise EpochSetFormatError(
            "file",
            f"the VHDR header {header!r} names file {name!r}, which was not sent (the files sent are {sent})",
            f"Send {name!r} as a 'file' part under that name, or correct the header's reference",
        )
    if len(matches) > 1:
        raise EpochSetFormatError(
            "file", f"{len(matches)} files were sent under the name {name!r}", "Send each file once, under its own name"
        )
    if matches[0] in claimed:
        raise EpochSetFormatError(
            "file",
            f"file {name!r} is named by both VHDR headers {claimed[matches[0]]!r} and {header!r}",
            "Give each run's data and marker files their own names",
        )
    return matches[0]
