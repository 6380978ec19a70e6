"""Build an open dataset of countries whose cells hold objects keyed by codes, exported as CSV and JSON Lines.

Dataset: ``countries.json`` of the npm package ``world-countries`` version 5.1.0 (licence ODbL 1.0, its
LICENSE file), fetched at test time with ``npm pack`` and never kept in the repository. Its 250 countries
hold objects keyed by data: ``currencies`` keyed by ISO 4217 code (``{"EUR": {"name": "Euro", "symbol":
"€"}}``), ``languages`` keyed by ISO 639-3 code (``{"deu": "German"}``), ``translations`` keyed by language
code, and ``name.native`` keyed by language code inside the ``name`` object; ``borders`` lists cca3 codes.

The test writes the export a reporting system gives: pandas' ``DataFrame(rows).to_csv`` with the nested
columns as JSON text, and the same records as JSON Lines. Every expected fact is computed here with plain
Python from ``countries.json``, never hard-coded.
"""

from __future__ import annotations

import json
import sqlite3

import pandas as pd
import pytest

from normalise.pipeline import build_database
from tests.open_data import (build_jsonl, check_lossless, check_pragmas, element_tables, lists, nest,
                             npm_package, record_table, without_empty)

PACKAGE, VERSION = "world-countries", "5.1.0"
STEM = "countries"
WIDEST = 60  # columns: a keyed object is a table of its keys, never a column per key


@pytest.fixture(scope="module")
def package(tmp_path_factory):
    return npm_package(PACKAGE, VERSION, tmp_path_factory.mktemp("npm"))


@pytest.fixture(scope="module")
def rows(package):
    return json.loads((package / "countries.json").read_text(encoding="utf-8"))


@pytest.fixture(scope="module", params=["csv", "jsonl"])
def built(request, rows, tmp_path_factory):
    where = tmp_path_factory.mktemp(f"world_{request.param}")
    if request.param == "jsonl":
        return build_jsonl(rows, where, STEM)
    path = where / f"{STEM}.csv"
    flat = [{k: json.dumps(v, ensure_ascii=False) if isinstance(v, (dict, list)) else v for k, v in r.items()}
            for r in rows]
    pd.DataFrame(flat).to_csv(path, index=False)
    db = where / f"{STEM}.db"
    return rows, db, build_database([str(path)], str(db))


def by_key(m: dict, rows: list[dict]) -> dict:
    """Each country by the value of the record table's natural key (a column of the data, whichever it is)."""
    table = record_table(m, STEM)
    (source,) = [c["source"] for c in table["columns"] if c["name"] in table["natural_key"]]
    return {r[source]: r for r in rows}


def keyed_back(got: dict, fields: set) -> dict:
    """Rows of a keyed object's table, per country, as the object: the one source that is no field of the
    values is the key."""
    out = {}
    for country, elements in got.items():
        obj = {}
        for e in elements:
            e = nest(e)
            (key,) = [k for k in e if k not in fields]
            code = e.pop(key)
            obj[code] = e.pop("value") if fields == {"value"} else e
        out[country] = obj
    return out


def most_frequent(rows: list[dict], column: str, field: str | None) -> dict:
    """Per code, the value most countries give it (ties to the first seen): what an entity row holds."""
    from collections import Counter

    seen: dict = {}
    for r in rows:
        for code, v in r[column].items():
            seen.setdefault(code, Counter())[v if field is None else v.get(field)] += 1
    return {code: c.most_common(1)[0][0] for code, c in seen.items()}


def own_values(db, column: str) -> int:
    """Occurrences whose own value of an entity attribute value_traces keeps (the entity row holds another)."""
    with sqlite3.connect(db) as con:
        return con.execute("SELECT count(*) FROM value_traces WHERE column_name = ? AND reason LIKE 'entity "
                           "attribute%'", (column,)).fetchone()[0]


def test_package_and_licence(package, rows):
    # world-countries (npm) 5.1.0: ODbL 1.0, its package.json and its LICENSE file
    meta = json.loads((package / "package.json").read_text(encoding="utf-8"))
    assert meta["version"] == VERSION and [x["type"] for x in meta["licenses"]] == ["ODbL-1.0"]
    assert "Open Database License (ODbL)" in (package / "LICENSE").read_text(encoding="utf-8")
    assert len(rows) == 250


def test_records_proof_and_pragmas(built):
    rows, db, m = built
    (i,) = m["inputs"]
    assert i["rows_read"] == i["records_loaded"] == len(rows)
    assert i["rows_set_aside"] == i["rows_rejected"] == 0 and m["cells_quarantined"] == 0
    assert m["integrity"]["reconciled"] is True
    check_lossless(m)  # every cell rebuilt from the tables equals the decoded input
    check_pragmas(db, m)


def test_no_wide_table(built):
    rows, db, m = built
    # one column per key would give hundreds (every ISO 4217 code a country uses, every language)
    codes = {c for r in rows for c in r["currencies"]}
    assert len(codes) > WIDEST
    widest = max(m["tables"], key=lambda t: len(t["columns"]))
    assert len(widest["columns"]) < WIDEST, widest["name"]


def test_currencies(built):
    rows, db, m = built
    countries = by_key(m, rows)
    facts = {(k, code, c.get("name"), c.get("symbol"))
             for k, r in countries.items() for code, c in r["currencies"].items()}
    fields = {f for r in rows for c in r["currencies"].values() for f in c}
    got = keyed_back(lists(db, m, STEM, "currencies"), fields)
    # a currency's name is an entity attribute: its row holds the name most countries give it, and each
    # country that spells it otherwise has its own spelling in value_traces
    name = most_frequent(rows, "currencies", "name")
    assert {(k, code, name[code], c.get("symbol")) for k, obj in got.items() for code, c in obj.items()} == {
        (k, code, name[code], symbol) for k, code, _, symbol in facts}
    assert own_values(db, "currencies") == sum(n != name[code] for _, code, n, _ in facts)
    assert [list(v) for v in got.values()] == [list(r["currencies"]) for r in countries.values() if r["currencies"]]
    bridge, entity, _ = element_tables(m, STEM, "currencies")
    assert bridge["rows"] == len(facts)  # one row per (country, currency)
    assert entity["rows"] == len({code for _, code, _, _ in facts})  # a currency once, however many use it


def test_languages(built):
    rows, db, m = built
    countries = by_key(m, rows)
    got = keyed_back(lists(db, m, STEM, "languages"), {"value"})
    name = most_frequent(rows, "languages", None)  # the entity row's name of each code
    assert got == {k: {code: name[code] for code in r["languages"]} for k, r in countries.items() if r["languages"]}
    assert own_values(db, "languages") == sum(v != name[code] for r in rows for code, v in r["languages"].items())
    bridge, entity, _ = element_tables(m, STEM, "languages")
    assert bridge["rows"] == sum(len(r["languages"]) for r in rows)  # one row per (country, language code)
    assert entity["rows"] == len({code for r in rows for code in r["languages"]})


def test_translations_and_native_names(built):
    rows, db, m = built
    countries = by_key(m, rows)
    fields = {f for r in rows for t in r["translations"].values() for f in t}
    assert keyed_back(lists(db, m, STEM, "translations"), fields) == {
        k: r["translations"] for k, r in countries.items() if r["translations"]}
    native = {f for r in rows for t in r["name"]["native"].values() for f in t}
    # the codes recur across countries, as the translations' do: an entity of codes, a bridge row per name
    assert keyed_back(lists(db, m, STEM, "name.native"), native) == {
        k: r["name"]["native"] for k, r in countries.items() if r["name"]["native"]}


def test_borders_and_scalars(built):
    rows, db, m = built
    countries = by_key(m, rows)
    assert lists(db, m, STEM, "borders") == {k: r["borders"] for k, r in countries.items() if r["borders"]}
    table = record_table(m, STEM)
    with sqlite3.connect(db) as con:
        got = {r[0]: r[1] for r in con.execute(f'SELECT "cca3", "name_common" FROM "{table["name"]}"')}
    assert got == {r["cca3"]: r["name"]["common"] for r in rows}
    assert without_empty(rows[0]["name"])["common"] == got[rows[0]["cca3"]]
