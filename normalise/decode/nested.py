"""JSON and Python-literal cells, a whole column at a time.

Python-literal columns are rewritten to JSON in bulk with C-level string operations (regex split, join, replace)
and parsed by ``json.loads``; only cells outside the shared subset of the two grammars (escapes, tuples, sets,
non-string keys, trailing commas...) take the exact per-cell path in ``literal.py``. Both routes give what
``ast.literal_eval`` gives: the bulk route accepts a cell only when every token is one whose meaning is the same
in both grammars. When the C accelerator is built, JSON text (a JSON column's cells, or the rewritten Python
literals) is read a whole column at a time by its reader, which gives what ``json.loads`` gives and leaves every
cell it cannot settle (invalid, NaN, a lone surrogate, over a limit) to the exact path. A column is decoded with
the cyclic garbage collector paused (``paused_gc``).
"""

from __future__ import annotations

import gc
import json
import re
import sys
from contextlib import contextmanager

from ..model.escapes import SURROGATE
from .literal import (CellError, Limits, check_escapes, check_limits, decode_json, decode_python_literal,
                      surrogate_escape_cells)

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


def _load_accelerator():
    """The C accelerator, built when a compiler was there at install time; None without it."""
    try:
        from .. import _pyliteral
    except ImportError:  # pragma: no cover - depends on the installation
        return None
    return _pyliteral


_pyliteral = _load_accelerator()


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


def decode_python_cells(texts: list[str], limits: Limits) -> list:
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


def decode_json_cells(texts: list[str], limits: Limits, raw_surrogates: bool = True) -> list:
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
