"""Event markers of a continuous recording, from a BIDS-style ``events.tsv`` or a file's annotations.

An ``events.tsv`` is UTF-8 text with a header line and one tab-separated row per event:

* ``onset``: time of the event from the start of the recording, in s
* ``duration``: in s, a number or ``n/a`` (read as 0)
* ``trial_type``: the event's value, the text that ``epoching.conditions`` maps to a condition
  (``value`` is read when there is no ``trial_type`` column)

Other columns are ignored.
"""

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from epoch_assay.engine.errors import EpochSetFormatError

# common practice: an events file of a few hours holds thousands of rows, not millions
MAX_EVENTS_FILE_BYTES = 16 * 1024 * 1024
MAX_EVENTS = 200_000
REQUIRED_COLUMNS = ("onset", "duration")
VALUE_COLUMNS = ("trial_type", "value")
_MISSING = "n/a"
_EVENTS_FIX = (
    "Give a tab-separated events.tsv with a header line naming onset, duration and trial_type, "
    "and one row per event (onset and duration in s)"
)


@dataclass(frozen=True)
class Events:
    """Events of a recording.

    onset_s : array, shape (n_events,), in s from the start of the recording
    duration_s : array, shape (n_events,), in s
    values : array of str, shape (n_events,), what each event was
    """

    onset_s: np.ndarray
    duration_s: np.ndarray
    values: np.ndarray

    @property
    def n_events(self) -> int:
        return int(self.onset_s.shape[0])

    def value_counts(self) -> dict[str, int]:
        """Number of events per value."""
        values, counts = np.unique(self.values, return_counts=True)
        return {str(value): int(count) for value, count in zip(values, counts, strict=False)}


def events_from_lists(onset_s: list[float], duration_s: list[float], values: list[str]) -> Events:
    """Events from parallel lists (e.g. a file's annotations), in the order given; at most MAX_EVENTS."""
    if len(values) > MAX_EVENTS:
        raise EpochSetFormatError(
            "events",
            f"the recording has {len(values)} annotations, more than {MAX_EVENTS}",
            "Keep only this recording's events, or send them as an events.tsv in the 'events' field",
        )
    return Events(
        onset_s=np.asarray(onset_s, dtype=np.float64).reshape(-1),
        duration_s=np.asarray(duration_s, dtype=np.float64).reshape(-1),
        values=np.asarray([str(value).strip() for value in values], dtype=str).reshape(-1),
    )


def read_events_tsv(path: Path) -> Events:
    """Read and check a BIDS-style ``events.tsv`` (see the module docstring)."""
    if path.stat().st_size > MAX_EVENTS_FILE_BYTES:
        raise EpochSetFormatError(
            "events",
            f"the events file is larger than {MAX_EVENTS_FILE_BYTES} bytes",
            "Keep only the rows of this recording's events",
        )
    try:
        text = path.read_bytes().decode("utf-8-sig")
    except UnicodeDecodeError as error:
        raise EpochSetFormatError(
            "events", f"the events file is not UTF-8 text ({error.reason} at byte {error.start})", _EVENTS_FIX
        ) from None
    lines = [line for line in text.splitlines() if line.strip()]
    if not lines:
        raise EpochSetFormatError("events", "the events file is empty", _EVENTS_FIX)
    if len(lines) - 1 > MAX_EVENTS:
        raise EpochSetFormatError(
            "events",
            f"the events file has {len(lines) - 1} rows, more than {MAX_EVENTS}",
            "Keep only the rows of this recording's events",
        )
    header = [name.strip() for name in lines[0].split("\t")]
    columns = _column_indices(header)
    rows = [line.split("\t") for line in lines[1:]]
    onset, duration, values = [], [], []
    for number, row in enumerate(rows, start=2):
        if len(row) != len(header):
            raise EpochSetFormatError(
                "events",
                f"line {number} has {len(row)} tab-separated fields but the header has {len(header)}",
                _EVENTS_FIX,
            )
        onset.append(_seconds(row[columns["onset"]], "onset", number, allow_missing=False))
        duration.append(_seconds(row[columns["duration"]], "duration", number, allow_missing=True))
        values.append(row[columns["value"]].strip())
    if any(value in ("", _MISSING) for value in values):
        first = next(number for number, value in enumerate(values, start=2) if value in ("", _MISSING))
        raise EpochSetFormatError(
            "events",
            f"line {first} has no event value in column {header[columns['value']]!r}",
            "Give every event a value",
        )
    return events_from_lists(onset, duration, values)


def _column_indices(header: list[str]) -> dict[str, int]:
    missing = [name for name in REQUIRED_COLUMNS if name not in header]
    value_column = next((name for name in VALUE_COLUMNS if name in header), None)
    if missing or value_column is None:
        absent = missing + ([] if value_column else ["trial_type"])
        raise EpochSetFormatError(
            "events",
            f"the header line has no column(s) {', '.join(absent)} (it has {', '.join(repr(name) for name in header)})",
            _EVENTS_FIX,
        )
    return {"onset": header.index("onset"), "duration": header.index("duration"), "value": header.index(value_column)}


def _seconds(field: str, column: str, line: int, *, allow_missing: bool) -> float:
    text = field.strip()
    if allow_missing and text == _MISSING:
        return 0.0
    try:
        number = float(text)
    except ValueError:
        number = math.nan
    if not math.isfinite(number) or number < 0:
        raise EpochSetFormatError(
            "events",
            f"line {line}: {column} is {text!r}, not a number of seconds >= 0",
            f"Write {column} in seconds from the start of the recording",
        )
    return number
