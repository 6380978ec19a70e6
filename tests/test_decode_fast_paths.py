"""The helpers that make column decoding fast keep every result the references give.

* ``paused_gc`` pauses the cyclic garbage collector while a column is decoded
  and always leaves it as it found it (reference: the ``gc`` module,
  ``gc.isenabled``);
* the C scan for surrogate escapes finds exactly the texts the Python check
  looks at (reference: the escape grammar of RFC 8259 section 7 and of the
  Python language reference, "String and Bytes literals"; the refusal itself
  is RFC 8259 section 8.2), so a JSON column decodes the same with or without
  it (reference: json.loads).
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
from normalise.literal import surrogate_escape_cells
from tests.strategies import json_cells, json_values, strict_equal
from tests.test_decode_reference import check_column_against, json_reference

decode_module = importlib.import_module("normalise.decode")  # the package exports a decode() too
try:
    from normalise._pyliteral import surrogate_escapes as c_surrogate_escapes
except ImportError:  # pragma: no cover - the C accelerator was not built
    c_surrogate_escapes = None

needs_c = pytest.mark.skipif(c_surrogate_escapes is None, reason="C accelerator not built")

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
    monkeypatch.setattr(decode_module, "_decode_json_column", broken)
    with gc_state(True):
        with pytest.raises(MemoryError):
            decode_column("c", ["[1]"], [2], "t.csv", forced=("json", None))
        assert gc.isenabled()


# --- the scan for surrogate escapes --------------------------------------------------

# A surrogate escape as both grammars write one: \uXXXX (JSON, RFC 8259 section 7, and Python)
# or \U0000XXXX (Python), with XXXX in D800-DFFF. Written independently of literal.py.
_ESCAPE_OF_A_SURROGATE = re.compile(r"\\(?:u|U0000)[dD][89abcdefABCDEF]")

# Characters that build and break such escapes, in all three string widths CPython stores
# (1, 2 and 4 bytes a character), with characters whose UTF-16/UTF-32 bytes hold 0x5C
# (the byte of a backslash) but are not a backslash.
_PIECES = st.sampled_from(["\\", "\\\\", "u", "U", "0", "0000", "d", "D", "8", "9", "a", "b", "f", "F", "c", "7",
                           "x", '"', "é", "\u5c5c", "\u015c", "\u5c00", "\U0001005c", "\U00105c5c", "😀",
                           "\ud800", "\udc5c", "\\ud800", "\\uDFFF", "\\U0000dc00", "\\ud7ff", "\\ue000"])
_ESCAPE_TEXTS = st.one_of(st.lists(_PIECES, max_size=12).map("".join), st.text(max_size=30))


@needs_c
@HUNT
@given(st.lists(_ESCAPE_TEXTS, max_size=8))
@example(["\\ud8", "\\ud", "\\U0000d8", "\\U0000d", "\u5c5c\\ud9", "\U0001005c" + "ud800", "\\\\ud800"])
def test_c_scan_finds_what_the_python_check_looks_at(texts):
    # reference: RFC 8259 section 7 (\uXXXX) and the Python language reference (\U0000XXXX);
    # the pure-Python check surrogate_escape_cells is what literal.check_escapes searches for
    want = [k for k, t in enumerate(texts) if _ESCAPE_OF_A_SURROGATE.search(t)]
    assert c_surrogate_escapes(texts) == want
    assert surrogate_escape_cells(texts) == want


@needs_c
def test_c_scan_refuses_what_is_not_text():
    with pytest.raises(TypeError):
        c_surrogate_escapes(["[1]", b"[1]"])
    with pytest.raises(TypeError):
        c_surrogate_escapes(7)


@contextmanager
def escape_scan(route: str):
    """Decode with the C scan or with its pure-Python reference."""
    saved = decode_module.surrogate_escapes
    decode_module.surrogate_escapes = c_surrogate_escapes if route == "c" else surrogate_escape_cells
    try:
        yield
    finally:
        decode_module.surrogate_escapes = saved


SCANS = ["python"] + (["c"] if c_surrogate_escapes is not None else [])


@pytest.mark.parametrize("route", SCANS)
@FAST
@given(st.lists(st.one_of(json_values(surrogates=True, max_leaves=10).map(json.dumps), json_cells()),
                min_size=1, max_size=8))
@example(['["\\ud834\\udd1e"]', '["\\udd1e\\ud834"]', '{"\\ud800": 1}', '["\\\\ud800"]', '["\\u00e9"]'])
def test_json_column_with_either_scan_matches_json_loads(route, cells):
    # reference: json.loads; RFC 8259 section 6 (no NaN or Infinity) and section 8.2 (lone surrogates)
    with escape_scan(route):
        check_column_against(cells, "json", json_reference)


@needs_c
@FAST
@given(st.lists(st.one_of(json_values(surrogates=True, max_leaves=10).map(json.dumps), json_cells()),
                min_size=1, max_size=8))
def test_both_scans_quarantine_the_same_cells_at_the_same_place(cells):
    # reference: literal.check_escapes (RFC 8259 section 8.2), run per cell on the cells each scan finds
    lines = list(range(2, len(cells) + 2))
    cols = []
    for route in ("python", "c"):
        with escape_scan(route):
            cols.append(decode_column("c", cells, lines, "t.csv", forced=("json", None), raw_surrogates=False))
    assert [str(q) for q in cols[0].quarantined] == [str(q) for q in cols[1].quarantined]
    assert all(strict_equal(a, b) for a, b in zip(cols[0].values, cols[1].values))
