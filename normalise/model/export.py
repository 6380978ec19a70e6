"""An export as read: its columns of raw cells, the line each row starts on, and the rows that could not be read.

Every pass after reading takes an ``Export`` (and the join and ``--append`` make new ones), so it is part of the
model every pass shares; ``read.py`` makes them.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

STDIN = "-"  # the input path that means standard input


@dataclass
class RejectedRow:
    """A row that could not be read as a record, kept with its raw text."""

    file: str
    line: int
    raw: str
    reason: str


@dataclass
class Export:
    """One input file read into columns.

    ``cells[name][i]`` is the raw cell of data row ``i``: a ``str`` for CSV and
    TSV, and for JSON Lines the field's value as parsed (a list or dict there is
    already decoded). ``lines[i]`` is the row's line number in the file.
    """

    path: str
    kind: str  # "csv", "tsv" or "jsonl"
    columns: list[str]
    cells: dict[str, list]
    lines: list[int]
    rejected: list[RejectedRow] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    header_names: dict[str, str] = field(default_factory=dict)  # column -> name in the file
    delimiter: str | None = None
    encoding: str = "utf-8"
    chars_read: int = 0  # characters of the file read up to the end of this chunk (for progress)
    invalid_bytes: bool = True  # whether cells may hold bytes the encoding could not read (lone surrogates)
    # set by the join (join.JoinedExport, join.LinkedExport) and by --append; as read, each says "none"
    record_keys: list[int] | None = None  # surrogate key per row, when not the line
    main_rows: int | None = None  # rows that come from the main export itself (None: every row)
    main_rows_read: int | None = None  # rows read of the main export (None: this file's)
    origin: dict = field(default_factory=dict)  # column -> (file path, column in that file), of joined columns
    inner_unmatched: dict | None = None  # row -> why an inner join sets it aside
    parent_path: str = ""  # the main export, of a further export linked one-to-many
    parent_column: str = ""  # the column holding the main record's key
    rows_unmatched: int = 0  # rows of a linked export that name no main record

    @property
    def name(self) -> str:
        return "stdin" if self.path == STDIN else Path(self.path).stem

    @property
    def number_of_records(self) -> int:
        return len(self.lines)

    @property
    def rows_read(self) -> int:
        """Data rows read: records plus rejected rows (the header is not a row)."""
        return len(self.lines) + len(self.rejected)
