"""Events read from a trigger channel: every change of its masked code to a nonzero code.

A trigger channel holds an integer code per sample. Its codes are first masked with a
bitwise AND (``mask``), keeping only the bits that carry triggers; an event starts at each
sample whose masked code is nonzero and differs from the sample before, and its value is
that code as text ("1", "12", ...). A code already present at the first sample is the
state the recording started in, not an event. These are the semantics of
``mne.find_events(raw, stim_channel=name, mask=mask, mask_type="and", consecutive=True,
shortest_event=1, initial_event=False)`` (MNE-Python, Gramfort et al., 2013; mask_type
"and" keeps the bits set in the mask), which the tests compare against.

The default mask depends on the file: a BDF ``Status`` channel is a 24-bit word whose low 16
bits are the trigger inputs and whose high 8 bits report the amplifier's state (new epoch,
speed mode, CMS in range, battery low) — the BDF format's maker, "Trigger signals"
(bdf.com/faq/trigger_signals.htm, cited by MNE's ``read_raw_bdf`` documentation) and
the BDF format's maker's BDF format description — so BDF files are masked to ``0xFFFF``; other files keep
every bit. (MNE's EDF/BDF reader already drops bits 17-23 of a stim channel, keeping the
16 trigger bits and the "new epoch" bit 16; the mask removes that one too.) Codes are masked
as the bits stored, not as their absolute value.
"""

import re

import numpy as np

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import EpochSetFormatError
from epoch_assay.engine.io.detect import FileFormat
from epoch_assay.engine.io.events import Events, events_from_lists

ANNOTATIONS = "annotations"
CHANNEL_PREFIX = "channel:"
EVENTS_FROM_PATTERN = re.compile(rf"^({ANNOTATIONS}|{CHANNEL_PREFIX}.+)$")
BDF_TRIGGER_MASK = 0xFFFF
DEFAULT_TRIGGER_MASKS = {FileFormat.BDF: BDF_TRIGGER_MASK}
STATUS_CHANNEL = "status"


def default_trigger_mask(file_format: FileFormat) -> int | None:
    """The bits that carry triggers in ``file_format``'s trigger channels; None keeps every bit."""
    return DEFAULT_TRIGGER_MASKS.get(file_format)


def default_trigger_channel(recording: EpochSet) -> str | None:
    """A channel named ``Status`` (any case), else the recording's only trigger (stim) channel, else None."""
    for name in recording.ch_names:
        if name.lower() == STATUS_CHANNEL:
            return name
    stim = [name for name, kind in zip(recording.ch_names, recording.ch_types, strict=True) if kind == "stim"]
    return stim[0] if len(stim) == 1 else None


def trigger_codes(recording: EpochSet, channel: str, mask: int | None) -> np.ndarray:
    """The masked integer codes of ``channel``, shape (n_samples,); refused when not whole numbers."""
    if channel not in recording.ch_names:
        raise EpochSetFormatError(
            "events_from",
            f"names trigger channel {channel!r}, which the recording does not have; it has "
            f"{', '.join(recording.ch_names)}",
            'Name one of those channels ("channel:<name>"), or use "annotations"',
        )
    values = recording.data[0, recording.ch_names.index(channel)]
    codes = np.round(values)
    if not np.array_equal(codes, values):
        raise EpochSetFormatError(
            "events_from",
            f"channel {channel!r} holds values that are not whole numbers, so it is not a trigger channel",
            "Name the channel that holds the trigger codes, or send the events as an events.tsv",
        )
    codes = codes.astype(np.int64)
    return codes if mask is None else codes & mask


def trigger_events(recording: EpochSet, channel: str, mask: int | None) -> Events:
    """Events where the masked code of ``channel`` changes to a nonzero code (see the module docstring)."""
    codes = trigger_codes(recording, channel, mask)
    starts = np.flatnonzero((codes[1:] != codes[:-1]) & (codes[1:] != 0)) + 1
    return events_from_lists(
        (starts / recording.sfreq).tolist(), [0.0] * starts.size, [str(code) for code in codes[starts].tolist()]
    )
