"""FIF files naming other files are refused before MNE opens them (tags per mne.io.constants.FIFF)."""

import struct

import mne
import numpy as np
import pytest
from mne.io.constants import FIFF

from epoch_assay.engine.errors import EpochSetFormatError
from epoch_assay.engine.io.fif import read_fif_epochs
from epoch_assay.engine.io.fif_safety import refuse_file_references
from tests.corpus.fif_files import SELF_NAME, referring_to, split_first_part


def _tag(kind: int, data: bytes, type_: int = FIFF.FIFFT_INT, next_: int = 0) -> bytes:
    """One FIF tag: big-endian kind, type, size, next, then the data (layout of mne/_fiff/tag.py)."""
    return struct.pack(">iIii", kind, type_, len(data), next_) + data


def _file_id() -> bytes:
    return _tag(FIFF.FIFF_FILE_ID, bytes(20), FIFF.FIFFT_ID_STRUCT)


def test_a_single_file_written_by_mne_passes(tmp_path):
    info = mne.create_info(["Fz", "Cz"], 100.0, "eeg")
    epochs = mne.EpochsArray(np.zeros((2, 2, 10)), info, verbose="error")
    path = tmp_path / "one-epo.fif"
    epochs.save(path, verbose="error")
    assert refuse_file_references(path) is None
    assert refuse_file_references(path.read_bytes()) is None
    assert mne.read_epochs(path, verbose="error").get_data().shape == (2, 2, 10)


def test_the_first_part_of_a_split_file_is_refused():
    with pytest.raises(EpochSetFormatError, match="refers to another file"):
        refuse_file_references(split_first_part())


def test_a_file_referring_to_itself_is_refused_before_mne_reads_it(tmp_path):
    path = tmp_path / "blob"
    path.write_bytes(referring_to(SELF_NAME))
    with pytest.raises(EpochSetFormatError, match="refers to another file") as refused:
        read_fif_epochs(path, max_array_bytes=10**9)
    assert str(tmp_path) not in str(refused.value)


def test_a_reference_listed_only_in_the_directory_is_refused():
    # FILE_ID, DIR_POINTER → directory at byte 64; the directory lists a FIFF_REF_FILE_NAME tag that
    # the chain of tags does not reach (the pointer tag ends the chain with next = -1).
    head = _file_id()
    directory_at = len(head) + 20 + 4
    pointer = _tag(FIFF.FIFF_DIR_POINTER, struct.pack(">i", directory_at), next_=FIFF.FIFFV_NEXT_NONE)
    entry = struct.pack(">iIii", FIFF.FIFF_REF_FILE_NAME, FIFF.FIFFT_STRING, 8, 0)
    # Kind 102 is FIFF_DIR (recalled from the format's description; MNE reads the tag at the pointer whatever its kind).
    directory = _tag(102, entry, FIFF.FIFFT_DIR_ENTRY_STRUCT)
    content = head + pointer + bytes(directory_at - len(head) - len(pointer)) + directory
    with pytest.raises(EpochSetFormatError, match="refers to another file"):
        refuse_file_references(content)


def test_tags_pointing_back_to_an_earlier_tag_are_refused():
    head = _file_id()
    looping = struct.pack(">iIii", FIFF.FIFF_NOP, FIFF.FIFFT_INT, 0, len(head))  # its next is itself
    with pytest.raises(EpochSetFormatError, match="damaged"):
        refuse_file_references(head + looping)
