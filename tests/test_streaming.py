"""Chunked builds: the same input gives the same database whatever the chunk size.

Reference: a one-chunk build of the same file (the chunked build must agree with it table by table and view by
view), and SQLite's own pragmas for integrity. Keys need no shared counter (DEVELOPERS.md, "Keys"), so this is
exact equality, not similarity.
"""

from __future__ import annotations

import sqlite3

import pytest

from demo.generate import generate
from normalise.pipeline import build_database


def dump(db) -> dict:
    con = sqlite3.connect(db)
    names = [n for (n,) in con.execute("SELECT name FROM sqlite_master WHERE type IN ('table', 'view') ORDER BY name")]
    return {n: sorted(con.execute(f'SELECT * FROM "{n}"').fetchall(), key=repr) for n in names}


@pytest.fixture(scope="module")
def export(tmp_path_factory):
    out = tmp_path_factory.mktemp("streaming")
    generate(out, size=400, seed=11)
    return out / "contributions.csv"


@pytest.mark.parametrize("chunk_rows", [1, 7, 100, 10_000])
def test_chunk_size_changes_nothing(export, tmp_path, chunk_rows):
    one = build_database([str(export)], str(tmp_path / "one.db"))
    chunked = build_database([str(export)], str(tmp_path / "chunked.db"), chunk_rows=chunk_rows)
    assert dump(tmp_path / "one.db") == dump(tmp_path / "chunked.db")
    assert [t["rows"] for t in one["tables"]] == [t["rows"] for t in chunked["tables"]]
    assert chunked["integrity"]["reconciled"]
    con = sqlite3.connect(tmp_path / "chunked.db")
    assert con.execute("PRAGMA foreign_key_check").fetchall() == []  # SQLite pragma
    assert con.execute("PRAGMA integrity_check").fetchall() == [("ok",)]  # SQLite pragma
