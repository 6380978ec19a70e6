"""Entities wherever they are (issue 12), the parts done so far: an identity repeated inside one list.

A person who is both author and editor of one title appears twice in its list. The relational reading
(an associative, or bridge, table: one row per occurrence of the relationship, the entity's attributes
once in the entity table; textbook normalisation, common practice) gives one entity row and two bridge
rows, told apart by their list position. Every check here is computed from the input in the test.
"""

from __future__ import annotations

import json
import sqlite3

from normalise.model.names import singular
from normalise.pipeline import build_database
from tests.test_lossless import write_rows


def people_of(db, bridge: str, entity: str, key: str):
    with sqlite3.connect(db) as con:
        return con.execute(f'SELECT r."key", e.pid, e.name, b.role FROM "{bridge}" b JOIN "{entity}" e USING ({key}) '
                           f'JOIN "books" r USING (book_sk) ORDER BY r."key", b.list_position').fetchall()


def test_an_identity_repeated_inside_a_list_is_one_entity_with_a_link_per_occurrence(tmp_path):
    lists = {"b1": [{"pid": 1, "name": "Ann", "role": "author"}, {"pid": 1, "name": "Ann", "role": "editor"},
                    {"pid": 2, "name": "Bo", "role": "author"}],
             "b2": [{"pid": 2, "name": "Bo", "role": "editor"}]}
    path = tmp_path / "books.csv"
    write_rows(path, ["key", "people"], [(k, json.dumps(v)) for k, v in lists.items()])
    m = build_database([str(path)], str(tmp_path / "out.db"))
    roles = {t["name"]: t["role"] for t in m["tables"]}
    (entity,) = [e["table"] for e in m["entities"]]
    bridge = "book_people"
    assert roles[bridge] == "bridge"
    key = f"{entity}_sk"
    with sqlite3.connect(tmp_path / "out.db") as con:
        assert con.execute(f'SELECT count(*) FROM "{entity}"').fetchone()[0] == len(
            {p["pid"] for v in lists.values() for p in v})
    got = people_of(tmp_path / "out.db", bridge, entity, key)
    assert got == [(k, p["pid"], p["name"], p["role"]) for k, v in lists.items() for p in v]
    assert m["integrity"]["proof"] == "exact"
    assert m["integrity"]["cells_rebuilt_exactly"] == m["integrity"]["cells_checked"] == 4


def test_a_list_whose_objects_all_carry_one_id_is_an_entity_list(tmp_path):
    lists = {f"b{i}": [{"pid": 7, "name": "Ann", "step": j} for j in range(1, 4)] for i in range(3)}
    path = tmp_path / "books.csv"
    write_rows(path, ["key", "people"], [(k, json.dumps(v)) for k, v in lists.items()])
    m = build_database([str(path)], str(tmp_path / "out.db"))
    assert [t["role"] for t in m["tables"] if t["name"] == "book_people"] == ["bridge"]
    (group,) = m["entities"]
    assert group["identity"] == "pid" and group["attributes"] == ["name"]
    assert m["integrity"]["proof"] == "exact"


def test_table_names_are_singular_nouns():
    # English plurals (common practice): aliases, suffixes, series, status, cookies
    assert [singular(w) for w in ("aliases", "suffixes", "series", "status", "cookies", "categories")] == [
        "alias", "suffix", "series", "status", "cookie", "category"]
    # -uses, -ices, -yses (English spelling, common practice): the -us, -ex and -is words by name, others regular
    assert [singular(w) for w in ("statuses", "buses", "causes", "houses", "indices", "prices", "analyses",
                                  "user_statuses")] == [
        "status", "bus", "cause", "house", "index", "price", "analysis", "user_status"]


def test_a_list_of_numbers_keeps_numbers(tmp_path):
    # JSON numbers (RFC 8259 section 6) in a list: an INTEGER value table when every value is an integer, a
    # REAL one when some have a fraction; SQLite's typeof() says what each stored value is
    cells = {"A": [33, 65], "B": [44, 21], "C": [2, 3, 3]}
    path = tmp_path / "points.csv"
    write_rows(path, ["key", "steps", "latlng"],
               [(k, json.dumps(v), json.dumps([x + 0.5 for x in v] if k == "C" else v)) for k, v in cells.items()])
    m = build_database([str(path)], str(tmp_path / "out.db"))
    assert m["integrity"]["proof"] == "exact"
    with sqlite3.connect(tmp_path / "out.db") as con:
        steps = con.execute("SELECT DISTINCT typeof(step) FROM step").fetchall()
        got = con.execute('SELECT r."key", v.step FROM point_steps b JOIN step v USING (step_sk) '
                          'JOIN points r USING (point_sk) ORDER BY r."key", b.list_position').fetchall()
        latlng = con.execute("SELECT DISTINCT typeof(latlng) FROM latlng").fetchall()
    assert steps == [("integer",)] and latlng == [("real",)]
    assert got == [(k, x) for k, v in cells.items() for x in v]
    # 33 beside 2.5 is held as 33.0 in the REAL table; the cell as given is kept in value_traces
    assert m["integrity"]["traced_by_reason"] == {"the cell as given (its rows differ)": 2}
