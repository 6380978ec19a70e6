"""How fast the summary views answer, at 50,000 records, on SQLite and PostgreSQL.

    python benchmarks/bench_views.py [--records 50000] [--runs 5] [--postgresql URL]

The demo export at that size is built once per backend; then each view answers two queries a BI tool
sends: the first 1,000 rows (``SELECT * ... LIMIT 1000``) and one ``GROUP BY`` over the whole view. The
baseline, measured in the same run on the same database, is the same two queries on the view's own table
(the record or entity table, no summary columns): the cost of the table itself. Figures are the median of
``--runs`` runs, after one warm-up run.
"""

from __future__ import annotations

import argparse
import os
import sqlite3
import statistics
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from demo.generate import generate  # noqa: E402
from normalise.pipeline import build_database  # noqa: E402


def median_seconds(run, runs: int) -> float:
    run()  # warm-up: the pages in the cache, the plan compiled
    times = []
    for _ in range(runs):
        started = time.perf_counter()
        run()
        times.append(time.perf_counter() - started)
    return statistics.median(times)


def queries(view: dict, group_by: str) -> dict[str, str]:
    return {"first 1,000 rows": f'SELECT * FROM "{view}" LIMIT 1000',
            "GROUP BY over all": f'SELECT "{group_by}", count(*) FROM "{view}" GROUP BY "{group_by}"'}


def group_column(columns: list[str]) -> str:
    """A count column of the view to group on (the number of a list's entries, or records_in_total)."""
    for c in columns:
        if c.startswith("number_of_") or c == "records_in_total":
            return c
    return columns[-1]


def measure(execute, columns_of, views: list[dict], runs: int) -> list[tuple]:
    rows = []
    for v in views:
        view_columns = columns_of(v["name"])
        table_columns = columns_of(v["table"])
        for what, sql in queries(v["name"], group_column(view_columns)).items():
            base_sql = queries(v["table"], table_columns[0])[what]
            rows.append((v["name"], what, median_seconds(lambda: execute(sql), runs),
                         median_seconds(lambda: execute(base_sql), runs)))
    return rows


def show(backend: str, rows: list[tuple]) -> None:
    print(f"\n{backend}: median seconds (view | its table alone, the baseline)")
    for name, what, seconds, baseline in rows:
        print(f"  {name:28} {what:18} {seconds:8.3f} | {baseline:6.3f}")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--records", type=int, default=50_000)
    ap.add_argument("--runs", type=int, default=5)
    ap.add_argument("--postgresql", default=os.environ.get("NORMALISE_TEST_POSTGRES_URL"))
    ap.add_argument("--materialise", action="store_true", help="also time the materialised views")
    args = ap.parse_args()
    work = Path(tempfile.mkdtemp(prefix="bench-views-"))
    generate(work, size=args.records, seed=7)
    inputs = [str(work / "titles.csv"), str(work / "contributions.csv")]
    db = str(work / "demo.db")
    started = time.perf_counter()
    manifest = build_database(inputs, db)
    print(f"{args.records:,} records built into SQLite in {time.perf_counter() - started:.1f} s")
    con = sqlite3.connect(db)
    show("SQLite", measure(lambda sql: con.execute(sql).fetchall(),
                           lambda name: [r[1] for r in con.execute(f'PRAGMA table_info("{name}")')],
                           manifest["views"], args.runs))
    if args.postgresql:
        import psycopg
        import sqlalchemy as sa

        schema = "bench_views"
        build_database(inputs, args.postgresql, schema=schema, replace=True)
        url = sa.engine.make_url(args.postgresql).set(drivername="postgresql")
        with psycopg.connect(url.render_as_string(hide_password=False), autocommit=True) as pg:
            pg.execute(f'SET search_path TO "{schema}"')

            def columns_of(name):
                return [r[0] for r in pg.execute(
                    "SELECT column_name FROM information_schema.columns WHERE table_schema = %s AND "
                    "table_name = %s ORDER BY ordinal_position", (schema, name))]

            show("PostgreSQL", measure(lambda sql: pg.execute(sql).fetchall(), columns_of, manifest["views"],
                                       args.runs))


if __name__ == "__main__":
    main()
