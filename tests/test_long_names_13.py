"""Names the tool makes itself fit PostgreSQL's limit (63 bytes: PostgreSQL documentation, "Identifiers and
Key Words") however long the file, column and key names of the export are.

Long names are cut to 60 characters with a stable hash of the whole name at their end (``names.fit``), so
names that differ only past the cut stay apart, and ``name_map`` says which input name each came from.
Invented data: a warehouse export with long file and column names.
"""

from __future__ import annotations

import json
import sqlite3

from normalise.pipeline import build_database
from tests.open_data import check_lossless, check_pragmas
from tests.test_lossless import write_rows
from tests.test_postgresql import assert_same_as_sqlite, pg, pg_url, relation_names, schema  # noqa: F401

STEM = "quarterly_inventory_export_from_the_regional_warehouse_system_version_two"
COLUMN = "items_held_in_the_long_named_storage_location_of_this_warehouse"


def export(tmp_path):
    rows = [(f"k{i}", json.dumps([{"sku_id": j, "label": f"L{j}"} for j in range(i % 3 + 1)]),
             json.dumps(["a", "b"][: i % 2 + 1]), json.dumps(["x"]))
            for i in range(12)]
    path = tmp_path / f"{STEM}.csv"
    write_rows(path, ["key", COLUMN, COLUMN + "_tags", COLUMN + "_tags_again"], rows)
    return str(path)


def test_every_name_fits_and_is_mapped(tmp_path):
    db = tmp_path / "out.db"
    m = build_database([export(tmp_path)], str(db))
    check_lossless(m)
    check_pragmas(db, m)
    with sqlite3.connect(db) as con:
        names = [n for (n,) in con.execute("SELECT name FROM sqlite_master WHERE type IN ('table', 'view')")]
        columns = [c[1] for n in names for c in con.execute(f'PRAGMA table_info("{n}")')]
        mapped = dict(con.execute("SELECT table_name, name_in_input FROM name_map WHERE column_name IS NULL"))
    assert names and max(len(n.encode()) for n in names + columns) <= 63
    assert len(set(names)) == len(names)
    assert mapped[m["tables"][[t["role"] for t in m["tables"]].index("record")]["name"]] == STEM


def test_postgresql_takes_them_as_they_are(tmp_path, pg, pg_url, schema):
    path = export(tmp_path)
    m = build_database([path], str(tmp_path / "out.db"))
    pm = build_database([path], pg_url, schema=schema)
    check_lossless(pm)
    assert_same_as_sqlite(pg, schema, str(tmp_path / "out.db"), relation_names(m))
