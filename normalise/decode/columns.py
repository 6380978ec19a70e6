"""Decode pass: find each column's format and decode whole columns at once.

Formats of a column's text cells:

* ``json``           JSON text (RFC 8259)
* ``python-literal`` the repr of lists, dicts, tuples, strings, numbers, None/True/False
* ``delimited``      values joined by a separator (``poetry|essays``)
* ``text``           plain text or numbers, each cell one value

Empty markers (blank, ``[]``, ``{}``, ``None``, ``null``, ``nan``) are empty,
never values; they are whole cells, so a string "None" inside a nested value is
the string. Stripping guides detection only: a scalar value is the cell exactly
as given, and a delimited column keeps, beside its stripped pieces, what it
needs to give every cell back (``join_separator``, ``layout``). A cell that
fails goes to quarantine with its place and a message, and its row stays.

Speed: Python-literal columns are rewritten to JSON in bulk with C-level
string operations (regex split, join, replace) and parsed by ``json.loads``;
only cells outside the shared subset of the two grammars (escapes, tuples,
sets, non-string keys, trailing commas...) take the exact per-cell path in
``literal.py``. Both routes give what ``ast.literal_eval`` gives: the bulk
route accepts a cell only when every token is one whose meaning is the same in
both grammars. When the C accelerator is built, JSON text (a JSON column's
cells, or the rewritten Python literals) is read a whole column at a time by
its reader, which gives what ``json.loads`` gives and leaves every cell it
cannot settle (invalid, NaN, a lone surrogate, over a limit) to the exact path.
A column is decoded with the cyclic garbage collector paused (``paused_gc``).
"""

from __future__ import annotations

import json
from collections import Counter
from dataclasses import dataclass, field

from ..model.export import Export
from ..model.kinds import Format
from .delimited import AMBIGUITY_SHOWN, ambiguity_message, cut_pieces, detect_separator, join_separator_of
from .literal import CellError, Limits, check_limits, lone_surrogate_in
from .nested import decode_json_cells, decode_python_cells, paused_gc

FORMATS = (Format.JSON, Format.PYTHON_LITERAL, Format.DELIMITED, Format.TEXT)  # what --decode may force
EMPTY_MARKERS = frozenset(["", "[]", "{}", "()", "None", "null", "nan", "NaN"])




_NESTED_START = frozenset("[{(")


# A second grammar counts as a format of its own (the column is "mixed") only
# when at least this many cells, and this share of the nested cells, need it;
# fewer are malformed cells of the main format and go to quarantine.
MIXED_MIN_CELLS = 3
MIXED_MIN_SHARE = 0.05


@dataclass
class QuarantinedCell:
    """A cell that could not be decoded, with everything needed to find and fix it."""

    file: str
    line: int
    column: str
    position: int | None
    excerpt: str
    message: str

    def __str__(self) -> str:
        where = f"{self.file}, line {self.line}, column {self.column}"
        if self.position is not None:
            where += f", char {self.position}"
        return f"{where}: {self.message} (got {self.excerpt!r})"


@dataclass
class DecodedColumn:
    """One column after decoding: a value per row (None when empty or quarantined)."""

    name: str
    format: Format
    values: list
    quarantined: list[QuarantinedCell] = field(default_factory=list)
    format_counts: dict[str, int] = field(default_factory=dict)
    separator: str | None = None
    ambiguity: list[str] = field(default_factory=list)
    forced: bool = False
    # Delimited columns only (see ``join_delimited``): how many values hold a name suffix
    # rejoined to the piece before it ("Carl Dole, Jr."); the separator text the cells use
    # (", " when they write "a, b"; the separator itself when no cell says otherwise); and,
    # per row, None when the cell is exactly its values joined by ``join_separator`` (or
    # held no text), else the cell exactly as written, so every cell can be given back.
    rejoined: int = 0
    join_separator: str | None = None
    layout: list | None = None
    # rows whose value may hold what JSON has not (tuples, sets, bytes, non-text keys): the cells the exact
    # per-cell path decoded; None when not known (then the lossless proof looks at every value)
    impure: set | None = None
    decision: "ColumnFormat | None" = None  # what the column's first rows decided, for the rest of its file

    def __post_init__(self):
        if self.join_separator is None:
            self.join_separator = self.separator


@dataclass(frozen=True)
class ColumnFormat:
    """What a column's first rows decided, applied to every later cell of its file (``decode``'s ``decided``).

    Detection looks at a whole column (the share of nested cells, the separator that repeats, whether enough
    cells need the other grammar); a cell decoded with the decisions of the column's first rows decodes the
    same in any part of the file, so the database does not depend on how the file is cut into chunks.
    ``format``: json, python-literal, delimited or text, as detected (or forced); ``primary``: the grammar a
    nested cell is read with first; ``mixed``: whether cells of the other grammar are values (enough of them
    among the first rows) rather than malformed cells; ``separator`` and ``join_separator``: a delimited
    column's; ``column_format``: the column's ``DecodedColumn.format`` (``mixed`` or ``empty`` too).
    """

    format: Format
    separator: str | None = None
    primary: Format | None = None
    mixed: bool = False
    join_separator: str | None = None
    column_format: Format = Format.TEXT


def excerpt(text: str, position: int | None, width: int = 24) -> str:
    """A short piece of the cell around the position, for messages."""
    start = 0 if position is None else max(0, position - 1 - width // 2)
    piece = text[start:start + width]
    return ("..." if start else "") + piece + ("..." if start + width < len(text) else "")


_LONGEST_MARKER = max(map(len, EMPTY_MARKERS))


def _classify(text: str) -> str:
    if len(text) <= _LONGEST_MARKER and text in EMPTY_MARKERS:  # no hash of every long cell
        return "empty"
    return "nested" if text[0] in _NESTED_START else "text"


def parse_decode_option(spec: str) -> tuple[str, str, str | None]:
    """Parse ``COLUMN=FORMAT`` (FORMAT: json, python-literal, text, delimited or delimited:SEP).

    Example:
        >>> parse_decode_option("formats=delimited:|")
        ('formats', 'delimited', '|')
    """
    from ..model.errors import UsageError

    column, eq, fmt = spec.partition("=")
    if not eq or not column:
        raise UsageError(f"--decode {spec!r}: expected COLUMN=FORMAT, e.g. --decode tags=delimited:|")
    fmt, _, sep = fmt.partition(":")
    if fmt not in FORMATS:
        raise UsageError(f"--decode {spec!r}: unknown format {fmt!r}; use one of {', '.join(FORMATS)}"
                         " (delimited may name its separator: delimited:;)")
    if sep and fmt != Format.DELIMITED:
        raise UsageError(f"--decode {spec!r}: only delimited takes a separator")
    return column, fmt, (sep or None)


def format_choices(formats: dict | None) -> dict[str, tuple[str, str | None]]:
    """``formats`` as ``{column: (format, separator)}``, each given so or as the command line's text.

    Example:
        >>> format_choices({"tags": "delimited:|", "notes": ("text", None)})
        {'tags': ('delimited', '|'), 'notes': ('text', None)}
    """
    out = {}
    for column, choice in (formats or {}).items():
        if isinstance(choice, str):
            _, fmt, sep = parse_decode_option(f"{column}={choice}")
            choice = (fmt, sep)
        out[column] = tuple(choice)
    return out


def decode_column(name: str, cells: list, lines: list[int], file: str,
                  limits: Limits = Limits(), forced: tuple[str, str | None] | None = None,
                  raw_surrogates: bool = True, decided: ColumnFormat | None = None) -> DecodedColumn:
    """Decode one column of raw cells, detecting its format unless ``forced``.

    ``decided`` (the ``decision`` of the column's first rows, decoded before) replaces detection: the cells
    are read as those rows decided.

    Example:
        >>> c = decode_column("people", ["[{'id': 1}]", "", "[{'id': 2}, {'id': 3}]"], [2, 3, 4], "x.csv")
        >>> c.format, c.values
        ('python-literal', [[{'id': 1}], None, [{'id': 2}, {'id': 3}]])
    """
    with paused_gc():
        return _decode_column(name, cells, lines, file, limits, forced, raw_surrogates, decided)


# Long (about 160 lines) on purpose: one pass over a column's cells, whose classification, detection, decoding
# and quarantine share the per-row lists (values, texts, raws, kinds); apart, they would pass all of them around.
def _decode_column(name: str, cells: list, lines: list[int], file: str, limits: Limits,
                   forced: tuple[str, str | None] | None, raw_surrogates: bool,
                   decided: ColumnFormat | None = None) -> DecodedColumn:
    n = len(cells)
    values: list = [None] * n
    impure = None  # rows whose value may hold Python-only types; None: not known, every value is looked at
    counts: Counter = Counter()
    quarantined: list[QuarantinedCell] = []
    pending_bad: list[int] = []  # already-decoded cells holding lone surrogates
    text_rows: list[int] = []
    texts: list[str] = []  # stripped: what detection and the nested grammars read
    raws: list[str] = []  # the same cells as given: what scalar values and layouts keep
    kinds: list[str] = []
    for i, cell in enumerate(cells):
        if cell is None:
            counts["empty"] += 1
        elif isinstance(cell, str):
            # Stripping (str.strip: every Unicode whitespace, NBSP and U+3000 too) only guides
            # detection; a scalar keeps the cell as given. Around JSON text whitespace is
            # insignificant (RFC 8259, section 2), and a nested value holds none of it.
            text = cell.strip()
            kind = _classify(text)
            if kind == "empty":
                counts["empty"] += 1
            else:
                text_rows.append(i)
                texts.append(text)
                raws.append(cell)
                kinds.append(kind)
        elif isinstance(cell, (list, dict)):  # JSON Lines: already decoded
            if not cell:
                counts["empty"] += 1
            elif raw_surrogates and lone_surrogate_in(cell):
                pending_bad.append(i)
            elif forced and forced[0] == Format.TEXT:  # --decode COLUMN=text: the value as its JSON text
                counts[Format.TEXT] += 1
                values[i] = json.dumps(cell, ensure_ascii=False)
            else:
                counts["json"] += 1
                values[i] = cell
        else:  # JSON Lines scalar
            if isinstance(cell, float) and cell != cell:
                counts["empty"] += 1
            else:
                counts[Format.TEXT] += 1
                values[i] = cell

    def quarantine(i: int, text: str, error: CellError) -> None:
        quarantined.append(QuarantinedCell(file, lines[i], name, error.position,
                                           excerpt(text, error.position), error.message))
        counts["invalid"] += 1

    for i in pending_bad:
        quarantine(i, json.dumps(cells[i], ensure_ascii=True)[:200],
                   CellError("a string holds a lone surrogate, which is not a character "
                             "(RFC 8259, section 8.2); it cannot be stored as text", None))
    if decided is not None:  # the column's first rows decided (every decision below is theirs)
        fmt, sep = decided.format, decided.separator
    else:
        fmt, sep = forced if forced else _detect_format(texts, kinds)
    detected, primary, mixed, join_sep = fmt, None, False, None
    if fmt in (Format.JSON, Format.PYTHON_LITERAL, Format.MIXED):
        nested = [k for k, kind in enumerate(kinds) if kind == "nested" or forced]
        if decided is not None:
            primary = decided.primary
        else:
            primary = fmt if fmt != Format.MIXED else _dominant_nested(texts, nested)
        decoded = _decode_many(primary, [texts[k] for k in nested], limits, raw_surrogates)
        other = Format.PYTHON_LITERAL if primary == Format.JSON else Format.JSON
        failed = [j for j, v in enumerate(decoded) if isinstance(v, CellError)]
        retry = {}
        if failed and not forced and (decided is None or decided.mixed):
            second = _decode_many(other, [texts[nested[j]] for j in failed], limits)
            retry = {j: v for j, v in zip(failed, second) if not isinstance(v, CellError)}
            share = len(retry) / max(1, len(nested))
            if decided is not None:
                pass  # the first rows made the column mixed: every cell of the other grammar is a value
            elif len(retry) < MIXED_MIN_CELLS or share < MIXED_MIN_SHARE:
                retry = {}  # a stray cell of the other grammar is a malformed cell, not a format
            else:
                fmt, mixed = "mixed", True
        if primary == Format.PYTHON_LITERAL or retry:  # values that may hold what JSON has not, for the proof
            impure = {text_rows[nested[j]] for j in getattr(decoded, "exact", ())} if primary != Format.JSON else set()
            impure |= {text_rows[nested[j]] for j in retry} if other == Format.PYTHON_LITERAL else set()
        for j, value in enumerate(decoded):
            k = nested[j]
            row = text_rows[k]
            if j in retry:
                counts[other] += 1
                values[row] = retry[j] if _is_present(retry[j]) else None
            elif isinstance(value, CellError):
                if not forced and _decodes_as(other, texts[k], limits):
                    value.message += f" (the cell would read as {other}; --decode {name}={other} reads the column so)"
                quarantine(row, texts[k], value)
            else:
                counts[primary] += 1
                values[row] = value if _is_present(value) else None
        if not forced:  # forced, every text cell was read in the grammar
            for k in (k for k, kind in enumerate(kinds) if kind == "text"):
                quarantine(text_rows[k], texts[k], CellError(f"plain text in a {primary} column", 1))
        column_format = fmt
    elif fmt == Format.DELIMITED:
        column_format = "delimited"
        sep = sep or detect_separator(texts) or "|"
        join_sep = decided.join_separator if decided is not None else join_separator_of(raws, sep)
        # every text cell not given back by joining its values is kept as written ("None", "  " too)
        layout = [cell if isinstance(cell, str) and cell else None for cell in cells]
        rejoined = 0
        ambiguity = []
        for k, text in enumerate(texts):
            row = text_rows[k]
            try:
                check_limits(text, limits)
            except CellError as exc:
                quarantine(row, text, exc)
                continue
            parts, _, rejoins, strays = cut_pieces(text, sep)
            if rejoins:
                rejoined += len({index for _, index in rejoins})
            if (rejoins or strays) and len(ambiguity) < AMBIGUITY_SHOWN:
                ambiguity.append(ambiguity_message(lines[row], text, parts, rejoins, strays))
            if parts:
                values[row] = parts
                if raws[k] == join_sep.join(parts):
                    layout[row] = None
            counts["delimited" if parts else "empty"] += 1
    else:
        column_format = Format.TEXT
        for k, text in enumerate(raws):
            try:
                check_limits(text, limits)
            except CellError as exc:
                quarantine(text_rows[k], text, exc)
                continue
            values[text_rows[k]] = text
            counts[Format.TEXT] += 1
    if decided is not None:
        column_format = decided.column_format
    elif counts.get(Format.JSON) and column_format == Format.TEXT and not texts:
        column_format = Format.JSON  # JSON Lines fields that arrived decoded
    elif counts.get(Format.JSON) and column_format in (Format.TEXT, Format.PYTHON_LITERAL) and texts:
        if column_format == Format.PYTHON_LITERAL or counts[Format.TEXT]:
            column_format = Format.MIXED
    if decided is None and not any(v for k, v in counts.items() if k not in (Format.EMPTY, "invalid")) \
            and not counts.get("invalid"):
        column_format = Format.EMPTY
    if column_format == Format.JSON or column_format == Format.DELIMITED:
        impure = set()
    column = DecodedColumn(name, column_format, values, quarantined, {k: v for k, v in sorted(counts.items()) if v},
                           sep if column_format == Format.DELIMITED else None,
                           forced=bool(forced), impure=impure,
                           decision=decided or ColumnFormat(detected, sep, primary, mixed, join_sep, column_format))
    if column_format == Format.DELIMITED:
        column.ambiguity = ambiguity
        column.rejoined = rejoined
        column.join_separator = join_sep
        column.layout = layout
    return column


def _is_present(value) -> bool:
    """Decoded empties ([], {}, (), None) are empty, never values."""
    return value is not None and not (isinstance(value, (list, dict, tuple, set)) and not value)


def _decode_many(fmt: str, texts: list[str], limits: Limits, raw_surrogates: bool = True) -> list:
    if fmt == Format.JSON:
        return decode_json_cells(texts, limits, raw_surrogates)
    return decode_python_cells(texts, limits)


def _decodes_as(fmt: str, text: str, limits: Limits) -> bool:
    return not isinstance(_decode_many(fmt, [text], limits)[0], CellError)


def _dominant_nested(texts: list[str], nested: list[int]) -> str:
    """JSON unless enough cells read only as Python literals to make it a Python column.

    Most JSON cells are also Python literals, so cells valid in both grammars
    are no evidence; a few Python-only cells in a JSON column are malformed
    JSON (a trailing comma, single quotes), not a second format.
    """
    sample = [texts[k] for k in nested[:2000]]
    as_json = [not isinstance(v, CellError) for v in decode_json_cells(sample, Limits())]
    refused = [t for t, ok in zip(sample, as_json) if not ok]
    python_only = sum(not isinstance(v, CellError) for v in decode_python_cells(refused, Limits()))
    few = python_only < MIXED_MIN_CELLS or python_only < MIXED_MIN_SHARE * len(sample)
    if sum(as_json) > python_only and few:
        return "json"
    return "python-literal"


def _detect_format(texts: list[str], kinds: list[str]) -> tuple[str, str | None]:
    if not texts:
        return Format.TEXT, None
    nested = [k for k, kind in enumerate(kinds) if kind == "nested"]
    if len(nested) >= 0.5 * len(texts):
        return _dominant_nested(texts, nested), None
    plain = [texts[k] for k, kind in enumerate(kinds) if kind == "text"]
    sep = detect_separator(plain[:5000])
    if sep is not None:
        return "delimited", sep
    return Format.TEXT, None


def decode(export: Export, limits: Limits = Limits(),
           formats: dict[str, tuple[str, str | None]] | None = None, *, sample: int | None = None,
           decided: dict[str, ColumnFormat] | None = None, done=None) -> dict[str, DecodedColumn]:
    """Decode every column of an export; ``formats`` fixes a column's format by name.

    With ``sample``, each column's format is detected on its first ``sample`` rows only and the rows after
    them are read as those decided; a column with no value in those rows is detected on the ``sample`` rows
    from its first value (``first_value``) instead. ``decided`` (``decisions`` of the decoded first part of
    the same file, ``partition._Streamed``) reads a later part so. Either way a cell decodes the same
    whichever part of its file it comes in. ``done()``, when given, is called as each column is decoded.
    """
    formats = format_choices(formats)
    raw_surrogates = export.invalid_bytes
    out = {}
    for name in export.columns:
        forced = formats.get(name)
        cells, lines = export.cells[name], export.lines
        decision = decided.get(name) if decided else None
        if decision is None and sample is not None and len(cells) > sample:
            late = first_value(cells, sample) if not forced and first_value(cells[:sample]) is None else None
            if late is not None:  # nothing in the first rows to decide on: the rows from the first value decide
                decision = late_decision(name, cells, lines, late, sample, export.path, limits, raw_surrogates)
        if decision is None and sample is not None and len(cells) > sample:
            first = decode_column(name, cells[:sample], lines[:sample], export.path, limits, forced, raw_surrogates)
            rest = decode_column(name, cells[sample:], lines[sample:], export.path, limits, forced, raw_surrogates,
                                 first.decision)
            out[name] = _concatenated(first, rest)
        else:
            out[name] = decode_column(name, cells, lines, export.path, limits, forced, raw_surrogates, decision)
        if done is not None:
            done()
    return out


def first_value(cells: list, start: int = 0) -> int | None:
    """The index of the first cell at or after ``start`` that holds a value (not blank nor an empty marker:
    ``[]``, ``None``, ``null``...), or None when none does.

    Example:
        >>> first_value(["", "[]", " null ", '["a"]', "b"])
        3
    """
    for i in range(start, len(cells)):
        cell = cells[i]
        if cell is None or isinstance(cell, float) and cell != cell:
            continue
        if isinstance(cell, str):
            if _classify(cell.strip()) != "empty":
                return i
        elif not isinstance(cell, (list, dict)) or cell:
            return i
    return None


def late_decision(name: str, cells: list, lines: list[int], start: int, sample: int, file: str,
                  limits: Limits = Limits(), raw_surrogates: bool = True) -> ColumnFormat:
    """The format of a column with no value in its first rows, detected on the ``sample`` rows from its first
    value (``cells[start]``) as ``decode`` detects a column on its first rows."""
    window = slice(start, start + sample)
    return decode_column(name, cells[window], lines[window], file, limits, None, raw_surrogates).decision


def decisions(decoded: dict[str, DecodedColumn]) -> dict[str, ColumnFormat]:
    """What each decoded column's first rows decided (``decode``'s ``decided`` for the rest of the file)."""
    return {name: col.decision for name, col in decoded.items() if col.decision is not None}


def _concatenated(first: DecodedColumn, rest: DecodedColumn) -> DecodedColumn:
    """One column from its first rows and the rows after them (decoded as the first rows decided)."""
    n = len(first.values)
    counts = Counter(first.format_counts) + Counter(rest.format_counts)
    layout = None if first.layout is None else first.layout + (rest.layout or [None] * len(rest.values))
    impure = None if first.impure is None or rest.impure is None else first.impure | {n + i for i in rest.impure}
    return DecodedColumn(first.name, first.format, first.values + rest.values, first.quarantined + rest.quarantined,
                         dict(sorted(counts.items())), first.separator,
                         (first.ambiguity + rest.ambiguity)[:AMBIGUITY_SHOWN], first.forced,
                         first.rejoined + rest.rejoined, first.join_separator, layout, impure, first.decision)
