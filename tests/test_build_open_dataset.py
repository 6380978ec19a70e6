"""Build an open dataset with a multi-value column, carried by a package registry.

Dataset: ``zone1970.tab`` of the IANA time zone database, as shipped in the
PyPI package ``tzdata`` (package licence Apache-2.0; the tz database files are
in the public domain, as the file's own header says). Written against tzdata
2026.6 (IANA release 2026f); the ``test`` extra of pyproject.toml installs it.

Column 1 holds "the countries that overlap the timezone, as a comma-separated
list of ISO 3166 2-character country codes" (the file's header), so one
country appears in many rows and one row names many countries: a many-to-many
relation between time zones and countries. The build should make a value
table of country codes (an entity) and a bridge from zones to codes.

Every expected count is computed here with plain Python from the file itself,
never hard-coded, so a newer tzdata release changes the data but not the test.
"""

from __future__ import annotations

import importlib.metadata
import importlib.resources
import sqlite3
from collections import Counter

import pytest
import tzdata  # noqa: F401  (the `test` extra of pyproject.toml installs it)

from normalise.pipeline import build_database

HEADER = ["countries", "coordinates", "tz", "comments"]


def zone1970_rows() -> list[list[str]]:
    """Data lines of zone1970.tab split on tabs; '#' lines are comments (the file's header)."""
    text = (importlib.resources.files("tzdata") / "zoneinfo" / "zone1970.tab").read_text(encoding="utf-8")
    return [line.split("\t") for line in text.splitlines() if line and not line.startswith("#")]


@pytest.fixture(scope="module")
def zone1970(tmp_path_factory):
    rows = zone1970_rows()
    where = tmp_path_factory.mktemp("tz")
    path = where / "zone1970.tsv"
    with open(path, "w", encoding="utf-8", newline="") as f:
        f.write("\t".join(HEADER) + "\n")
        for row in rows:  # the comments column is absent on some lines: an empty cell here
            f.write("\t".join(row + [""] * (len(HEADER) - len(row))) + "\n")
    db = where / "zone1970.db"
    m = build_database([str(path)], str(db))
    return rows, db, m


def test_package_and_licence():
    # tzdata (PyPI), Apache-2.0 package licence; zone1970.tab is public domain (its header)
    meta = importlib.metadata.metadata("tzdata")
    assert "Apache" in (meta.get("License-Expression") or meta.get("License") or "")
    assert importlib.metadata.version("tzdata")  # written against 2026.6


def test_zone1970_tables(zone1970):
    # tzdata (PyPI, Apache-2.0; data public domain), written against 2026.6 / IANA 2026f
    rows, db, m = zone1970
    lists = [row[0].split(",") for row in rows]  # reference: the file's header, column 1
    counts = Counter(code for codes in lists for code in codes)
    tables = {t["name"]: t for t in m["tables"]}
    (record,) = [t for t in m["tables"] if t["role"] == "record"]
    bridge = next(t for t in m["tables"] if t["role"] == "bridge"
                  and {"file": "zone1970", "column": "countries"} in t["sources"])
    value_fk = next(fk for fk in bridge["foreign_keys"] if fk["references"] != record["name"])
    values = tables[value_fk["references"]]

    assert record["rows"] == len(rows)
    assert values["role"] == "entity"
    assert values["rows"] == len(counts)  # entities: distinct country codes
    assert bridge["rows"] == sum(len(codes) for codes in lists)  # links: every code listed
    (i,) = m["inputs"]
    assert i["rows_read"] == i["records_loaded"] == len(rows)
    assert i["elements_decoded"] == i["elements_written"] == sum(len(codes) for codes in lists)
    assert m["cells_quarantined"] == 0 and m["integrity"]["reconciled"] is True

    code_column = values["natural_key"][0]
    with sqlite3.connect(db) as con:
        assert con.execute("PRAGMA foreign_key_check").fetchall() == []  # SQLite pragma
        assert con.execute("PRAGMA integrity_check").fetchall() == [("ok",)]  # SQLite pragma
        per_code = dict(con.execute(
            f'SELECT v."{code_column}", count(*) FROM "{bridge["name"]}" b '
            f'JOIN "{values["name"]}" v USING ("{value_fk["columns"][0]}") GROUP BY 1'))
        # every zone's list, in the file's order, from the tables
        owner = record["primary_key"][0]
        got: dict = {}
        for tz, code in con.execute(
                f'SELECT r.tz, v."{code_column}" FROM "{bridge["name"]}" b '
                f'JOIN "{record["name"]}" r USING ("{owner}") '
                f'JOIN "{values["name"]}" v USING ("{value_fk["columns"][0]}") '
                f"ORDER BY r.{owner}, b.list_position"):
            got.setdefault(tz, []).append(code)
    assert per_code == dict(counts)
    most_common_code, most_common_count = counts.most_common(1)[0]
    # the most frequent country code, by bridge rows (US in 2026.6)
    assert per_code[most_common_code] == most_common_count == max(per_code.values())
    assert {c for c, n in per_code.items() if n == most_common_count} == {
        c for c, n in counts.items() if n == most_common_count}
    assert got == {row[2]: row[0].split(",") for row in rows}
