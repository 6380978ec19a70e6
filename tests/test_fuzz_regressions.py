"""What fuzzing found, kept as regressions, and a short bounded fuzz run of the same invariants.

The invariants are those of the atheris harnesses (``fuzz/checks.py``): the decode pass returns what
``json.loads`` / ``ast.literal_eval`` return or quarantines, and never raises; the read pass raises nothing
but ``UnreadableFile``, and reading in chunks gives what reading whole gives. ``bash fuzz/run.sh SECONDS``
runs the coverage-guided harnesses for longer.
"""

from __future__ import annotations

import json
import time

import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from fuzz.checks import MODES, SUFFIXES, check_decode, check_read
from normalise.build import TooManyColumns, check_width, to_sql_value
from normalise.model.expected import usable_identity
from normalise.decode import decode_column, split_delimited
from normalise.model.escapes import printable
from normalise.read import read
from tests.strategies import json_cells, python_cells, random_cells

BOUNDED = settings(max_examples=200, deadline=None, derandomize=True,
                   suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])


# --- crashes found by fuzz/fuzz_decode.py and fuzz/fuzz_read.py ------------------------------------

def test_delimited_cell_with_a_line_break_outside_quotes():
    # fuzz_decode: decode_column(['\x00[\n=,,="', '', '', '', ''], auto) raised csv.Error
    # ("new-line character seen in unquoted field")
    assert split_delimited('x\n"y|z', "|") == ['x\n"y', "z"]
    check_decode(['\x00[\n=,,="', "", "", "", ""], "auto")


def test_tsv_whose_delimited_column_holds_a_line_break_and_a_quote(tmp_path):
    # fuzz_read: b'\xfc~\n")\xfc~\n""|"|,' as .tsv, read then decoded: the same csv.Error
    assert check_read(b'\xfc~\n")\xfc~\n""|"|,', ".tsv", chunk_rows=1, directory=str(tmp_path)) is not None


# --- crashes found while building the corpus (tests/corpus/), each fixed where it arose ---------------

def test_header_and_json_lines_keys_with_undecodable_bytes_are_named_printably(tmp_path):
    # a column name with a lone surrogate reached json.dump of the manifest: UnicodeEncodeError
    csv_file = tmp_path / "h.csv"
    csv_file.write_bytes(b"id,na\xffme\n1,2\n")
    export = read(csv_file)
    assert export.columns == ["id", "na\\xffme"] and "try --encoding" in export.warnings[0]
    jsonl = tmp_path / "h.jsonl"
    jsonl.write_bytes(b'{"id": 1, "w\xfeo": 2, "\\ud800": 3}\n')
    assert read(jsonl).columns == ["id", "w\\xfeo", "\\ud800"]
    assert printable("plain") == "plain"


def test_blank_lines_before_the_header_are_skipped(tmp_path):
    # a file of blank lines read as records of no columns
    f = tmp_path / "b.csv"
    f.write_text("\n\r\n\nid,name\n1,a\n")
    export = read(f)
    assert export.columns == ["id", "name"] and export.lines == [5]
    f.write_text("\n\n\n")
    assert read(f).columns == [] and read(f).lines == []


def test_values_beyond_64_bits_or_infinite_never_reach_sqlite_as_integers():
    # OverflowError ("Python int too large to convert to SQLite INTEGER", "cannot convert float
    # infinity to integer") from values after the sample the model was inferred from
    assert to_sql_value(2**63 - 1, "integer") == 2**63 - 1
    assert to_sql_value(2**63, "integer") is None
    assert to_sql_value(-(2**63) - 1, "integer") is None
    assert to_sql_value("123456789012345678901234567890", "integer") is None
    assert to_sql_value(float("inf"), "integer") is None
    assert to_sql_value(10**400, "real") is None
    assert usable_identity(7, "integer") and not usable_identity("7", "integer")
    assert not usable_identity(2**64, "integer") and not usable_identity(1.5, "integer")
    assert usable_identity(2**64, "text") and not usable_identity(True, "text")


def test_a_table_wider_than_sqlite_allows_is_refused_before_writing():
    from normalise.model.plan import Column, Plan, Table

    wide = Plan(tables=[Table("wide", "record", [Column(f"c{i}", "integer") for i in range(2001)], ["c0"],
                              sources=[{"file": "wide", "column": None}])])
    with pytest.raises(TooManyColumns, match="2,001 columns"):
        check_width(wide)
    check_width(Plan(tables=[Table("ok", "record", [Column(f"c{i}", "integer") for i in range(1999)], ["c0"])]))


def test_decode_as_text_keeps_json_lines_objects_as_json_text():
    col = decode_column("obj", [{"a": 1}, None, [1, "é"]], [1, 2, 3], "x.jsonl", forced=("text", None))
    assert col.values == ['{"a": 1}', None, '[1, "é"]'] and col.format == "text"


def test_identity_candidates_of_a_wide_object_take_bounded_time():
    # a JSON Lines object of 3,000 keys took minutes (a dependency measure for every pair of fields)
    from normalise.infer import identity_candidates

    objects = [{f"k{i}": r * i for i in range(3000)} for r in range(5)]
    started = time.monotonic()
    identity_candidates(objects, list(range(5)))
    assert time.monotonic() - started < 10


# --- a short bounded run of the fuzz invariants (Hypothesis) ----------------------------------------

@BOUNDED
@given(st.sampled_from(MODES),
       st.lists(st.one_of(python_cells(), json_cells(), random_cells(), st.text(max_size=12)), min_size=1,
                max_size=6))
@example("auto", ['\x00[\n=,,="', "", "", "", ""])
@example("auto", ["1j", "[1]", "[2]"])
@example("json", ["[1e999]", "[NaN]", '["\\ud800"]', "[" * 70 + "]" * 70])
@example("python-literal", ["[__import__('os').system('touch MARKER')]", "(1,)", "{1: 2}", "[1,]"])
def test_decode_column_matches_the_references_or_quarantines(mode, cells):
    check_decode(cells, mode)


_FILE_TOKENS = st.sampled_from([b"\n", b"\r\n", b"\r", b",", b"\t", b";", b"|", b'"', b'""', b"{", b"}", b"[", b"]",
                                b":", b'"a":', b"1", b"null", b"NaN", b"\xef\xbb\xbf", b"\x00", b"\xff", b"\xed\xa0\x80",
                                b"\\ud800", b"id", b"a", b" ", b"'", b"(", b")"])


@BOUNDED
@given(st.sampled_from(SUFFIXES), st.lists(st.one_of(_FILE_TOKENS, st.binary(max_size=4)), max_size=40).map(b"".join),
       st.integers(min_value=1, max_value=4))
@example(".tsv", b'\xfc~\n")\xfc~\n""|"|,', 1)
@example(".csv", b"\n\n\n", 1)
@example(".jsonl", b'{"a\xff": 1}\n{"\\ud800": 2}\n', 1)
@example(".json", b"[1, 2]", 2)
def test_read_raises_only_unreadable_file_and_chunks_agree(tmp_path_factory, suffix, data, chunk_rows):
    check_read(data, suffix, chunk_rows=chunk_rows, directory=str(tmp_path_factory.getbasetemp()))


def test_json_cells_of_the_conformance_kind_never_crash_a_column():
    cells = ['{"a":' * 300 + "1" + "}" * 300, "[" * 5000, '"\\ud800\\udc00"', "[1e99999]", "[-0]", '["\\u0000"]']
    col = check_decode(cells, "json")
    assert json.dumps(col.values, ensure_ascii=True)
