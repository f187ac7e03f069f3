"""One stored file for a session post: its runs, events and sidecars in a zip archive of our own making.

The service writes the bundle from the uploaded parts and keeps it as one blob; the worker
(and the service, to check an upload) reads it back. Members have names of our own
(``run-1/header``, ``run-1/events.tsv``, ``channels.tsv``, ...), listed in ``manifest.json``
with each run's format. Members are stored uncompressed with a fixed timestamp, so the same
files give the same bytes (and the same hash). Reading extracts only the members the manifest
lists, under those names, into a private temporary folder.
"""

import json
import tempfile
import zipfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from epoch_assay.engine.errors import EpochSetFormatError
from epoch_assay.engine.io.detect import FileFormat
from epoch_assay.engine.io.session_files import RunFiles, SessionFiles

MANIFEST = "manifest.json"
BUNDLE_VERSION = 1
SIDECARS = ("channels_tsv", "electrodes_tsv", "coordsystem")
_SIDECAR_MEMBERS = {
    "channels_tsv": "channels.tsv",
    "electrodes_tsv": "electrodes.tsv",
    "coordsystem": "coordsystem.json",
}
_FIXED_TIME = (1980, 1, 1, 0, 0, 0)
_CHUNK_BYTES = 1 << 20


def write_bundle(session: SessionFiles, target: Path) -> None:
    """Write ``session``'s files and a manifest into the zip archive ``target``."""
    manifest: dict = {"version": BUNDLE_VERSION, "runs": []}
    with zipfile.ZipFile(target, "w", compression=zipfile.ZIP_STORED, allowZip64=True) as archive:
        for number, run in enumerate(session.runs, start=1):
            members = {role: f"run-{number}/{role}" for role in run.files}
            for role, path in run.files.items():
                _add(archive, members[role], path)
            events = None
            if run.events is not None:
                events = f"run-{number}/events.tsv"
                _add(archive, events, run.events)
            manifest["runs"].append({"format": run.file_format.value, "files": members, "events": events})
        for role in SIDECARS:
            path = getattr(session, role)
            manifest[role] = None if path is None else _SIDECAR_MEMBERS[role]
            if path is not None:
                _add(archive, _SIDECAR_MEMBERS[role], path)
        info = zipfile.ZipInfo(MANIFEST, date_time=_FIXED_TIME)
        archive.writestr(info, json.dumps(manifest, sort_keys=True))


def is_bundle(path: Path) -> bool:
    """Whether ``path`` is a bundle (a zip archive with a manifest), not a bare recording file."""
    if not zipfile.is_zipfile(path):
        return False
    with zipfile.ZipFile(path) as archive:
        return MANIFEST in archive.namelist()


@contextmanager
def unpacked_bundle(path: Path) -> Iterator[SessionFiles]:
    """The session's files, extracted into a private temporary folder that is removed on exit."""
    with zipfile.ZipFile(path) as archive, tempfile.TemporaryDirectory(prefix="epoch-assay-session-") as folder:
        manifest = json.loads(archive.read(MANIFEST))
        if manifest.get("version") != BUNDLE_VERSION:
            raise EpochSetFormatError(
                "file", f"the stored session has bundle version {manifest.get('version')!r}", "Upload it again"
            )
        root = Path(folder)

        def extracted(member: str) -> Path:
            target = root / member.replace("/", "_")
            with archive.open(member) as source, open(target, "wb") as out:
                while chunk := source.read(_CHUNK_BYTES):
                    out.write(chunk)
            return target

        runs = tuple(
            RunFiles(
                file_format=FileFormat(run["format"]),
                files={role: extracted(member) for role, member in run["files"].items()},
                events=None if run["events"] is None else extracted(run["events"]),
            )
            for run in manifest["runs"]
        )
        sidecars = {role: extracted(manifest[role]) for role in SIDECARS if manifest.get(role) is not None}
        yield SessionFiles(runs=runs, **sidecars)


def _add(archive: zipfile.ZipFile, member: str, path: Path) -> None:
    info = zipfile.ZipInfo(member, date_time=_FIXED_TIME)
    info.compress_type = zipfile.ZIP_STORED
    with open(path, "rb") as source, archive.open(info, "w", force_zip64=True) as out:
        while chunk := source.read(_CHUNK_BYTES):
            out.write(chunk)
