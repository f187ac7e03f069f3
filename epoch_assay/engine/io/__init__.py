"""Reading and writing epoch-set files."""

from pathlib import Path

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.io.detect import EPOCH_FILE_FORMATS, FileFormat, detect_format
from epoch_assay.engine.io.fif import read_fif_epochs
from epoch_assay.engine.io.json_epochs import parse_json_epochs
from epoch_assay.engine.io.npz import DEFAULT_MAX_COMPRESSION_RATIO, read_npz, write_npz

__all__ = ["read_epoch_set_file", "read_npz", "write_npz"]


def read_epoch_set_file(
    path: Path,
    *,
    max_array_bytes: int,
    max_compression_ratio: float = DEFAULT_MAX_COMPRESSION_RATIO,
    allowed: tuple[FileFormat, ...] = EPOCH_FILE_FORMATS,
) -> tuple[EpochSet, FileFormat]:
    """Read an NPZ, MNE epochs (FIF) or JSON epoch set, told apart by content; also say which it was.

    ``allowed`` narrows the formats accepted (JSON is only parsed from bodies the API has size-capped);
    ``max_compression_ratio`` bounds what an NPZ file may declare relative to its size.
    """
    file_format = detect_format(path, allowed)
    if file_format == FileFormat.NPZ:
        return read_npz(path, max_array_bytes=max_array_bytes, max_compression_ratio=max_compression_ratio), file_format
    if file_format == FileFormat.FIF:
        return read_fif_epochs(path, max_array_bytes=max_array_bytes), file_format
    return parse_json_epochs(path.read_bytes()).epochs, file_format
