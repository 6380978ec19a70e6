"""build --append: records added to a database built from the same plan, keys stable, entities shared.

References: the database as it was before the append (every row it held is still there, unchanged), counts
computed in the test with the csv module and ast, and SQLite's own pragmas for integrity.
"""

from __future__ import annotations

import ast
import csv
import sqlite3

import pytest

from normalise.cli import main

HEADER = ["book_key", "title", "people"]
FIRST = [("B1", "Orchard", [{"id": 1, "name": "Ann Orrel", "role": "author"}]),
         ("B2", "Harbour", [{"id": 2, "name": "Bo Kell", "role": "author"},
                            {"id": 1, "name": "Ann Orrel", "role": "editor"}])]
SECOND = [("B3", "Lantern", [{"id": 1, "name": "Ann Orrel", "role": "author"},
                             {"id": 3, "name": "Cy Vane", "role": "translator"}]),
          ("B1", "Orchard again", [{"id": 2, "name": "Bo Kell", "role": "author"}])]


def write(path, rows):
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(HEADER)
        for key, title, people in rows:
            w.writerow([key, title, repr(people)])


def dump(db) -> dict:
    con = sqlite3.connect(db)
    names = [n for (n,) in con.execute("SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name")]
    return {n: set(con.execute(f'SELECT * FROM "{n}"').fetchall()) for n in names}


@pytest.fixture()
def built(tmp_path):
    first, second = tmp_path / "books.csv", tmp_path / "more" / "books.csv"
    second.parent.mkdir()
    write(first, FIRST)
    write(second, SECOND)
    db, plan = tmp_path / "books.db", tmp_path / "plan.toml"
    assert main(["plan", str(first), "--key", "books=book_key", "-o", str(plan)]) == 0
    assert main(["build", str(first), "--db", str(db), "--plan", str(plan), "--quiet"]) == 0
    return db, first, second, plan


def test_append_keeps_every_row_and_shares_entities(built):
    db, _, second, plan = built
    before = dump(db)
    assert main(["build", str(second), "--db", str(db), "--append", "--plan", str(plan), "--quiet"]) == 0
    after = dump(db)
    for table, rows in before.items():  # nothing that was there changed or went
        assert rows <= after[table], table
    con = sqlite3.connect(db)
    keys = [k for (k,) in con.execute("SELECT book_key FROM books ORDER BY book_sk")]
    assert keys == ["B1", "B2", "B3"]  # B1 again is a duplicate of a record already there: set aside
    set_aside = con.execute("SELECT natural_key FROM set_aside_rows").fetchall()
    assert set_aside == [("B1",)]
    people = {p["id"] for _, _, ps in FIRST + SECOND for p in ps}
    assert {i for (i,) in con.execute("SELECT id FROM person")} == people  # one row per person, shared
    sk_before = {r[1]: r[0] for r in before["person"]}
    assert all(con.execute("SELECT person_sk FROM person WHERE id = ?", (i,)).fetchone()[0] == sk
               for i, sk in sk_before.items())  # the same keys
    links = sum(len(ps) for key, _, ps in FIRST + SECOND[:1])
    assert con.execute("SELECT count(*) FROM book_people").fetchone()[0] == links
    assert con.execute("PRAGMA foreign_key_check").fetchall() == []  # SQLite pragma
    assert con.execute("PRAGMA integrity_check").fetchall() == [("ok",)]  # SQLite pragma
    lists = {}
    for key, title, role, position in con.execute(
            "SELECT b.book_key, p.name, l.role, l.list_position FROM book_people l JOIN books b USING (book_sk) "
            "JOIN person p USING (person_sk) ORDER BY b.book_key, l.list_position"):
        lists.setdefault(key, []).append((title, role))
    originals = {k: [(p["name"], p["role"]) for p in ast.literal_eval(repr(ps))] for k, _, ps in FIRST + SECOND[:1]}
    assert lists == originals


def test_append_refuses_another_model(built, tmp_path):
    db, _, _, _ = built
    other = tmp_path / "other.csv"
    other.write_text("code,label\nX,1\n", encoding="utf-8")
    before = db.read_bytes()
    assert main(["build", str(other), "--db", str(db), "--append", "--quiet"]) == 2
    assert db.read_bytes() == before
    assert main(["build", str(other), "--db", str(tmp_path / "none.db"), "--append", "--quiet"]) == 2
