"""The invariants the fuzz harnesses check, without atheris, so tests can use them too.

``check_decode(cells, mode)``: ``decode_column`` on fuzzed cells never raises; in a
column read as JSON every cell is what ``json.loads`` returns (NaN and Infinity
refused, RFC 8259 section 6) or quarantined, in a column read as Python literals
what ``ast.literal_eval`` returns or quarantined; a cell the reference accepts is
quarantined only for a documented reason (depth, size, a lone surrogate); a cell
the reference refuses is never given a value. A scalar value is its cell exactly
(never trimmed); a delimited column gives every cell back exactly (its layout
entry, else its values joined by its join separator).

``check_read(data, suffix)``: ``read`` on fuzzed file bytes raises nothing but
``UnreadableFile``; every row it reads is a record or a rejected row with a line;
reading in chunks gives the same records, lines and rejected rows; decoding the
columns read never raises.
"""

from __future__ import annotations

import ast
import json
import math
import os
import tempfile
import warnings

from normalise.decode import EMPTY_MARKERS, decode, decode_column
from normalise.model.errors import UnreadableFile
from normalise.decode.literal import Limits
from normalise.read import iter_chunks, read

MODES = ("json", "python-literal", "auto")
REFUSED = object()
# Why a cell that a reference accepts may still be quarantined (README "Decoding, exactly"; literal.py).
ALLOWED_REFUSALS = ("lone surrogate", "not valid in the file's encoding", "nesting depth", "nesting deeper",
                    "too deeply nested", "exceeds the limit", "Exceeds the limit")
# A small depth limit keeps the references (which recurse) far from their own limits.
LIMITS = Limits(max_depth=60, max_cell_chars=1 << 16)


class InvariantBroken(AssertionError):
    """An invariant failed; the message holds the input."""


def _no_constant(name):
    raise ValueError(name)


def json_reference(text: str):
    try:
        return json.loads(text, parse_constant=_no_constant)
    except Exception:  # noqa: BLE001 - any refusal of the reference counts as a refusal
        return REFUSED


def literal_reference(text: str):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            return ast.literal_eval(text)
        except Exception:  # noqa: BLE001
            return REFUSED


REFERENCES = {"json": json_reference, "python-literal": literal_reference}


def strict_equal(a, b) -> bool:
    """Equal, and of the same types all the way down, with dict keys in the same order.

    True is not 1, 1 is not 1.0, a tuple is not a list, -0.0 is not 0.0; a set matches member by member.

    Example:
        >>> strict_equal({"a": [1, (2.0,)]}, {"a": [1, (2.0,)]})
        True
        >>> strict_equal([1], [True]), strict_equal([0.0], [-0.0]), strict_equal({1: 0, 2: 0}, {2: 0, 1: 0})
        (False, False, False)
    """
    if type(a) is not type(b):
        return False
    if isinstance(a, float):
        return (math.isnan(a) and math.isnan(b)) or (a == b and math.copysign(1, a) == math.copysign(1, b))
    if isinstance(a, complex):
        return strict_equal(a.real, b.real) and strict_equal(a.imag, b.imag)
    if isinstance(a, (list, tuple)):
        return len(a) == len(b) and all(strict_equal(x, y) for x, y in zip(a, b))
    if isinstance(a, dict):
        return len(a) == len(b) and all(strict_equal(ka, kb) and strict_equal(va, vb)
                                        for (ka, va), (kb, vb) in zip(a.items(), b.items()))
    if isinstance(a, (set, frozenset)):
        rest = list(b)
        for x in a:
            for k, y in enumerate(rest):
                if strict_equal(x, y):
                    del rest[k]
                    break
            else:
                return False
        return not rest
    return a == b


def stored(value):
    """What decode_column keeps for a decoded value: empty containers and None are None."""
    if value is None or (isinstance(value, (list, dict, tuple, set)) and not value):
        return None
    return value


def check_decode(cells: list[str], mode: str, limits: Limits = LIMITS):
    """Decode a column of fuzzed cells and check it against the references; returns the column."""
    lines = list(range(2, len(cells) + 2))
    forced = None if mode == "auto" else (mode, None)
    try:
        col = decode_column("c", list(cells), lines, "fuzz.csv", limits, forced)
    except Exception as exc:  # noqa: BLE001 - the invariant is that nothing at all escapes
        raise InvariantBroken(f"decode_column({cells!r}, {mode}) raised {exc!r}") from exc
    if len(col.values) != len(cells):
        raise InvariantBroken(f"{len(col.values)} values for {len(cells)} cells: {cells!r}")
    by_line = {}
    for q in col.quarantined:
        if q.line in by_line:
            raise InvariantBroken(f"line {q.line} quarantined twice: {cells!r}")
        if not q.message or q.file != "fuzz.csv" or q.column != "c":
            raise InvariantBroken(f"quarantine without place or message: {q!r}")
        by_line[q.line] = q
    if col.format in ("json", "python-literal"):
        grammars = [col.format]
    elif col.format == "mixed":
        grammars = ["json", "python-literal"]
    else:
        grammars = []  # delimited, scalar or empty (auto mode): strings, checked for presence only
    for i, cell in enumerate(cells):
        text, line, value = cell.strip(), i + 2, col.values[i]
        if line in by_line:
            if value is not None:
                raise InvariantBroken(f"{text!r} both quarantined and given {value!r}")
            plain = mode == "auto" and text[:1] not in ("[", "{", "(")  # a scalar in a nested column
            if grammars and not (plain and "plain text" in by_line[line].message):
                accepted = [g for g in grammars if REFERENCES[g](text) is not REFUSED]
                if accepted and not any(r in by_line[line].message for r in ALLOWED_REFUSALS):
                    raise InvariantBroken(f"{text!r} ({mode}, read as {col.format}) quarantined "
                                          f"({by_line[line].message}) but {accepted[0]} accepts it")
            continue
        if text in EMPTY_MARKERS:
            if value is not None:
                raise InvariantBroken(f"empty marker {text!r} gave {value!r}")
            continue
        if not grammars:
            continue
        if mode == "auto" and text[:1] not in ("[", "{", "("):
            continue  # plain text in a nested column (auto mode) is a scalar, kept or quarantined
        wants = [REFERENCES[g](text) for g in grammars]
        if all(w is REFUSED for w in wants):
            raise InvariantBroken(f"{text!r} ({mode}) given {value!r} though {' and '.join(grammars)} refuse it")
        if not any(w is not REFUSED and strict_equal(value, stored(w)) for w in wants):
            raise InvariantBroken(f"{text!r} ({mode}) decoded to {value!r}, the reference gives "
                                  f"{[w for w in wants if w is not REFUSED][0]!r}")
    check_faithful(cells, col)
    return col


def check_faithful(cells: list, col) -> None:
    """Scalar values are the cells as given; a delimited column gives every text cell back exactly."""
    for i, cell in enumerate(cells):
        value = col.values[i]
        if col.format == "text" and value is not None and value != cell:
            raise InvariantBroken(f"scalar cell {cell!r} stored as {value!r}")
        if col.format == "delimited" and isinstance(cell, str):
            back = col.layout[i] if col.layout[i] is not None else (
                "" if value is None else col.join_separator.join(value))
            if back != cell:
                raise InvariantBroken(f"delimited cell {cell!r} given back as {back!r} "
                                      f"(values {value!r}, join separator {col.join_separator!r})")


SUFFIXES = (".csv", ".tsv", ".jsonl", ".json", ".txt")


def check_read(data: bytes, suffix: str, chunk_rows: int = 2, directory: str | None = None):
    """Read fuzzed file bytes; returns the Export, or None when it was refused as unreadable."""
    handle, path = tempfile.mkstemp(suffix=suffix, dir=directory)
    try:
        with os.fdopen(handle, "wb") as f:
            f.write(data)
        try:
            export = read(path)
        except UnreadableFile as exc:
            if not str(exc) or "\n" in str(exc):
                raise InvariantBroken(f"unreadable without a one-line message: {exc!r} for {data!r}") from exc
            return None
        except Exception as exc:  # noqa: BLE001
            raise InvariantBroken(f"read({suffix}) raised {exc!r} for {data!r}") from exc
        _check_export(export, data)
        try:
            decode(export, LIMITS)
        except Exception as exc:  # noqa: BLE001
            raise InvariantBroken(f"decode after read({suffix}) raised {exc!r} for {data!r}") from exc
        try:
            chunks = list(iter_chunks(path, chunk_rows))
        except UnreadableFile:
            raise InvariantBroken(f"chunked read refused a file that read() accepted: {data!r}") from None
        except Exception as exc:  # noqa: BLE001
            raise InvariantBroken(f"iter_chunks({suffix}) raised {exc!r} for {data!r}") from exc
        lines = [n for c in chunks for n in c.lines]
        rejected = [(r.line, r.reason) for c in chunks for r in c.rejected]
        if lines != export.lines or rejected != [(r.line, r.reason) for r in export.rejected]:
            raise InvariantBroken(f"chunks of {chunk_rows} read {lines}/{rejected}, the whole file "
                                  f"{export.lines}/{[(r.line, r.reason) for r in export.rejected]}: {data!r}")
        for name in export.columns:
            if [v for c in chunks for v in c.cells[name]] != export.cells[name]:
                raise InvariantBroken(f"chunks read other cells in column {name!r}: {data!r}")
        return export
    finally:
        os.unlink(path)


def _check_export(export, data: bytes) -> None:
    n = len(export.lines)
    if any(len(export.cells[c]) != n for c in export.columns) or len(set(export.columns)) != len(export.columns):
        raise InvariantBroken(f"columns of unequal length or repeated names {export.columns!r}: {data!r}")
    if export.lines != sorted(set(export.lines)) or any(n < 1 for n in export.lines):
        raise InvariantBroken(f"record lines not increasing: {export.lines!r}: {data!r}")
    seen = set(export.lines)
    for r in export.rejected:
        if r.line < 1 or r.line in seen or not r.reason:
            raise InvariantBroken(f"rejected row without its own line or reason: {r!r}: {data!r}")
        seen.add(r.line)
    physical = data.count(b"\n") + data.count(b"\r") + 1
    if any(line > physical for line in seen):
        raise InvariantBroken(f"a line number beyond the file's {physical} lines: {sorted(seen)}: {data!r}")
