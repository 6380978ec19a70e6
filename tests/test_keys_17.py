"""Every key a client can read (issue 17): surrogate keys are at most 2**53 - 1, so a JSON reader that keeps
numbers as IEEE 754 doubles (JavaScript's ``JSON.parse``; ECMAScript's ``Number.MAX_SAFE_INTEGER`` is
2**53 - 1) reads each one back exactly; and the rare hash collision gets a free key, never a shared one.

References: ECMAScript 2024, section 21.1.2.6 (Number.MAX_SAFE_INTEGER = 2**53 - 1); Python's ``json.loads``
with ``parse_int=float`` as the double-only reader; SQLite's own ``json_group_array`` writing the keys as JSON
text; SQLite's ``PRAGMA foreign_key_check`` for the references after collisions.
"""

from __future__ import annotations

import json
import sqlite3

import pytest

from demo.generate import generate
from normalise.build import keys as build_module, values as build_values
from normalise.pipeline import build_database

SAFE = 2**53 - 1  # ECMAScript Number.MAX_SAFE_INTEGER


def key_columns(con: sqlite3.Connection) -> list[tuple[str, str]]:
    """(table, column) of every primary and foreign key column, read from SQLite's own pragmas."""
    out = []
    tables = [r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type = 'table'")]
    for table in tables:
        out += [(table, r[1]) for r in con.execute("SELECT * FROM pragma_table_info(?)", (table,)) if r[5]]
        out += [(table, r[3]) for r in con.execute("SELECT * FROM pragma_foreign_key_list(?)", (table,))]
    return sorted(set(out))


@pytest.fixture(scope="module")
def demo_db(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo")
    generate(folder, size=2000, seed=11)
    db = folder / "demo.db"
    build_database([str(folder / "titles.csv"), str(folder / "contributions.csv")], str(db))
    return db


def test_every_key_is_within_the_safe_integers(demo_db):
    with sqlite3.connect(demo_db) as con:
        columns = key_columns(con)
        assert len(columns) > 10
        for table, column in columns:
            top = con.execute(f'SELECT max(abs("{column}")) FROM "{table}"').fetchone()[0]
            assert top is None or top <= SAFE, (table, column, top)


def test_keys_come_back_exactly_through_a_double_only_json_reader(demo_db):
    with sqlite3.connect(demo_db) as con:
        for table, column in key_columns(con):
            text = con.execute(f'SELECT json_group_array("{column}") FROM "{table}"').fetchone()[0]
            exact = json.loads(text)
            as_doubles = json.loads(text, parse_int=float)
            assert [int(x) if x is not None else None for x in as_doubles] == exact, (table, column)


def test_the_person_lookup_a_client_does_finds_every_row(demo_db):
    """A client reads a bridge row's person_sk through JSON as a double and looks the person up by it."""
    with sqlite3.connect(demo_db) as con:
        rows = json.loads(con.execute("SELECT json_group_array(person_sk) FROM title_contributors").fetchone()[0],
                          parse_int=float)
        people = {float(sk) for (sk,) in con.execute("SELECT person_sk FROM person")}
        assert rows and all(sk in people for sk in rows)


def test_colliding_hashes_get_free_keys_and_the_build_stays_exact(tmp_path, monkeypatch):
    """With keys cut to 8 bits, 40 distinct tags collide (about 3 pairs expected): each still gets a key of its own, the
    bridge rows name the right tag, and the lossless proof holds."""
    monkeypatch.setattr(build_module, "_MASK", 0xFF)
    hashed = [build_module.key_of(build_values.value_text(f"t{i}", "text")) for i in range(40)]
    assert len(set(hashed)) < 40  # the case is real: some tags share a hash
    path = tmp_path / "notes.csv"
    lines = ["key,tags"] + [f'n{i},"[""t{i}"", ""t{(i + 1) % 40}""]"' for i in range(40)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    m = build_database([str(path)], str(tmp_path / "notes.db"))
    assert m["integrity"]["proof"] == "exact" and m["integrity"]["cells_differing"] == 0
    with sqlite3.connect(tmp_path / "notes.db") as con:
        assert con.execute("SELECT count(*), count(DISTINCT tag_sk) FROM tag").fetchone() == (40, 40)
        assert con.execute("PRAGMA foreign_key_check").fetchall() == []
        pairs = set(con.execute("SELECT n.key, t.tag FROM note_tags b JOIN notes n USING (note_sk) "
                                "JOIN tag t USING (tag_sk)"))
    assert pairs == {(f"n{i}", f"t{j}") for i in range(40) for j in (i, (i + 1) % 40)}
