"""What SQLite alone costs for the database a build writes: the floor under any end-to-end time.

    python benchmarks/sqlite_floor.py EXPORT.csv [--runs 3] [--json]

The rows are built first, in memory and untimed (read, decode, infer and build
exactly as ``normalise build`` does). Then only the writing is timed, through
the writer the build uses (``normalise.write.sqlite.SqliteWriter``): the inserts into
the constrained tables, then ``finish`` (indexes, views, ``PRAGMA
foreign_key_check``, ``PRAGMA integrity_check``, commit, fsync and the move
into place). Each check is also timed on its own on the finished database, to
show where the time goes. Figures are medians of ``--runs`` runs.
"""

from __future__ import annotations

import argparse
import gc
import json
import os
import sqlite3
import statistics
import tempfile
import time

from normalise.build import Builder
from normalise.check import check_plan
from normalise.pipeline import prepare
from normalise.write import SqliteWriter


def built_rows(path: str):
    plan, exports, decoded, _ = prepare([path])  # read, decode and infer as a build does
    order = check_plan(plan)
    builder = Builder(plan)
    for export in exports:
        builder.add(export, decoded[export.path])
    rows = builder.take_rows()
    built = builder.finish()
    for name, more in built.rows.items():
        rows[name] = rows.get(name, []) + more
    return plan, order, rows, built.updates


def write_once(plan, order, rows, updates, db: str) -> dict:
    times = {}
    start = time.perf_counter()
    writer = SqliteWriter(plan, order, db, replace=True)
    for name in order:
        writer.insert(name, rows.get(name, []))
    for table, changed in updates.items():
        writer.update(table, changed)
    times["insert"] = time.perf_counter() - start
    start = time.perf_counter()
    writer.finish()
    times["finish"] = time.perf_counter() - start
    with sqlite3.connect(db) as con:
        for pragma in ("foreign_key_check", "integrity_check", "quick_check"):
            start = time.perf_counter()
            con.execute(f"PRAGMA {pragma}").fetchall()
            times[pragma] = time.perf_counter() - start
    times["total"] = times["insert"] + times["finish"]
    return times


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("export")
    p.add_argument("--runs", type=int, default=3)
    p.add_argument("--json", action="store_true", help="print one JSON object (for bench_build.py)")
    a = p.parse_args()
    gc.disable()  # as during a build (pipeline.paused_gc)
    plan, order, rows, updates = built_rows(a.export)
    with tempfile.TemporaryDirectory() as d:
        runs = [write_once(plan, order, rows, updates, os.path.join(d, "floor.db")) for _ in range(a.runs)]
    median = {k: statistics.median(r[k] for r in runs) for k in runs[0]}
    median["rows"] = sum(len(r) for r in rows.values())
    if a.json:
        print(json.dumps(median))
        return
    print(f"SQLite alone, {median['rows']:,} rows; median of {a.runs} runs")
    print(f"  inserts {median['insert']:.1f}s, then indexes, views, checks, commit and move {median['finish']:.1f}s"
          f" = {median['total']:.1f}s")
    print(f"  of which, measured again on the finished file: foreign_key_check {median['foreign_key_check']:.1f}s, "
          f"integrity_check {median['integrity_check']:.1f}s (quick_check {median['quick_check']:.1f}s)")


if __name__ == "__main__":
    main()
