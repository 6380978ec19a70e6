"""Issue 14: a build's report and data dictionary are rendered from its plan and its counts, not read back.

The check is against SQLite's own catalog (``sqlite_master``, ``PRAGMA table_info``, ``PRAGMA foreign_key_list``,
``PRAGMA index_list``; sqlite.org/pragma.html), read by ``catalog._catalog`` as ``normalise report DB`` reads a
database on its own: for every table and view the model made from the plan (``catalog.planned``) says what SQLite
says of the file the build wrote — names, roles, keys, columns with their declared types, row counts, view SQL.

Data: two open datasets carried by package registries, made into the flat files a real system gives:
``zone1970.tab`` of the IANA tz database (PyPI ``tzdata``; public domain), a TSV with a delimited list, and
``countryinfo`` (PyPI, MIT), a CSV with JSON lists and objects.
"""

from __future__ import annotations

import csv
import sqlite3

import pytest

from normalise.pipeline import build_database, prepare
from normalise.report.catalog import _catalog, planned
from normalise.report.html import write_outputs
from tests.test_open_countryinfo import DELIMITED, HEADER as COUNTRY_HEADER, cell, countries
from tests.test_open_dataset import HEADER as ZONE_HEADER, table_rows


def _zone_tsv(where) -> str:
    path = where / "zone1970.tsv"
    with open(path, "w", encoding="utf-8", newline="") as f:
        f.write("\t".join(ZONE_HEADER) + "\n")
        for row in table_rows("zone1970.tab"):
            f.write("\t".join(row + [""] * (len(ZONE_HEADER) - len(row))) + "\n")
    return str(path)


def _countries_csv(where) -> str:
    path = where / "countries.csv"
    with open(path, "w", encoding="utf-8", newline="") as f:
        w = csv.writer(f)
        w.writerow(COUNTRY_HEADER)
        for row in countries():
            w.writerow([DELIMITED[c].join(row[c]) if c in DELIMITED and row.get(c) else cell(row.get(c))
                        for c in COUNTRY_HEADER])
    return str(path)


@pytest.fixture(scope="module", params=["tzdata", "countryinfo"])
def build(request, tmp_path_factory):
    where = tmp_path_factory.mktemp(request.param)
    path = _zone_tsv(where) if request.param == "tzdata" else _countries_csv(where)
    db = where / "out.db"
    manifest = dict(build_database([path], str(db)))
    plan = prepare([path]).plan  # the same input gives the same plan (keys and names are deterministic)
    return db, manifest, plan


def _shown(model: dict) -> dict:
    """What the report and the dictionary render of the model, table by table and view by view."""
    tables = {t["name"]: {"role": t["role"], "rows": t["rows"], "primary_key": t["primary_key"],
                          "natural_key": t["natural_key"], "position_column": t["position_column"],
                          "unique": sorted(map(list, t["unique"])),
                          "foreign_keys": [(f["columns"], f["references"], f["ref_columns"], f["unique"], f["owner"])
                                           for f in t["foreign_keys"]],
                          "columns": [(c["name"], c["type"], c["sql_type"], c["nullable"], c["unique"], c["source"])
                                      for c in t["columns"]]}
              for t in model["tables"]}
    views = {v["name"]: {"kind": v["kind"], "table": v["table"], "sql": v["sql"],
                         "columns": [c["name"] for c in v["columns"]]} for v in model["views"]}
    return {"tables": tables, "order": list(tables), "views": views, "notes": model["notes"]}


def test_the_plan_made_model_is_what_sqlite_says_of_the_file(build):
    # reference: SQLite's catalog and PRAGMAs of the written file (sqlite.org/pragma.html)
    db, manifest, plan = build
    with sqlite3.connect(db) as conn:
        read_back = _shown(_catalog(conn, manifest))
        counted = {name: conn.execute(f'SELECT count(*) FROM "{name}"').fetchone()[0]
                   for name in read_back["tables"]}
    made = _shown(planned(plan, manifest))
    assert made == read_back
    assert {name: t["rows"] for name, t in made["tables"].items()} == counted  # the build's counts are the file's


def test_a_build_report_takes_the_plan(build, tmp_path):
    db, manifest, plan = build
    with_plan = tmp_path / "with_plan.md"
    read_back = tmp_path / "read_back.md"
    write_outputs(db, manifest, dictionary_path=with_plan, plan=plan)
    write_outputs(db, manifest, dictionary_path=read_back)
    assert with_plan.read_text(encoding="utf-8") == read_back.read_text(encoding="utf-8")
