"""Parquet, the HTML report and the data dictionary of a PostgreSQL build.

They are made from a SQLite copy of the rows the run wrote to PostgreSQL (``pipeline._outputs``); these checks
read PostgreSQL itself through psycopg (its catalogue, ``information_schema.columns``, and every row) and the
Parquet files through pyarrow, so what the outputs say is compared with the server, not with the copy. The
data is the invented demo (``demo/generate.py``).
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pyarrow.parquet as pq
import pytest

from demo.generate import generate
from tests.test_postgresql import _drop, _new_schema, pg, pg_url  # noqa: F401 (fixtures: a real server)

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="module")
def built(tmp_path_factory, pg, pg_url):
    where = tmp_path_factory.mktemp("pgout")
    generate(where, size=300, seed=11)
    schema = _new_schema()
    done = subprocess.run([sys.executable, "-m", "normalise", "build", str(where / "titles.csv"),
                           str(where / "contributions.csv"), "--db", pg_url, "--schema", schema, "--quiet",
                           "--parquet", str(where / "pq"), "--report", str(where / "r.html"),
                           "--dictionary", str(where / "d.md")], capture_output=True, text=True,
                          env={**os.environ, "PYTHONPATH": str(ROOT)}, timeout=300)
    assert done.returncode == 0, done.stderr
    yield where, schema
    _drop(pg, schema)


def _relations(pg, schema: str) -> list[str]:
    rows = pg.execute("SELECT table_name FROM information_schema.tables WHERE table_schema = %s "
                      "AND table_name <> 'normalise_register' ORDER BY table_name", (schema,)).fetchall()
    return [r[0] for r in rows]


def test_parquet_holds_every_row_postgresql_holds(built, pg):
    from psycopg import sql

    where, schema = built
    names = _relations(pg, schema)
    assert sorted(p.stem for p in (where / "pq").glob("*.parquet")) == names  # every table and view
    for name in names:
        cur = pg.execute(sql.SQL("SELECT * FROM {}").format(sql.Identifier(schema, name)))
        columns = [d.name for d in cur.description]
        theirs = cur.fetchall()
        table = pq.read_table(where / "pq" / f"{name}.parquet")
        assert table.column_names == columns, name
        mine = list(zip(*(table.column(c).to_pylist() for c in columns))) if table.num_rows else []
        key = repr  # rows compared as multisets: a view has no order of its own
        assert sorted(mine, key=key) == sorted(theirs, key=key), name


def test_the_dictionary_gives_postgresql_types(built, pg):
    where, schema = built
    text = (where / "d.md").read_text(encoding="utf-8")
    assert "Each column's type is PostgreSQL's" in text
    types = pg.execute("SELECT table_name, column_name, upper(data_type) FROM information_schema.columns "
                       "WHERE table_schema = %s AND table_name = 'titles'", (schema,)).fetchall()
    for _, column, type_ in types:
        row = next(line for line in text.splitlines() if line.startswith(f"| `{column}` |"))
        assert f"({type_})" in row, (column, row)
    assert any(t == "DATE" for *_, t in types)  # the demo's release dates are DATE on PostgreSQL
    from psycopg import sql

    with pg.transaction():  # PostgreSQL writes a view's definition with names as the search path sees them
        pg.execute(sql.SQL("SET LOCAL search_path TO {}").format(sql.Identifier(schema)))
        definition = pg.execute("SELECT definition FROM pg_catalog.pg_views WHERE schemaname = %s AND "
                                "viewname = 'titles_summary'", (schema,)).fetchone()[0]
    assert definition.strip() in text  # the view as PostgreSQL holds it, not SQLite's


def test_the_report_is_of_the_server(built, pg_url):
    where, schema = built
    html = (where / "r.html").read_text(encoding="utf-8")
    assert "not applicable (PostgreSQL)" in html and schema.replace('"', "&quot;") in html
    from sqlalchemy.engine import make_url

    password = make_url(pg_url).password
    for name in ("r.html", "d.md"):
        assert password not in (where / name).read_text(encoding="utf-8")
