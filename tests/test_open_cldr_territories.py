"""Build an open dataset of territories with their languages and currencies, exported as JSON Lines.

Dataset: the Unicode CLDR supplemental data as shipped in the PyPI package
``babel`` (package licence BSD-3-Clause; the CLDR data under the Unicode
licence, ``babel/locale-data/LICENSE.unicode``), written against babel 2.19.0;
the ``test`` extra of pyproject.toml installs it. ``territory_languages`` gives,
per territory, the languages spoken there with the share of the population and,
on some pairs only, an official status; ``territory_currencies`` gives the
currencies used there in order, with the dates they were in use and whether
they were legal tender. English names come from ``babel.Locale("en")``.

The test writes one JSON Lines record per territory, as an API export would:
``{"code", "name", "languages": [{"code", "name", "population_percent",
"official_status"}], "currencies": [{"code", "name", "symbol", "from", "to",
"tender"}]}``, each key left out where CLDR has no value (official status on
most pairs, dates on some, a few names). A language or currency code is an
identity: its name belongs to it, wherever it is listed; population share,
status and dates belong to the pair. Two territories list one currency twice
(ML: XOF, MLF, XOF). Every expected fact is computed here with plain Python
from babel's data, never hard-coded.
"""

from __future__ import annotations

import importlib.metadata
import importlib.resources
import sqlite3

import pytest

from tests.open_data import build_jsonl, check_lossless, check_pragmas, element_tables, lists, records

STEM = "territories"


def day(parts) -> str | None:
    return None if parts is None else "%04d-%02d-%02d" % parts


def sparse(obj: dict) -> dict:
    """An object with the keys that have no value left out, as the API export writes it."""
    return {k: v for k, v in obj.items() if v is not None}


def territories() -> list[dict]:
    from babel import Locale
    from babel.core import get_global

    en = Locale("en")
    languages, currencies = get_global("territory_languages"), get_global("territory_currencies")
    out = []
    for code in sorted(set(languages) | set(currencies)):
        out.append(sparse({
            "code": code, "name": en.territories.get(code),
            "languages": [sparse({"code": lang, "name": en.languages.get(lang),
                                  "population_percent": info["population_percent"],
                                  "official_status": info["official_status"]})
                          for lang, info in languages.get(code, {}).items()],
            "currencies": [sparse({"code": cur, "name": en.currencies.get(cur),
                                   "symbol": en.currency_symbols.get(cur), "from": day(start),
                                   "to": day(end), "tender": tender})
                           for cur, start, end, tender in currencies.get(code, [])],
        }))
    return out


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    rows = territories()
    return build_jsonl(rows, tmp_path_factory.mktemp("cldr"), STEM)


def test_package_and_licence():
    # babel (PyPI), BSD-3-Clause; CLDR data under the Unicode licence (the file babel ships beside it)
    meta = importlib.metadata.metadata("babel")
    assert "BSD" in " ".join([meta.get("License-Expression") or "", meta.get("License") or ""]
                             + (meta.get_all("Classifier") or []))
    assert importlib.metadata.version("babel")  # written against 2.19.0
    assert "UNICODE" in (importlib.resources.files("babel") / "locale-data" / "LICENSE.unicode").read_text(
        encoding="utf-8").upper()
    rows = territories()
    assert len(rows) > 200
    assert any(len({c["code"] for c in r["currencies"]}) < len(r["currencies"]) for r in rows)
    assert any("official_status" in lang for r in rows for lang in r["languages"])
    assert any("official_status" not in lang for r in rows for lang in r["languages"])


def test_records(built):
    rows, db, m = built
    (i,) = m["inputs"]
    assert i["rows_read"] == i["records_loaded"] == len(rows)
    assert i["rows_set_aside"] == i["rows_rejected"] == 0 and m["cells_quarantined"] == 0
    elements = sum(len(r["languages"]) + len(r["currencies"]) for r in rows)
    assert i["elements_decoded"] == i["elements_written"] == elements
    assert m["integrity"]["reconciled"] is True
    got = records(db, m, STEM)
    assert got == {r["code"]: {k: v for k, v in r.items() if k in ("code", "name")} for r in rows}


def test_sqlite_pragmas(built):
    _, db, m = built
    check_pragmas(db, m)


@pytest.mark.parametrize("column", ["languages", "currencies"])
def test_entities_and_bridges(built, column):
    rows, db, m = built
    bridge, entity, _ = element_tables(m, STEM, column)
    assert entity["role"] == "entity"
    codes = {obj["code"] for r in rows for obj in r[column]}
    assert entity["rows"] == len(codes)  # one row per distinct code
    assert bridge["rows"] == sum(len(r[column]) for r in rows)  # one link per listed pair
    # each territory's list, in order, every field back as it was, none filled in
    assert lists(db, m, STEM, column) == {r["code"]: r[column] for r in rows if r[column]}


@pytest.mark.parametrize("column, attributes, links", [
    ("languages", {"name"}, {"population_percent", "official_status"}),
    ("currencies", {"name", "symbol"}, {"from", "to"}),
])
def test_entity_and_link_attributes(built, column, attributes, links):
    rows, db, m = built
    bridge, entity, _ = element_tables(m, STEM, column)
    on_entity = {c["source"] for c in entity["columns"] if c["source"]}
    on_bridge = {c["source"] for c in bridge["columns"] if c["source"]}
    # names are the code's own (one per code in CLDR), shares and dates vary from pair to pair
    per_code: dict = {}
    for r in rows:
        for obj in r[column]:
            per_code.setdefault(obj["code"], set()).add(tuple(obj.get(a) for a in sorted(attributes)))
    assert all(len(v) == 1 for v in per_code.values())
    assert attributes <= on_entity and links <= on_bridge
    key = entity["natural_key"][0]
    names = {a: next(c["name"] for c in entity["columns"] if c["source"] == a) for a in attributes}
    with sqlite3.connect(db) as con:
        got = {row[0]: dict(zip(sorted(attributes), row[1:])) for row in con.execute(
            f'SELECT "{key}", ' + ", ".join(f'"{names[a]}"' for a in sorted(attributes)) +
            f' FROM "{entity["name"]}"')}
    assert got == {code: dict(zip(sorted(attributes), next(iter(v)))) for code, v in per_code.items()}


def test_lossless_proof(built):
    check_lossless(built[2])
