"""The helpers that make column decoding fast keep every result the references give.

* ``paused_gc`` pauses the cyclic garbage collector while a column is decoded
  and always leaves it as it found it (reference: the ``gc`` module,
  ``gc.isenabled``).
"""

from __future__ import annotations

import gc
import importlib
from contextlib import contextmanager

import pytest

from normalise.decode import decode_column, paused_gc

decode_module = importlib.import_module("normalise.decode")  # the package exports a decode() too


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
