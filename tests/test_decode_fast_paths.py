"""The helpers that make column decoding fast keep every result the references give.

* ``paused_gc`` pauses the cyclic garbage collector while a column is decoded
  and always leaves it as it found it (reference: the ``gc`` module,
  ``gc.isenabled``);
* the C reader ``json_values`` gives, for every JSON text it reads, what
  ``json.loads`` gives (same values, same types, same repr, same dict key order),
  and leaves to the exact path every text ``json.loads`` refuses, and only those
  or the ones the tool refuses on purpose: NaN and Infinity (RFC 8259 section 6),
  lone surrogates (RFC 8259 section 8.2), cells over the depth or size limits;
* a column decodes the same with the C reader and without it (reference:
  json.loads, ast.literal_eval).
"""

from __future__ import annotations

import gc
import importlib
import json
import os
import re
from contextlib import contextmanager

import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from normalise.decode import decode_column, paused_gc
from normalise.decode.literal import Limits, surrogate_escape_cells
from tests.strategies import (has_lone_surrogate, hostile_text, json_cells, json_values, mutated, python_cells,
                              strict_equal)
from tests.test_decode_reference import (_REFUSED, bulk_route, check_column_against, json_reference,
                                         literal_eval_reference)

decode_module = importlib.import_module("normalise.decode.columns")  # where decode_column finds its readers
nested_module = importlib.import_module("normalise.decode.nested")
c_json_values = nested_module._json_values
needs_c = pytest.mark.skipif(c_json_values is None, reason="C accelerator not built")

# ast.parse warns about invalid escape sequences ('\d'); the references warn the same way.
pytestmark = pytest.mark.filterwarnings("ignore::SyntaxWarning", "ignore::DeprecationWarning")

SCALE = float(os.environ.get("NORMALISE_HYPOTHESIS_SCALE", "1"))
_HEALTH = [HealthCheck.too_slow, HealthCheck.data_too_large]
FAST = settings(max_examples=int(80 * SCALE), deadline=None, suppress_health_check=_HEALTH)
HUNT = settings(max_examples=int(400 * SCALE), deadline=None, suppress_health_check=_HEALTH)


@contextmanager
def gc_state(enabled: bool):
    """Run the block with the collector enabled or not, then restore the test runner's state."""
    before = gc.isenabled()
    (gc.enable if enabled else gc.disable)()
    try:
        yield
    finally:
        (gc.enable if before else gc.disable)()


# --- paused_gc -------------------------------------------------------------------

@pytest.mark.parametrize("enabled", [True, False])
def test_paused_gc_pauses_and_restores_the_previous_state(enabled):
    # reference: gc.isenabled (Python library reference, gc module)
    with gc_state(enabled):
        with paused_gc():
            assert not gc.isenabled()
        assert gc.isenabled() is enabled


@pytest.mark.parametrize("enabled", [True, False])
def test_paused_gc_restores_the_previous_state_on_error(enabled):
    # reference: gc.isenabled (Python library reference, gc module)
    with gc_state(enabled):
        with pytest.raises(ZeroDivisionError):
            with paused_gc():
                1 / 0
        assert gc.isenabled() is enabled


def test_paused_gc_nested_restores_the_outer_pause():
    # reference: gc.isenabled (Python library reference, gc module)
    with gc_state(True):
        with paused_gc():
            with paused_gc():
                pass
            assert not gc.isenabled()  # the inner block found it paused and leaves it so
        assert gc.isenabled()


@pytest.mark.parametrize("enabled", [True, False])
@pytest.mark.parametrize("fmt,cells", [
    ("json", ['[{"a": 1}]', "[1,", '["\\ud800"]', "[NaN]"]),
    ("python-literal", ["[{'a': 1}]", "[1,", "['\\ud800']", "[f(1)]"]),
    (None, ["[{'a': 1}]", '[{"a": 1}]', "x|y", "x"]),
])
def test_decode_column_leaves_the_collector_as_it_found_it(enabled, fmt, cells):
    # reference: gc.isenabled; json.loads / ast.literal_eval refuse the failing cells
    forced = (fmt, None) if fmt else None
    with gc_state(enabled):
        col = decode_column("c", cells, list(range(2, len(cells) + 2)), "t.csv", forced=forced)
        assert gc.isenabled() is enabled
    if fmt:
        assert len(col.quarantined) == 3, col.quarantined


def test_decode_column_restores_the_collector_when_it_raises(monkeypatch):
    # reference: gc.isenabled (Python library reference, gc module)
    def broken(*args, **kwargs):
        raise MemoryError
    monkeypatch.setattr(decode_module, "decode_json_cells", broken)
    with gc_state(True):
        with pytest.raises(MemoryError):
            decode_column("c", ["[1]"], [2], "t.csv", forced=("json", None))
        assert gc.isenabled()


# --- the C reader against json.loads ------------------------------------------------

LEFT = object()


def _dumps(value, ensure_ascii, indent, separators):
    return json.dumps(value, ensure_ascii=ensure_ascii, indent=indent, separators=separators)


# JSON as writers lay it out: escaped or not, indented with spaces or tabs, tight or loose separators.
_LAID_OUT = st.builds(_dumps, json_values(surrogates=True, max_leaves=15), st.booleans(),
                      st.sampled_from([None, 0, 2, "\t", "\r\n"]),
                      st.sampled_from([None, (",", ":"), (" , ", " : "), (",\n", ":\t")]))
# Numbers in and around json's grammar: -?(0|[1-9][0-9]*)(\.[0-9]+)?([eE][-+]?[0-9]+)?
_NUMBERS = st.from_regex(r"\A-?[0-9]{0,25}(\.[0-9]{0,20})?([eE][-+]?[0-9]{0,4})?\Z").map(
    lambda t: st.sampled_from([t, f"[{t}]", f'{{"n": {t}}}', f"[{t}, {t}]"])).flatmap(lambda s: s)
# Strings with every escape, raw controls and surrogates (escaped and raw), in all three string widths.
_ESCAPES = ["\\\"", "\\\\", "\\/", "\\b", "\\f", "\\n", "\\r", "\\t", "\\u0041", "\\u00e9", "\\u4e2d", "\\ud834",
            "\\udd1e", "\\uDBFF", "\\uDFFF", "\\ud834\\udd1e", "\\u", "\\u12", "\\x41", "\\U0001d11e", "\\'",
            "\x00", "\x1f", "\x7f", "\ud800", "\udfff", "é", "中", "😀", "a", " ", '"']
_STRINGS = st.lists(st.sampled_from(_ESCAPES), max_size=8).map(lambda parts: '"' + "".join(parts) + '"').map(
    lambda t: st.sampled_from([t, f"[{t}]", f"{{{t}: 1}}", f'{{"k": {t}}}'])).flatmap(lambda s: s)
JSON_TEXTS = st.one_of(_LAID_OUT, mutated(_LAID_OUT), _NUMBERS, _STRINGS, json_cells(),
                       hostile_text(max_size=12, surrogates=True))


def _depth(value) -> int:
    if isinstance(value, list):
        return 1 + max(map(_depth, value), default=0)
    if isinstance(value, dict):
        return 1 + max(map(_depth, value.values()), default=0)
    return 0


def _raw_surrogate(text: str) -> bool:
    return any("\ud800" <= ch <= "\udfff" for ch in text)


# In a column, a raw lone surrogate stands for bytes the file's encoding could not read, which
# have a message of their own (tests/test_decode_reference.py); these cells hold none.
COLUMN_TEXTS = JSON_TEXTS.filter(lambda t: not _raw_surrogate(t))


def check_reader(texts, max_depth=100, max_chars=1 << 20, raw_surrogates=False):
    """Every text the reader reads gives json.loads's value; it leaves the others, and only for a reason."""
    values, left = c_json_values(texts, max_depth, max_chars, raw_surrogates, LEFT)
    assert left == [k for k, v in enumerate(values) if v is LEFT]
    for k, (text, got) in enumerate(zip(texts, values)):
        want = json_reference(text)  # reference: json.loads, NaN and Infinity refused (RFC 8259 section 6)
        if got is not LEFT:
            assert strict_equal(got, want) and repr(got) == repr(want), (text, got, want)
            assert len(text) <= max_chars and _depth(got) <= max_depth
            assert not (raw_surrogates and _raw_surrogate(text)), text
            assert not has_lone_surrogate(got) or (not raw_surrogates and _raw_surrogate(text)), text
        else:  # refused by json.loads, or refused on purpose (RFC 8259 sections 6 and 8.2; Limits)
            assert (want is _REFUSED or has_lone_surrogate(want) or len(text) > max_chars
                    or _depth(want) > min(max_depth, 512)), (text, want)


@needs_c
@HUNT
@given(st.lists(JSON_TEXTS, min_size=1, max_size=6), st.booleans())
@example(['[1, 2.5, -0, -0.0, 1e400, 1E5, 12345678901234567890, "\\ud834\\udd1e", {"a": null, "a": true}]',
          "[1.]", "[01]", "[1e]", "[-]", "[NaN]", "[-Infinity]", '"\\ud800"', '"\\ud800\\u0041"', "nulll",
          "[1,]", '{"a":1,}', '"a\nb"', "\ufeff[1]", " \t[1]\r\n", "1" * 4301, "[" + "1" * 4300 + "]",
          "123456789012345678", "-123456789012345678", "1234567890123456789", "-0.0e-0", "1E+2", "0e5"],
         False)
@example(['["\ud800"]', '{"\udfff": 1}', "[1]\udcff", '["\\udcff"]'], True)
def test_c_reader_gives_what_json_loads_gives(texts, raw_surrogates):
    check_reader(texts, raw_surrogates=raw_surrogates)


@needs_c
@pytest.mark.parametrize("limit", [1, 2, 5, 100, 511, 512, 513, 1000])
def test_c_reader_leaves_cells_over_the_depth_limit(limit):
    # reference: json.loads for the values; Limits.max_depth (README) for the refusal
    depths = [d for d in (limit - 1, limit, limit + 1) if d > 0]
    texts = ["[" * d + "]" * d for d in depths] + ['{"a": ' * d + "1" + "}" * d for d in depths]
    values, left = c_json_values(texts, limit, 1 << 20, False, LEFT)
    for text, got in zip(texts, values):
        depth = text.count("[") + text.count("{")
        if depth <= min(limit, 512):
            assert got == json.loads(text) and repr(got) == repr(json.loads(text))  # too deep for strict_equal
        else:
            assert got is LEFT


@needs_c
def test_c_reader_leaves_cells_over_the_size_limit():
    # reference: Limits.max_cell_chars (README); json.loads for the one read
    values, left = c_json_values(["[1, 2]", "[1, 22]"], 100, 6, False, LEFT)
    assert values == [[1, 2], LEFT] and left == [1]


@needs_c
def test_c_reader_shares_keys_across_cells_without_changing_them():
    # reference: json.loads; keys escaped and not, in all three string widths
    keys = [f"k{i}" for i in range(9000)] + ["é", "中", "😀", "a" * 65, ""]  # more than the reader keeps
    texts = [json.dumps({k: i, "a": [k]}, ensure_ascii=i % 2 == 0) for i, k in enumerate(keys * 2)]
    texts += ['{"\\u0061": 1, "a": 2}', '{"a\\u00e9": 1}', '{"aé": 1}', '{"\\ud83d\\ude00": 1, "😀": 2}']
    values, left = c_json_values(texts, 100, 1 << 20, False, LEFT)
    assert not left
    for text, got in zip(texts, values):
        want = json.loads(text)
        assert strict_equal(got, want) and repr(got) == repr(want)
        assert [type(k) for k in got] == [str] * len(got)


@needs_c
def test_c_reader_refuses_what_is_not_text():
    with pytest.raises(TypeError):
        c_json_values(["[1]", b"[1]"], 100, 1 << 20, False, LEFT)
    with pytest.raises(TypeError):
        c_json_values(7, 100, 1 << 20, False, LEFT)


# --- a column with and without the C reader --------------------------------------------

@contextmanager
def json_reader(route: str):
    """Decode with the C reader, or with json's scanner and the Python checks."""
    saved = nested_module._json_values
    nested_module._json_values = c_json_values if route == "c" else None
    try:
        yield
    finally:
        nested_module._json_values = saved


READERS = ["python"] + (["c"] if c_json_values is not None else [])


@pytest.mark.parametrize("reader", READERS)
@FAST
@given(st.lists(COLUMN_TEXTS, min_size=1, max_size=8))
@example(['["\\ud834\\udd1e"]', '["\\udd1e\\ud834"]', '{"\\ud800": 1}', '["\\\\ud800"]', '["\\u00e9"]'])
def test_json_column_with_either_reader_matches_json_loads(reader, cells):
    # reference: json.loads; RFC 8259 section 6 (no NaN or Infinity) and section 8.2 (lone surrogates)
    with json_reader(reader):
        check_column_against(cells, "json", json_reference)


@pytest.mark.parametrize("reader", READERS)
@FAST
@given(st.lists(python_cells(), min_size=1, max_size=8))
def test_python_column_with_either_reader_matches_literal_eval(reader, cells):
    # reference: ast.literal_eval (Python language reference, literals and displays)
    with json_reader(reader), bulk_route("c" if nested_module.ACCELERATED else "python"):
        check_column_against(cells, "python-literal", literal_eval_reference)


@needs_c
@FAST
@given(st.lists(st.one_of(JSON_TEXTS, python_cells()), min_size=1, max_size=8),
       st.sampled_from(["json", "python-literal", None]), st.booleans())
def test_both_readers_give_the_same_column(cells, fmt, raw_surrogates):
    # reference: the route without the C reader (json's scanner, check_limits, check_escapes)
    if not raw_surrogates:  # the reader found none in the file: the cells hold none
        cells = [c for c in cells if not _raw_surrogate(c)] or ["[1]"]
    lines = list(range(2, len(cells) + 2))
    cols = []
    for reader in ("python", "c"):
        with json_reader(reader):
            cols.append(decode_column("c", cells, lines, "t.csv", Limits(max_depth=8, max_cell_chars=200),
                                      forced=(fmt, None) if fmt else None, raw_surrogates=raw_surrogates))
    assert [str(q) for q in cols[0].quarantined] == [str(q) for q in cols[1].quarantined]
    assert cols[0].format == cols[1].format and cols[0].format_counts == cols[1].format_counts
    assert all(strict_equal(a, b) for a, b in zip(cols[0].values, cols[1].values))


# --- the pure-Python scan for surrogate escapes (the route without the C reader) ------------

# A surrogate escape as both grammars write one: \uXXXX (JSON, RFC 8259 section 7, and Python)
# or \U0000XXXX (Python), with XXXX in D800-DFFF. Written independently of literal.py.
_ESCAPE_OF_A_SURROGATE = re.compile(r"\\(?:u|U0000)[dD][89abcdefABCDEF]")
_PIECES = st.sampled_from(["\\", "\\\\", "u", "U", "0", "0000", "d", "D", "8", "9", "a", "b", "f", "F", "c", "7",
                           "x", '"', "é", "\u5c5c", "\U0001005c", "😀", "\ud800", "\\ud800", "\\uDFFF",
                           "\\U0000dc00", "\\ud7ff", "\\ue000"])


@FAST
@given(st.lists(st.one_of(st.lists(_PIECES, max_size=12).map("".join), st.text(max_size=30)), max_size=8))
@example(["\\ud8", "\\ud", "\\U0000d8", "\\U0000d", "\\\\ud800"])
def test_surrogate_escape_scan_finds_every_surrogate_escape(texts):
    # reference: RFC 8259 section 7 (\uXXXX) and the Python language reference (\U0000XXXX)
    assert surrogate_escape_cells(texts) == [k for k, t in enumerate(texts) if _ESCAPE_OF_A_SURROGATE.search(t)]
