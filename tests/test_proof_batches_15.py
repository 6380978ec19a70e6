"""Issue 15: the lossless proof rebuilds the cells a range of records at a time (``prove.PROOF_BATCH``), so its
memory is bounded by the batch, not by the input; its digest sums are those of the whole-table rebuild.

Reference: the proof's own whole-table rebuild (no batch) of the same database, column by column, and the input's
digests taken by the build; a row deleted with SQL (sqlite.org/lang_delete.html) must still be caught.

Data:
- the Unicode CLDR supplemental data shipped in ``babel`` (PyPI, BSD-3-Clause; CLDR under the Unicode licence) as
  JSON Lines, as ``tests/test_open_cldr_territories.py`` writes it: lists of objects with fields on some only;
- ``countryinfo`` (PyPI, MIT) as CSV, as ``tests/test_report_from_plan_14.py`` writes it: delimited lists,
  lists of objects, numbers.
"""

from __future__ import annotations

import json
import sqlite3

import pytest

from normalise import prove as prove_module
from normalise.build import build
from normalise.check import check_plan
from normalise.pipeline import build_database, prepare
from normalise.prove import _sums, _units, prove, sqlite_fetch
from normalise.write import write_sqlite
from tests.test_open_cldr_territories import territories
from tests.test_report_from_plan_14 import _countries_csv


@pytest.fixture(scope="module", params=["cldr", "countryinfo"])
def written(request, tmp_path_factory):
    where = tmp_path_factory.mktemp(request.param)
    if request.param == "cldr":
        path = where / "territories.jsonl"
        path.write_text("".join(json.dumps(r, ensure_ascii=False) + "\n" for r in territories()), "utf-8")
        path = str(path)
    else:
        path = _countries_csv(where)
    plan, exports, decoded, _ = prepare([path])
    built = build(plan, exports, decoded)
    db = str(where / "out.db")
    write_sqlite(plan, built.rows, check_plan(plan), db)
    return path, plan, built, db


@pytest.mark.parametrize("batch", [1, 2, 7, 100])
def test_batched_sums_are_the_whole_table_sums(written, batch):
    _, plan, built, db = written
    fetch, close = sqlite_fetch(db)
    try:
        for unit in _units(plan):
            assert _sums(plan, fetch, unit, built.inputs.records, batch) == _sums(plan, fetch, unit,
                                                                                  built.inputs.records)
        keys = {k for unit in _units(plan) for k in unit}
        batched = _sums(plan, fetch, keys, built.inputs.records, batch)
    finally:
        close()
    for key, (n, total) in built.inputs.sums.items():  # and both are the input's, cell for cell
        assert tuple(batched[key]) == (n, total), key


def test_a_deleted_row_is_caught_in_batches(written, tmp_path, monkeypatch):
    _, plan, built, db = written
    copy = tmp_path / "changed.db"
    with sqlite3.connect(db) as src, sqlite3.connect(copy) as dst:
        src.backup(dst)
    bridge = next(n.table for r in plan.records for n in r.nested if n.table)
    with sqlite3.connect(copy) as con:
        assert con.execute(f'DELETE FROM "{bridge}" WHERE rowid = (SELECT max(rowid) FROM "{bridge}")').rowcount == 1
    monkeypatch.setattr(prove_module, "PROOF_BATCH", 3)
    fetch, close = sqlite_fetch(str(copy))
    try:
        figures = prove(plan, built.inputs, fetch, path=str(copy))
    finally:
        close()
    assert figures["cells_differing"] >= 1


def test_a_build_with_small_batches_proves_exact(written, tmp_path, monkeypatch):
    path = written[0]
    monkeypatch.setattr(prove_module, "PROOF_BATCH", 4)
    m = build_database(path, tmp_path / "small.db", chunk_rows=50)
    assert m["integrity"]["proof"] == "exact"
    assert m["integrity"]["cells_rebuilt_exactly"] == m["integrity"]["cells_checked"] > 0
