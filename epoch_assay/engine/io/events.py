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
from epoch_assay.engine.io.tsv import MAX_TSV_ROWS, MISSING, read_tsv

REQUIRED_COLUMNS = ("onset", "duration")
VALUE_COLUMNS = ("trial_type", "value")
_EVENTS_FIX = (
    "Give a tab-separated events.tsv with a header line naming onset, duration and trial_type, "
    "and one row per event (onset and duration in s)"
)


# An events.tsv and a file's annotations are bounded alike.
MAX_EVENTS = MAX_TSV_ROWS


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
    table = read_tsv(path, "events", REQUIRED_COLUMNS, _EVENTS_FIX)
    value_column = next((name for name in VALUE_COLUMNS if name in table.header), None)
    if value_column is None:
        raise EpochSetFormatError(
            "events",
            f"the header line has no column trial_type or value (it has "
            f"{', '.join(repr(name) for name in table.header)})",
            _EVENTS_FIX,
        )
    lines = table.line_numbers
    onset = [
        _seconds(text, "onset", line, allow_missing=False)
        for text, line in zip(table.column("onset"), lines, strict=False)
    ]
    duration = [
        _seconds(text, "duration", line, allow_missing=True)
        for text, line in zip(table.column("duration"), lines, strict=False)
    ]
    values = table.column(value_column)
    empty = next((line for line, value in zip(lines, values, strict=False) if value in ("", MISSING)), None)
    if empty is not None:
        raise EpochSetFormatError(
            "events", f"line {empty} has no event value in column {value_column!r}", "Give every event a value"
        )
    return events_from_lists(onset, duration, values)


def _seconds(field: str, column: str, line: int, *, allow_missing: bool) -> float:
    text = field.strip()
    if allow_missing and text == MISSING:
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
