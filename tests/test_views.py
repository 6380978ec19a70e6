"""Tests of the summary views, against the same figures computed independently with pandas.

The references, named beside each check:

* the CSV files, read with ``pandas.read_csv`` (every cell as text), joined with
  ``DataFrame.merge`` and decoded with the standard library as the demo
  generator writes them (``demo/generate.py``, module docstring):
  ``contributors`` with ``ast.literal_eval``, ``production_team`` and
  ``subjects`` with ``json.loads``, ``formats`` with ``str.split("|")``;
* the base tables (``person``), read with ``pandas.read_sql_query``, for the
  display name an entity table chose (the views only look it up);
* common practice for list columns in BI exports: an empty list is NULL (no
  value), never an empty string.

The views are read with ``sqlite3`` directly, so NULL and '' stay distinct.
"""

from __future__ import annotations

import ast
import json
import sqlite3

import pandas as pd
import pytest

from demo.generate import generate
from normalise.pipeline import build_database

TITLES, CONTRIBUTIONS = "titles.csv", "contributions.csv"
SEPARATOR = "; "  # the documented separator (normalise/model/views.py, LIST_SEPARATOR)
DECODERS = {  # demo/generate.py, module docstring
    "contributors": ast.literal_eval,
    "production_team": json.loads,
    "subjects": json.loads,
    "formats": lambda text: text.split("|"),
}
LISTS = {"contributors": "title_contributors", "production_team": "title_production_team",
         "subjects": "title_subjects", "formats": "title_formats"}


def decode(column: str, cell) -> list:
    """A cell as the reference decoder reads it; blank, missing and malformed cells give no list."""
    if not isinstance(cell, str) or cell.strip() == "":
        return []
    try:
        return DECODERS[column](cell)
    except (ValueError, SyntaxError):
        return []  # malformed: the tool quarantines the cell, so the record has no list


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    generate(out, size=200, seed=7)
    db = out / "views.db"
    m = build_database([str(out / TITLES), str(out / CONTRIBUTIONS)], str(db),
                       picks=["first_editor=contributors:role=editor"])
    return out, str(db), m


@pytest.fixture(scope="module")
def expected(demo):
    """One row per kept title with its decoded lists: a left join of the first row per key."""
    out, db, _ = demo
    titles = pd.read_csv(out / TITLES, dtype=str, keep_default_na=False).drop_duplicates("title_key")
    contributions = pd.read_csv(out / CONTRIBUTIONS, dtype=str, keep_default_na=False) \
        .drop_duplicates("title_key")
    joined = titles.merge(contributions, on="title_key", how="left", validate="one_to_one")
    for column in LISTS:
        joined[column] = [decode(column, cell) for cell in joined[column]]
    with sqlite3.connect(db) as con:
        people = pd.read_sql_query("SELECT person_id, name FROM person", con)
    names = dict(zip(people["person_id"], people["name"]))
    return joined, names


def view_rows(db: str, view: str, key: str) -> dict:
    with sqlite3.connect(db) as con:
        cur = con.execute(f'SELECT * FROM "{view}"')
        columns = [d[0] for d in cur.description]
        return {row[columns.index(key)]: dict(zip(columns, row)) for row in cur}


def joined_or_null(values: list):
    return SEPARATOR.join(values) if values else None


def test_record_summary(demo, expected):
    _, db, _ = demo
    joined, names = expected
    rows = view_rows(db, "titles_summary", "title_key")
    assert sorted(rows) == sorted(joined["title_key"])
    for record in joined.to_dict("records"):
        got = rows[record["title_key"]]
        shown = {
            "contributors": [names[p["person_id"]] for p in record["contributors"]],
            "production_team": [names[p["person_id"]] for p in record["production_team"]],
            "subjects": record["subjects"],
            "formats": record["formats"],
        }
        for column, values in shown.items():
            assert got[f"number_of_{column}"] == len(values), (record["title_key"], column)
            assert got[column] == joined_or_null(values), (record["title_key"], column)
        editors = [p for p in record["contributors"] if p["role"] == "editor"]
        assert got["first_editor"] == (names[editors[0]["person_id"]] if editors else None)


def test_record_summary_empty_lists_are_null(demo, expected):
    _, db, _ = demo
    joined, _ = expected
    with sqlite3.connect(db) as con:
        for column in list(LISTS) + ["first_editor"]:
            # common practice: no value is NULL, not an empty string
            assert con.execute(f'SELECT count(*) FROM titles_summary WHERE "{column}" = \'\'').fetchone()[0] == 0
        nulls = con.execute("SELECT count(*) FROM titles_summary WHERE contributors IS NULL").fetchone()[0]
        no_editor = con.execute("SELECT count(*) FROM titles_summary WHERE first_editor IS NULL").fetchone()[0]
    assert nulls == sum(not v for v in joined["contributors"]) > 0
    assert no_editor == sum(not any(p["role"] == "editor" for p in v) for v in joined["contributors"]) > 0


def memberships(joined: pd.DataFrame, column: str) -> pd.DataFrame:
    """(title_key, release_date, entity) for every element of a list column."""
    exploded = joined[["title_key", "release_date", column]].explode(column).dropna(subset=[column])
    entity = exploded[column].map(lambda v: v["person_id"] if isinstance(v, dict) else v)
    return pd.DataFrame({"title_key": exploded["title_key"], "release_date": exploded["release_date"],
                         "entity": entity})


def summary_of(joined: pd.DataFrame, columns: list[str]) -> dict:
    """Per entity: distinct titles per list and in total, first and last title by release date
    (ties by title key, as the view breaks them), with the dates."""
    parts = {c: memberships(joined, c) for c in columns}
    total = pd.concat(parts.values()).drop_duplicates(["title_key", "entity"])
    out: dict = {}
    for entity, group in total.groupby("entity"):
        dated = group[group["release_date"] != ""]
        first = dated.sort_values(["release_date", "title_key"]).iloc[0]
        last = dated.sort_values(["release_date", "title_key"], ascending=False).iloc[0]
        out[entity] = {"records_in_total": group["title_key"].nunique(),
                       "first_title": first["title_key"], "first_release_date": first["release_date"],
                       "last_title": last["title_key"], "last_release_date": last["release_date"]}
    for column, part in parts.items():
        counts = part.groupby("entity")["title_key"].nunique()
        for entity in out:
            out[entity][f"records_in_{LISTS[column]}"] = int(counts.get(entity, 0))
    return out


@pytest.mark.parametrize("view, key, columns", [
    ("person_summary", "person_id", ["contributors", "production_team"]),
    ("subject_summary", "subject", ["subjects"]),
    ("format_summary", "format", ["formats"]),
])
def test_entity_summary(demo, expected, view, key, columns):
    _, db, _ = demo
    joined, _ = expected
    want = summary_of(joined, columns)
    rows = view_rows(db, view, key)
    assert sorted(rows) == sorted(want)
    for entity, figures in want.items():
        got = {k: rows[entity][k] for k in figures}
        assert got == figures, (view, entity)


def test_person_summary_counts_people_in_both_lists_once(demo, expected):
    """A person in both lists of one title counts once in the total (distinct records)."""
    _, db, _ = demo
    joined, _ = expected
    both = {(r["title_key"], p["person_id"]) for r in joined.to_dict("records") for p in r["contributors"]} \
        & {(r["title_key"], p["person_id"]) for r in joined.to_dict("records") for p in r["production_team"]}
    assert both  # the demo plants people in both lists (planted.json: in_both_lists)
    rows = view_rows(db, "person_summary", "person_id")
    for _, pid in both:
        r = rows[pid]
        assert r["records_in_total"] < r["records_in_title_contributors"] + r["records_in_title_production_team"]


def test_manifest_views(demo):
    _, db, m = demo
    assert m["views"] == [
        {"name": "titles_summary", "kind": "record_summary", "table": "titles"},
        {"name": "person_summary", "kind": "entity_summary", "table": "person"},
        {"name": "subject_summary", "kind": "entity_summary", "table": "subject"},
        {"name": "format_summary", "kind": "entity_summary", "table": "format"},
    ]
    roles = {t["name"]: t["role"] for t in m["tables"]}
    for v in m["views"]:
        assert roles[v["table"]] == {"record_summary": "record", "entity_summary": "entity"}[v["kind"]]
    with sqlite3.connect(db) as con:
        in_database = {n for (n,) in con.execute("SELECT name FROM sqlite_master WHERE type = 'view'")}
    assert in_database == {v["name"] for v in m["views"]}
