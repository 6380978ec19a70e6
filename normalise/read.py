"""Read pass: turn CSV, TSV and JSON Lines exports into columns of raw cells.

Every data row keeps the line number a person sees in the file (the line on
which the row starts, header = line 1), so that later messages can point at it.
Rows that cannot be read as records (too many or too few fields, a JSON Lines
line that is not an object) are *rejected rows*: kept with their raw text and
the reason, never dropped and never fatal.
"""

from __future__ import annotations

import codecs
import csv
import io
import json
import os
import sys
from dataclasses import dataclass, field
from pathlib import Path

from .errors import UnreadableFile

# The csv module refuses fields above 128 KiB by default; cell size is a
# decoding limit with its own message (see decode.Limits), not a reader crash.
csv.field_size_limit(sys.maxsize)

DELIMITER_CANDIDATES = ("\t", ",", ";", "|")
SNIFF_BYTES = 1 << 16


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

    @property
    def name(self) -> str:
        return Path(self.path).stem

    @property
    def number_of_records(self) -> int:
        return len(self.lines)

    @property
    def rows_read(self) -> int:
        """Data rows read: records plus rejected rows (the header is not a row)."""
        return len(self.lines) + len(self.rejected)


def read(path: str | os.PathLike, *, encoding: str | None = None,
         delimiter: str | None = None) -> Export:
    """Read one export; the format comes from the file's extension and content.

    Example:
        >>> import tempfile, os
        >>> d = tempfile.mkdtemp(); p = os.path.join(d, "t.csv")
        >>> _ = open(p, "w").write('id,tags\\n1,"a|b"\\n2\\n')
        >>> e = read(p)
        >>> e.cells["tags"], e.lines, [r.reason for r in e.rejected]
        (['a|b'], [2], ['too few fields: 1 of 2'])
    """
    path = os.fspath(path)
    if not os.path.exists(path):
        raise UnreadableFile(f"{path}: no such file")
    if os.path.isdir(path):
        raise UnreadableFile(f"{path}: is a directory, expected a CSV, TSV or JSON Lines file")
    suffix = Path(path).suffix.lower()
    if suffix in (".jsonl", ".ndjson") or (suffix == ".json" and _looks_like_json_lines(path)):
        return _read_json_lines(path, encoding or "utf-8-sig")
    if suffix == ".json" and _json_head(path).startswith(b"["):
        raise UnreadableFile(f"{path}: holds a JSON array, not JSON Lines (one object per line); "
                             "rewrite it with one object per line (e.g. jq -c '.[]') as .jsonl")
    return _read_delimited(path, encoding or "utf-8-sig", delimiter)


def _json_head(path: str) -> bytes:
    with open(path, "rb") as f:
        return f.read(1024).lstrip(b"\xef\xbb\xbf \t\r\n")


def _looks_like_json_lines(path: str) -> bool:
    return _json_head(path).startswith(b"{")


class _InvalidBytes:
    """surrogateescape that also notes that it was needed: valid files pay nothing for the check."""

    seen = False

    @classmethod
    def handle(cls, error: UnicodeDecodeError):
        cls.seen = True
        return codecs.lookup_error("surrogateescape")(error)


codecs.register_error("normalise-invalid-bytes", _InvalidBytes.handle)


def _open_text(path: str, encoding: str) -> io.TextIOWrapper:
    # Undecodable bytes are kept as lone surrogates; the decode pass then
    # quarantines such cells with their position instead of crashing here.
    _InvalidBytes.seen = False
    return open(path, "r", encoding=encoding, errors="normalise-invalid-bytes", newline="")


def detect_delimiter(sample: str, suffix: str = "") -> str:
    """Pick the delimiter that splits the sample's rows into the most consistent fields.

    Example:
        >>> detect_delimiter('a;b;c\\n1;"x,y";3\\n')
        ';'
    """
    best, best_score = ("\t" if suffix == ".tsv" else ","), (0.0, 0)
    lines = sample.splitlines(keepends=True)
    if len(sample) >= SNIFF_BYTES and len(lines) > 1:
        lines = lines[:-1]  # the last line of a cut sample is partial
    for candidate in DELIMITER_CANDIDATES:
        try:
            rows = [r for r in csv.reader(lines, delimiter=candidate) if r]
        except csv.Error:
            continue
        if not rows or len(rows[0]) < 2:
            continue
        width = len(rows[0])
        consistent = sum(len(r) == width for r in rows) / len(rows)
        score = (consistent, width)
        if score > best_score:
            best, best_score = candidate, score
    return best


def unique_header(names: list[str]) -> tuple[list[str], list[str]]:
    """Give blank and repeated header names unique names; return names and warnings.

    Example:
        >>> unique_header(["id", "", "id", "name"])
        (['id', 'column_2', 'id_2', 'name'], ["header: column 2 has no name; named 'column_2'", "header: column 3 repeats 'id'; named 'id_2'"])
    """
    seen: set[str] = set()
    out, warnings = [], []
    for i, raw in enumerate(names, start=1):
        name = raw.strip()
        if not name:
            name = f"column_{i}"
            warnings.append(f"header: column {i} has no name; named {name!r}")
        if name in seen:
            base, n = name, 2
            while f"{base}_{n}" in seen or f"{base}_{n}" in names:
                n += 1
            name = f"{base}_{n}"
            warnings.append(f"header: column {i} repeats {base!r}; named {name!r}")
        seen.add(name)
        out.append(name)
    return out, warnings


class _LineTap:
    """Iterator over a file's lines that remembers the lines of the current row."""

    __slots__ = ("_lines", "taken", "chars")

    def __init__(self, lines):
        self._lines = lines
        self.taken: list[str] = []
        self.chars = 0

    def __iter__(self):
        return self

    def __next__(self) -> str:
        line = next(self._lines)
        self.taken.append(line)
        self.chars += len(line)
        return line


def _read_delimited(path: str, encoding: str, delimiter: str | None) -> Export:
    return next(_iter_delimited(path, encoding, delimiter, None))


def iter_chunks(path: str | os.PathLike, chunk_rows: int, *, encoding: str | None = None,
                delimiter: str | None = None):
    """Read a CSV or TSV export as a sequence of Exports of at most ``chunk_rows`` records each.

    Line numbers, rejected rows and warnings are those of the whole file; a
    JSON Lines file (whose columns can appear on any line) comes as one chunk.
    """
    path = os.fspath(path)
    suffix = Path(path).suffix.lower()
    if suffix in (".jsonl", ".ndjson", ".json"):
        yield read(path, encoding=encoding, delimiter=delimiter)
        return
    if not os.path.isfile(path):
        read(path, encoding=encoding, delimiter=delimiter)  # raises the usual error
    yield from _iter_delimited(path, encoding or "utf-8-sig", delimiter, chunk_rows)


def _iter_delimited(path: str, encoding: str, delimiter: str | None, chunk_rows: int | None):
    suffix = Path(path).suffix.lower()
    with _open_text(path, encoding) as f:
        if delimiter is None:
            delimiter = detect_delimiter(f.read(SNIFF_BYTES), suffix)
            f.seek(0)
        tap = _LineTap(iter(f))
        reader = csv.reader(tap, delimiter=delimiter)
        kind = "tsv" if delimiter == "\t" else "csv"
        header = next(reader, None)
        while header == []:  # blank lines before the header (a file of blank lines is empty)
            header = next(reader, None)
        if header is None:
            yield Export(path, kind, [], {}, [], warnings=[f"{path}: empty file"],
                         delimiter=delimiter, encoding=encoding)
            return
        if _quote_left_open("".join(tap.taken), delimiter):
            raise UnreadableFile(f"{path}: a quote opened in the header (line 1) is never closed, "
                                 "so the whole file reads as the header; close or remove the quote")
        header, named = _printable_names(header)
        columns, warnings = unique_header(header)
        warnings = named + warnings
        header_names = dict(zip(columns, header))
        width = len(columns)

        def chunk(cells, lines, rejected, warnings):
            return Export(path, kind, columns, cells, lines, rejected, warnings,
                          header_names=header_names, delimiter=delimiter, encoding=encoding,
                          chars_read=tap.chars, invalid_bytes=_InvalidBytes.seen)

        cells: dict[str, list] = {c: [] for c in columns}
        store = [cells[c].append for c in columns]
        lines: list[int] = []
        rejected: list[RejectedRow] = []
        tap.taken.clear()
        line_no = reader.line_num  # lines consumed so far
        blank = 0
        any_rows = False
        last, last_start, last_taken = None, 0, []  # kind, line and lines of the last row
        while True:
            try:
                row = next(reader)
            except StopIteration:
                break
            except csv.Error as exc:  # unreachable in non-strict mode; kept as a guard
                rejected.append(RejectedRow(path, line_no + 1, "".join(tap.taken), f"unreadable row: {exc}"))
                tap.taken.clear()
                line_no = reader.line_num
                last = None
                continue
            start = line_no + 1
            line_no = reader.line_num
            if len(row) == width:
                if chunk_rows is not None and len(lines) >= chunk_rows:
                    # hand over all but nothing of this row: the last row of the file
                    # must stay behind in case its quote never closes
                    yield chunk(cells, lines, rejected, warnings)
                    any_rows = True
                    cells = {c: [] for c in columns}
                    store = [cells[c].append for c in columns]
                    lines, rejected, warnings = [], [], []
                for put, value in zip(store, row):
                    put(value)
                lines.append(start)
                last = "record"
            elif not row:
                blank += 1
                last = None
            else:
                raw = "".join(tap.taken)
                reason = (f"too many fields: {len(row)} of {width}" if len(row) > width
                          else f"too few fields: {len(row)} of {width}")
                rejected.append(RejectedRow(path, start, raw, reason))
                last = "rejected"
            last_start, last_taken, tap.taken = start, tap.taken, []
        # Only the last row can hold a quote that is never closed: it runs to
        # the end of the file. Such a row is rejected even when its field count
        # happens to be right, so the rest of the file is not taken as one cell.
        if last is not None and _quote_left_open("".join(last_taken), delimiter):
            note = "a quote opened in this row is never closed; the row runs to the end of the file"
            if last == "record":
                for c in columns:
                    cells[c].pop()
                lines.pop()
                rejected.append(RejectedRow(path, last_start, "".join(last_taken), note))
            else:
                rejected[-1].reason += f" ({note})"
    if blank:
        warnings.append(f"{blank} blank line(s) skipped")
    if not lines and not rejected and not any_rows:
        warnings.append(f"{path}: header only, no data rows")
    yield chunk(cells, lines, rejected, warnings)


def _quote_left_open(raw: str, delimiter: str) -> bool:
    """Whether a row's text ends inside a quoted field (a quote never closed).

    A sentinel line after a complete row reads as a row of its own; after an
    open quote the csv reader takes it into the quoted field.

    Example:
        >>> _quote_left_open('1,"a\\nb\\n', ","), _quote_left_open('1,"a\\nb"\\n', ","), _quote_left_open('1,a"b\\n', ",")
        (True, False, False)
    """
    if '"' not in raw:
        return False
    sentinel = "x" if delimiter != "x" else "y"
    rows = list(csv.reader(io.StringIO(raw + "\n" + sentinel, newline=""), delimiter=delimiter))
    return rows[-1] != [sentinel]


def printable_name(name: str) -> str:
    """A name with bytes the encoding could not read (lone surrogates) written as ``\\xNN`` escapes.

    Names become column names and manifest entries, which must be text.

    Example:
        >>> printable_name("na\\udcffme"), printable_name("\\ud800"), printable_name("name")
        ('na\\\\xffme', '\\\\ud800', 'name')
    """
    if name.isascii() or not any("\ud800" <= ch <= "\udfff" for ch in name):
        return name
    try:
        return name.encode("utf-8", "surrogateescape").decode("utf-8", "backslashreplace")
    except UnicodeEncodeError:  # a surrogate from a JSON escape, not from an undecodable byte
        return name.encode("utf-8", "backslashreplace").decode("utf-8")


def _printable_names(header: list[str]) -> tuple[list[str], list[str]]:
    out, warnings = [], []
    for i, name in enumerate(header, start=1):
        shown = printable_name(name)
        if shown != name:
            warnings.append(f"header: column {i}'s name holds bytes that are not valid in the file's "
                            f"encoding; named {shown!r} (try --encoding)")
        out.append(shown)
    return out, warnings


def _refuse_constant(name: str):
    raise ValueError(f"{name} is not a JSON number (RFC 8259 section 6)")


def _read_json_lines(path: str, encoding: str) -> Export:
    columns: list[str] = []
    cells: dict[str, list] = {}
    lines: list[int] = []
    rejected: list[RejectedRow] = []
    n = 0
    with _open_text(path, encoding) as f:
        for line_no, line in enumerate(f, start=1):
            text = line.strip()
            if not text:
                continue
            try:
                obj = json.loads(text, parse_constant=_refuse_constant)
            except (ValueError, RecursionError) as exc:
                rejected.append(RejectedRow(path, line_no, line, f"not valid JSON: {exc}"))
                continue
            if not isinstance(obj, dict):
                rejected.append(RejectedRow(path, line_no, line,
                                            f"expected a JSON object, got {type(obj).__name__}"))
                continue
            if not all(key.isascii() for key in obj):  # keys with undecodable bytes or lone surrogates
                obj = {printable_name(key): value for key, value in obj.items()}
            for key in obj:
                if key not in cells:
                    columns.append(key)
                    cells[key] = [None] * n
            for key, column in cells.items():
                column.append(obj.get(key))
            lines.append(line_no)
            n += 1
    return Export(path, "jsonl", columns, cells, lines, rejected,
                  header_names={c: c for c in columns}, encoding=encoding)
