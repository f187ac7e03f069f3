"""BIDS sidecar files that describe a recording's channels (BIDS specification, EEG: "Channels
description (*_channels.tsv)", "Electrodes description (*_electrodes.tsv)", "Coordinate System
JSON (*_coordsystem.json)").

* ``channels.tsv``: columns ``name`` and ``type`` (required), ``status`` (optional, ``good``,
  ``bad`` or ``n/a``). BIDS types map to ours: EEG → eeg; EOG, HEOG, VEOG → eog; TRIG → stim;
  every other BIDS type → misc. A ``bad`` status flags the channel bad before any step.
* ``electrodes.tsv``: columns ``name``, ``x``, ``y``, ``z`` (``n/a`` where unknown), in the
  units that ``coordsystem.json`` declares in ``EEGCoordinateUnits`` (``m``, ``cm`` or ``mm``),
  converted to m; the positions are taken as head coordinates (the axes of BIDS ``CapTrak``:
  x towards the right ear, y towards the nose, z up).
"""

import json
import math
from dataclasses import dataclass
from pathlib import Path

from epoch_assay.engine.errors import EpochSetFormatError
from epoch_assay.engine.io.tsv import MISSING, read_tsv

# BIDS EEG channel types (BIDS specification, appendix "Units" / channels.tsv "type"; recalled from memory).
BIDS_CHANNEL_TYPES = {
    "EEG": "eeg",
    "EOG": "eog",
    "HEOG": "eog",
    "VEOG": "eog",
    "TRIG": "stim",
    **{
        kind: "misc"
        for kind in ("AUDIO", "ECG", "EMG", "EYEGAZE", "GSR", "MISC", "PPG", "PUPIL", "REF", "RESP", "SYSCLOCK", "TEMP")
    },
}
STATUSES = ("good", "bad", MISSING)
METRES_PER_UNIT = {"m": 1.0, "cm": 1e-2, "mm": 1e-3}
MAX_COORDSYSTEM_BYTES = 64 * 1024
_CHANNELS_FIX = "Give a tab-separated channels.tsv with a header line naming name, type and (optionally) status"
_ELECTRODES_FIX = "Give a tab-separated electrodes.tsv with a header line naming name, x, y and z"
_COORDSYSTEM_FIX = 'Send the coordsystem.json of the electrodes, with "EEGCoordinateUnits": "m", "cm" or "mm"'


@dataclass(frozen=True)
class ChannelsSidecar:
    """Channel types and bad channels from a channels.tsv, by channel name as the file writes it."""

    types: dict[str, str]
    bads: tuple[str, ...]


def read_channels_tsv(path: Path) -> ChannelsSidecar:
    """Read a BIDS channels.tsv (see the module docstring)."""
    table = read_tsv(path, "channels", ("name", "type"), _CHANNELS_FIX)
    names = _unique_names(table.column("name"), table.line_numbers, "channels", _CHANNELS_FIX)
    types = {}
    for name, kind, line in zip(names, table.column("type"), table.line_numbers, strict=True):
        if kind.upper() not in BIDS_CHANNEL_TYPES:
            raise EpochSetFormatError(
                "channels",
                f"line {line}: type {kind!r} of channel {name!r} is not a BIDS channel type",
                f"Use one of {', '.join(BIDS_CHANNEL_TYPES)}",
            )
        types[name] = BIDS_CHANNEL_TYPES[kind.upper()]
    statuses = table.column("status") if "status" in table.header else [MISSING] * len(names)
    for name, status, line in zip(names, statuses, table.line_numbers, strict=True):
        if status.lower() not in STATUSES:
            raise EpochSetFormatError(
                "channels", f"line {line}: status {status!r} of channel {name!r} is not good, bad or n/a", _CHANNELS_FIX
            )
    bads = tuple(name for name, status in zip(names, statuses, strict=True) if status.lower() == "bad")
    return ChannelsSidecar(types=types, bads=bads)


def read_coordinate_units(path: Path) -> float:
    """Metres per unit of the electrode positions, from a coordsystem.json's ``EEGCoordinateUnits``."""
    if path.stat().st_size > MAX_COORDSYSTEM_BYTES:
        raise EpochSetFormatError(
            "coordsystem", f"the file is larger than {MAX_COORDSYSTEM_BYTES} bytes", _COORDSYSTEM_FIX
        )
    try:
        document = json.loads(path.read_bytes().decode("utf-8-sig"))
    except (UnicodeDecodeError, json.JSONDecodeError):
        raise EpochSetFormatError("coordsystem", "the file is not a JSON document", _COORDSYSTEM_FIX) from None
    units = document.get("EEGCoordinateUnits") if isinstance(document, dict) else None
    if units not in METRES_PER_UNIT:
        raise EpochSetFormatError(
            "coordsystem",
            f"EEGCoordinateUnits is {units!r}; the positions' units must be m, cm or mm",
            _COORDSYSTEM_FIX,
        )
    return METRES_PER_UNIT[units]


def read_electrodes_tsv(path: Path, metres_per_unit: float) -> dict[str, tuple[float, float, float]]:
    """Electrode positions from a BIDS electrodes.tsv, in m, by name; electrodes with ``n/a`` coordinates left out."""
    table = read_tsv(path, "electrodes", ("name", "x", "y", "z"), _ELECTRODES_FIX)
    names = _unique_names(table.column("name"), table.line_numbers, "electrodes", _ELECTRODES_FIX)
    columns = [table.column(axis) for axis in ("x", "y", "z")]
    positions: dict[str, tuple[float, float, float]] = {}
    for index, (name, line) in enumerate(zip(names, table.line_numbers, strict=True)):
        texts = [column[index] for column in columns]
        if all(text == MISSING for text in texts):
            continue
        x, y, z = (_coordinate(text, name, line) * metres_per_unit for text in texts)
        positions[name] = (x, y, z)
    return positions


def _coordinate(text: str, name: str, line: int) -> float:
    try:
        number = float(text)
    except ValueError:
        number = math.nan
    if not math.isfinite(number):
        raise EpochSetFormatError(
            "electrodes",
            f"line {line}: a coordinate of electrode {name!r} is {text!r}, not a number",
            "Give x, y and z as numbers, or n/a for all three where the position is unknown",
        )
    return number


def _unique_names(names: list[str], lines: tuple[int, ...], field: str, fix: str) -> list[str]:
    seen: set[str] = set()
    for name, line in zip(names, lines, strict=True):
        if not name or name == MISSING:
            raise EpochSetFormatError(field, f"line {line} has no channel name", fix)
        if name in seen:
            raise EpochSetFormatError(field, f"line {line}: channel {name!r} is listed twice", "List each channel once")
        seen.add(name)
    return names
