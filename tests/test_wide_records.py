"""Records wider than a table may be (issue 12, part 4): split into 1:1 tables instead of being refused.

The limits, named beside each check:

* SQLite: at most 2,000 columns in a table as built by default (SQLITE_MAX_COLUMN), and in the result of a
  SELECT (https://sqlite.org/limits.html, "Maximum Number Of Columns"); read back with SQLite's own pragmas
  (``table_info``, ``foreign_key_list``, ``foreign_key_check``, ``integrity_check``; https://sqlite.org/pragma.html);
* PostgreSQL: at most 1,600 columns in a table (PostgreSQL documentation, "Appendix K. PostgreSQL Limits"),
  counted in the system catalog ``pg_attribute``.

Invented data: an export of 2,500 and one of 4,100 columns (an item code, plain columns of integers, decimals
and short texts with empty cells, a list, an object with an identity and an object of fixed keys at the end).
Every expected value is the input row as the ``csv`` module reads it.
"""

from __future__ import annotations

import csv
import json
import random
import sqlite3

import pytest

from normalise.build import TooManyColumns
from normalise.cli import main
from normalise.pipeline import build_database
from tests.open_data import check_lossless, check_pragmas, record_table
from tests.test_postgresql import pg, pg_url, schema  # noqa: F401 (fixtures)
from tests.test_streaming import dump

SQLITE_MAX_COLUMNS = 2000  # sqlite.org/limits.html, SQLITE_MAX_COLUMN's default
POSTGRESQL_MAX_COLUMNS = 1600  # PostgreSQL documentation, Appendix K. PostgreSQL Limits, "columns per table"
PART_COLUMNS = 500  # the columns of each table of a split record (README)
NESTED = ("tags", "owner", "origin")  # the nested columns, besides the plain ones
ROWS = 30


def write_export(path, columns: int, rows: int = ROWS, seed: int = 12) -> str:
    """A CSV of ``columns`` columns: item_id, the plain fields, then tags (a list), owner (an object with an
    identity that repeats) and origin (an object of fixed keys), so their columns fall in the last tables."""
    rng = random.Random(seed)
    plain = [f"field_{k:04d}" for k in range(1, columns - len(NESTED))]
    with open(path, "w", encoding="utf-8", newline="") as f:
        out = csv.writer(f)
        out.writerow(["item_id", *plain, *NESTED])
        for r in range(rows):
            cells = [f"IT-{r:04d}"]
            for k in range(len(plain)):
                if rng.random() < 0.08:
                    cells.append("")
                elif k % 3 == 0:
                    cells.append(str(rng.randint(-500, 5000)))
                elif k % 3 == 1:
                    cells.append(str(round(rng.uniform(0, 100), 2)))
                else:
                    cells.append(rng.choice(["north ", "south east ", "Ünïcode ", "w"]) + str(r % 7))
            cells.append(json.dumps(rng.sample(["red", "green", "blue", "grey"], r % 4)))
            cells.append(json.dumps({"id": r % 5, "name": f"Owner {r % 5}"}))
            cells.append(json.dumps({"city": f"Town {r % 9}", "zip": f"{1000 + r}", "floor": r % 4}))
            out.writerow(cells)
    return str(path)


def input_rows(path) -> list[dict]:
    with open(path, encoding="utf-8", newline="") as f:
        return list(csv.DictReader(f))


def table_columns(con, name: str) -> list[tuple]:
    """(column, is part of the primary key) of a table, from PRAGMA table_info (sqlite.org/pragma.html)."""
    return [(r[1], r[5] > 0) for r in con.execute(f'PRAGMA table_info("{name}")')]


def parts_of(con, record: str, key: str) -> list[str]:
    """The tables keyed by the record's key that is also their foreign key to it: PRAGMA foreign_key_list."""
    found = []
    for (name,) in con.execute("SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name"):
        fks = [(r[2], r[3], r[4]) for r in con.execute(f'PRAGMA foreign_key_list("{name}")')]
        pk = [c for c, in_pk in table_columns(con, name) if in_pk]
        if name != record and fks == [(record, key, key)] and pk == [key]:
            found.append(name)
    return found


def whole_rows(con, tables: list[str], key: str) -> dict[int, dict]:
    """Each record's row joined across its tables by its key, table by table (a SELECT over all of them
    would pass SQLite's limit on the columns of a result, sqlite.org/limits.html)."""
    rows: dict[int, dict] = {}
    for name in tables:
        cursor = con.execute(f'SELECT * FROM "{name}"')
        names = [d[0] for d in cursor.description]
        for r in cursor:
            row = rows.setdefault(r[names.index(key)], {})
            assert not (set(row) - {key}) & set(names), f"{name} repeats a column"
            row.update(zip(names, r))
    return rows


def as_cell(value) -> str:
    """A stored value as the CSV cell it came from: NULL was an empty cell; numbers in their own text."""
    return "" if value is None else str(value)


@pytest.fixture(scope="module", params=[2500, 4100])
def built(request, tmp_path_factory):
    where = tmp_path_factory.mktemp(f"wide{request.param}")
    path = write_export(where / "items.csv", request.param)
    m = build_database([path], str(where / "out.db"), dictionary_path=str(where / "dictionary.md"),
                       report_path=str(where / "report.html"))
    return request.param, where, path, m


def test_every_table_fits_and_every_cell_comes_back(built):
    columns, where, path, m = built
    check_pragmas(where / "out.db", m)
    check_lossless(m)
    with sqlite3.connect(where / "out.db") as con:
        names = [n for (n,) in con.execute("SELECT name FROM sqlite_master WHERE type = 'table'")]
        widths = {n: len(table_columns(con, n)) for n in names}
        record = record_table(m, "items")
        parts = parts_of(con, record["name"], record["primary_key"][0])
    assert max(widths.values()) <= min(SQLITE_MAX_COLUMNS, POSTGRESQL_MAX_COLUMNS)  # the two limits above
    assert max(widths.values()) <= PART_COLUMNS
    # the plain columns and the object's fields, each in exactly one table: the record's and its parts' widths
    # add up to them and the key once per table (the list is a bridge, the owner a foreign key and an entity)
    held = widths[record["name"]] + sum(widths[p] for p in parts) - len(parts) - 1
    assert held == columns - len(NESTED) + 1 + 3  # the owner's key column, the origin's three fields
    # the record table's 500 columns, then 499 and the key in each part (README): as few parts as that allows
    assert len(parts) == -(-(held + 1 - PART_COLUMNS) // (PART_COLUMNS - 1))
    assert [t["role"] for t in m["tables"] if t["name"] in parts] == ["record_part"] * len(parts)
    assert sorted(parts) == sorted(f"items_part_{n}" for n in range(2, len(parts) + 2))


def test_a_record_joined_across_its_parts_is_the_input_row(built):
    columns, where, path, m = built
    rows = input_rows(path)
    with sqlite3.connect(where / "out.db") as con:
        key = record_table(m, "items")["primary_key"][0]
        parts = parts_of(con, "items", key)
        whole = whole_rows(con, ["items", *parts], key)
        # the same through SQL: the record and every part joined on the key, the last plain column of each
        last = [[c for c, _ in table_columns(con, p) if c.startswith("field_")][-1] for p in parts]
        joins = " ".join(f'JOIN "{p}" USING ("{key}")' for p in parts)
        picked = ", ".join(f'"{p}"."{c}"' for p, c in zip(parts, last))
        joined = con.execute(f"SELECT item_id, {picked} FROM items {joins} ORDER BY item_id").fetchall()
    by_code = {row["item_id"]: row for row in whole.values()}
    assert sorted(by_code) == [r["item_id"] for r in rows]
    for given in rows:
        got = by_code[given["item_id"]]
        assert {k: as_cell(got[k]) for k in given if k not in NESTED} == {k: v for k, v in given.items()
                                                                      if k not in NESTED}
        origin = json.loads(given["origin"])
        assert {k: got[f"origin_{k}"] for k in origin} == origin
    assert [(code, *map(as_cell, values)) for code, *values in joined] == [
        (r["item_id"], *[r[c] for c in last]) for r in rows]


def test_chunked_builds_give_the_same_database(built, tmp_path):
    _, where, path, _ = built
    m = build_database([path], str(tmp_path / "chunked.db"), chunk_rows=7)
    check_lossless(m)
    assert dump(tmp_path / "chunked.db") == dump(where / "out.db")


def test_a_plan_replays_the_split(built, tmp_path):
    _, where, path, m = built
    plan = tmp_path / "plan.toml"
    assert main(["plan", path, "-o", str(plan)]) == 0
    assert main(["build", path, "--plan", str(plan), "--db", str(tmp_path / "replayed.db"), "--quiet"]) == 0
    assert dump(tmp_path / "replayed.db") == dump(where / "out.db")


def test_dictionary_and_report_name_the_parts(built):
    _, where, _, m = built
    parts = [t["name"] for t in m["tables"] if t["role"] == "record_part"]
    dictionary = (where / "dictionary.md").read_text(encoding="utf-8")
    report = (where / "report.html").read_text(encoding="utf-8")
    for name in parts:
        assert f"### `{name}`" in dictionary
        assert f'data-table="{name}"' in report
    assert "record table (continued)" in dictionary


def _wide_object(path, keys: int) -> str:
    with open(path, "w", encoding="utf-8") as f:
        for r in range(4):
            f.write(json.dumps({"id": r, "obj": {f"k{i}": r * i for i in range(keys)}}) + "\n")
    return str(path)


def test_a_nested_table_over_the_limit_is_refused_naming_it(tmp_path):
    # a single object of 2,100 fixed keys is one child table of 2,102 columns: over SQLite's 2,000
    # (sqlite.org/limits.html); nested tables are not split, so the build stops before writing anything
    path = _wide_object(tmp_path / "wide.jsonl", 2100)
    with pytest.raises(TooManyColumns) as caught:
        build_database([path], str(tmp_path / "out.db"))
    message = str(caught.value)
    assert "wide_obj" in message and "2,102 columns" in message and "2,000" in message
    assert "formats={'COLUMN': 'text'}" in message  # from Python; the command line says --decode COLUMN=text
    assert not (tmp_path / "out.db").exists()


# --- PostgreSQL ---------------------------------------------------------------------------------

def pg_widths(pg, schema: str) -> dict[str, int]:
    """Columns per table in the schema, from pg_attribute (PostgreSQL documentation, System Catalogs)."""
    rows = pg.execute("SELECT c.relname, count(*) FROM pg_catalog.pg_attribute a "
                      "JOIN pg_catalog.pg_class c ON c.oid = a.attrelid "
                      "JOIN pg_catalog.pg_namespace n ON n.oid = c.relnamespace "
                      "WHERE n.nspname = %s AND c.relkind = 'r' AND a.attnum > 0 AND NOT a.attisdropped "
                      "GROUP BY c.relname", (schema,)).fetchall()
    return dict(rows)


def test_postgresql_writes_the_same_tables_under_its_limit(built, pg, pg_url, schema):
    from tests.test_postgresql import assert_same_as_sqlite, relation_names

    _, where, path, m = built
    pm = build_database([path], pg_url, schema=schema)
    check_lossless(pm)
    widths = pg_widths(pg, schema)
    assert max(widths.values()) <= POSTGRESQL_MAX_COLUMNS  # Appendix K. PostgreSQL Limits
    assert {t["name"] for t in pm["tables"] if t["role"] == "record_part"} <= set(widths)
    assert_same_as_sqlite(pg, schema, str(where / "out.db"), relation_names(m))


def test_postgresql_refuses_a_nested_table_sqlite_can_hold(pg, pg_url, schema, tmp_path):
    from tests.test_postgresql import schema_exists

    # 1,702 columns: under SQLite's 2,000 (sqlite.org/limits.html), over PostgreSQL's 1,600 (Appendix K)
    path = _wide_object(tmp_path / "wide.jsonl", 1700)
    build_database([path], str(tmp_path / "out.db"))
    with pytest.raises(TooManyColumns, match="1,600 PostgreSQL allows"):
        build_database([path], pg_url, schema=schema)
    assert not schema_exists(pg, schema)
