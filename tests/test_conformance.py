"""JSON decoding against the JSONTestSuite parsing corpus (github.com/nst/JSONTestSuite).

The corpus lives outside the repository, in ``shared/conformance/JSONTestSuite``
beside the work tree (see its SOURCE.md), or where NORMALISE_JSON_SUITE points;
the tests skip, saying so, when it is absent. Nothing of it is copied here.

* ``y_`` (must accept): ``decode_json`` returns exactly what ``json.loads`` returns,
  and a JSON column holds that value (stored as None when it is empty).
* ``n_`` (must reject): ``decode_json`` raises CellError, and a JSON column
  quarantines the cell. ``json.loads`` itself accepts three of them (NaN,
  Infinity, -Infinity); RFC 8259, section 6 does not, and neither do we.
* ``i_`` (either way): ``decode_json`` returns or raises CellError, promptly,
  and a JSON column keeps or quarantines the cell; nothing else may happen.

Files are bytes. They are read as UTF-8 with ``surrogateescape``, as the reader
reads exports, so a byte that is not UTF-8 becomes a lone surrogate and the cell
is quarantined as undecodable ("try --encoding"). All 95 ``y_`` files are valid
UTF-8; the ``i_`` files in UTF-16 or Latin-1 are quarantined that way, which the
suite allows. A leading byte order mark is kept (plain UTF-8, not utf-8-sig), so
BOM cases meet the decoder as they meet ``json.loads``.

Exclusion (column path only): an ``n_`` file whose text is blank once stripped
(``n_single_space``, ``n_structure_no_data``) is an empty cell by design (empty
markers are never values), so the column stores None for it instead of
quarantining it; ``decode_json`` on the unstripped text still refuses it.
"""

from __future__ import annotations

import json
import os
import signal
import time
from contextlib import contextmanager
from pathlib import Path

import pytest

from normalise.decode import EMPTY_MARKERS, decode_column
from normalise.decode.literal import CellError, decode_json
from tests.strategies import cell_value, strict_equal

SUITE_ENV = "NORMALISE_JSON_SUITE"
DEFAULT_SUITE = Path(__file__).resolve().parents[2] / "shared" / "conformance" / "JSONTestSuite"
# json.loads accepts these n_ cases; RFC 8259, section 6 refuses them, and so must we.
JSON_LOADS_ACCEPTS = {"n_number_NaN.json": "NaN", "n_number_infinity.json": "Infinity",
                      "n_number_minus_infinity.json": "-Infinity"}
# n_ cases that are blank once stripped: empty cells by design in a column (see above).
BLANK_BY_DESIGN = {"n_single_space.json", "n_structure_no_data.json"}
SECONDS_PER_CASE = 5


def find_suite() -> tuple[Path | None, str]:
    """The test_parsing folder, or None and why it was not found."""
    env = os.environ.get(SUITE_ENV)
    roots = [Path(env)] if env else [DEFAULT_SUITE]
    for root in roots:
        for folder in (root / "test_parsing", root):
            if folder.is_dir() and any(folder.glob("y_*.json")):
                return folder, ""
    where = f"{SUITE_ENV}={env}" if env else str(DEFAULT_SUITE)
    return None, (f"JSONTestSuite corpus not found at {where} (expected test_parsing/y_*.json; "
                  f"set {SUITE_ENV} to the JSONTestSuite folder or its test_parsing folder)")


SUITE, MISSING = find_suite()


def cases(prefix: str) -> list:
    if SUITE is None:
        return [pytest.param(None, marks=pytest.mark.skip(reason=MISSING), id=f"{prefix}-corpus-absent")]
    return sorted(p.name for p in SUITE.glob(f"{prefix}*.json"))


def read_case(name: str) -> str:
    # As the reader reads exports: UTF-8, undecodable bytes kept as lone surrogates.
    return (SUITE / name).read_bytes().decode("utf-8", "surrogateescape")


def json_column(text: str):
    return decode_column("cell", [text, "[1]"], [2, 3], "suite.json", forced=("json", None))


@contextmanager
def time_limit(seconds: int):
    """Fail, rather than hang, when a case takes too long (POSIX main thread only)."""
    if not hasattr(signal, "SIGALRM"):
        yield
        return

    def expire(signum, frame):
        raise TimeoutError(f"took more than {seconds} s")

    previous = signal.signal(signal.SIGALRM, expire)
    signal.alarm(seconds)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)


def test_corpus_is_complete():
    if SUITE is None:
        pytest.skip(MISSING)
    counts = {p: len(list(SUITE.glob(f"{p}_*.json"))) for p in "yni"}
    assert counts == {"y": 95, "n": 188, "i": 35}, counts  # as SOURCE.md lists them


@pytest.mark.parametrize("name", cases("y_"))
def test_y_case_decodes_to_the_json_loads_value(name):
    text = read_case(name)
    want = json.loads(text)  # reference: json.loads (RFC 8259 parser of the standard library)
    assert strict_equal(decode_json(text), want)
    col = json_column(text)
    assert not col.quarantined, col.quarantined
    # the column strips the cell first and stores empties as None
    assert strict_equal(col.values[0], cell_value(json.loads(text.strip())))
    assert col.values[1] == [1]


@pytest.mark.parametrize("name", cases("n_"))
def test_n_case_is_refused_and_quarantined(name):
    text = read_case(name)
    if name in JSON_LOADS_ACCEPTS:
        json.loads(text)  # reference: json.loads accepts it; RFC 8259, section 6 does not
    else:
        with pytest.raises((ValueError, RecursionError)):  # reference: json.loads refuses it
            json.loads(text)
    with time_limit(SECONDS_PER_CASE), pytest.raises(CellError) as info:
        decode_json(text)
    err = info.value
    assert err.message
    assert err.position is None or 1 <= err.position <= len(text) + 1
    if name in JSON_LOADS_ACCEPTS:
        assert "RFC 8259" in err.message and err.message.startswith(JSON_LOADS_ACCEPTS[name])
    with time_limit(SECONDS_PER_CASE):
        col = json_column(text)
    assert col.values[0] is None and col.values[1] == [1]
    if text.strip() in EMPTY_MARKERS:
        assert name in BLANK_BY_DESIGN and not col.quarantined  # empty by design, see module doc
        return
    (q,) = col.quarantined
    assert (q.file, q.line, q.column) == ("suite.json", 2, "cell") and q.message
    assert q.position is None or 1 <= q.position <= len(text.strip()) + 1


@pytest.mark.parametrize("name", cases("i_"))
def test_i_case_neither_crashes_nor_hangs(name):
    text = read_case(name)
    start = time.perf_counter()
    with time_limit(SECONDS_PER_CASE):
        try:
            value = decode_json(text)
        except CellError as err:
            assert err.message
        else:
            assert strict_equal(value, json.loads(text))  # reference: json.loads, when we accept
        col = json_column(text)
    assert len(col.quarantined) in (0, 1) and col.values[1] == [1]
    assert (col.values[0] is None) or not col.quarantined
    assert time.perf_counter() - start < SECONDS_PER_CASE
