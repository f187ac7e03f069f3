"""A JSON epoch set: the NPZ file's keys as JSON values, for small posts from scripts.

``data`` is a nested list (n_trials, n_channels, n_times); ``sfreq`` and ``tmin`` are
numbers; ``ch_names``, ``labels`` and the optional ``ch_types`` are lists of strings;
``unit`` and ``montage`` are strings; ``positions`` is a list of [x, y, z] in m (null for
an unknown coordinate). ``subject`` and ``session`` say whose data it is. The arrays pass
the same checks as an NPZ file.
"""

import json
from dataclasses import dataclass

import numpy as np

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import EpochSetFormatError
from epoch_assay.engine.io.npz import OPTIONAL_KEYS, REQUIRED_KEYS, epoch_set_from_arrays

IDENTITY_KEYS = ("subject", "session")
_NUMERIC_KEYS = ("data", "sfreq", "tmin", "positions")
_FIX = "Send a JSON object with the keys of the NPZ epoch-set file (see docs/inputs.md), arrays as nested lists"


@dataclass(frozen=True)
class JsonEpochSet:
    """A parsed JSON epoch set and whose it is."""

    epochs: EpochSet
    subject: str | None
    session: str | None


def parse_json_epochs(body: bytes) -> JsonEpochSet:
    """Parse and check a JSON epoch set (data in V after the ``unit`` is applied)."""
    try:
        document = json.loads(body)
    except json.JSONDecodeError as error:
        raise EpochSetFormatError(
            "body", f"is not valid JSON (line {error.lineno}, column {error.colno})", _FIX
        ) from None
    except (ValueError, RecursionError):
        # ValueError: an integer of more digits than Python converts; RecursionError: nesting too deep.
        raise EpochSetFormatError(
            "body", "is not JSON that can be read: too deeply nested, or a number too long", _FIX
        ) from None
    if not isinstance(document, dict):
        raise EpochSetFormatError("body", f"is a JSON {type(document).__name__}, not an object", _FIX)
    unknown = sorted(set(document) - set(REQUIRED_KEYS + OPTIONAL_KEYS + IDENTITY_KEYS))
    if unknown:
        raise EpochSetFormatError(
            unknown[0],
            f"unknown key(s) {', '.join(repr(key) for key in unknown)}",
            f"Remove them; the keys read are {', '.join(REQUIRED_KEYS + OPTIONAL_KEYS + IDENTITY_KEYS)}",
        )
    arrays = {key: _array(key, value) for key, value in document.items() if key not in IDENTITY_KEYS}
    for key in REQUIRED_KEYS:
        if key not in arrays:
            raise EpochSetFormatError(key, f"the body has no {key!r}", _FIX)
    return JsonEpochSet(
        epochs=epoch_set_from_arrays(arrays), subject=_text(document, "subject"), session=_text(document, "session")
    )


def _array(key: str, value: object) -> np.ndarray:
    try:
        if key in _NUMERIC_KEYS:
            return np.array(value, dtype=np.float64)
        array = np.array(value)
    except OverflowError:
        raise EpochSetFormatError(
            key, "holds a number too large for a 64-bit float", "Give numbers within ±1.8e308, in V or µV"
        ) from None
    except (ValueError, TypeError, RecursionError):
        raise EpochSetFormatError(
            key,
            "cannot be read as a regular array of numbers (ragged lists, or values that are not numbers)",
            "Give every trial the same channels and every channel the same samples",
        ) from None
    if array.dtype.kind not in "U" and not (array.size == 0 and array.ndim == 1):
        raise EpochSetFormatError(key, f"must hold strings, got {array.dtype}", "Give text values as JSON strings")
    return array.astype(str)


def _text(document: dict, key: str) -> str | None:
    value = document.get(key)
    if value is not None and not isinstance(value, str):
        raise EpochSetFormatError(key, f"must be a string, got {type(value).__name__}", f"Give {key} as text")
    return value
