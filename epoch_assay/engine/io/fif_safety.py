"""Refuse FIF files that name other files, by reading their tag structure ourselves, before MNE opens them.

A FIF file is a sequence of tags, each a 16-byte big-endian header ``kind, type, size, next``
followed by ``size`` bytes of data; ``next`` is 0 for "the tag that follows", -1 for "none",
and otherwise the byte position of the next tag. The second tag (``FIFF_DIR_POINTER``) may
point at a directory tag (``FIFF_DIR``) listing every tag as ``kind, type, size, position``.
(Tag layout and kinds as in MNE-Python's FIF reader and constants, ``mne.io.constants.FIFF``
and ``mne/_fiff/tag.py``, ``mne/_fiff/open.py``; Hämäläinen, "Functional Image File Format",
Elekta Neuromag, 1999, the format's own description, recalled from memory.)

MNE follows a file's references: a ``FIFFB_REF`` block with ``FIFF_REF_FILE_NAME`` (or only
``FIFF_REF_FILE_NUM``) makes ``read_epochs`` and ``read_raw_fif`` open the "next split
file", resolved against the folder of the file being read, so an upload could make the
server read any file it can open, itself repeatedly, or probe for files. An upload is one
file: any reference to another file is refused, whether MNE would read it through the
directory or by walking the tags one after another, so both are checked.
"""

import io
import os
import struct
from pathlib import Path
from typing import BinaryIO

from mne.io.constants import FIFF

from epoch_assay.engine.errors import EpochSetFormatError

# Every tag kind that names or numbers another file (mne.io.constants.FIFF).
FILE_REFERENCE_KINDS = frozenset(
    {
        FIFF.FIFF_REF_ROLE,
        FIFF.FIFF_REF_FILE_ID,
        FIFF.FIFF_REF_FILE_NUM,
        FIFF.FIFF_REF_FILE_NAME,
        FIFF.FIFF_REF_PATH,
    }
)
_HEADER = struct.Struct(">iIii")
_INT32 = struct.Struct(">i")
_NEXT_SEQUENTIAL, _NEXT_NONE = FIFF.FIFFV_NEXT_SEQ, FIFF.FIFFV_NEXT_NONE
_FIX = "Upload one file that holds all the data: save it again with MNE, with split_size larger than the data"
_DAMAGED_FIX = "Save the data again with MNE and upload the file it writes, unchanged"


def refuse_file_references(path_or_bytes: Path | str | bytes) -> None:
    """Raise :class:`EpochSetFormatError` if the FIF file refers to another file, or its tag structure is damaged.

    Reads only tag headers (16 bytes each) and the directory; never MNE. Walks the tags as MNE
    does without a directory (following ``next``) and, when the file has a directory, checks
    every entry it lists and the tag at every position it gives.
    """
    if isinstance(path_or_bytes, bytes):
        _check(io.BytesIO(path_or_bytes), len(path_or_bytes))
        return
    with open(path_or_bytes, "rb") as handle:
        _check(handle, os.fstat(handle.fileno()).st_size)


def _check(handle: BinaryIO, file_size: int) -> None:
    max_tags = file_size // _HEADER.size + 1
    directory_position = _walk_chain(handle, file_size, max_tags)
    if directory_position > 0:
        _check_directory(handle, file_size, directory_position, max_tags)


def _walk_chain(handle: BinaryIO, file_size: int, max_tags: int) -> int:
    """Follow the tags from the start; the directory position given by the second tag (0: none)."""
    position: int | None = 0
    seen: set[int] = set()
    directory_position = 0
    while position is not None:
        if position in seen or len(seen) >= max_tags:
            raise _damaged("its tags point back to earlier tags")
        seen.add(position)
        header = _header_at(handle, file_size, position)
        if header is None:
            break  # MNE also stops at a short last tag
        kind, _type, size, next_position = header
        _refuse_kind(kind, handle, file_size, position, size)
        if len(seen) == 2 and kind == FIFF.FIFF_DIR_POINTER and size == _INT32.size:
            directory_position = _int_at(handle, position + _HEADER.size)
        position = _following(position, size, next_position)
    return directory_position


def _check_directory(handle: BinaryIO, file_size: int, directory_position: int, max_tags: int) -> None:
    header = _header_at(handle, file_size, directory_position)
    if header is None:
        return  # MNE then walks the tags, which _walk_chain has checked
    _kind, _type, size, _next = header
    n_entries = size // _HEADER.size
    if n_entries > max_tags:
        raise _damaged("its directory lists more tags than the file can hold")
    for index in range(n_entries):
        entry = _header_at(handle, file_size, directory_position + _HEADER.size * (index + 1))
        if entry is None:
            raise _damaged("its directory ends early")
        kind, _type, entry_size, tag_position = entry
        _refuse_kind(kind, handle, file_size, tag_position, entry_size)
        tag = _header_at(handle, file_size, tag_position) if 0 <= tag_position < file_size else None
        if tag is not None:
            _refuse_kind(tag[0], handle, file_size, tag_position, tag[2])


def _refuse_kind(kind: int, handle: BinaryIO, file_size: int, position: int, size: int) -> None:
    if kind in FILE_REFERENCE_KINDS:
        raise EpochSetFormatError(
            "file",
            "the FIF file refers to another file (a split recording or a file reference), which is not read",
            _FIX,
        )
    block_start = kind == FIFF.FIFF_BLOCK_START and size == _INT32.size and 0 <= position < file_size
    if block_start and _int_at(handle, position + _HEADER.size) == FIFF.FIFFB_REF:
        raise EpochSetFormatError(
            "file", "the FIF file refers to another file (it holds a block of file references)", _FIX
        )


def _following(position: int, size: int, next_position: int) -> int | None:
    if next_position == _NEXT_SEQUENTIAL:
        if size < 0:
            raise _damaged("a tag declares a negative size")
        return position + _HEADER.size + size
    if next_position == _NEXT_NONE:
        return None
    if next_position < 0:
        raise _damaged("a tag points to a negative position")
    return next_position


def _header_at(handle: BinaryIO, file_size: int, position: int) -> tuple[int, int, int, int] | None:
    if position < 0 or position + _HEADER.size > file_size:
        return None
    handle.seek(position)
    return _HEADER.unpack(handle.read(_HEADER.size))


def _int_at(handle: BinaryIO, position: int) -> int:
    handle.seek(position)
    raw = handle.read(_INT32.size)
    return _INT32.unpack(raw)[0] if len(raw) == _INT32.size else 0


def _damaged(problem: str) -> EpochSetFormatError:
    return EpochSetFormatError("file", f"the FIF file's tag structure is damaged: {problem}", _DAMAGED_FIX)
