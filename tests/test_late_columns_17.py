"""A column with no value in the first records is modelled as one whose values start at once.

The model and each column's format are made from the first ``pipeline.SAMPLE_ROWS`` records. A column blank
(or ``[]``) in all of them used to be decided as empty and every later list in it kept as text; now its format is
detected on the records from its first value, and those records join the sample (``partition.py``), whatever
the partition size, and the run says so (the manifest's ``widened``).

Dataset: the per-country JSON files of the PyPI package ``countryinfo`` (MIT; see tests/test_open_countryinfo.py),
exported as a reporting system sorts a list by a count: the countries with the fewest neighbours first, so the
islands, which have no ``borders`` key, fill the first records. Expected lists come from the package files with
``json`` (RFC 8259) and ``csv`` (the Python library reference), never from the tool's output.
"""

from __future__ import annotations

import csv
import json
import sqlite3

import pytest

from normalise import pipeline
from normalise.pipeline import build_database
from normalise.report.manifest import summary
from tests.open_data import check_lossless, check_pragmas, element_tables, lists
from tests.test_open_countryinfo import cell, countries, kept
from tests.test_partitions_14 import database, same_databases

STEM = "countries"
HEADER = ["name", "borders", "languages", "area"]


def _export(where) -> tuple:
    """The countries, fewest neighbours first (ties in name order), as CSV with JSON list cells."""
    rows = sorted(kept(countries()), key=lambda r: (len(r.get("borders") or ()), r["name"]))
    path = where / f"{STEM}.csv"
    with open(path, "w", encoding="utf-8", newline="") as f:
        w = csv.writer(f)
        w.writerow(HEADER)
        for row in rows:
            w.writerow([cell(row.get(c)) for c in HEADER])
    without = sum(1 for r in rows if not r.get("borders"))
    return path, rows, without


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    where = tmp_path_factory.mktemp("late")
    path, rows, without = _export(where)
    assert 20 < without < len(rows) - 20  # islands first, then the rest (the package's own data)
    out = {}
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(pipeline, "SAMPLE_ROWS", without)  # the first records hold no border at all
        for size in (None, 7, 40):
            db = where / f"p{size}.db"
            out[size] = (db, build_database([str(path)], str(db), chunk_rows=size))
    return path, rows, without, out


def test_the_first_records_hold_no_value_of_the_column(built):
    path, _, without, _ = built
    with open(path, newline="", encoding="utf-8") as f:
        cells = [row["borders"] for row in csv.DictReader(f)]
    # blank where the key is missing, [] where the list is empty: no value either way (decode.EMPTY_MARKERS)
    assert set(cells[:without]) <= {"", "[]"} and cells[without] not in ("", "[]")


def test_the_late_column_is_a_bridge_and_every_list_comes_back(built):
    _, rows, _, out = built
    db, m = out[None]
    expect = {r["name"]: r["borders"] for r in rows if r.get("borders")}
    bridge, entity, _ = element_tables(m, STEM, "borders")
    assert bridge["rows"] == sum(map(len, expect.values()))  # one link per element (json.loads of each cell)
    assert entity["rows"] == len({b for bs in expect.values() for b in bs})
    assert lists(db, m, STEM, "borders") == expect  # every country's list, in order
    check_pragmas(db, m)  # SQLite's foreign_key_check and integrity_check
    check_lossless(m)


def test_the_run_says_where_the_column_was_decided(built):
    path, _, without, out = built
    _, m = out[None]
    (entry,) = [w for w in m["widened"] if w.get("column") == "borders"]
    assert entry["format"] == "json" and entry["first_records"] == without
    assert entry["first_value_line"] == without + 2  # the header is line 1
    assert entry["records"] == min(without, len(built[1]) - without)
    text = summary(m)  # the run's summary (stderr) says it in words
    assert f"borders has no value in the first {without:,} records" in text


def test_every_partition_size_gives_the_same_database(built):
    *_, out = built
    reference = database(out[None][0])
    for size in (7, 40):
        same_databases(reference, database(out[size][0]), f"{size} a partition")
        assert out[size][1]["widened"] == out[None][1]["widened"]


def test_two_files_read_whole_decide_alike(built, tmp_path, monkeypatch):
    # a second input makes the build read its inputs whole (partition._Whole) instead of in chunks
    path, rows, without, out = built
    other = tmp_path / "notes.csv"
    other.write_text("code,note\nx1,first\n", encoding="utf-8")
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", without)
    db = tmp_path / "two.db"
    m = build_database([str(path), str(other)], str(db))
    assert lists(db, m, STEM, "borders") == lists(out[None][0], out[None][1], STEM, "borders")
    assert [w for w in m["widened"] if w.get("column") == "borders"] == \
        [w for w in out[None][1]["widened"] if w.get("column") == "borders"]


def test_a_column_empty_throughout_is_not_widened(tmp_path, monkeypatch):
    path = tmp_path / "items.csv"
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["key", "tags", "unused"])
        for i in range(12):
            w.writerow([f"k{i}", json.dumps(["a", "b"][: i % 3]) if i >= 9 else "[]", ""])
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", 4)
    for size in (None, 2, 5):
        m = build_database([str(path)], str(tmp_path / f"o{size}.db"), chunk_rows=size)
        assert [w["column"] for w in m["widened"]] == ["tags"]
        with sqlite3.connect(tmp_path / f"o{size}.db") as con:
            tags = con.execute('SELECT count(*) FROM "item_tags"').fetchone()[0]
        assert tags == 1 + 2  # json.loads of the cells: k10 holds ["a"], k11 ["a", "b"]
