"""BIDS-style events.tsv files."""

import numpy as np
import pytest

from epoch_assay.engine.errors import EpochSetFormatError
from epoch_assay.engine.io.events import read_events_tsv


def _events(tmp_path, text: str):
    path = tmp_path / "events"
    path.write_text(text, encoding="utf-8")
    return read_events_tsv(path)


def test_onsets_durations_and_trial_types_are_read_in_order(tmp_path):
    # Reference: BIDS specification 1.9, "Task events": onset and duration in s, trial_type a text column.
    events = _events(tmp_path, "onset\tduration\ttrial_type\tresponse_time\n1.5\t0\tgo\t0.4\n3.25\tn/a\tstop\tn/a\n")
    np.testing.assert_array_equal(events.onset_s, [1.5, 3.25])
    np.testing.assert_array_equal(events.duration_s, [0.0, 0.0])
    assert events.values.tolist() == ["go", "stop"]


def test_the_value_column_is_read_when_there_is_no_trial_type(tmp_path):
    assert _events(tmp_path, "onset\tduration\tvalue\n1\t0\t12\n").values.tolist() == ["12"]


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("", "empty"),
        ("onset\ttrial_type\n1\ta\n", "duration"),
        ("onset\tduration\n1\t0\n", "trial_type"),
        ("onset\tduration\ttrial_type\nsoon\t0\ta\n", "line 2: onset"),
        ("onset\tduration\ttrial_type\n-1\t0\ta\n", "line 2: onset"),
        ("onset\tduration\ttrial_type\n1\t0\n", "line 2 has 2"),
        ("onset\tduration\ttrial_type\n1\t0\tn/a\n", "no event value"),
    ],
)
def test_a_malformed_events_file_is_refused_saying_where(tmp_path, text, fragment):
    with pytest.raises(EpochSetFormatError, match=fragment):
        _events(tmp_path, text)


def test_an_events_file_that_is_not_utf8_is_refused(tmp_path):
    path = tmp_path / "events"
    path.write_bytes(b"onset\tduration\ttrial_type\n1\t0\t\xff\xfe\n")
    with pytest.raises(EpochSetFormatError, match="UTF-8"):
        read_events_tsv(path)
