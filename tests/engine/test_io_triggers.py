"""Events from a trigger channel, against MNE's find_events on the same file."""

import mne
import numpy as np
import pytest

from epoch_assay.engine.errors import EpochSetFormatError
from epoch_assay.engine.io.detect import FileFormat
from epoch_assay.engine.io.edf import read_continuous
from epoch_assay.engine.io.triggers import BDF_TRIGGER_MASK, default_trigger_channel, trigger_events
from epoch_assay.engine.recording import ChannelSpec, EpochingSpec, load_recording
from tests.support.recording_files import known_recording
from tests.support.session_files import bdf_bytes, event_codes, status_words

LIMIT = 1 << 28
# Bits 16-23 of a BDF Status word report the amplifier's state, not triggers (the BDF format's maker, "Trigger signals",
# bdf.com/faq/trigger_signals.htm, as cited by MNE's read_raw_bdf documentation). Bit 16 ("new
# epoch") is set here: MNE's reader keeps the low 17 bits of a stim channel, so it reaches the mask.
AMPLIFIER_STATE_BITS = 1 << 16
EPOCHING = {"tmin": -0.2, "tmax": 0.6, "conditions": {"a": ["1"], "b": ["2"]}}


def _status_bdf(tmp_path, high_bits: int = AMPLIFIER_STATE_BITS):
    known = known_recording(seed=5)
    path = tmp_path / "status.bdf"
    path.write_bytes(bdf_bytes(known, status_words(known, high_bits)))
    return known, path


def _mne_find_events(path, mask: int) -> np.ndarray:
    # Reference: mne.find_events (Gramfort et al., 2013, MNE-Python) with the documented mask
    # semantics (mask_type="and": keep the bits set in mask), every change counted.
    raw = mne.io.read_raw_bdf(path, preload=True, verbose="error")
    return mne.find_events(
        raw, stim_channel="Status", mask=mask, mask_type="and", consecutive=True, shortest_event=1, verbose="error"
    )


def test_bdf_status_triggers_give_the_events_mne_find_events_gives_per_condition(tmp_path):
    known, path = _status_bdf(tmp_path)
    recording = read_continuous(path, FileFormat.BDF, max_array_bytes=LIMIT).recording
    ours = trigger_events(recording, "Status", BDF_TRIGGER_MASK)
    reference = _mne_find_events(path, BDF_TRIGGER_MASK)
    sfreq = recording.sfreq
    for code in ("1", "2"):
        expected = reference[reference[:, 2] == int(code), 0] / sfreq
        np.testing.assert_array_equal(ours.onset_s[ours.values == code], expected)
    assert ours.value_counts() == {"1": int(np.sum(event_codes(known) == 1)), "2": int(np.sum(event_codes(known) == 2))}


def test_without_the_mask_the_amplifier_state_bits_make_other_codes(tmp_path):
    _, path = _status_bdf(tmp_path)
    recording = read_continuous(path, FileFormat.BDF, max_array_bytes=LIMIT).recording
    assert set(trigger_events(recording, "Status", None).value_counts()) == {
        str(AMPLIFIER_STATE_BITS),
        str(AMPLIFIER_STATE_BITS | 1),
        str(AMPLIFIER_STATE_BITS | 2),
    }


def test_a_status_channel_is_the_default_source_of_a_bdf_files_events(tmp_path):
    known, path = _status_bdf(tmp_path)
    source = load_recording(path, None, EpochingSpec(**EPOCHING), ChannelSpec(), max_array_bytes=LIMIT)
    (run,) = source.runs
    assert run.events_from == "channel:Status"
    assert run.events.value_counts() == {"1": known.values.count("a"), "2": known.values.count("b")}


def test_a_trigger_mask_given_in_the_epoching_replaces_the_default(tmp_path):
    _, path = _status_bdf(tmp_path)
    conditions = {"a": [str(AMPLIFIER_STATE_BITS | 1)], "b": [str(AMPLIFIER_STATE_BITS | 2)]}
    epoching = EpochingSpec(**EPOCHING | {"trigger_mask": 0x1FFFF, "conditions": conditions})
    source = load_recording(path, None, epoching, ChannelSpec(), max_array_bytes=LIMIT)
    assert set(source.runs[0].events.value_counts()) == {str(AMPLIFIER_STATE_BITS), *conditions["a"], *conditions["b"]}


def test_a_trigger_channel_that_does_not_exist_is_refused_naming_the_channels(tmp_path):
    _, path = _status_bdf(tmp_path)
    epoching = EpochingSpec(**EPOCHING | {"events_from": "channel:Trigger"})
    with pytest.raises(EpochSetFormatError, match=r"'Trigger'.*Status"):
        load_recording(path, None, epoching, ChannelSpec(), max_array_bytes=LIMIT)


def test_a_channel_of_non_integer_values_is_not_a_trigger_channel(tmp_path):
    _, path = _status_bdf(tmp_path)
    epoching = EpochingSpec(**EPOCHING | {"events_from": "channel:Cz"})
    with pytest.raises(EpochSetFormatError, match="not whole numbers"):
        load_recording(path, None, epoching, ChannelSpec(), max_array_bytes=LIMIT)


def test_the_status_channel_is_found_whatever_its_case(tmp_path):
    _, path = _status_bdf(tmp_path)
    recording = read_continuous(path, FileFormat.BDF, max_array_bytes=LIMIT).recording
    assert default_trigger_channel(recording.with_changes(ch_names=(*recording.ch_names[:-1], "STATUS"))) == "STATUS"


def test_events_from_must_name_annotations_or_a_channel():
    with pytest.raises(ValueError, match="events_from"):
        EpochingSpec(**EPOCHING | {"events_from": "status"})
