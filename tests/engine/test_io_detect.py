"""Formats told apart by their first bytes, whatever the file is called."""

import mne
import numpy as np
import pytest

from epoch_assay.engine.errors import EpochSetFormatError
from epoch_assay.engine.io.detect import EPOCH_FILE_FORMATS, RECORDING_FORMATS, FileFormat, detect_format, sniff
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.recording_files import known_recording, recording_bytes


@pytest.mark.parametrize(
    ("content", "expected"),
    [
        (lambda: npz_bytes(small_epochs()), FileFormat.NPZ),
        (lambda: recording_bytes(known_recording(seconds=3.0, n_events=1), "edf"), FileFormat.EDF),
        (lambda: recording_bytes(known_recording(seconds=3.0, n_events=1), "bdf"), FileFormat.BDF),
        (lambda: b'  {"data": []}', FileFormat.JSON),
    ],
)
def test_the_format_is_recognised_from_the_content(content, expected):
    # Reference: EDF header version "0" + 7 spaces (Kemp et al., 1992); BDF byte 0xFF then its seven-letter
    # identifier (the published BDF header layout); zip local-file header "PK\x03\x04" (PKWARE APPNOTE.TXT 4.3.7).
    assert sniff(content()[:16]) == expected


def test_a_fif_file_is_recognised_by_its_file_id_tag(tmp_path):
    info = mne.create_info(["Fz"], 100.0, ["eeg"])
    path = tmp_path / "x-epo.fif"
    mne.EpochsArray(np.zeros((1, 1, 10)), info, verbose="error").save(path, verbose="error")
    assert sniff(path.read_bytes()[:16]) == FileFormat.FIF


def test_unknown_bytes_are_refused_whatever_the_name(tmp_path):
    path = tmp_path / "looks-like.npz"
    path.write_bytes(b"GIF89a not an epoch set")
    with pytest.raises(EpochSetFormatError, match="match none"):
        detect_format(path, EPOCH_FILE_FORMATS)


def test_a_recording_sent_as_an_epoch_set_is_refused_pointing_to_the_recordings_endpoint(tmp_path):
    path = tmp_path / "epochs.npz"
    path.write_bytes(recording_bytes(known_recording(seconds=3.0, n_events=1), "edf"))
    with pytest.raises(EpochSetFormatError, match="recordings"):
        detect_format(path, EPOCH_FILE_FORMATS)


def test_an_epoch_file_sent_as_a_recording_is_refused(tmp_path):
    path = tmp_path / "rec.edf"
    path.write_bytes(npz_bytes(small_epochs()))
    with pytest.raises(EpochSetFormatError, match="epoch-sets"):
        detect_format(path, RECORDING_FORMATS)
