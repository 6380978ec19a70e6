"""One-to-many joins: a further export whose rows each belong to one record of the main export.

Expected figures are computed in the test with the csv module; what a left, inner and full join keep is
common practice (a left join keeps every left row; an inner join only matched ones; a full join both sides).
"""

from __future__ import annotations

import csv
import json
import sqlite3

import pytest

from normalise.cli import main


CUSTOMERS = [("C1", "Avel"), ("C2", "Bryn"), ("C3", "Cato"), ("C1", "Avel again")]
ORDERS = [("O1", "C1", "[{'sku': 1, 'qty': 2}]"), ("O2", "C1", "[{'sku': 2, 'qty': 1}]"),
          ("O3", "C2", "[]"), ("O4", "C9", "[{'sku': 1, 'qty': 5}]"), ("O5", "", "[{'sku': 3, 'qty': 1}]")]


@pytest.fixture()
def files(tmp_path):
    with open(tmp_path / "customers.csv", "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["customer_id", "name"])
        w.writerows(CUSTOMERS)
    with open(tmp_path / "orders.csv", "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["order_id", "customer_id", "items"])
        w.writerows(ORDERS)
    return tmp_path


def build(files, how):
    db, manifest = files / f"{how}.db", files / f"{how}.json"
    code = main(["build", str(files / "customers.csv"), str(files / "orders.csv"), "--db", str(db),
                 "--manifest", str(manifest), "--cardinality", "one-to-many", "--how", how,
                 "--key", "customers=customer_id", "--key", "orders=order_id", "--quiet"])
    assert code == 0
    return sqlite3.connect(db), json.loads(manifest.read_text())


@pytest.mark.parametrize("how", ["left", "inner", "full"])
def test_rows_reconcile_and_belong_to_their_records(files, how):
    con, m = build(files, how)
    kept_customers = {c for c, _ in CUSTOMERS}  # first occurrence kept, the repeat set aside
    with_orders = {c for _, c, _ in ORDERS if c in kept_customers}
    orders = {o: c for o, c, _ in ORDERS}
    expected = {o for o, c in orders.items() if c in kept_customers or (how == "full" and c)}
    got = dict(con.execute("SELECT o.order_id, c.customer_id FROM orders o "
                           "LEFT JOIN customers c ON c.customer_sk = o.customer_sk"))
    assert set(got) == expected
    assert all(got[o] == orders[o] for o in got if got[o] is not None)
    unmatched = {r[0] for r in con.execute("SELECT join_key FROM unmatched_rows")}
    assert unmatched == ({"C9", None} if how != "full" else {None})
    customers = {r[0] for r in con.execute("SELECT customer_id FROM customers")}
    assert customers == (with_orders if how == "inner" else kept_customers)
    for i in m["inputs"]:  # every row read is loaded, set aside, rejected or kept as unmatched
        assert i["rows_read"] == (i["records_loaded"] + i["rows_set_aside"] + i["rows_rejected"]
                                  + i.get("rows_unmatched", 0))
    assert m["integrity"]["reconciled"] and m["integrity"]["foreign_key_violations"] == 0
    assert con.execute("PRAGMA foreign_key_check").fetchall() == []  # SQLite pragma
    join = m["joins"][0]
    assert join["cardinality"] == "one-to-many"
    assert join["left_only"] == len(kept_customers - {c for _, c, _ in ORDERS})
    assert join["right_only"] == len({c for _, c, _ in ORDERS if c} - kept_customers)
    fks = con.execute("PRAGMA foreign_key_list(orders)").fetchall()  # SQLite pragma
    assert [(r[2], r[3], r[4]) for r in fks] == [("customers", "customer_sk", "customer_sk")]
