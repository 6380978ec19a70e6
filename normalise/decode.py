"""Decode pass: find each column's format and decode whole columns at once.

Formats of a column's text cells:

* ``json``           JSON text (RFC 8259)
* ``python-literal`` the repr of lists, dicts, tuples, strings, numbers, None/True/False
* ``delimited``      values joined by a separator (``poetry|essays``)
* ``scalar``         plain text or numbers

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

import gc
import json
import re
import sys
import unicodedata
from collections import Counter
from contextlib import contextmanager
from dataclasses import dataclass, field
from functools import lru_cache

from .escapes import SURROGATE
from .literal import (CellError, Limits, check_escapes, check_limits, decode_json, decode_python_literal,
                      lone_surrogate_in, surrogate_escape_cells)
from .read import Export

FORMATS = ("json", "python-literal", "delimited", "text")
EMPTY_MARKERS = frozenset(["", "[]", "{}", "()", "None", "null", "nan", "NaN"])
SEPARATOR_CANDIDATES = ("|", ";", ",")
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
    format: str  # json | python-literal | delimited | scalar | mixed | empty
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
    ``format``: json, python-literal, delimited or scalar, as detected (or forced); ``primary``: the grammar a
    nested cell is read with first; ``mixed``: whether cells of the other grammar are values (enough of them
    among the first rows) rather than malformed cells; ``separator`` and ``join_separator``: a delimited
    column's; ``column_format``: the column's ``DecodedColumn.format`` (``mixed`` or ``empty`` too).
    """

    format: str
    separator: str | None = None
    primary: str | None = None
    mixed: bool = False
    join_separator: str | None = None
    column_format: str = "scalar"


def excerpt(text: str, position: int | None, width: int = 24) -> str:
    """A short piece of the cell around the position, for messages."""
    start = 0 if position is None else max(0, position - 1 - width // 2)
    piece = text[start:start + width]
    return ("..." if start else "") + piece + ("..." if start + width < len(text) else "")


# --- Python literals, whole column -------------------------------------------

# A string token of the shared subset: no backslash, no NUL (NUL separates cells),
# no lone surrogate (undecodable bytes: json.loads keeps them, ast.literal_eval refuses).
_SIMPLE_STRING = re.compile(r"""('[^'\x00\ud800-\udfff]*'|"[^"\x00\ud800-\udfff]*")""")
# What may stand between string tokens in a cell the bulk route accepts.
_SIMPLE_SKELETON = re.compile(r"(?:[ \t\r\n\[\]{},:0-9.eE+\-]++|None|True|False)*+")
_WORDS = (("None", "null"), ("True", "true"), ("False", "false"))


def _separator_absent_from(text: str) -> str | None:
    for candidate in ("\x01", "\x02", "\x03", "\x04", "\ue000", "\ufdd0"):
        if candidate not in text:
            return candidate
    return None  # all six occur in the data: the caller leaves every cell to the exact path


def python_literals_as_json(texts: list[str]) -> list[str | None]:
    """Rewrite Python-literal cells as JSON text where the two grammars agree.

    Returns, per cell, JSON text that ``json.loads`` turns into exactly what
    ``ast.literal_eval`` gives for the cell, or None when the cell needs the
    exact path. Works on the whole column with C-level string operations.

    Example:
        >>> python_literals_as_json(["[{'a': None, 'b': \\"O'H\\"}]", "(1, 2)", "['x\\\\n']"])
        ['[{"a": null, "b": "O\\'H"}]', None, None]
    """
    out: list[str | None] = [None] * len(texts)
    index = [i for i, t in enumerate(texts) if "\\" not in t and "\x00" not in t]
    if not index:
        return out
    big = "\x00".join([texts[i] for i in index])
    sep = _separator_absent_from(big)
    if sep is None:
        return out
    pieces = _SIMPLE_STRING.split(big)
    strings = pieces[1::2]
    skeletons = pieces[0::2]
    # Skeleton per cell (strings removed) decides whether the bulk route applies.
    cell_skeletons = "".join(skeletons).split("\x00")
    # Strings: '...' -> "..." with inner double quotes escaped; "..." kept.
    if strings:
        converted = sep.join(strings).replace('"', '\\"').replace("'", '"').split(sep)
        if '"' in big:
            for k, s in enumerate(strings):
                if s[0] == '"':
                    converted[k] = s
        pieces[1::2] = converted
    skeleton_text = sep.join(skeletons)
    for word, json_word in _WORDS:
        if word in skeleton_text:
            skeleton_text = skeleton_text.replace(word, json_word)
    pieces[0::2] = skeleton_text.split(sep)
    cells = "".join(pieces).split("\x00")
    fullmatch = _SIMPLE_SKELETON.fullmatch
    for i, skeleton, cell in zip(index, cell_skeletons, cells):
        if fullmatch(skeleton):
            out[i] = cell
    return out


try:  # the C accelerator, built when a compiler was there at install time
    from . import _pyliteral
except ImportError:  # pragma: no cover - depends on the installation
    _pyliteral = None

# Looked up one by one: an accelerator built from older sources lacks the newer functions.
_many_py_to_json = getattr(_pyliteral, "many_py_to_json", None)
_json_values = getattr(_pyliteral, "json_values", None)
ACCELERATED = _many_py_to_json is not None
_LEFT = object()  # stands for a cell the C reader leaves to the exact path


def rewrite_as_json(texts: list[str]) -> list[str | None]:
    """JSON text per Python-literal cell where the grammars agree, else None (C when built, else bulk Python)."""
    if _many_py_to_json is not None:
        return _many_py_to_json(texts)
    return python_literals_as_json(texts)


@contextmanager
def paused_gc():
    """Pause the cyclic garbage collector for the block, then restore its previous state.

    Decoding a column makes hundreds of thousands of lists and dicts; every
    few hundred allocations start a collection, and the collections of the
    older generations walk every container made so far, yet find nothing to
    free: decoded values hold no reference cycles. The containers are still
    examined once, by the first collection after the pause. The collector is
    enabled again on leaving, even on an error, and only when it was enabled
    before.

    Example:
        >>> with paused_gc():
        ...     gc.isenabled()
        False
    """
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


class _NestingGuard:
    """Enforce the depth limit through the recursion limit while a column is decoded.

    ``json``'s C scanner enters one recursion level per nested array or object,
    so with the interpreter's recursion limit set to the current depth plus
    ``max_depth`` a deeper cell raises RecursionError, and then takes the exact
    path, which measures its depth and says so. This costs nothing per cell,
    where counting brackets costs a scan of every cell. The limit is never
    raised above its old value, and always restored; when it cannot be set,
    ``active`` is False and the caller counts brackets instead.
    """

    def __init__(self, max_depth: int):
        self.max_depth = max_depth
        self.active = False

    def __enter__(self):
        frames, f = 0, sys._getframe()
        while f is not None:
            frames += 1
            f = f.f_back
        self.old = sys.getrecursionlimit()
        # Two levels short of the limit: a cell near it takes the exact path, which measures
        # its depth, so the limit never rests on how the interpreter counts frames.
        wanted = frames + self.max_depth - 2
        # From Python 3.12 the recursion limit no longer bounds C code such as json's scanner
        # (What's New in Python 3.12), so there the caller counts brackets instead.
        if wanted < self.old and sys.version_info < (3, 12):
            try:
                sys.setrecursionlimit(wanted)
                self.active = True
            except RecursionError:  # pragma: no cover - deeper in C than in Python frames
                pass
        return self

    def __exit__(self, *exc):
        if self.active:
            sys.setrecursionlimit(self.old)
        return False


def _decode_python_column(texts: list[str], limits: Limits) -> list:
    """Decode Python-literal cells; a CellError instance marks a failed cell."""
    as_json = rewrite_as_json(texts)
    max_chars, max_depth = limits.max_cell_chars, limits.max_depth
    if _json_values is not None:
        # The size limit holds for the cell as written, so a cell over it is not rewritten
        # ("" is no JSON, so the reader leaves it to the exact path, which says why).
        as_json = [js if js is not None and len(text) <= max_chars else "" for text, js in zip(texts, as_json)]
        # raw_surrogates=True: the rewrite never holds one, and if it did, the exact path would say so
        values, left = _json_values(as_json, max_depth, max_chars, True, _LEFT)
        return _decode_exactly(values, left, texts, decode_python_literal, limits)
    values = []
    append = values.append
    # The rewritten text holds no letters but null/true/false, so json.loads needs
    # no NaN guard here, and its shared default decoder is the fastest call.
    loads = json.loads
    fast = []
    with _NestingGuard(max_depth) as guard:
        for text, js in zip(texts, as_json):
            if js is not None:
                try:
                    if len(text) > max_chars or (not guard.active
                                                 and text.count("[") + text.count("{") > max_depth):
                        check_limits(text, limits)
                    append(loads(js))
                    continue
                except CellError as exc:
                    append(exc)
                    continue
                except (ValueError, RecursionError):
                    pass
            fast.append(len(values))
            append(None)
    return _decode_exactly(values, fast, texts, decode_python_literal, limits)


class _Values(list):
    """Decoded values, with the positions the exact per-cell path decoded (``exact``): only those may hold
    what JSON has not (tuples, sets, bytes, non-text keys); the bulk route's values are JSON's own types."""

    exact: list = []


def _decode_exactly(values: list, rows: list[int], texts: list[str], exact, limits: Limits) -> list:
    """Fill ``values[k]`` for each row the fast route left by the exact per-cell path (run outside the
    nesting guard: it measures depth itself); a CellError marks a failed cell."""
    values = _Values(values)
    values.exact = list(rows)
    for k in rows:
        try:
            values[k] = exact(texts[k], limits)
        except CellError as exc:
            values[k] = exc
    return values


def _no_constant(name):
    raise ValueError(name)


# json.loads builds a new decoder whenever it is given options; one shared decoder
# that refuses NaN and Infinity (RFC 8259, section 6) avoids that per cell.
_STRICT_JSON = json.JSONDecoder(parse_constant=_no_constant)


def _decode_json_column(texts: list[str], limits: Limits, raw_surrogates: bool = True) -> list:
    """Decode JSON cells: the whole column in one call to the C reader when it was built, else
    with json's shared scanner; the cells either one leaves take the exact path and its message.

    ``raw_surrogates`` says whether the file had bytes its encoding could not
    read (kept as lone surrogates); when it had none, cells need no scan for them.
    Without the C reader, escapes that may give a lone surrogate are found with
    one scan per cell, and only the cells holding one are checked after decoding.
    """
    if _json_values is not None:
        values, left = _json_values(texts, limits.max_depth, limits.max_cell_chars, raw_surrogates, _LEFT)
        return _decode_exactly(values, left, texts, decode_json, limits)
    values = []
    append = values.append
    # The scanner under json.loads, called directly: cells are stripped, so json.loads
    # would skip no whitespace, and a value that ends early is left to the exact path.
    scan = _STRICT_JSON.scan_once
    max_chars, max_depth = limits.max_cell_chars, limits.max_depth
    retry = []
    with _NestingGuard(max_depth) as guard:
        count_brackets = not guard.active
        for text in texts:
            try:
                if (len(text) > max_chars
                        or (count_brackets and text.count("[") + text.count("{") > max_depth)
                        or (raw_surrogates and not text.isascii() and SURROGATE.search(text))):
                    check_limits(text, limits)
                value, end = scan(text, 0)
                if end == len(text):
                    append(value)
                    continue
            except CellError as exc:
                append(exc)
                continue
            except (ValueError, RecursionError, StopIteration):  # StopIteration: no value at all
                pass
            retry.append(len(values))
            append(None)
    retry_set = set(retry)
    for k in surrogate_escape_cells(texts):
        if k not in retry_set and not isinstance(values[k], CellError):
            try:
                check_escapes(texts[k], values[k], pairs=True)
            except CellError as exc:
                values[k] = exc
    return _decode_exactly(values, retry, texts, decode_json, limits)


# --- delimited lists ----------------------------------------------------------

# Name suffixes and company forms, written after a comma inside one value ("Carl Dole, Jr.",
# "Acme Widgets, Inc."): the one list that both the rejoin and the ambiguity report read.
# Each may end in a full stop ("Jr." or "Jr"); case is not significant. From memory of how
# names and company names are commonly written; not a standard.
NAME_SUFFIXES = ("Jr", "Sr", "II", "III", "IV", "V", "PhD", "Ph.D", "MD", "M.D", "Esq", "Inc", "Ltd", "LLC",
                 "LLP", "PLC", "Co", "Corp", "GmbH")
_SUFFIX_WORDS = "|".join(re.escape(s) for s in sorted(NAME_SUFFIXES, key=len, reverse=True))
_SUFFIX_PIECE = re.compile(rf"(?i)(?:{_SUFFIX_WORDS})\.?")  # fullmatch against a stripped piece


@lru_cache(maxsize=16)
def _suffix_after(sep: str) -> re.Pattern:
    """Finds a separator followed by a suffix piece: only cells it finds need the slower rejoin step."""
    return re.compile(rf"(?i){re.escape(sep)}\s*(?:{_SUFFIX_WORDS})\.?\s*(?:{re.escape(sep)}|$)")


_RECORD_START, _FIELD_START, _IN_FIELD, _IN_QUOTED, _QUOTE_IN_QUOTED = range(5)


def _csv_fields(text: str, sep: str) -> list[tuple[str, str, bool]] | None:
    """Each field of a cell as ``(raw, value, quoted)``, as ``csv.reader`` reads the cell, or None
    where ``csv.reader`` raises (a line break outside quotes with more text after it).

    The dialect: ``delimiter=sep`` (one character), ``quotechar='"'``, ``doublequote=True``,
    ``skipinitialspace=True``, ``strict=False``. The states are those of CPython's csv reader
    (``parse_process_char`` in ``Modules/_csv.c``); tests/test_exact_values.py checks the values
    against ``csv.reader`` itself. csv's field size limit is not applied. ``raw`` is the field as
    written, quotes and spaces included, so ``sep.join(raw for raw, _, _ in fields) == text``
    unless the text is only line breaks.

    Example:
        >>> _csv_fields('a| "b|c" |d', "|")
        [('a', 'a', False), (' "b|c" ', 'b|c ', True), ('d', 'd', False)]
    """
    fields: list[tuple[str, str, bool]] = []
    buf: list[str] = []
    start, state, quoted = 0, _RECORD_START, False
    for i, c in enumerate(text):
        if state == _IN_QUOTED:
            if c == '"':
                state = _QUOTE_IN_QUOTED
            else:
                buf.append(c)
            continue
        if c == "\n" or c == "\r":  # the record ends here; csv refuses any text after it
            if text[i:].strip("\r\n"):
                return None
            if state == _RECORD_START:
                return []
            fields.append((text[start:], "".join(buf), quoted))
            return fields
        if state == _IN_FIELD:
            if c == sep:
                fields.append((text[start:i], "".join(buf), quoted))
                buf, start, state, quoted = [], i + 1, _FIELD_START, False
            else:
                buf.append(c)
        elif state == _QUOTE_IN_QUOTED:
            if c == '"':  # "" inside quotes is one "
                buf.append(c)
                state = _IN_QUOTED
            elif c == sep:
                fields.append((text[start:i], "".join(buf), quoted))
                buf, start, state, quoted = [], i + 1, _FIELD_START, False
            else:  # text after the closing quote joins the field (strict=False)
                buf.append(c)
                state = _IN_FIELD
        elif c == '"':
            state, quoted = _IN_QUOTED, True
        elif c == " ":  # skipinitialspace
            state = _FIELD_START
        elif c == sep:
            fields.append((text[start:i], "", False))
            buf, start, state, quoted = [], i + 1, _FIELD_START, False
        else:
            buf.append(c)
            state = _IN_FIELD
    if state == _RECORD_START:
        return []
    fields.append((text[start:], "".join(buf), quoted))
    return fields


def _fields(text: str, sep: str) -> list[tuple[str, str, bool]]:
    """``(raw, value, quoted)`` per field: quoted values keep their separators; a cell csv refuses
    (a line break outside quotes) and a separator longer than one character split plainly."""
    if '"' in text and len(sep) == 1 and sep not in '"\r\n':
        fields = _csv_fields(text, sep)
        if fields is not None:
            return fields
    return [(p, p, False) for p in text.split(sep)]


def _looks_like_code(piece: str) -> bool:
    """One word in capitals or without letters ("RO", "A1", "12"): a code, which takes no name suffix."""
    return not any(ch.isspace() for ch in piece) and (piece.isupper() or not any(ch.isalpha() for ch in piece))


def _cut(text: str, sep: str) -> tuple[list[str], list[str], list[tuple[str, int]], list[str]]:
    """Split a cell: ``(values, heads, rejoins, strays)``.

    Values are the pieces stripped, empty ones dropped, each name suffix after a
    comma rejoined to the value before it with the cell's own text between them.
    ``heads[j]`` is ``values[j]`` without a rejoined suffix; ``rejoins`` holds
    ``(suffix, index of the value it joined)``; ``strays`` the suffix-like pieces left as values
    of their own (quoted, after an empty piece, or after another separator). After
    a code ("RO,MD": Moldova, not a doctor) a suffix-like piece is a value, and no
    evidence of anything.
    """
    if '"' not in text:
        raws = text.split(sep)
        if len(raws) == 1:
            piece = text.strip()
            return ([piece], [piece], [], []) if piece else ([], [], [], [])
        if not _suffix_after(sep).search(text):
            values = [v for v in (p.strip() for p in raws) if v]
            return values, values, [], []
        fields = [(p, p, False) for p in raws]
    else:
        fields = _fields(text, sep)
    values: list[str] = []
    heads: list[str] = []
    rejoins: list[tuple[str, int]] = []
    strays: list[str] = []
    last_raw = None  # the raw text of the field just before, when it gave the last value
    for raw, value, quoted in fields:
        piece = value.strip()
        if not piece:
            last_raw = None
            continue
        if values and _SUFFIX_PIECE.fullmatch(piece) and not _looks_like_code(heads[-1]):
            if sep == "," and last_raw is not None and not quoted:
                # the separator text exactly as written: spaces after the value, the comma, spaces before the suffix
                between = last_raw[len(last_raw.rstrip()):] + sep + raw[:len(raw) - len(raw.lstrip())]
                values[-1] = values[-1] + between + piece
                rejoins.append((piece, len(values) - 1))
                last_raw = raw
                continue
            strays.append(piece)
        values.append(piece)
        heads.append(piece)
        last_raw = raw
    return values, heads, rejoins, strays


def split_delimited(text: str, sep: str) -> list[str]:
    """Split a delimited cell into its values, stripped, empty pieces dropped.

    A value quoted with double quotes keeps its separators; a name suffix after a
    comma ("Jr.", "Inc.", see ``NAME_SUFFIXES``) stays with the value before it,
    with the separator text as the cell has it.

    Example:
        >>> split_delimited('poetry|"essays|letters"| drama', "|")
        ['poetry', 'essays|letters', 'drama']
        >>> split_delimited("Carl Dole, Jr., Ann Lee", ",")
        ['Carl Dole, Jr.', 'Ann Lee']
    """
    return _cut(text, sep)[0]


def join_delimited(pieces: list[str], sep: str) -> str:
    """The cell a column's values give back, joined by the column's ``join_separator``.

    The inverse of ``split_delimited`` for every cell a ``DecodedColumn.layout``
    leaves None (the cell is exactly its values joined); any other cell (quoted
    pieces, uneven spacing, empty pieces, surrounding spaces) is kept in the
    layout as written.

    Example:
        >>> join_delimited(split_delimited("Carl Dole, Jr., Ann Lee", ","), ", ")
        'Carl Dole, Jr., Ann Lee'
    """
    return sep.join(pieces)


def join_separator_of(texts: list[str], sep: str, sample: int = 2000) -> str:
    """The separator text the cells use around ``sep`` (``", "`` in "a, b, c"), the most frequent one.

    Example:
        >>> join_separator_of(["a, b", "c, d, e", "f,g"], ",")
        ', '
    """
    runs: Counter = Counter()
    pattern = _separator_run(sep)
    seen = 0
    for text in texts:
        if sep in text and '"' not in text:
            runs.update(pattern.findall(text))
            seen += 1
            if seen >= sample:
                break
    return runs.most_common(1)[0][0] if runs else sep


@lru_cache(maxsize=16)
def _separator_run(sep: str) -> re.Pattern:
    return re.compile(rf"[^\S\r\n]*{re.escape(sep)}[^\S\r\n]*")  # spaces around it, never a line break


def _punctuation_only(piece: str) -> bool:
    """No letter, digit or symbol (emoji, currency) in the piece: what a split of ";)" or "a;;b" leaves."""
    return not any(ch.isalnum() or unicodedata.category(ch) in ("So", "Sc") for ch in piece)


# A column is not delimited by a separator when more than this share of the cells holding it
# split into an empty piece or one made only of punctuation (";)", ";-)", "a|b|").
MAX_BROKEN_SHARE = 0.2


def detect_separator(texts: list[str]) -> str | None:
    """The separator of a delimited column, or None when the cells look like plain text.

    A separator must occur in a fair share of the cells, and cut them into real
    pieces: splits that leave empty pieces or pieces of punctuation alone (";)",
    ";-)") are evidence against. Then one of two kinds of evidence must hold:
    the pieces repeat across rows (labels do; words of prose do not), or most
    cells hold several pieces of one shape (names "Ann Lee, Bo Chen", extensions
    ".csv;.tsv"), even when pieces rarely repeat.

    Example:
        >>> detect_separator(["poetry|essays", "essays", "drama|poetry|essays"])
        '|'
        >>> detect_separator(["Hello, world", "A sentence, with commas", "Plain"]) is None
        True
        >>> detect_separator([":)", ";)", ":(", ":D", ";-)"]) is None
        True
    """
    if not texts:
        return None
    best = None
    for sep in SEPARATOR_CANDIDATES:
        with_sep = [t for t in texts if sep in t]
        if len(with_sep) < max(2, 0.1 * len(texts)) and not (len(texts) < 10 and with_sep):
            continue
        broken = sum(any(not v.strip() or _punctuation_only(v) for _, v, _ in _fields(t, sep)) for t in with_sep)
        if broken > MAX_BROKEN_SHARE * len(with_sep):
            continue
        cut = [_cut(t, sep) for t in texts]
        pieces = [p for c in cut for p in c[0]]
        if not pieces:
            continue
        distinct = len(set(pieces))
        repeat = 1 - distinct / len(pieces)
        long_prose = sum(len(p) > 60 for p in pieces) / len(pieces)
        if long_prose > 0.2:
            continue
        if sep == ",":
            by_repeat = repeat >= 0.3 and _pieces_stand_alone(texts, cut, sep)
        else:
            by_repeat = repeat >= 0.1 or len(pieces) <= 20
        if not by_repeat and not _pieces_of_one_kind([c[1] for c in cut], sep):
            continue
        score = (len(with_sep), repeat)
        if best is None or score > best[0]:
            best = (score, sep)
    return None if best is None else best[1]


def _pieces_stand_alone(texts: list[str], cut: list, sep: str) -> bool:
    """Whether the values found between separators also fill cells on their own, as list items do.

    A comma inside prose or a title ("The Orchard, Revisited") splits off
    phrases that never stand alone; the items of a list are codes or tags
    ("AE,OM", "poetry, essays") or values that also fill cells alone.
    """
    alone = {t.strip() for t in texts if sep not in t}
    pieces = [p for t, c in zip(texts, cut) if sep in t for p in c[0]]
    if not alone:
        return True  # every cell holds several values: nothing to compare with
    if not pieces:
        return False
    if sum(not any(ch.isspace() for ch in p) and len(p) <= 24 for p in pieces) >= 0.9 * len(pieces):
        return True  # codes and tags ("AE,OM", "poetry, essays"), not phrases
    return sum(p in alone for p in pieces) / len(pieces) >= 0.2


# A run of letters (with the marks inside names: O'Neil, Mary-Jane, St.John) or of digits.
_LETTER_RUN = re.compile(r"[^\W\d_]+(?:['’.\-][^\W\d_]+)*")
_DIGIT_RUN = re.compile(r"\d+")


def _case_class(match: re.Match) -> str:
    run = match.group()
    return "a" if run.islower() else "U" if run.isupper() and len(run) > 1 else "A"


def _shape(piece: str) -> tuple | None:
    """The kind of a piece: its words as lower-case (a), capitalised (A) or capitals (U) letter
    runs and digit runs (9), other characters kept, words of one shape in a row counted once;
    None for more than four words (a phrase, not a name, tag or code).

    Example:
        >>> _shape("Ann Lee"), _shape("Mary-Jane O'Neil"), _shape("short stories"), _shape(".csv"), _shape("AE")
        (('A',), ('A',), ('a',), ('.a',), ('U',))
    """
    words = piece.split()
    if len(words) > 4:
        return None
    out: list[str] = []
    for word in words:
        shape = _DIGIT_RUN.sub("9", _LETTER_RUN.sub(_case_class, word))
        if not out or out[-1] != shape:
            out.append(shape)
    return tuple(out)


def _pieces_of_one_kind(heads: list[list[str]], sep: str) -> bool:
    """Whether most cells hold several pieces, and the pieces within a cell are mostly of one shape.

    Name suffixes do not count (``heads`` are the values without them). When
    no cell holds more than two pieces and the separator is a comma, the two
    must also have the same number of words, two or more ("Ann Lee, Bo Chen"):
    a comma inside one value ("Lee, Ann", "Paris, France", "The Orchard,
    Revisited") parts it in two just as often.
    """
    multi = [h for h in heads if len(h) >= 2]
    if not multi or len(multi) < 0.5 * len(heads):
        return False
    agree = total = 0
    for pieces in multi:
        shapes = Counter(s for s in map(_shape, pieces) if s is not None)
        agree += shapes.most_common(1)[0][1] if shapes else 0
        total += len(pieces)
    if agree < 0.8 * total:
        return False
    if sep == "," and all(len(h) == 2 for h in multi):
        alike = sum(len(h[0].split()) == len(h[1].split()) >= 2 for h in multi)
        return alike >= 0.8 * len(multi)
    return True


def _ambiguity_message(line: int, text: str, values: list[str], rejoins: list, strays: list) -> str:
    if rejoins:
        suffix, index = rejoins[0]
        return (f"line {line}: {suffix!r} in {text!r} was kept with the value before it ({values[index]!r}), "
                f"not read as a value of its own")
    return (f"line {line}: {strays[0]!r} in {text!r} looks like part of the value before it, "
            f"not a value of its own")


AMBIGUITY_SHOWN = 5  # evidence messages kept per column


# --- per column ---------------------------------------------------------------

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
    from .errors import UsageError

    column, eq, fmt = spec.partition("=")
    if not eq or not column:
        raise UsageError(f"--decode {spec!r}: expected COLUMN=FORMAT, e.g. --decode tags=delimited:|")
    fmt, _, sep = fmt.partition(":")
    if fmt not in FORMATS:
        raise UsageError(f"--decode {spec!r}: unknown format {fmt!r}; use one of {', '.join(FORMATS)}"
                         " (delimited may name its separator: delimited:;)")
    if sep and fmt != "delimited":
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
            elif forced and forced[0] == "scalar":  # --decode COLUMN=text: the value as its JSON text
                counts["scalar"] += 1
                values[i] = json.dumps(cell, ensure_ascii=False)
            else:
                counts["json"] += 1
                values[i] = cell
        else:  # JSON Lines scalar
            if isinstance(cell, float) and cell != cell:
                counts["empty"] += 1
            else:
                counts["scalar"] += 1
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
    if fmt in ("json", "python-literal", "mixed"):
        nested = [k for k, kind in enumerate(kinds) if kind == "nested" or forced]
        if decided is not None:
            primary = decided.primary
        else:
            primary = fmt if fmt != "mixed" else _dominant_nested(texts, nested)
        decoded = _decode_many(primary, [texts[k] for k in nested], limits, raw_surrogates)
        other = "python-literal" if primary == "json" else "json"
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
        if primary == "python-literal" or retry:  # values that may hold what JSON has not, for the proof
            impure = {text_rows[nested[j]] for j in getattr(decoded, "exact", ())} if primary != "json" else set()
            impure |= {text_rows[nested[j]] for j in retry} if other == "python-literal" else set()
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
        plain = [k for k, kind in enumerate(kinds) if kind == "text"] if not forced else []
        for k in plain:
            counts["text"] += 1
            if not forced:
                quarantine(text_rows[k], texts[k],
                           CellError(f"plain text in a {primary} column", 1))
                counts["text"] -= 1
        column_format = fmt
    elif fmt == "delimited":
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
            parts, _, rejoins, strays = _cut(text, sep)
            if rejoins:
                rejoined += len({index for _, index in rejoins})
            if (rejoins or strays) and len(ambiguity) < AMBIGUITY_SHOWN:
                ambiguity.append(_ambiguity_message(lines[row], text, parts, rejoins, strays))
            if parts:
                values[row] = parts
                if raws[k] == join_sep.join(parts):
                    layout[row] = None
            counts["delimited" if parts else "empty"] += 1
    else:
        column_format = "scalar"
        for k, text in enumerate(raws):
            try:
                check_limits(text, limits)
            except CellError as exc:
                quarantine(text_rows[k], text, exc)
                continue
            values[text_rows[k]] = text
            counts["scalar"] += 1
    if decided is not None:
        column_format = decided.column_format
    elif counts.get("json") and column_format == "scalar" and not texts:
        column_format = "json"  # JSON Lines fields that arrived decoded
    elif counts.get("json") and column_format in ("scalar", "python-literal") and texts:
        if column_format == "python-literal" or counts["scalar"]:
            column_format = "mixed"
    if decided is None and not any(v for k, v in counts.items() if k not in ("empty", "invalid")) \
            and not counts.get("invalid"):
        column_format = "empty"
    if column_format == "json" or column_format == "delimited":
        impure = set()
    column = DecodedColumn(name, column_format, values, quarantined,
                           {k: v for k, v in sorted(counts.items()) if v}, sep if column_format == "delimited" else None,
                           forced=bool(forced), impure=impure,
                           decision=decided or ColumnFormat(detected, sep, primary, mixed, join_sep, column_format))
    if column_format == "delimited":
        column.ambiguity = ambiguity
        column.rejoined = rejoined
        column.join_separator = join_sep
        column.layout = layout
    return column


def _is_present(value) -> bool:
    """Decoded empties ([], {}, (), None) are empty, never values."""
    return value is not None and not (isinstance(value, (list, dict, tuple, set)) and not value)


def _decode_many(fmt: str, texts: list[str], limits: Limits, raw_surrogates: bool = True) -> list:
    if fmt == "json":
        return _decode_json_column(texts, limits, raw_surrogates)
    return _decode_python_column(texts, limits)


def _decodes_as(fmt: str, text: str, limits: Limits) -> bool:
    return not isinstance(_decode_many(fmt, [text], limits)[0], CellError)


def _dominant_nested(texts: list[str], nested: list[int]) -> str:
    """JSON unless enough cells read only as Python literals to make it a Python column.

    Most JSON cells are also Python literals, so cells valid in both grammars
    are no evidence; a few Python-only cells in a JSON column are malformed
    JSON (a trailing comma, single quotes), not a second format.
    """
    sample = [texts[k] for k in nested[:2000]]
    as_json = [not isinstance(v, CellError) for v in _decode_json_column(sample, Limits())]
    refused = [t for t, ok in zip(sample, as_json) if not ok]
    python_only = sum(not isinstance(v, CellError) for v in _decode_python_column(refused, Limits()))
    few = python_only < MIXED_MIN_CELLS or python_only < MIXED_MIN_SHARE * len(sample)
    if sum(as_json) > python_only and few:
        return "json"
    return "python-literal"


def _detect_format(texts: list[str], kinds: list[str]) -> tuple[str, str | None]:
    if not texts:
        return "scalar", None
    nested = [k for k, kind in enumerate(kinds) if kind == "nested"]
    if len(nested) >= 0.5 * len(texts):
        return _dominant_nested(texts, nested), None
    plain = [texts[k] for k, kind in enumerate(kinds) if kind == "text"]
    sep = detect_separator(plain[:5000])
    if sep is not None:
        return "delimited", sep
    return "scalar", None


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
        if forced and forced[0] == "text":
            forced = ("scalar", None)
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
