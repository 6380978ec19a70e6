"""Exact decoding of single cells: JSON (RFC 8259) and Python literals.

These are the reference paths. ``nested.py`` runs whole columns through faster
routes and sends here only the cells those routes cannot settle, so every value
the tool produces is the value ``json.loads`` or ``ast.literal_eval`` returns.

Nothing here evaluates code: Python text is parsed to a syntax tree, checked to
be a literal, and only then converted by ``ast.literal_eval``.
"""

from __future__ import annotations

import ast
import json
import re
from itertools import accumulate

from ..model.errors import NormaliseError
from ..model.escapes import SURROGATE
from ..model.settings import Limits

# CPython's tokenizer refuses more than 200 nested brackets ("too many nested
# parentheses"); json.loads recurses in C and hits RecursionError near 1,000.
# The tool's own limit is checked first, so neither parser is ever pushed there.
PYTHON_PARSER_MAX_DEPTH = 200



class CellError(NormaliseError):
    """A cell that cannot be decoded; ``position`` is a 1-based character offset (the decoders know the cell,
    not its place: the quarantine names file, line and column)."""

    def __init__(self, message: str, position: int | None = None, **place):
        super().__init__(message, position=position, **place)
        self.message = message


# What the bracket count skips, as Python's tokenizer reads it: triple-quoted
# strings first (else ''' reads as '' and a quote), one-line strings, comments.
# Valid JSON holds neither of the extra forms outside its strings.
_STRING_LITERALS = re.compile(r"""'''(?:[^'\\]|\\.|'(?!''))*'''|\"\"\"(?:[^"\\]|\\.|"(?!""))*\"\"\"|"""
                              r"""'(?:[^'\\\n]|\\.)*'|"(?:[^"\\\n]|\\.)*"|#[^\r\n]*""", re.S)
_BRACKETS = re.compile(r"[\[\]{}()]")
_OPENERS = frozenset("[{(")


def nesting_depth(text: str) -> int:
    """Deepest bracket nesting outside string literals.

    Example:
        >>> nesting_depth("[{'a': '[[['}, [1]]")
        2
    """
    brackets = _BRACKETS.findall(_STRING_LITERALS.sub("", text))
    if not brackets:
        return 0
    return max(0, max(accumulate(1 if b in _OPENERS else -1 for b in brackets)))


_SURROGATE_ESCAPE = re.compile(r"\\(u[dD][89a-fA-F]|U0000[dD][89a-fA-F])")


def lone_surrogate_in(value) -> bool:
    """Whether a decoded value holds a string with a lone surrogate (not a character, so not storable)."""
    stack = [value]
    while stack:
        v = stack.pop()
        if isinstance(v, str):
            if not v.isascii() and SURROGATE.search(v):
                return True
        elif isinstance(v, dict):
            stack.extend(v.keys())
            stack.extend(v.values())
        elif isinstance(v, (list, tuple, set, frozenset)):
            stack.extend(v)
    return False


# A surrogate escape that starts an escape (not the "\\ud800" of an escaped backslash).
_SURROGATE_ESCAPE_AT = re.compile(r"(?<!\\)(?:\\\\)*(\\(?:u[dD][89a-fA-F][0-9a-fA-F]{2}|U0000[dD][89a-fA-F][0-9a-fA-F]{2}))")


def _lone_escape_position(text: str, pairs: bool) -> int:
    """1-based place of the first escape that gives a lone surrogate.

    In JSON (``pairs``) a high surrogate escape directly followed by a low one is
    one character (RFC 8259, section 7); in Python every surrogate escape is lone.
    """
    found = list(_SURROGATE_ESCAPE_AT.finditer(text))
    k = 0
    while k < len(found):
        here = found[k]
        if (pairs and k + 1 < len(found) and here.group(1)[2] in "dD" and here.group(1)[3] in "89abAB"
                and found[k + 1].start(1) == here.end(1) and found[k + 1].group(1)[3] in "cdefCDEF"):
            k += 2
            continue
        return here.start(1) + 1
    match = _SURROGATE_ESCAPE.search(text)
    return match.start() + 1 if match else 1


def surrogate_escape_cells(texts: list[str]) -> list[int]:
    """Indices of the texts holding an escape that may give a lone surrogate; without the C
    reader, a JSON column runs ``check_escapes`` on these only.

    Example:
        >>> surrogate_escape_cells(['["\\\\ud800"]', '["\\\\u00e9"]', "['\\\\U0000dfff']"])
        [0, 2]
    """
    search = _SURROGATE_ESCAPE.search
    return [k for k, text in enumerate(texts) if "\\" in text and search(text)]


def check_escapes(text: str, value, pairs: bool = False) -> None:
    """Refuse a value whose escapes (\\ud800...) made a lone surrogate: RFC 8259 section 8.2 calls such
    strings unpredictable, and no database stores them as text. ``pairs``: JSON text, where a
    high and a low surrogate escape in a row make one character."""
    if "\\" in text and _SURROGATE_ESCAPE.search(text) and lone_surrogate_in(value):
        raise CellError("an escape gives a lone surrogate, which is not a character "
                        "(RFC 8259, section 8.2); it cannot be stored as text",
                        _lone_escape_position(text, pairs))


def check_limits(text: str, limits: Limits) -> None:
    """Refuse a cell over the size or depth limit, or holding bytes the encoding could not read."""
    if len(text) > limits.max_cell_chars:
        raise CellError(f"cell of {len(text):,} characters exceeds the limit of "
                        f"{limits.max_cell_chars:,} (--max-cell-chars)", 1)
    if text.count("[") + text.count("{") + text.count("(") > limits.max_depth:
        depth = nesting_depth(text)
        if depth > limits.max_depth:
            raise CellError(f"nesting depth {depth} exceeds the limit of {limits.max_depth} "
                            f"(--max-depth)", 1)
    if not text.isascii():
        bad = SURROGATE.search(text)
        if bad:
            raise CellError("bytes that are not valid in the file's encoding "
                            "(try --encoding)", bad.start() + 1)


_JSON_STRING = re.compile(r'"(?:[^"\\]|\\.)*"', re.S)


def _refuse_constant(name: str):
    raise CellError(f"{name} is not a JSON value (RFC 8259, section 6 allows no NaN or Infinity)")


def decode_json(text: str, limits: Limits = Limits()):
    """Decode one JSON text exactly as ``json.loads`` does, refusing NaN and Infinity.

    Example:
        >>> decode_json('[{"id": 7, "name": "Ann"}]')
        [{'id': 7, 'name': 'Ann'}]
        >>> decode_json('[NaN]')
        Traceback (most recent call last):
        ...
        normalise.decode.literal.CellError: NaN is not a JSON value (RFC 8259, section 6 allows no NaN or Infinity)
    """
    check_limits(text, limits)
    try:
        value = json.loads(text, parse_constant=_refuse_constant)
    except CellError as exc:
        name = str(exc).split(" ", 1)[0]
        outside_strings = _JSON_STRING.sub(lambda m: " " * len(m.group()), text)
        found = re.search(r"(?<![\w\"])" + re.escape(name), outside_strings)
        exc.position = found.start() + 1 if found else None
        raise
    except json.JSONDecodeError as exc:
        raise CellError(f"not valid JSON: {exc.msg}", exc.pos + 1) from None
    except (RecursionError, MemoryError):
        raise CellError("too deeply nested to decode", 1) from None
    except ValueError as exc:  # e.g. an integer beyond the interpreter's digit limit
        raise CellError(f"not valid JSON: {exc}", None) from None
    check_escapes(text, value, pairs=True)
    return value


_NOT_LITERAL = {
    ast.Call: "a call",
    ast.ListComp: "a comprehension",
    ast.SetComp: "a comprehension",
    ast.DictComp: "a comprehension",
    ast.GeneratorExp: "a comprehension",
    ast.Lambda: "a lambda",
    ast.JoinedStr: "an f-string",
    ast.Attribute: "attribute access",
    ast.Subscript: "a subscript",
    ast.Name: "a name",
    ast.Starred: "unpacking",
    ast.NamedExpr: "an assignment expression",
    ast.IfExp: "a conditional expression",
    ast.BoolOp: "a boolean operation",
    ast.Compare: "a comparison",
    ast.Await: "an await",
    ast.Yield: "a yield",
    ast.YieldFrom: "a yield",
    ast.BinOp: "arithmetic",
    ast.UnaryOp: "an operator",
}


_LINE_BREAK = re.compile(r"\r\n|\r|\n")  # the line breaks Python's tokenizer counts


def _offset(text: str, lineno: int | None, col: int | None, utf8: bool = False) -> int | None:
    """1-based character offset of a (1-based line, 0-based column) place in text.

    A SyntaxError counts the column in characters; a syntax tree node counts it
    in UTF-8 bytes (``utf8=True``).
    """
    if lineno is None or col is None:
        return None
    starts = [0] + [m.end() for m in _LINE_BREAK.finditer(text)]
    if not 1 <= lineno <= len(starts):
        return None
    start = starts[lineno - 1]
    if utf8:
        col = len(text[start:start + col].encode("utf-8", "surrogatepass")[:col].decode("utf-8", "ignore"))
    return start + col + 1


def _describe_non_literal(tree: ast.AST, text: str) -> CellError | None:
    """The first construct (by position) that makes the tree more than a literal."""
    found = []
    callees = {id(node.func) for node in ast.walk(tree) if isinstance(node, ast.Call)}
    for node in ast.walk(tree):
        kind = _NOT_LITERAL.get(type(node))
        if kind is None:
            continue
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Name) \
                and node.func.id == "set" and not node.args and not node.keywords:
            continue  # set() is the one call ast.literal_eval accepts
        if isinstance(node, ast.Name) and id(node) in callees:
            continue  # the callee's name; the call itself is reported
        found.append(((node.lineno, node.col_offset), node, kind))
    if not found:
        return None
    (line, col), node, kind = min(found, key=lambda f: f[0])
    detail = f" {node.id!r}" if isinstance(node, ast.Name) else ""
    return CellError(f"{kind}{detail} is not a Python literal; expressions are never evaluated",
                     _offset(text, line, col, utf8=True))


def decode_python_literal(text: str, limits: Limits = Limits()):
    """Decode one Python literal exactly as ``ast.literal_eval`` does, without ever evaluating code.

    Example:
        >>> decode_python_literal("[{'id': 7, 'name': \\"O'Hara\\", 'lead': None}]")
        [{'id': 7, 'name': "O'Hara", 'lead': None}]
        >>> decode_python_literal("[__import__('os')]")
        Traceback (most recent call last):
        ...
        normalise.decode.literal.CellError: a call is not a Python literal; expressions are never evaluated
    """
    check_limits(text, limits)
    if limits.max_depth > PYTHON_PARSER_MAX_DEPTH and nesting_depth(text) > PYTHON_PARSER_MAX_DEPTH:
        raise CellError(f"nesting deeper than {PYTHON_PARSER_MAX_DEPTH} levels, the most "
                        "Python's literal grammar allows", 1)
    source = text.lstrip(" \t")  # as ast.literal_eval strips it
    shift = len(text) - len(source)
    try:
        tree = ast.parse(source, mode="eval")
    except SyntaxError as exc:
        where = _offset(source, exc.lineno, (exc.offset or 1) - 1)
        raise CellError(f"not a Python literal: {exc.msg}",
                        None if where is None else where + shift) from None
    except (ValueError, MemoryError, RecursionError) as exc:  # MemoryError: the parser's stack
        raise CellError(f"not a Python literal: {str(exc) or 'too deeply nested to parse'}", None) from None
    try:
        # literal_eval only converts a tree of literals and refuses anything else;
        # the refusal is then explained with the first offending construct.
        value = ast.literal_eval(tree)
    except (ValueError, TypeError, SyntaxError, MemoryError, RecursionError) as exc:
        problem = _describe_non_literal(tree, source)
        if problem is not None:
            if problem.position is not None:
                problem.position += shift
            raise problem from None
        raise CellError(f"not a Python literal: {exc}", None) from None
    check_escapes(text, value)
    return value
