"""Read pass: turn CSV, TSV and JSON Lines exports into columns of raw cells.

Every data row keeps the line number a person sees in the file (the line on
which the row starts, header = line 1), so that later messages can point at it.
Rows that cannot be read as records (too many or too few fields, a JSON Lines
line that is not an object) are *rejected rows*: kept with their raw text and
the reason, never dropped and never fatal.
"""

from __future__ import annotations

import atexit
import codecs
import csv
import io
import itertools
import json
import os
import re
import shutil
import stat
import sys
import tempfile
from pathlib import Path
from warnings import warn

from .model.errors import LooksHeaderless, MissingInput, UnreadableFile
from .model.escapes import printable
from .model.export import STDIN, Export, RejectedRow
from .model.names import free_name

# The csv module refuses fields above 128 KiB by default; cell size is a
# decoding limit with its own message (see decode.Limits), not a reader crash.
csv.field_size_limit(sys.maxsize)

DELIMITER_CANDIDATES = ("\t", ",", ";", "|")
SNIFF_BYTES = 1 << 16
HEADER_CHECK_ROWS = 20  # rows below the header compared with it (looks_headerless)


def read(path: str | os.PathLike, *, encoding: str | None = None,
         delimiter: str | None = None, header: bool = True) -> Export:
    """Read one export; the format comes from the file's extension and content.

    ``header=False`` says a CSV or TSV file has no header row: its columns are named ``column_1``,
    ``column_2``, ... and its first row is a record. With a header that looks like data, a
    ``LooksHeaderless`` warning names the file. A pipe, a FIFO or ``-`` (standard input) is read
    through a copy (``source_path``).

    Example:
        >>> import tempfile, os
        >>> d = tempfile.mkdtemp(); p = os.path.join(d, "t.csv")
        >>> _ = open(p, "w").write('id,tags\\n1,"a|b"\\n2\\n')
        >>> e = read(p)
        >>> e.cells["tags"], e.lines, [r.reason for r in e.rejected]
        (['a|b'], [2], ['too few fields: 1 of 2'])
    """
    path = os.fspath(path)
    _check_input(path)
    suffix = Path(path).suffix.lower()
    if suffix in (".jsonl", ".ndjson") or (suffix == ".json" and _looks_like_json_lines(path)):
        return _read_json_lines(path, encoding or "utf-8-sig")
    if suffix == ".json" and _json_head(path).startswith(b"["):
        raise UnreadableFile(f"{path}: holds a JSON array, not JSON Lines (one object per line); "
                             "rewrite it with one object per line (e.g. jq -c '.[]') as .jsonl", file=path)
    return _read_delimited(path, encoding or "utf-8-sig", delimiter, header)


def _check_input(path: str) -> None:
    if path == STDIN:
        return
    if not os.path.exists(path):
        raise MissingInput(f"{path}: no such file", file=path)
    if os.path.isdir(path):
        raise MissingInput(f"{path}: is a directory, expected a CSV, TSV or JSON Lines file", file=path)


# input path -> its copy, for inputs that can be read only once (pipes, FIFOs, standard input)
_COPIES: dict[str, str] = {}


def source_path(path: str) -> str:
    """The file to open for ``path``: itself when it is a regular file, else a copy made once.

    A pipe, a FIFO or standard input can be read once only and cannot seek back, and an export is read
    more than once (the delimiter is detected on its start; a streamed build reads it again to name a
    cell that differs). Such an input is copied once, in blocks, into the system's temporary directory,
    and the copy stands for it for the rest of the process (removed at exit); messages, table names and
    the manifest keep the path as given.

    Example:
        >>> import tempfile, os
        >>> p = os.path.join(tempfile.mkdtemp(), "t.csv"); _ = open(p, "w").write("a\\n1\\n")
        >>> source_path(p) == p
        True
    """
    if path in _COPIES:
        return _COPIES[path]
    if path != STDIN and stat.S_ISREG(os.stat(path).st_mode):
        return path
    fd, copy = tempfile.mkstemp(prefix="normalise-input-", suffix=Path(path).suffix)
    with open(fd, "wb") as out:
        if path == STDIN:
            shutil.copyfileobj(sys.stdin.buffer, out, 1 << 20)
        else:
            with open(path, "rb") as f:
                shutil.copyfileobj(f, out, 1 << 20)
    _COPIES[path] = copy
    return copy


@atexit.register
def _remove_copies() -> None:
    for copy in _COPIES.values():
        try:
            os.unlink(copy)
        except OSError:
            pass
    _COPIES.clear()


def _json_head(path: str) -> bytes:
    with open(source_path(path), "rb") as f:
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
    return open(source_path(path), "r", encoding=encoding, errors="normalise-invalid-bytes", newline="")


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
            base = name
            name = free_name(base, lambda name: name in seen or name in names)
            warnings.append(f"header: column {i} repeats {base!r}; named {name!r}")
        seen.add(name)
        out.append(name)
    return out, warnings


_NUMBER = re.compile(r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?")
_DATE = re.compile(r"\d{4}-\d\d-\d\d(?:[T ]\d\d:\d\d(?::\d\d(?:\.\d+)?)?(?:Z|[+-]\d\d:?\d\d)?)?")


def _kind(cell: str) -> str:
    """What a cell looks like: ``number``, ``date``, ``nested`` (bracketed), ``empty`` or ``text``."""
    text = cell.strip()
    if not text:
        return "empty"
    if _NUMBER.fullmatch(text):
        return "number"
    if _DATE.fullmatch(text):
        return "date"
    if (text[0], text[-1]) in (("[", "]"), ("{", "}")):
        return "nested"
    return "text"


def looks_headerless(header: list[str], rows: list[list[str]]) -> bool:
    """Whether a header row reads as one more row of data rather than as column names.

    It does when every header cell is a number; when no header cell is text (a name is text) and each is
    of the kind most of the values below it are (numbers over numbers, dates over dates); or when a header
    cell is a list or an object over a column of lists or objects, which no column name is. A header whose
    names are text like the values below (``Ann`` over names) cannot be told from data this way.

    Example:
        >>> looks_headerless(["id", "tags"], [["1", "[1]"]]), looks_headerless(["7", "12.5"], [])
        (False, True)
        >>> looks_headerless(["3", "Moss Ledger", '["maps"]'], [["4", "Salt Almanac", '["essays"]']])
        True
    """
    kinds = [_kind(cell) for cell in header]
    named = [k for k in kinds if k != "empty"]
    if not named:
        return False
    if all(k == "number" for k in named):
        return True
    below = []
    for i in range(len(header)):
        seen = [_kind(row[i]) for row in rows if i < len(row)]
        seen = [k for k in seen if k != "empty"]
        below.append(max(set(seen), key=seen.count) if seen else None)
    if "text" not in kinds and all(k == b for k, b in zip(kinds, below) if k != "empty"):
        return True
    return any(k == b == "nested" for k, b in zip(kinds, below))


def _rows_below(sample: str, delimiter: str) -> list[list[str]]:
    """The first rows after the header in the file's first bytes (the last, perhaps cut, line left out)."""
    if len(sample) >= SNIFF_BYTES:
        sample = sample[:sample.rfind("\n") + 1]
    try:
        rows = (r for r in csv.reader(io.StringIO(sample, newline=""), delimiter=delimiter) if r)
        return list(itertools.islice(rows, 1, HEADER_CHECK_ROWS + 1))
    except csv.Error:
        return []


def _headerless_warning(path: str, header: list[str]) -> str:
    shown = ", ".join(repr(c if len(c) <= 20 else c[:20] + "...") for c in header[:3])
    message = (f"{path}: the first row looks like data, not like column names ({shown}"
               f"{', ...' if len(header) > 3 else ''}); if the file has no header row, give --no-header")
    warn(message, LooksHeaderless, stacklevel=4)
    return message


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


def _read_delimited(path: str, encoding: str, delimiter: str | None, header: bool = True) -> Export:
    return next(_iter_delimited(path, encoding, delimiter, None, header))


def iter_chunks(path: str | os.PathLike, chunk_rows: int, *, encoding: str | None = None,
                delimiter: str | None = None, header: bool = True):
    """Read a CSV or TSV export as a sequence of Exports of at most ``chunk_rows`` records each.

    Line numbers, rejected rows and warnings are those of the whole file; a
    JSON Lines file (whose columns can appear on any line) comes as one chunk.
    """
    path = os.fspath(path)
    suffix = Path(path).suffix.lower()
    if suffix in (".jsonl", ".ndjson", ".json"):
        yield read(path, encoding=encoding, delimiter=delimiter)
        return
    _check_input(path)
    yield from _iter_delimited(path, encoding or "utf-8-sig", delimiter, chunk_rows, header)


# Long (about 110 lines): a generator whose state (the line tap, the header, an open quote at the end of a
# chunk, rejected rows) lasts for the whole file; its parts cannot be left and re-entered apart.
def _iter_delimited(path: str, encoding: str, delimiter: str | None, chunk_rows: int | None,
                    has_header: bool = True):
    suffix = Path(path).suffix.lower()
    with _open_text(path, encoding) as f:
        sample = f.read(SNIFF_BYTES)
        f.seek(0)
        if delimiter is None:
            delimiter = detect_delimiter(sample, suffix)
        tap = _LineTap(iter(f))
        reader = csv.reader(tap, delimiter=delimiter)
        kind = "tsv" if delimiter == "\t" else "csv"
        header = next(reader, None)
        first_line = 1
        while header == []:  # blank lines before the header (a file of blank lines is empty)
            first_line = reader.line_num + 1
            header = next(reader, None)
        if header is None:
            yield Export(path, kind, [], {}, [], warnings=[f"{path}: empty file"],
                         delimiter=delimiter, encoding=encoding)
            return
        if _quote_left_open("".join(tap.taken), delimiter):
            raise UnreadableFile(f"{path}: a quote opened in the {'header' if has_header else 'first row'} "
                                 f"(line {first_line}) is never closed, so the whole file reads as one row; "
                                 "close or remove the quote", file=path, line=first_line)
        first_row, first_taken = None, []
        if has_header:
            header, named = _printable_names(header)
            columns, warnings = unique_header(header)
            warnings = named + warnings
            if looks_headerless(header, _rows_below(sample, delimiter)):
                warnings.append(_headerless_warning(path, header))
        else:  # the first row is a record; its cells are values, not names
            first_row, first_taken = header, tap.taken
            columns, warnings = [f"column_{i}" for i in range(1, len(header) + 1)], []
            header = columns
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
        tap.taken = []
        line_no = reader.line_num  # lines consumed so far
        blank = 0
        any_rows = False
        last, last_start, last_taken = None, 0, []  # kind, line and lines of the last row
        if first_row is not None:
            for put, value in zip(store, first_row):
                put(value)
            lines.append(first_line)
            last, last_start, last_taken = "record", first_line, first_taken
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


def _printable_names(header: list[str]) -> tuple[list[str], list[str]]:
    out, warnings = [], []
    for i, name in enumerate(header, start=1):
        shown = printable(name)  # names become column names and manifest entries: text
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
                obj = {printable(key): value for key, value in obj.items()}
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
