"""Countries whose ``borders`` list names other countries by their code: a foreign key back to the countries.

Dataset: ``countries.json`` of the npm package ``world-countries`` 5.1.0 (licence ODbL 1.0, the package's
LICENSE file), fetched with npm at test time (``tests.open_data.npm_package``; skipped without npm or a
registry) and never stored here: 250 countries, each with its ISO 3166-1 alpha-3 code ``cca3`` and
``borders``, a list of the ``cca3`` codes of its land neighbours. The test exports the scalar columns it needs
(``cca3``, ``name.common``, ``region``) and ``borders`` to CSV: once whole, borders as JSON text, and once
without every 20th country, borders ``|``-delimited, so that some borders name a country the export does not
hold. Which country each border names, and how many name none, is computed here from countries.json in plain
Python; the database is read back with sqlite3.
"""

from __future__ import annotations

import csv
import json

import pytest

from normalise.pipeline import build_database
from tests.open_data import check_lossless, check_pragmas, npm_package, record_table, referred_rows

VERSION = "5.1.0"


@pytest.fixture(scope="module")
def package(tmp_path_factory):
    return npm_package("world-countries", VERSION, tmp_path_factory.mktemp("world-countries"))


@pytest.fixture(scope="module")
def countries(package) -> list[dict]:
    return json.loads((package / "countries.json").read_text(encoding="utf-8"))


def export(countries: list[dict], path, delimited: bool) -> str:
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["cca3", "name", "region", "borders"])
        for c in countries:
            borders = "|".join(c["borders"]) if delimited else json.dumps(c["borders"])
            w.writerow([c["cca3"], c["name"]["common"], c["region"], borders])
    return str(path)


def build(countries: list[dict], where, delimited: bool):
    where.mkdir()
    db = where / "countries.db"
    return db, build_database([export(countries, where / "countries.csv", delimited)], str(db))


def border_rows(db, m: dict) -> list[tuple]:
    """(country code, border as stored, code and name of the country row its foreign key leads to), in list order."""
    return referred_rows(db, m, "countries", "borders", "cca3", ("cca3", "name"))


def expected(countries: list[dict]) -> list[tuple]:
    names = {c["cca3"]: c["name"]["common"] for c in countries}
    return [(c["cca3"], b, b if b in names else None, names.get(b)) for c in countries for b in c["borders"]]


def test_package_and_licence(package, countries):
    assert json.loads((package / "package.json").read_text(encoding="utf-8"))["version"] == VERSION
    assert "Open Database License" in (package / "LICENSE").read_text(encoding="utf-8")
    assert len(countries) == 250
    assert len({c["cca3"] for c in countries}) == 250


def test_every_border_leads_to_its_country(countries, tmp_path):
    db, m = build(countries, tmp_path / "whole", delimited=False)
    assert record_table(m, "countries")["natural_key"] == ["cca3"]
    assert border_rows(db, m) == expected(countries)
    (ref,) = m["references"]
    listed = [b for c in countries for b in c["borders"]]
    codes = {c["cca3"] for c in countries}
    assert ref["column"] == "countries:borders"
    assert ref["values"] == len(listed)
    assert ref["unmatched"] == sum(b not in codes for b in listed)
    assert ref["distinct_values"] == len(set(listed))
    check_pragmas(db, m)
    check_lossless(m)


def test_borders_of_countries_left_out_are_kept_and_counted(countries, tmp_path):
    kept = [c for i, c in enumerate(countries) if i % 20 != 19]
    db, m = build(kept, tmp_path / "thinned", delimited=True)
    assert border_rows(db, m) == expected(kept)
    (ref,) = m["references"]
    codes = {c["cca3"] for c in kept}
    listed = [b for c in kept for b in c["borders"]]
    assert ref["values"] == len(listed)
    assert ref["unmatched"] == sum(b not in codes for b in listed) > 0
    assert ref["distinct_unmatched"] == len({b for b in listed if b not in codes})
    assert ref["matched"] == ref["values"] - ref["unmatched"]
    check_pragmas(db, m)
    check_lossless(m)
    chunked = build_database([str(tmp_path / "thinned" / "countries.csv")], str(tmp_path / "chunked.db"),
                             chunk_rows=16)
    assert chunked["references"] == m["references"]
    assert border_rows(tmp_path / "chunked.db", chunked) == expected(kept)
