"""Issue 17: what the first records decided (types, the keys of objects, which fields an identity determines) is
checked against every record by the build; a later record that contradicts it joins the sample, the plan is made
again and the build runs again, and the manifest says which records did it. A plan read from a file is not
widened: what it cannot hold is kept as given in value_traces, with a quarantine row naming the first line.

The sample is made small here (``pipeline.SAMPLE_ROWS``, 5,000 records in use) so that real files of a few hundred
records contradict it as a big file contradicts 5,000; the model must then be the one the whole file gives.

Data:
- the Unicode CLDR supplemental data shipped in the PyPI package ``babel`` (BSD-3-Clause; CLDR under the Unicode
  licence), as JSON Lines, built the way ``tests/test_open_cldr_territories.py`` writes it: territories with their
  languages (official status on some pairs only) and currencies (dates on some);
- ``countryinfo`` (PyPI, MIT) as CSV, whose ``area`` holds integers until line 100 (``0.49``).

Which fields a language or currency code determines is computed here with plain Python, by the textbook
definition of a functional dependency (X -> A holds when every occurrence of one X value carries the same A; an
absent key is a value of its own), never from the tool's output.
"""

from __future__ import annotations

import json
import sqlite3
from collections import defaultdict

import pytest

from normalise import pipeline
from normalise.pipeline import build_database, make_plan
from tests.test_open_cldr_territories import territories
from tests.test_report_from_plan_14 import _countries_csv

ABSENT = object()


def _schema(db) -> dict:
    """Every table and its columns with their declared types, from SQLite's own catalog (``PRAGMA table_info``)."""
    with sqlite3.connect(db) as con:
        names = [n for (n,) in con.execute("SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name")]
        return {n: [(r[1], r[2]) for r in con.execute(f'PRAGMA table_info("{n}")')] for n in names}


def _jsonl(rows: list[dict], path) -> str:
    path.write_text("".join(json.dumps(r, ensure_ascii=False) + "\n" for r in rows), encoding="utf-8")
    return str(path)


def _determined(rows: list[dict], column: str) -> dict[str, bool]:
    """For each field of the objects in ``column``: whether ``code -> field`` holds over every record."""
    seen = defaultdict(lambda: defaultdict(set))
    for row in rows:
        for obj in row.get(column, []):
            for field in {k for r in rows for o in r.get(column, []) for k in o} - {"code"}:
                seen[field][obj["code"]].add(json.dumps(obj[field]) if field in obj else ABSENT)
    return {field: all(len(values) == 1 for values in codes.values()) for field, codes in seen.items()}


@pytest.fixture(scope="module")
def cldr(tmp_path_factory):
    where = tmp_path_factory.mktemp("widening")
    rows = territories()
    path = _jsonl(rows, where / "territories.jsonl")
    whole = build_database(path, where / "whole.db")  # 267 records: the whole file is the sample
    return rows, path, where, whole


@pytest.mark.parametrize("sample", [1, 2, 40])
def test_a_small_sample_gives_the_model_of_the_whole_file(cldr, monkeypatch, sample):
    rows, path, where, whole = cldr
    assert whole["widened"] == []
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", sample)
    db = where / f"sample{sample}.db"
    m = build_database(path, db)
    assert _schema(db) == _schema(where / "whole.db")
    assert m["integrity"]["cells_rebuilt_exactly"] == m["integrity"]["cells_checked"]  # the lossless proof
    assert m["integrity"]["reconciled"] and m["integrity"]["integrity_check"] == "ok"
    said = [w for w in m["widened"] if "contradicted" in w]
    if sample == 1:  # the first territory's objects lack keys others carry: they join the model
        assert {(w["column"], w["key"]) for w in said if w["contradicted"] == "key"} >= {
            ("languages", "official_status"), ("currencies", "to")}


def test_fields_the_code_does_not_determine_over_every_record_stay_on_the_link(cldr, monkeypatch):
    rows, path, where, _ = cldr
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", 2)  # two territories: every field looks determined
    db = where / "two.db"
    m = build_database(path, db)
    schema = _schema(db)
    for column, entity in (("languages", "language"), ("currencies", "currency")):
        bridge = next(name for name in schema if name.endswith(f"_{column}"))  # the record table's own name first
        held = {c for c, _ in schema[entity]}
        linked = {c for c, _ in schema[bridge]}
        for field, holds in _determined(rows, column).items():
            assert (field in held, field in linked) == (holds, not holds), (column, field)
    widened = {w["column"] for w in m["widened"] if w.get("contradicted") == "dependency"}
    assert widened == {f"language.{f}" for f, h in _determined(rows, "languages").items() if not h} | {
        f"currency.{f}" for f, h in _determined(rows, "currencies").items() if not h}
    assert all(w["dependency"].startswith("code -> ") for w in m["widened"] if w.get("contradicted") == "dependency")


def test_a_later_value_its_type_cannot_hold_widens_the_column(tmp_path, monkeypatch):
    path = _countries_csv(tmp_path)
    build_database(path, tmp_path / "whole.db")
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", 30)
    for chunk_rows in (None, 7):  # read whole and in chunks: the same widening, the same database
        db = tmp_path / f"small{chunk_rows}.db"
        m = build_database(path, db, chunk_rows=chunk_rows, manifest_path=str(tmp_path / f"m{chunk_rows}.json"))
        said = [w for w in m["widened"] if w.get("contradicted") == "type"]
        assert [(w["column"], w["line"], w["type"], w["value"]) for w in said] == [("area", 100, "integer", "'0.49'")]
        area = dict(_schema(db)["countries"])["area"]
        assert area == dict(_schema(tmp_path / "whole.db")["countries"])["area"]
        with sqlite3.connect(db) as con:
            assert con.execute("SELECT count(*) FROM quarantined_cells WHERE column_name = 'area'").fetchone() == (0,)
        assert m["integrity"]["cells_rebuilt_exactly"] == m["integrity"]["cells_checked"]
    with sqlite3.connect(tmp_path / "smallNone.db") as a, sqlite3.connect(tmp_path / "small7.db") as b:
        assert list(a.iterdump()) == list(b.iterdump())


def test_a_plan_file_is_the_users_decision_and_is_not_widened(tmp_path, monkeypatch):
    path = _countries_csv(tmp_path)
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", 30)
    monkeypatch.setattr(pipeline, "MAX_WIDENINGS", 0)  # the plan of the first 30 records, as a user may write it
    plan = tmp_path / "plan.toml"
    make_plan(path, str(plan))
    monkeypatch.undo()
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", 30)
    db = tmp_path / "planned.db"
    m = build_database(path, db, plan_path=str(plan))
    assert [w for w in m["widened"] if "contradicted" in w] == []
    assert dict(_schema(db)["countries"])["area"] == "BIGINT"  # the plan's type, as written
    with sqlite3.connect(db) as con:
        line, message = con.execute("SELECT line, message FROM quarantined_cells WHERE column_name = 'area'").fetchone()
    assert line == 100 and "not integer" in message
    assert m["integrity"]["cells_rebuilt_exactly"] == m["integrity"]["cells_checked"]  # kept in value_traces


def test_the_plan_command_gives_the_plan_the_build_uses(tmp_path, monkeypatch):
    path = _countries_csv(tmp_path)
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", 30)
    plan = tmp_path / "plan.toml"
    make_plan(path, str(plan))
    built, replayed = tmp_path / "built.db", tmp_path / "replayed.db"
    build_database(path, built)
    m = build_database(path, replayed, plan_path=str(plan))
    assert _schema(built) == _schema(replayed)
    with sqlite3.connect(built) as a, sqlite3.connect(replayed) as b:
        tables = [n for (n,) in a.execute("SELECT name FROM sqlite_master WHERE type = 'table'")]
        for name in tables:  # the same rows, in the same order
            assert a.execute(f'SELECT * FROM "{name}"').fetchall() == b.execute(f'SELECT * FROM "{name}"').fetchall()
    assert m["integrity"]["cells_rebuilt_exactly"] == m["integrity"]["cells_checked"]


def test_the_command_says_it_widened_and_why(tmp_path, monkeypatch):
    """The summary names each widening with its line; the manifest keeps it (what the report shows)."""
    path = _countries_csv(tmp_path)
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", 30)
    from normalise.report.manifest import summary
    m = build_database(path, tmp_path / "out.db")
    text = summary(dict(m))
    assert "area holds '0.49' on line 100 of countries.csv, which is not integer" in text
