"""Decoded values against the reference parsers: json.loads and ast.literal_eval.

The contract: for every cell a reference accepts, the decoded value is the
reference's value (same types, same dict key order, -0.0 kept); every cell a
reference refuses is quarantined with a place and a message, never a crash;
NaN and Infinity are refused in JSON (RFC 8259, section 6); nothing is ever
evaluated; the depth and size limits hold, even for a cell nested 100,000 deep.

Nested cells are stripped of surrounding whitespace before decoding (around
JSON text it is insignificant, RFC 8259 section 2; scalar cells keep theirs,
see tests/test_exact_values.py), and the empty markers and decoded empty
containers are stored as None, so column-level checks compare against
``cell_value(reference(cell.strip()))``.

One deliberate refusal beyond the references: a value whose string holds a
lone surrogate (made by an escape such as "\\ud800", which both references
return as is) is quarantined, as RFC 8259 section 8.2 allows, since no database
stores it as text. ``expect`` below encodes that.
"""

from __future__ import annotations

import ast
import importlib
import json
import os
import time
import warnings
from contextlib import contextmanager

import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from normalise.decode import EMPTY_MARKERS, decode_column, python_literals_as_json
from normalise.decode.literal import CellError, Limits, decode_json, decode_python_literal, nesting_depth
from tests.strategies import (cell_value, has_lone_surrogate, json_cells, json_values, mutated,
                              python_cells, python_values, random_cells, strict_equal)

decode_module = importlib.import_module("normalise.decode.nested")  # where the bulk route is looked up

# The bulk route for Python-literal columns: the C accelerator when it was built at
# install time, else the pure-Python rewrite. Both are checked where present.
ROUTES = ["python"] + (["c"] if decode_module.ACCELERATED else [])
REWRITERS = {"python": decode_module.python_literals_as_json,
             "c": getattr(decode_module, "_many_py_to_json", None)}


@contextmanager
def bulk_route(route: str):
    """Run decode_column with the given bulk route (the exact path is the same for both)."""
    saved = decode_module._many_py_to_json
    decode_module._many_py_to_json = REWRITERS["c"] if route == "c" else None
    try:
        yield
    finally:
        decode_module._many_py_to_json = saved


# ast.parse warns about invalid escape sequences ('\d'); the references warn the same way.
pytestmark = pytest.mark.filterwarnings("ignore::SyntaxWarning", "ignore::DeprecationWarning")

# Sized for a run of well under 20 s; NORMALISE_HYPOTHESIS_SCALE=50 hunts longer.
SCALE = float(os.environ.get("NORMALISE_HYPOTHESIS_SCALE", "1"))
_HEALTH = [HealthCheck.too_slow, HealthCheck.data_too_large]
FAST = settings(max_examples=int(80 * SCALE), deadline=None, suppress_health_check=_HEALTH)
HUNT = settings(max_examples=int(250 * SCALE), deadline=None, suppress_health_check=_HEALTH)

_REFUSED = object()


def literal_eval_reference(text: str):
    """ast.literal_eval's value for the text, or _REFUSED."""
    # reference: Python language reference, literals and displays; ast.literal_eval
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            return ast.literal_eval(text)
        except Exception:  # SyntaxError, ValueError, TypeError, MemoryError, RecursionError
            return _REFUSED


def _no_constant(name):
    raise ValueError(name)


def json_reference(text: str):
    """json.loads's value for the text, or _REFUSED; NaN and Infinity refused."""
    # reference: RFC 8259 (section 6: no NaN or Infinity); json.loads
    try:
        return json.loads(text, parse_constant=_no_constant)
    except Exception:  # JSONDecodeError, ValueError (digit limit), RecursionError
        return _REFUSED


def column(cells, fmt, limits=Limits()):
    return decode_column("c", list(cells), list(range(2, len(cells) + 2)), "t.csv", limits,
                         forced=(fmt, None))


LONE_SURROGATE = "lone surrogate"  # in the message of that refusal


def expect(decode, text, want):
    """decode(text) gives the reference's value, or refuses it for a lone surrogate."""
    if has_lone_surrogate(want):
        with pytest.raises(CellError, match=LONE_SURROGATE):
            decode(text)
    else:
        assert_strict(decode(text), want)


def assert_strict(got, want):
    assert strict_equal(got, want), f"decoded {got!r}, reference {want!r}"
    assert repr(got) == repr(want) or isinstance(want, (set, dict, list, tuple)), (got, want)


def check_column_against(cells, fmt, reference):
    """Every cell: the reference's value, or quarantined where the reference refuses."""
    col = column(cells, fmt)
    by_line = {q.line: q for q in col.quarantined}
    assert len(by_line) == len(col.quarantined)
    for i, cell in enumerate(cells):
        text, line = cell.strip(), i + 2
        if text in EMPTY_MARKERS:
            assert col.values[i] is None and line not in by_line
            continue
        want = reference(text)
        if want is _REFUSED:
            assert line in by_line, f"{text!r} accepted as {col.values[i]!r}; the reference refuses it"
            assert col.values[i] is None
            q = by_line[line]
            assert q.message and q.file == "t.csv" and q.column == "c"
            assert q.position is None or 1 <= q.position <= len(text) + 1, (q.position, text)
        elif has_lone_surrogate(want):
            assert line in by_line and LONE_SURROGATE in by_line[line].message, text
            assert col.values[i] is None
        else:
            assert line not in by_line, f"{text!r} quarantined: {by_line[line].message}"
            assert_strict(col.values[i], cell_value(want))


# --- round trips ---------------------------------------------------------------

@FAST
@given(python_values())
@example([-0.0, 0.0, 1, 1.0, True, (1,), [1], {1: 1, True: 2, 1.0: 3}])
@example({"None": None, "True": True, "null": "null", (1, "a"): {1.5, -0.0}, b"\x00'\"": ()})
@example(["'", '"', "'\"", "\\", "\n\t\x00", "😀é", "a\\'b", 2**64, -2**63 - 1, 1e308, 5e-324])
@example(set())
def test_python_repr_round_trip(value):
    # reference: Python language reference, literals; repr() writes what ast.literal_eval reads
    expect(decode_python_literal, repr(value), value)


@pytest.mark.parametrize("route", ROUTES)
@FAST
@given(st.lists(python_values(max_leaves=10), min_size=1, max_size=6))
@example([["a", None], {"b": "O'Hara"}, ["it's", 'say "hi"'], [True, False, None], [-0.0]])
def test_python_repr_round_trip_through_column(route, values):
    # reference: Python language reference, literals; ast.literal_eval (via repr)
    with bulk_route(route):
        col = column([repr(v) for v in values], "python-literal")
    refused = {q.line for q in col.quarantined if LONE_SURROGATE in q.message}
    assert len(refused) == len(col.quarantined), col.quarantined
    for line, (got, value) in enumerate(zip(col.values, values), start=2):
        assert (line in refused) == has_lone_surrogate(value)
        assert_strict(got, None if line in refused else cell_value(value))


@FAST
@given(json_values(surrogates=True))
@example([-0.0, 0, 1e308, 2**64, True, None, "\ud800", {"": {"a": [1, {"b": "\u2028"}]}}])
def test_json_round_trip(value):
    # reference: RFC 8259; json.dumps (ensure_ascii=True) and json.loads
    text = json.dumps(value)
    # json.loads joins an escaped high and low surrogate into one character, so a
    # value holding such a pair of lone surrogates does not come back as it was
    expect(decode_json, text, json.loads(text) if has_lone_surrogate(value) else value)


@FAST
@given(json_values())
@example(["\x00\n\t\"\\/😀é\u2028\x7f", {"None": "null"}])
def test_json_round_trip_unescaped(value):
    # reference: RFC 8259; json.dumps (ensure_ascii=False) and json.loads
    expect(decode_json, json.dumps(value, ensure_ascii=False), value)


@FAST
@given(st.lists(json_values(surrogates=True, max_leaves=10), min_size=1, max_size=6),
       st.booleans())
def test_json_round_trip_through_column(values, ensure_ascii):
    # reference: RFC 8259; json.dumps and json.loads
    if not ensure_ascii:  # raw lone surrogates are refused as undecodable bytes; see test below
        values = [v for v in values if not _has_surrogate(v)] or [1]
    texts = [json.dumps(v, ensure_ascii=ensure_ascii) for v in values]
    col = column(texts, "json")
    refused = {q.line for q in col.quarantined if LONE_SURROGATE in q.message}
    assert len(refused) == len(col.quarantined), col.quarantined
    for line, (got, text) in enumerate(zip(col.values, texts), start=2):
        want = json.loads(text)
        assert (line in refused) == has_lone_surrogate(want)
        assert_strict(got, None if line in refused else cell_value(want))


def _has_surrogate(value) -> bool:
    return any("\ud800" <= ch <= "\udfff" for ch in json.dumps(value, ensure_ascii=False))


def test_raw_lone_surrogate_is_refused_as_undecodable():
    # A raw lone surrogate only arrives from bytes the file's encoding could not read
    # (the reader uses surrogateescape), so it is quarantined rather than stored.
    with pytest.raises(CellError, match="encoding"):
        decode_json('["\udcff"]')


@pytest.mark.parametrize("fmt,cell,at", [
    ("json", '["\\udcff"]', 3),
    ("json", '["\\ud834\\udd1e", {"k": "x\\ud800"}]', 26),
    ("json", '{"\\udd1e": 1}', 3),
    ("python-literal", "['\\udcff']", 3),
    ("python-literal", "['\\ud834\\udd1e']", 3),  # Python does not join them: two lone surrogates
    ("python-literal", "{'k': '\\U0000d800'}", 8),
])
def test_escaped_lone_surrogate_is_quarantined(fmt, cell, at):
    # json.loads / ast.literal_eval return a lone surrogate here; RFC 8259 section 8.2 leaves
    # such strings unpredictable and no database stores them as text, so the tool refuses them
    reference = json_reference if fmt == "json" else literal_eval_reference
    assert has_lone_surrogate(reference(cell))
    decode = decode_json if fmt == "json" else decode_python_literal
    with pytest.raises(CellError, match=LONE_SURROGATE) as info:
        decode(cell)
    col = column([cell, '["ok"]'], fmt)
    (q,) = col.quarantined
    assert LONE_SURROGATE in q.message and col.values == [None, ["ok"]]
    assert info.value.position == at, (info.value.position, cell[info.value.position - 1:])


def test_escaped_surrogate_pair_is_one_character_in_json():
    # reference: RFC 8259, section 7 (a pair of \u escapes for a character beyond the BMP)
    assert decode_json('["\\ud834\\udd1e"]') == ["\U0001d11e"] == json.loads('["\\ud834\\udd1e"]')
    col = column(['{"\\ud834\\udd1e": "\\ud83d\\ude00"}'], "json")
    assert col.values == [{"\U0001d11e": "\U0001f600"}] and not col.quarantined


# --- differential: same cells, the reference decides ------------------------------

@pytest.mark.parametrize("route", ROUTES)
@FAST
@given(st.lists(python_cells(), min_size=1, max_size=6))
@example(["(1, 2)", "[1,]", "{1, 2}", "{'a': 1, 'a': 2}", "[1e400, -0, -0.0, 01.5, 00]", "'''a'''"])
@example(["['a' 'b']", "[None1]", "[1None]", "[true]", "[1_000]", "[0x10]", "{'a': 1}['a']", "[1, 2] [0]"])
@example(["+1", "--1", "-True", "[1.]", "[.5]", "[1e5]", "[\"a'b\", 'c\"d']", "set()", "{}", "()"])
def test_python_column_matches_literal_eval(route, cells):
    # reference: ast.literal_eval (Python language reference, literals and displays)
    with bulk_route(route):
        check_column_against(cells, "python-literal", literal_eval_reference)


@FAST
@given(st.lists(json_cells(), min_size=1, max_size=6))
@example(["[1,]", "['a']", "[01]", "[1.]", "[-0]", "[-0.0]", "{\"a\": 1, \"a\": 2}", "[1e400]"])
@example(["[NaN]", "[Infinity]", "[-Infinity]", "Infinity", "[\"NaN\"]", "\ufeff[1]", "[1] [2]"])
def test_json_column_matches_json_loads(cells):
    # reference: json.loads; RFC 8259 section 6 (NaN/Infinity refused)
    check_column_against(cells, "json", json_reference)


@FAST
@given(st.one_of(json_cells(), python_cells()))
def test_decode_json_matches_json_loads(text):
    # reference: json.loads; RFC 8259 section 6 (NaN/Infinity refused). No stripping here.
    want = json_reference(text)
    if want is _REFUSED:
        with pytest.raises(CellError):
            decode_json(text)
    else:
        expect(decode_json, text, want)


@FAST
@given(st.one_of(python_cells(), json_cells()))
def test_decode_python_literal_matches_literal_eval(text):
    # reference: ast.literal_eval
    want = literal_eval_reference(text)
    if want is _REFUSED:
        with pytest.raises(CellError):
            decode_python_literal(text)
    else:
        expect(decode_python_literal, text, want)


# The bulk route must never change a value: whatever JSON it writes for a cell,
# json.loads of that JSON must be exactly what ast.literal_eval gives for the cell.
_FAST_PATH_TOKENS = st.sampled_from(
    ["\\", "\\'", '\\"', "\\\\", "\\x41", "\\x7", "\\u00e9", "\\ud83d", "\\U0001F600", "\\0", "\\n",
     "\\a", "\\v", "\\N{BULLET}", "\\\n", "b", "r", "u", "f", "j", "x", "_",
     "[", "]", "{", "}", ",", ":", " ", "\n", "\r", "\t", "None", "True", "False", "0", "1", "7",
     "-", "+", ".", "e", "E", "'", '"', "''", '""', "'a'", '"b"', "'\"'", "\"'\"", "'''", '"""',
     "'None'", '"True, False"', "'[1]'", "\x01", "\ue000", "\ufdd0", "é", "😀", "#", "\x0c"])
_FAST_PATH_CELLS = st.one_of(
    st.lists(_FAST_PATH_TOKENS, max_size=16).map("".join),
    mutated(json_values(max_leaves=8).map(json.dumps)),
    mutated(python_values(max_leaves=8).map(repr)),
    random_cells(),
)


@pytest.mark.parametrize("route", ROUTES)
@HUNT
@given(st.lists(_FAST_PATH_CELLS, min_size=1, max_size=8))
@example(["['\x01', \"\x02\", '\x03\x04\ue000\ufdd0']", "['a\"b']", "[\"a'b\"]"])
@example(["[None,True,False]", "{'None': None}", "['''']", "[''''']", "['''a'b''']"])
@example(["['\\x41\\u00e9\\U0001F600\\a\\v\\b\\f\\'\\\"']", '["\\x22\\u0022\\\\"]', "['\\ud83d\\ude00']"])
@example(["['\\0']", "['\\N{BULLET}']", "['\\d']", "['\\\n']", "[b'x']", "['\\x4']", "['\\U00110000']"])
def test_fast_path_never_changes_a_value(route, cells):
    # reference: ast.literal_eval, compared with json.loads of the bulk route's rewrite.
    # decode_column strips every cell before this route sees it ("''\n " is no literal).
    cells = [cell.strip() for cell in cells]
    for cell, js in zip(cells, REWRITERS[route](cells)):
        if js is None:
            continue
        try:
            fast = json.loads(js)
        except (ValueError, RecursionError):
            continue  # the column falls back to the exact path for this cell
        want = literal_eval_reference(cell)
        assert want is not _REFUSED, f"bulk route accepts {cell!r} as {fast!r}; literal_eval refuses it"
        assert not has_lone_surrogate(want), f"bulk route keeps a lone surrogate from {cell!r}"
        assert_strict(fast, want)


# --- never evaluated -------------------------------------------------------------

NON_LITERALS = [
    # (cell, construct the message names, text where the position points)
    ("[1, foo(2)]", "a call", "foo(2)"),
    ("[__import__('os')]", "a call", "__import__"),
    ("[x for x in range(3)]", "a comprehension", "[x for"),
    ("{k: 1 for k in 'ab'}", "a comprehension", "{k"),
    ("{k for k in 'ab'}", "a comprehension", "{k"),
    ("(x for x in 'ab')", "a comprehension", "(x for"),
    ("[1, lambda: 2]", "a lambda", "lambda"),
    ("[f'{1+1}']", "an f-string", "f'"),
    ("{'a': f'x'}", "an f-string", "f'x'"),
    ("[1, os.path]", "attribute access", "os.path"),
    ("[1, (2).real]", "attribute access", "(2).real"),
    ("[1, foo]", "a name 'foo'", "foo"),
    ("[nan, 1]", "a name 'nan'", "nan"),
    ("{'a': inf}", "a name 'inf'", "inf"),
    ("[true, null]", "a name 'true'", "true"),
    ("[1, [2][0]]", "a subscript", "[2][0]"),
    ("[*[1]]", "unpacking", "*[1]"),
    ("[(y := 1)]", "an assignment expression", "y :="),
    ("[1 if 1 else 2]", "a conditional expression", "1 if"),
    ("[1 and 2]", "a boolean operation", "1 and"),
    ("[1 < 2]", "a comparison", "1 <"),
    # positions are characters, also after non-ASCII text and on later lines
    ("['é', foo]", "a name 'foo'", "foo"),
    ("['😀😀', {'k': bar()}]", "a call", "bar()"),
    ("['中文',\n 'x', foo]", "a name 'foo'", "foo"),
    ("[1,\r\n foo]", "a name 'foo'", "foo"),
    ("[1,\r foo]", "a name 'foo'", "foo"),
]


@pytest.mark.parametrize("cell,kind,at", NON_LITERALS, ids=[c for c, _, _ in NON_LITERALS])
def test_non_literal_refused_with_construct_and_position(cell, kind, at):
    assert literal_eval_reference(cell) is _REFUSED  # reference: ast.literal_eval refuses it too
    with pytest.raises(CellError) as info:
        decode_python_literal(cell)
    err = info.value
    assert kind in err.message and "not a Python literal" in err.message
    assert err.position is not None and cell[err.position - 1:].startswith(at), \
        (err.position, cell[err.position - 1:] if err.position else None)
    col = column(["[1]", cell], "python-literal")
    (q,) = col.quarantined
    assert (q.file, q.line, q.column, q.position) == ("t.csv", 3, "c", err.position)
    assert kind in q.message and col.values == [[1], None]


def test_calls_are_never_executed(tmp_path):
    target = tmp_path / "x"
    payloads = [
        f"__import__('os').system('touch {target}')",
        f"[__import__('os').system('touch {target}')]",
        f"{{'a': open('{target}', 'w')}}",
        f"[exec(\"open('{target}', 'w')\")]",
        f"[eval(\"__import__('os').system('touch {target}')\")]",
        f"[(lambda: __import__('os').system('touch {target}'))()]",
        f"[[__import__('os').system('touch {target}') for _ in '1']]",
        f"[f\"{{__import__('os').system('touch {target}')}}\"]",
        f"[__builtins__.__import__('os').system('touch {target}')]",
        f"[().__class__.__base__.__subclasses__()]",
    ]
    for cell in payloads:
        with pytest.raises(CellError, match="not a Python literal; expressions are never evaluated"):
            decode_python_literal(cell)
        with pytest.raises(CellError):
            decode_json(cell)
    for cells in (payloads, ["[1]", "[2]", "[3]"] + payloads, ['[{"a": 1}]'] * 3 + payloads):
        for forced in (None, ("python-literal", None), ("json", None)):
            col = decode_column("c", cells, list(range(2, len(cells) + 2)), "t.csv", forced=forced)
            assert not any(v is not None and v not in ([1], [2], [3], [{"a": 1}]) for v in col.values)
    assert not target.exists(), "a payload was executed"


# --- limits ----------------------------------------------------------------------

DEEP = 100_000
DEEP_CELLS = [
    "[" * DEEP,
    "[" * DEEP + "]" * DEEP,
    '{"a":' * DEEP + "1" + "}" * DEEP,
    "{'a':" * DEEP + "1" + "}" * DEEP,
    "(" * DEEP + ")" * DEEP,
    "[" * DEEP + "'x'" + "]" * DEEP,
]


@pytest.mark.parametrize("cell", DEEP_CELLS, ids=lambda c: f"{c[:6]}...x{DEEP}")
def test_cell_nested_100000_deep_is_quarantined_quickly(cell):
    start = time.perf_counter()
    for decode in (decode_json, decode_python_literal):
        with pytest.raises(CellError, match=f"nesting depth {DEEP:,}|nesting depth {DEEP}") as info:
            decode(cell)
        assert "--max-depth" in info.value.message and info.value.position == 1
    for forced in (None, ("json", None), ("python-literal", None)):
        col = decode_column("c", [cell, "[1]"], [2, 3], "t.csv", forced=forced)
        (q,) = col.quarantined
        assert q.line == 2 and "nesting depth" in q.message and "exceeds the limit of 100" in q.message
        assert col.values[0] is None and col.values[1] == [1]
    assert time.perf_counter() - start < 5


@pytest.mark.parametrize("cell", DEEP_CELLS, ids=lambda c: f"{c[:6]}...x{DEEP}")
def test_cell_nested_100000_deep_with_limit_raised_still_no_recursion_error(cell):
    # With the tool's limit out of the way, the parsers' own limits must still end in
    # quarantine (json.loads: RecursionError; Python's grammar: 200 nested brackets).
    huge = Limits(max_depth=10 * DEEP)
    json_nesting = not cell.startswith(("(", "{'"))  # the others fail as JSON at once
    for fmt, decode in (("json", decode_json), ("python-literal", decode_python_literal)):
        with pytest.raises(CellError) as info:
            decode(cell, huge)
        assert "nest" in info.value.message or (fmt == "json" and not json_nesting)
        col = column([cell], fmt, huge)
        assert len(col.quarantined) == 1 and col.quarantined[0].message == info.value.message


def _nest(depth: int, kind: str) -> str:
    opener, closer = {"list": ("[", "]"), "json-object": ('{"a": ', "}"),
                      "dict": ("{'a': ", "}"), "tuple": ("(", ",)")}[kind]
    return opener * depth + "1" + closer * depth


@pytest.mark.parametrize("limit", [1, 2, 5, 100, 150, 200])
@pytest.mark.parametrize("kind", ["list", "json-object", "dict", "tuple"])
def test_depth_at_the_limit_decodes_and_one_more_is_quarantined(limit, kind):
    limits = Limits(max_depth=limit)
    at, over = _nest(limit, kind), _nest(limit + 1, kind)
    assert nesting_depth(at) == limit and nesting_depth(over) == limit + 1
    fmts = ["python-literal"] + (["json"] if kind in ("list", "json-object") else [])
    for fmt in fmts:
        reference = json_reference if fmt == "json" else literal_eval_reference
        decode = decode_json if fmt == "json" else decode_python_literal
        want = reference(at)
        assert want is not _REFUSED
        assert_strict(decode(at, limits), want)
        col = column([at, over], fmt, limits)
        assert_strict(col.values[0], want)
        (q,) = col.quarantined
        assert q.line == 3 and q.position == 1 and col.values[1] is None
        assert f"nesting depth {limit + 1} exceeds the limit of {limit}" in q.message or \
            (limit + 1 > 200 and "200" in q.message), q.message


def test_brackets_inside_strings_and_comments_do_not_count_as_depth():
    limits = Limits(max_depth=3)
    cells = ["['[[[[[[', \"]]]]\", '''it's [[[[ ''']", '["[[[[[[", "\\"[[[[["]', "[1, # [[[[[[\n 2]"]
    for cell in cells:
        assert nesting_depth(cell) == 1, cell
    assert decode_python_literal(cells[0], limits) == ["[[[[[[", "]]]]", "it's [[[[ "]
    assert decode_json(cells[1], limits) == ["[[[[[[", '"[[[[[']
    assert decode_python_literal(cells[2], limits) == [1, 2]


@pytest.mark.parametrize("cell", [
    "['''a'b''', " + "[" * 150 + "]" * 150 + ", 'z']",
    "[# " + "]" * 60 + "\n" + "[" * 110 + "]" * 110 + "]",
])
def test_depth_limit_not_evaded_by_triple_quotes_or_comments(cell):
    assert literal_eval_reference(cell) is not _REFUSED
    with pytest.raises(CellError, match="exceeds the limit of 100"):
        decode_python_literal(cell)
    assert len(column([cell], "python-literal").quarantined) == 1


def test_non_bracket_nesting_is_quarantined_not_crashing():
    for cell in ["-" * DEEP + "1", "not " * 50_000 + "1", "1" + "+1" * DEEP, "~" * DEEP + "1"]:
        start = time.perf_counter()
        with pytest.raises(CellError) as info:
            decode_python_literal(cell)
        assert info.value.message.startswith("not a Python literal: ") and \
            len(info.value.message) > len("not a Python literal: "), info.value.message
        assert time.perf_counter() - start < 5


def test_many_names_refused_in_linear_time():
    cell = "[" + ", ".join(["a"] * 20_000) + "]"
    start = time.perf_counter()
    with pytest.raises(CellError, match="a name 'a'") as info:
        decode_python_literal(cell)
    assert info.value.position == 2
    assert time.perf_counter() - start < 5


@pytest.mark.parametrize("fmt,small,big", [
    ("json", '["abcdef"]', '["abcdefg"]'),
    ("python-literal", "['abcdef']", "['abcdefg']"),
    ("delimited", "ab|cd|efgh", "ab|cd|efghi"),
    ("text", "abcdefghij", "abcdefghijk"),
])
def test_cell_above_max_cell_chars_is_quarantined(fmt, small, big):
    limits = Limits(max_cell_chars=10)
    assert len(small) == 10 and len(big) == 11
    col = column([small, big], fmt, limits)
    assert col.values[0] is not None and col.values[1] is None
    (q,) = col.quarantined
    assert q.line == 3 and q.position == 1
    assert "11 characters exceeds the limit of 10" in q.message and "--max-cell-chars" in q.message
    if fmt in ("json", "python-literal"):
        decode = decode_json if fmt == "json" else decode_python_literal
        with pytest.raises(CellError, match="exceeds the limit of 10"):
            decode(big, limits)


# --- NaN and Infinity in JSON ---------------------------------------------------------

@pytest.mark.parametrize("cell,token", [
    ("[NaN]", "NaN"),
    ("[1, Infinity]", "Infinity"),
    ('{"x": -Infinity}', "-Infinity"),
    ("Infinity", "Infinity"),
    ("-Infinity", "-Infinity"),
    ('["NaN", "a NaN", NaN]', "NaN"),
    ('["\\" NaN", {"Infinity": Infinity}]', "Infinity"),
    ('{"-Infinity": [1, -Infinity]}', "-Infinity"),
])
def test_nan_and_infinity_refused_in_json(cell, token):
    # reference: RFC 8259, section 6 ("Numeric values that cannot be represented ... such as
    # Infinity and NaN are not permitted"); json.loads would accept them
    assert json.loads(cell) is not None
    with pytest.raises(CellError, match="RFC 8259") as info:
        decode_json(cell)
    err = info.value
    assert err.message.startswith(f"{token} is not a JSON value")
    assert err.position is not None and cell[err.position - 1:].startswith(token) \
        and cell[err.position - 2] != '"', (err.position, cell)
    col = column(["[1]", cell], "json")
    (q,) = col.quarantined
    assert q.line == 3 and "RFC 8259" in q.message and q.position == err.position
    assert col.values == [[1], None]


def test_nan_marker_alone_is_empty_not_a_value():
    # "NaN" and "nan" on their own are empty markers (how pandas writes a missing value)
    col = column(["NaN", "nan", "[1]"], "json")
    assert col.values == [None, None, [1]] and not col.quarantined


def test_quarantined_cell_carries_file_line_column_position_excerpt_message():
    col = decode_column("tags", ["[1, 2]", '[1, 2,, 3]'], [7, 9], "export.csv", forced=("json", None))
    (q,) = col.quarantined
    assert (q.file, q.line, q.column, q.position) == ("export.csv", 9, "tags", 7)
    assert ",, 3]" in q.excerpt and q.message.startswith("not valid JSON: ")
    assert str(q).startswith("export.csv, line 9, column tags, char 7: not valid JSON")


@pytest.mark.parametrize("route", ROUTES)
def test_raw_lone_surrogate_in_python_column_is_quarantined(route):
    # reference: ast.literal_eval refuses text that cannot be UTF-8 (a lone surrogate stands
    # for a byte the file's encoding could not read); the bulk route must not keep it
    cells = ["['\udcff']", "'a\udcffb'", "{'k': \"\ud800\"}", "['ok']"]
    for cell in cells[:3]:
        assert literal_eval_reference(cell) is _REFUSED
    with bulk_route(route):
        col = column(cells, "python-literal")
    assert col.values == [None, None, None, ["ok"]]
    assert [q.line for q in col.quarantined] == [2, 3, 4]
    assert all("encoding" in q.message for q in col.quarantined)


@pytest.mark.parametrize("route", ROUTES)
def test_column_holding_every_separator_candidate_does_not_crash(route):
    # The bulk route joins cells with a character absent from the column; when the data
    # holds every candidate, every cell takes the exact path instead of crashing.
    cells = ["['\x01', \"\x02\"]", "['\x03\x04', '\ue000\ufdd0']", "['a\"b']", "(1, 2)"]
    assert python_literals_as_json(cells) == [None, None, None, None]
    with bulk_route(route):
        col = column(cells, "python-literal")
    assert not col.quarantined
    assert col.values == [["\x01", "\x02"], ["\x03\x04", "\ue000\ufdd0"], ['a"b'], (1, 2)]
