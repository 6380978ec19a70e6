"""Objects keyed by data (``{"P-101": {...}, "P-205": {...}}``): a row per key, not a column per key.

Invented data only: stores holding stock of parts keyed by part code. The model's check value is the
textbook one (from memory: Codd 1970, and any database text on first normal form): a repeating group
becomes a relation of its own, keyed by its owner and the group's key.
"""

from __future__ import annotations

import json
import sqlite3

from normalise.infer import Options
from normalise.pipeline import build_database, make_plan
from tests.open_data import check_lossless, check_pragmas

PARTS = [f"P-{n}" for n in range(101, 113)]


def stores(n: int = 12) -> list[dict]:
    """Each store stocks a few parts (a varying subset of the codes), with a quantity and a bin."""
    out = []
    for s in range(n):
        stock = {PARTS[(s * 5 + j) % len(PARTS)]: {"qty": s + j, "bin": f"{chr(65 + j)}{s}"} for j in range(1 + s % 3)}
        out.append({"store": f"S{s:02}", "address": {"city": f"Town {s % 4}", "zip": f"{1000 + s}"}, "stock": stock})
    return out


def write(rows: list[dict], path) -> str:
    path.write_text("".join(json.dumps(r) + "\n" for r in rows), encoding="utf-8")
    return str(path)


def test_repeating_group_is_a_relation_keyed_by_owner_and_key(tmp_path):
    rows = stores()
    db = tmp_path / "stores.db"
    m = build_database([write(rows, tmp_path / "stores.jsonl")], str(db))
    check_lossless(m)
    check_pragmas(db, m)
    tables = {t["name"]: t for t in m["tables"]}
    record = tables["stores"]
    # an ordinary object with fixed keys stays record columns; the keyed one makes no column per part code
    assert {"address_city", "address_zip"} <= {c["name"] for c in record["columns"]}
    assert not any("p_10" in c["name"] for c in record["columns"])
    # part codes recur across stores: the codes are an entity, each store's stock a bridge row per code
    (stock,) = [t for t in m["tables"]
                if {"file": "stores", "column": "stock"} in t["sources"] and t["role"] == "bridge"]
    (fk,) = [fk for fk in stock["foreign_keys"] if fk["references"] != "stores"]
    part, (part_key,) = tables[fk["references"]], fk["columns"]
    (code,) = part["natural_key"]
    facts = {(r["store"], code_, v["qty"], v["bin"]) for r in rows for code_, v in r["stock"].items()}
    assert stock["rows"] == len(facts) and part["rows"] == len({f[1] for f in facts})
    with sqlite3.connect(db) as con:
        got = set(con.execute(f'SELECT s."store", p."{code}", b."qty", b."bin" FROM "{stock["name"]}" b '
                              f'JOIN "stores" s ON b."store_sk" = s."store_sk" '
                              f'JOIN "{part["name"]}" p ON b."{part_key}" = p."{part_key}"'))
        # the relation is keyed by (owner, key): SQLite holds a UNIQUE index on exactly those columns
        unique = [[r[2] for r in con.execute(f"PRAGMA index_info('{idx[1]}')")]
                  for idx in con.execute(f"PRAGMA index_list('{stock['name']}')") if idx[2]]
    assert got == facts
    assert ["store_sk", part_key] in unique


def test_plan_writes_the_keyed_form_and_replays_it(tmp_path):
    path = write(stores(), tmp_path / "stores.jsonl")
    text = make_plan([path])
    assert 'keyed = "stock_code"' in text
    plan = tmp_path / "plan.toml"
    plan.write_text(text, encoding="utf-8")
    inferred = build_database([path], str(tmp_path / "a.db"))
    replayed = build_database([path], str(tmp_path / "b.db"), plan_path=str(plan))
    assert replayed["tables"] == inferred["tables"]
    check_lossless(replayed)


def test_forced_off_and_on(tmp_path):
    path = write(stores(), tmp_path / "stores.jsonl")
    off = build_database([path], str(tmp_path / "off.db"), options=Options(keyed={"stock": ""}))
    columns = {c["name"] for t in off["tables"] for c in t["columns"]}
    assert "p_101_qty" in columns and "stock_code" not in columns  # a column per key, as asked
    check_lossless(off)
    # two fixed keys are no evidence of keys by data; forced, they are read as rows all the same
    on = build_database([path], str(tmp_path / "on.db"), options=Options(keyed={"address": "part"}))
    assert any({"file": "stores", "column": "address"} in t["sources"] for t in on["tables"] if t["role"] != "record")
    check_lossless(on)


def test_a_cell_of_another_form_is_kept_whole(tmp_path):
    good = write(stores(), tmp_path / "stores.jsonl")
    plan = tmp_path / "plan.toml"
    make_plan([good], str(plan))
    rows = stores() + [{"store": "S99", "address": {"city": "Town 1", "zip": "1099"}, "stock": {"P-101": 7}}]
    (tmp_path / "odd").mkdir()
    db = tmp_path / "odd.db"
    m = build_database([write(rows, tmp_path / "odd" / "stores.jsonl")], str(db), plan_path=str(plan))
    check_lossless(m)  # the odd cell comes back from value_traces
    with sqlite3.connect(db) as con:
        (original,) = con.execute("SELECT original FROM value_traces WHERE column_name = 'stock'").fetchone()
    assert original == repr({"P-101": 7})
