"""Issue 12, part 3: values that are natural keys of a record table become foreign keys to it.

Invented data: regions with a code, a parent region and a list of neighbouring regions, a few codes naming no
region. The facts checked (which region each value names, how many name none) are computed here in plain
Python from the rows the test writes; the database is read back with sqlite3. Integrity is SQLite's own
pragmas (``PRAGMA foreign_key_check``, ``PRAGMA integrity_check``).
"""

from __future__ import annotations

import csv
import json
import sqlite3

import pytest

from normalise import JoinOptions
from normalise.pipeline import build_database, make_plan
from normalise.survey import survey
from tests.open_data import check_lossless, check_pragmas, record_table, referred_rows

CODES = [f"R{n:02d}" for n in range(1, 25)]


def regions() -> list[dict]:
    """24 regions in a tree (each region's parent is region n // 2), neighbours along the list; one parent
    and one neighbour name no region (QQ, XX)."""
    rows = []
    for n, code in enumerate(CODES, start=1):
        parent = "" if n == 1 else "QQ" if n == 24 else CODES[n // 2 - 1]
        neighbours = [CODES[(n + k) % len(CODES)] for k in (1, 2)] + (["XX"] if n == 5 else [])
        rows.append({"code": code, "name": f"Region {n}", "parent": parent, "neighbours": json.dumps(neighbours)})
    # a region named before its parent comes (forward references, resolved at the end)
    rows.reverse()
    return rows


def write_csv(path, rows: list[dict]) -> str:
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.DictWriter(f, fieldnames=list(rows[0]))
        w.writeheader()
        w.writerows(rows)
    return str(path)


def reference(m: dict, column: str) -> dict:
    (found,) = [r for r in m["references"] if r["column"] == column]
    return found


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    where = tmp_path_factory.mktemp("references")
    rows = regions()
    path = write_csv(where / "regions.csv", rows)
    db = where / "regions.db"
    return rows, path, db, build_database([path], str(db))


def test_parent_column_names_its_region(built):
    rows, _, db, m = built
    codes = {r["code"] for r in rows}
    table, column = reference(m, "regions:parent")["foreign_key"].split(".")
    record = record_table(m, "regions")
    assert table == record["name"]
    (pk,) = record["primary_key"]
    with sqlite3.connect(db) as con:
        got = dict(con.execute(f'SELECT r.code, p.code FROM "{table}" r '
                               f'LEFT JOIN "{table}" p ON p."{pk}" = r."{column}"'))
        kept = dict(con.execute(f'SELECT code, parent FROM "{table}"'))
    assert got == {r["code"]: (r["parent"] if r["parent"] in codes else None) for r in rows}
    assert kept == {r["code"]: r["parent"] or None for r in rows}  # the value itself stays, QQ included


def test_neighbours_name_their_regions(built):
    rows, _, db, m = built
    codes = {r["code"] for r in rows}
    got = referred_rows(db, m, "regions", "neighbours", "code", ("code",))
    expected = [(r["code"], v, v if v in codes else None) for r in rows for v in json.loads(r["neighbours"])]
    assert got == expected


def test_unmatched_values_kept_and_counted(built):
    rows, _, _, m = built
    codes = {r["code"] for r in rows}
    parents = [r["parent"] for r in rows if r["parent"]]
    parent = reference(m, "regions:parent")
    assert parent["values"] == len(parents)
    assert parent["unmatched"] == sum(p not in codes for p in parents) == 1
    assert parent["matched"] == parent["values"] - parent["unmatched"]
    assert parent["unmatched_examples"] == ["QQ"]
    listed = [v for r in rows for v in json.loads(r["neighbours"])]
    neighbours = reference(m, "regions:neighbours")
    assert neighbours["values"] == len(listed)
    assert neighbours["unmatched"] == sum(v not in codes for v in listed) == 1
    assert neighbours["distinct_values"] == len(set(listed))
    assert neighbours["unmatched_examples"] == ["XX"]


def test_pragmas_and_proof(built):
    _, _, db, m = built
    check_pragmas(db, m)
    check_lossless(m)


def dump(db) -> dict:
    con = sqlite3.connect(db)
    names = [n for (n,) in con.execute("SELECT name FROM sqlite_master WHERE type IN ('table', 'view') ORDER BY name")]
    return {n: sorted(con.execute(f'SELECT * FROM "{n}"').fetchall(), key=repr) for n in names}


@pytest.mark.parametrize("chunk_rows", [1, 5])
def test_streaming_gives_the_same_database(built, tmp_path, chunk_rows):
    _, path, db, m = built
    chunked = build_database([path], str(tmp_path / "chunked.db"), chunk_rows=chunk_rows)
    assert dump(db) == dump(tmp_path / "chunked.db")
    assert chunked["references"] == m["references"]
    check_pragmas(tmp_path / "chunked.db", chunked)
    check_lossless(chunked)


def test_plan_sets_and_removes_references(built, tmp_path):
    _, path, _, _ = built
    text = make_plan([path])
    assert text.count('references = "regions"') == 2  # the parent column and the neighbours list
    plan = tmp_path / "plan.toml"
    plan.write_text(text.replace(', references = "regions"', ""), encoding="utf-8")  # the column: off
    m = build_database([path], str(tmp_path / "off.db"), plan_path=str(plan))
    assert [r["column"] for r in m["references"]] == ["regions:neighbours"]
    assert "parent_sk" not in [c["name"] for c in record_table(m, "regions")["columns"]]
    plan.write_text(text.replace('references = "regions"', 'references = "nowhere"', 1), encoding="utf-8")
    from normalise.infer.planfile import InvalidPlan
    with pytest.raises(InvalidPlan, match="nowhere"):
        build_database([path], str(tmp_path / "bad.db"), plan_path=str(plan))


def test_survey_shows_the_evidence(built):
    rows, path, _, _ = built
    codes = {r["code"] for r in rows}
    columns = {c["name"]: c for c in survey([path])["files"][0]["columns"]}
    parents = {r["parent"] for r in rows if r["parent"]}
    ref = columns["parent"]["references"]
    assert (ref["file"], ref["key"]) == ("regions", "code")
    assert (ref["distinct_values"], ref["matched"]) == (len(parents), len(parents & codes))
    assert ref["foreign_key"]
    assert "references" not in columns["code"] and "references" not in columns["name"]


def test_second_file_refers_to_the_first(tmp_path):
    """Offices name the region they are in (a file of its own: --separate); cities, the first file, name a
    region of the second file, which comes after them."""
    rows = regions()
    codes = {r["code"] for r in rows}
    regions_csv = write_csv(tmp_path / "regions.csv", rows)
    offices = [{"office": f"O{n}", "region_code": CODES[n % 12]} for n in range(30)] + [
        {"office": "O99", "region_code": "R77"}]
    offices_csv = write_csv(tmp_path / "offices.csv", offices)
    db = tmp_path / "two.db"
    m = build_database([regions_csv, offices_csv], str(db), join_options=JoinOptions(separate=True))
    ref = reference(m, "offices:region_code")
    assert ref["references"] == record_table(m, "regions")["name"]
    assert (ref["values"], ref["unmatched"]) == (len(offices), sum(o["region_code"] not in codes for o in offices))
    table, column = ref["foreign_key"].split(".")
    with sqlite3.connect(db) as con:
        got = dict(con.execute(f'SELECT o.office, r.code FROM "{table}" o '
                               f'LEFT JOIN regions r ON r.region_sk = o."{column}"'))
    assert got == {o["office"]: (o["region_code"] if o["region_code"] in codes else None) for o in offices}
    check_pragmas(db, m)
    check_lossless(m)

    cities = [{"city": f"C{n}", "name": f"City {n}", "region": CODES[(3 * n) % 24]} for n in range(20)]
    cities_csv = write_csv(tmp_path / "cities.csv", cities)
    db = tmp_path / "forward.db"
    m = build_database([cities_csv, regions_csv], str(db))
    ref = reference(m, "cities:region")
    assert (ref["values"], ref["matched"]) == (len(cities), len(cities))
    table, column = ref["foreign_key"].split(".")
    with sqlite3.connect(db) as con:
        got = dict(con.execute(f'SELECT c.city, r.code FROM "{table}" c JOIN regions r ON r.region_sk = c."{column}"'))
    assert got == {c["city"]: c["region"] for c in cities}
    check_pragmas(db, m)
    check_lossless(m)


def test_small_integers_are_no_reference(tmp_path):
    """A column of small counts matches integer keys by chance: without a key's name it stays a column."""
    rows = [{"id": str(n), "rank": str(n % 5 + 1), "parent_id": str(max(1, n // 2))} for n in range(1, 40)]
    path = write_csv(tmp_path / "items.csv", rows)
    m = build_database([path], str(tmp_path / "items.db"))
    assert [r["column"] for r in m["references"]] == ["items:parent_id"]
    check_pragmas(tmp_path / "items.db", m)
    check_lossless(m)


def test_append_resolves_against_existing_records(built, tmp_path):
    rows, _, _, _ = built
    first, second = rows[12:], rows[:12]  # the regions R01..R12 first: the tree's upper half
    a = write_csv(tmp_path / "regions.csv", first)
    plan = tmp_path / "plan.toml"
    make_plan([a], str(plan))
    db = tmp_path / "appended.db"
    build_database([a], str(db), plan_path=str(plan))
    (tmp_path / "more").mkdir()
    b = write_csv(tmp_path / "more" / "regions.csv", second)  # the plan names the file regions
    m = build_database([b], str(db), plan_path=str(plan), append=True)
    codes = {r["code"] for r in rows}
    with sqlite3.connect(db) as con:
        got = dict(con.execute("SELECT r.code, p.code FROM regions r LEFT JOIN regions p ON p.region_sk = r.parent_sk"))
    # the appended regions name their parents among the regions already there; those already there stay as
    # they were (their parents were all there too)
    assert got == {r["code"]: (r["parent"] if r["parent"] in codes else None) for r in rows}
    check_pragmas(db, m)
    check_lossless(m)
