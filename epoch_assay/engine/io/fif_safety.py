"""STUB, to be replaced by the hardening branch's module of the same name and signature.

Only what the raw FIF reader needs until then: refuse a FIF file that names another file
(split recordings, file references), which MNE would open beside the file being read. Tags
are 16-byte big-endian headers ``kind, type, size, next`` (tag layout as in MNE-Python's
``mne/_fiff/tag.py``); this stub walks them in file order and refuses the reference kinds of
``mne.io.constants.FIFF``. The hardening module also checks the tag directory.
"""

import struct
from pathlib import Path

from mne.io.constants import FIFF

from epoch_assay.engine.errors import EpochSetFormatError

FILE_REFERENCE_KINDS = frozenset(
    {FIFF.FIFF_REF_ROLE, FIFF.FIFF_REF_FILE_ID, FIFF.FIFF_REF_FILE_NUM, FIFF.FIFF_REF_FILE_NAME, FIFF.FIFF_REF_PATH}
)
_HEADER = struct.Struct(">iIii")
_FIX = "Upload one file that holds all the data: save it again with MNE, with split_size larger than the data"


def refuse_file_references(path_or_bytes: Path | str | bytes) -> None:
    """Raise :class:`EpochSetFormatError` if the FIF file has a tag that names or numbers another file."""
    content = path_or_bytes if isinstance(path_or_bytes, bytes) else Path(path_or_bytes).read_bytes()
    position, seen = 0, set()
    while position >= 0 and position + _HEADER.size <= len(content) and position not in seen:
        seen.add(position)
        kind, _type, size, following = _HEADER.unpack_from(content, position)
        if kind in FILE_REFERENCE_KINDS:
            raise EpochSetFormatError(
                "file", "the FIF file refers to another file (a split recording or a file reference)", _FIX
            )
        if following == FIFF.FIFFV_NEXT_NONE or size < 0:
            return
        position = position + _HEADER.size + size if following == FIFF.FIFFV_NEXT_SEQ else following
