"""Tab-separated text files with a header line, as BIDS writes them (events, channels, electrodes).

UTF-8 (a byte-order mark is allowed), one header line naming the columns, one row per line,
every row with as many tab-separated fields as the header; blank lines are skipped; ``n/a``
marks a missing value (BIDS specification, "Tabular files").
"""

from dataclasses import dataclass
from pathlib import Path

from epoch_assay.engine.errors import EpochSetFormatError

MISSING = "n/a"
# common practice: a sidecar or events file of a few hours holds thousands of rows, not millions
MAX_TSV_BYTES = 16 * 1024 * 1024
MAX_TSV_ROWS = 200_000


@dataclass(frozen=True)
class Table:
    """The rows of a TSV file; ``line_numbers[i]`` is the file line of ``rows[i]`` (the header is line 1)."""

    header: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    line_numbers: tuple[int, ...]

    def column(self, name: str) -> list[str]:
        """The stripped values of column ``name``, one per row."""
        index = self.header.index(name)
        return [row[index].strip() for row in self.rows]


def read_tsv(path: Path, field: str, required: tuple[str, ...], fix: str) -> Table:
    """Read ``path`` as a TSV table with at least the ``required`` columns; errors name ``field`` and say ``fix``."""
    if path.stat().st_size > MAX_TSV_BYTES:
        raise EpochSetFormatError(
            field, f"the file is larger than {MAX_TSV_BYTES} bytes", "Keep only this recording's rows"
        )
    try:
        text = path.read_bytes().decode("utf-8-sig")
    except UnicodeDecodeError as error:
        raise EpochSetFormatError(
            field, f"the file is not UTF-8 text ({error.reason} at byte {error.start})", fix
        ) from None
    numbered = [(number, line) for number, line in enumerate(text.splitlines(), start=1) if line.strip()]
    if not numbered:
        raise EpochSetFormatError(field, "the file is empty", fix)
    if len(numbered) - 1 > MAX_TSV_ROWS:
        raise EpochSetFormatError(
            field, f"the file has {len(numbered) - 1} rows, more than {MAX_TSV_ROWS}", "Keep only this recording's rows"
        )
    header = tuple(name.strip() for name in numbered[0][1].split("\t"))
    missing = [name for name in required if name not in header]
    if missing:
        raise EpochSetFormatError(
            field,
            f"the header line has no column(s) {', '.join(missing)} (it has {', '.join(repr(name) for name in header)})",
            fix,
        )
    rows = []
    for number, line in numbered[1:]:
        row = tuple(line.split("\t"))
        if len(row) != len(header):
            raise EpochSetFormatError(
                field, f"line {number} has {len(row)} tab-separated fields but the header has {len(header)}", fix
            )
        rows.append(row)
    return Table(header=header, rows=tuple(rows), line_numbers=tuple(number for number, _ in numbered[1:]))
