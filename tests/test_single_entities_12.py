"""Single objects with an identity (issue 12, part 1): an entity row, and a foreign key on the row holding it.

Invented data: a help desk's tickets, each with the person who opened it (``opened_by``), the queue it sits in
(``queue``, with its own ``lead`` person inside) and a list of ``watchers``. The people are one identity space
across three places.

The check value is the textbook decomposition (third normal form, from memory: any database text): in
``ticket(key, opened_by.id, opened_by.name)`` the name depends on the person's id, not on the ticket, so it moves
to a relation keyed by the id, and the ticket keeps the id as a foreign key. Every expected fact is computed in
the test from the input rows.
"""

from __future__ import annotations

import json
import sqlite3

import pytest

from normalise.pipeline import build_database, make_plan
from tests.open_data import check_lossless, check_pragmas
from tests.test_lossless import write_rows
from tests.test_postgresql import pg, pg_url, schema  # noqa: F401 (fixtures)
from tests.test_streaming import dump

PEOPLE = {1: "Ilse Varga", 2: "Tomas Quill", 3: "Rena Okafor", 4: "Dov Sarrat"}


def person(pid: int, **extra) -> dict:
    return {"id": pid, "name": PEOPLE[pid], **extra}


def tickets() -> list[dict]:
    out = []
    for n in range(24):
        out.append({
            "key": f"T{n:03}",
            "opened_by": person(1 + n % 3),
            "queue": {"qid": 10 + n % 2, "title": f"Queue {n % 2}", "lead": person(2 + n % 3)},
            "watchers": [person(1 + (n + k) % 4) for k in range(n % 3)],
        })
    out[5]["opened_by"]["desk"] = "north"  # a field some occurrences carry only: a link attribute
    out[7]["queue"]["lead"] = None  # no lead: null, kept as null
    return out


def write(rows: list[dict], path) -> str:
    write_rows(path, ["key", "opened_by", "queue", "watchers"],
               [(r["key"], json.dumps(r["opened_by"]), json.dumps(r["queue"]), json.dumps(r["watchers"]))
                for r in rows])
    return str(path)


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    where = tmp_path_factory.mktemp("tickets")
    rows = tickets()
    path = write(rows, where / "tickets.csv")
    m = build_database([path], str(where / "out.db"))
    return rows, where, path, m


def people_table(m: dict) -> dict:
    (group,) = [g for g in m["entities"] if g["identity"] == "id"]
    return group


def test_one_people_table_across_columns(built):
    rows, where, _, m = built
    group = people_table(m)
    assert sorted(group["members"]) == ["tickets:opened_by", "tickets:queue.lead", "tickets:watchers"]
    found = {p["id"]: p["name"] for r in rows for p in [r["opened_by"], r["queue"]["lead"], *r["watchers"]] if p}
    with sqlite3.connect(where / "out.db") as con:
        got = dict(con.execute(f'SELECT "id", "name" FROM "{group["table"]}"'))
    assert got == found  # every person once, whichever column they came in
    check_lossless(m)
    check_pragmas(where / "out.db", m)


def test_the_record_holds_a_foreign_key_and_link_fields(built):
    rows, where, _, m = built
    group = people_table(m)
    (record,) = [t for t in m["tables"] if t["role"] == "record"]
    fks = {fk["columns"][0]: fk["references"] for fk in record["foreign_keys"]}
    # the queue is an entity too: its qid repeats across tickets and determines its title
    assert fks == {"opened_by_sk": group["table"], "queue_sk": "queue", "queue_lead_sk": group["table"]}
    names = [c["name"] for c in record["columns"]]
    assert "opened_by_name" not in names and "opened_by_desk" in names  # name moved, the rare flag stayed
    with sqlite3.connect(where / "out.db") as con:
        got = con.execute(f'SELECT t."key", o."id", l."id", t."opened_by_desk", q."title" FROM "tickets" t '
                          f'JOIN "{group["table"]}" o ON o."{group["table"]}_sk" = t."opened_by_sk" '
                          f'LEFT JOIN "{group["table"]}" l ON l."{group["table"]}_sk" = t."queue_lead_sk" '
                          f'JOIN "queue" q ON q."queue_sk" = t."queue_sk" ORDER BY t."key"').fetchall()
    assert got == [(r["key"], r["opened_by"]["id"], (r["queue"]["lead"] or {}).get("id"),
                    r["opened_by"].get("desk"), r["queue"]["title"]) for r in rows]


def test_entity_summary_counts_records_through_every_column(built):
    rows, where, _, m = built
    group = people_table(m)
    counts = {}
    for r in rows:
        for p in {p["id"] for p in [r["opened_by"], r["queue"]["lead"], *r["watchers"]] if p}:
            counts[p] = counts.get(p, 0) + 1
    with sqlite3.connect(where / "out.db") as con:
        got = dict(con.execute(f'SELECT "id", records_in_total FROM "{group["table"]}_summary"'))
        shown = con.execute('SELECT "key", "opened_by" FROM "tickets_summary" ORDER BY "key"').fetchall()
    assert got == counts
    assert shown == [(r["key"], r["opened_by"]["name"]) for r in rows]


def test_streamed_in_chunks_gives_the_same_database(built, tmp_path):
    _, where, path, _ = built
    for chunk_rows in (1, 5):
        m = build_database([path], str(tmp_path / f"c{chunk_rows}.db"), chunk_rows=chunk_rows)
        check_lossless(m)
        assert dump(tmp_path / f"c{chunk_rows}.db") == dump(where / "out.db")


def test_an_occurrence_that_disagrees_is_traced_and_comes_back(tmp_path):
    rows = tickets()
    rows[3]["opened_by"]["name"] = "I. Varga"  # one ticket spells the person otherwise
    m = build_database([write(rows, tmp_path / "tickets.csv")], str(tmp_path / "out.db"))
    check_lossless(m)
    group = people_table(m)
    with sqlite3.connect(tmp_path / "out.db") as con:
        assert con.execute(f'SELECT "name" FROM "{group["table"]}" WHERE "id" = 1').fetchone() == ("Ilse Varga",)
        traced = con.execute("SELECT table_name, column_name, path, original FROM value_traces").fetchall()
    assert traced == [("tickets", "opened_by", "/name", "'I. Varga'")]


def test_options_name_single_objects(tmp_path):
    path = write(tickets(), tmp_path / "tickets.csv")
    # no identity for the lead: its fields stay columns of the record
    m = build_database([path], str(tmp_path / "a.db"), options=_options(identities={"queue.lead": ""}))
    assert sorted(people_table(m)["members"]) == ["tickets:opened_by", "tickets:watchers"]
    check_lossless(m)
    # kept apart: the lead's people in a table of their own
    m = build_database([path], str(tmp_path / "b.db"), options=_options(no_merge=["tickets:queue.lead"]))
    assert sorted(sorted(g["members"]) for g in m["entities"] if g["identity"] == "id") == [
        ["tickets:opened_by", "tickets:watchers"], ["tickets:queue.lead"]]
    check_lossless(m)
    # the queue no entity: its fields are columns of the record again
    m = build_database([path], str(tmp_path / "c.db"), options=_options(identities={"queue": ""}))
    assert [g for g in m["entities"] if g["identity"] == "qid"] == []
    assert {"queue_qid", "queue_title"} <= {c["name"] for t in m["tables"] if t["role"] == "record"
                                            for c in t["columns"]}
    check_lossless(m)


def test_a_plan_replays_the_references(built, tmp_path):
    rows, where, path, _ = built
    plan = tmp_path / "plan.toml"
    make_plan([path], str(plan))
    assert 'entity = "' in plan.read_text(encoding="utf-8")
    m = build_database([path], str(tmp_path / "replayed.db"), plan_path=str(plan))
    check_lossless(m)
    assert dump(tmp_path / "replayed.db") == dump(where / "out.db")


def _options(**kw):
    from normalise.infer import Options

    return Options(**kw)


def test_postgresql_gives_the_same_relations(built, pg, pg_url, schema):
    # Reference: the SQLite build of the same input, relation by relation (tables and views)
    from tests.test_postgresql import assert_same_as_sqlite, relation_names

    _, where, path, m = built
    pm = build_database([path], pg_url, schema=schema)
    check_lossless(pm)
    assert_same_as_sqlite(pg, schema, str(where / "out.db"), relation_names(m))
