"""--parquet writes every table and view; each file holds what the database holds (reference: pyarrow's reader)."""

from __future__ import annotations

import sqlite3

import pyarrow.parquet as pq

from demo.generate import generate
from normalise.pipeline import build_database


def test_every_table_and_view_as_parquet(tmp_path):
    generate(tmp_path, size=60, seed=3)
    db, out = tmp_path / "demo.db", tmp_path / "parquet"
    m = build_database([str(tmp_path / "titles.csv"), str(tmp_path / "contributions.csv")], str(db),
                       parquet_dir=str(out))
    names = [t["name"] for t in m["tables"]] + [v["name"] for v in m["views"]]
    assert sorted(p.stem for p in out.glob("*.parquet")) == sorted(names)
    con = sqlite3.connect(db)
    for name in names:
        table = pq.read_table(out / f"{name}.parquet")
        rows = con.execute(f'SELECT * FROM "{name}"').fetchall()
        columns = [d[0] for d in con.execute(f'SELECT * FROM "{name}" LIMIT 0').description]
        assert table.column_names == columns
        booleans = {c for c in columns if str(table.schema.field(c).type) == "bool"}
        as_parquet = [tuple(r) for r in zip(*[table.column(c).to_pylist() for c in columns])]
        as_sqlite = [tuple(bool(v) if c in booleans and v is not None else v for c, v in zip(columns, r))
                     for r in rows]
        assert sorted(as_parquet, key=repr) == sorted(as_sqlite, key=repr), name
