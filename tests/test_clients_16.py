"""Issue 16: the outputs opened with the clients people use, which must see the keys, views, types and comments.

The references, named beside each check:

* ``sqlite-utils`` (PyPI), a SQLite client and command-line tool: its ``tables`` and ``views`` commands (JSON on
  standard output) and its Python API's ``Table.foreign_keys`` and ``Table.pks``
  (https://sqlite-utils.datasette.io/en/stable/cli.html, /python-api.html);
* ``psql``, PostgreSQL's own terminal client (Debian's ``postgresql-client``), its ``\\d+`` description of a
  table or view in unaligned output (https://www.postgresql.org/docs/current/app-psql.html);
* the manifest, the build's contract, for what the database was made to hold (tables, keys, views, types), and
  the ``descriptions`` table for what each comment says.
"""

from __future__ import annotations

import json
import os
import shutil
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest
import sqlalchemy as sa

from demo.generate import generate
from normalise.pipeline import build_database
from tests.test_postgresql import _drop, _new_schema, pg, pg_url  # noqa: F401 (fixtures)

PICKS = ["first_editor=contributors:role=editor"]


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("clients")
    generate(out, size=80, seed=16)
    return [str(out / "titles.csv"), str(out / "contributions.csv")], out


@pytest.fixture(scope="module")
def sqlite_build(demo):
    paths, out = demo
    db = str(out / "demo.db")
    return db, build_database(paths, db, picks=PICKS)


def _sqlite_utils(*args: str):
    """The sqlite-utils command, as installed beside this Python (its console script), its JSON output read."""
    command = shutil.which("sqlite-utils", path=str(Path(sys.executable).parent)) or shutil.which("sqlite-utils")
    if command is None:
        pytest.fail("sqlite-utils is missing: pip install -e '.[test]'")
    done = subprocess.run([command, *args], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout)


def test_sqlite_utils_sees_the_tables_views_and_counts(sqlite_build):
    """``sqlite-utils tables --counts --columns`` and ``sqlite-utils views``: every table with its columns and
    rows, and every view, as the manifest made them."""
    db, m = sqlite_build
    tables = {t["table"]: t for t in _sqlite_utils("tables", db, "--counts", "--columns")}
    assert set(tables) == {t["name"] for t in m["tables"]}
    for t in m["tables"]:
        assert tables[t["name"]]["columns"] == [c["name"] for c in t["columns"]]
        assert tables[t["name"]]["count"] == t["rows"], t["name"]
    assert [v["view"] for v in _sqlite_utils("views", db)] == [v["name"] for v in m["views"]]
    rows = _sqlite_utils("query", db, f'SELECT * FROM "{m["views"][0]["name"]}" LIMIT 5')
    assert rows and "number_of_contributors" in rows[0] and "first_editor" in rows[0]


def test_sqlite_utils_sees_every_foreign_key_and_primary_key(sqlite_build):
    """sqlite-utils' own reading of the foreign keys (``Table.foreign_keys``) and primary keys (``Table.pks``)."""
    import sqlite_utils

    db, m = sqlite_build
    database = sqlite_utils.Database(db)
    try:
        seen = 0
        for t in m["tables"]:
            table = database[t["name"]]
            assert table.pks == t["primary_key"]
            got = {(tuple(fk.columns), fk.other_table, tuple(fk.other_columns)) for fk in table.foreign_keys}
            assert got == {(tuple(fk["columns"]), fk["references"], tuple(fk["ref_columns"]))
                           for fk in t["foreign_keys"]}, t["name"]
            seen += len(got)
        assert seen == sum(len(t["foreign_keys"]) for t in m["tables"]) > 5
        assert set(database.view_names()) == {v["name"] for v in m["views"]}
    finally:
        database.close()


# --- psql ----------------------------------------------------------------------------------------------------

PG_TYPES = {"integer": "bigint", "real": "double precision", "boolean": "boolean", "text": "text", "date": "date",
            "timestamp": "timestamp without time zone", "decimal": "numeric"}


@pytest.fixture(scope="module")
def pg_build(demo, pg, pg_url):
    paths, _ = demo
    schema = _new_schema()
    m = build_database(paths, pg_url, schema=schema, picks=PICKS)
    yield schema, m
    _drop(pg, schema)


def _psql_pattern(schema: str, name: str) -> str:
    """A psql pattern naming exactly one relation: each part in double quotes, a double quote doubled."""
    return ".".join('"' + part.replace('"', '""') + '"' for part in (schema, name))


def psql_describe(pg_url: str, schema: str, name: str) -> dict:
    """``\\d+`` of a table or view, through psql in unaligned output (-A, tab-separated): its columns (type, nullable,
    description) and the lines of its sections (Indexes, Foreign-key constraints, View definition)."""
    command = shutil.which("psql")
    if command is None:
        pytest.fail("psql is missing: .ci/run installs Debian's postgresql, which has it")
    url = sa.engine.make_url(pg_url)
    env = {**os.environ, "PGPASSWORD": url.password or "", "PGCONNECT_TIMEOUT": "10"}
    target = url.set(drivername="postgresql", password=None).render_as_string(hide_password=False)
    done = subprocess.run([command, "-X", "-A", "-F", "\t", "-v", "ON_ERROR_STOP=1", "-d", target,
                           "-c", rf"\d+ {_psql_pattern(schema, name)}"],
                          capture_output=True, text=True, env=env, timeout=120)
    assert done.returncode == 0, done.stderr
    lines = done.stdout.splitlines()
    header = lines[1].split("\t")
    columns, sections, section = {}, {}, None
    for line in lines[2:]:
        if section is None and "\t" in line:
            cells = dict(zip(header, line.split("\t")))
            columns[cells["Column"]] = cells
        elif line.endswith(":") and not line.startswith(" "):
            section = line[:-1]
            sections[section] = []
        elif section is not None and line.strip():
            sections[section].append(line.strip())
    return {"title": lines[0], "columns": columns, "sections": sections}


def test_psql_sees_types_keys_indexes_and_comments(pg, pg_url, pg_build):
    """For every table: psql's column types (the plan's, a date column DATE), NOT NULL, the primary key, every foreign
    key, an index leading with each foreign key's columns, and each column's comment, the ``descriptions`` text."""
    from psycopg import sql

    schema, m = pg_build
    held = {(t, c): d for t, c, d in pg.execute(sql.SQL("SELECT table_name, column_name, description FROM {}")
                                                 .format(sql.Identifier(schema, "descriptions")))}
    foreign_keys = 0
    for t in m["tables"]:
        described = psql_describe(pg_url, schema, t["name"])
        assert described["title"] == f'Table "{schema}.{t["name"]}"'
        columns = described["columns"]
        assert list(columns) == [c["name"] for c in t["columns"]]
        for c in t["columns"]:
            got = columns[c["name"]]
            assert got["Type"] == PG_TYPES[c["type"]], (t["name"], c["name"])
            assert (got["Nullable"] == "not null") == (not c["nullable"] or c["name"] in t["primary_key"])
            assert got["Description"] == held[(t["name"], c["name"])] or \
                got["Description"].startswith(held[(t["name"], c["name"])] + f" Stored as {got['Type'].upper()};")
        indexes = described["sections"]["Indexes"]
        key = ", ".join(t["primary_key"])
        assert any(" PRIMARY KEY, btree (" + key + ")" in line for line in indexes), indexes
        constraints = described["sections"].get("Foreign-key constraints", [])
        for fk in t["foreign_keys"]:
            shown = (f'FOREIGN KEY ({", ".join(fk["columns"])}) REFERENCES '
                     f'{sql.Identifier(schema).as_string(pg)}.{fk["references"]}({", ".join(fk["ref_columns"])})')
            assert any(shown in line for line in constraints), (shown, constraints)
            leading = f'btree ({", ".join(fk["columns"])}'
            assert any(leading in line for line in indexes), (leading, indexes)
            foreign_keys += 1
    assert foreign_keys == sum(len(t["foreign_keys"]) for t in m["tables"]) > 5
    titles = psql_describe(pg_url, schema, "titles")["columns"]
    assert titles["release_date"]["Type"] == "date" and "to_char(" in titles["release_date"]["Description"]


def test_psql_sees_the_views_and_their_comments(pg, pg_url, pg_build):
    """psql describes each view (``View "..."``, its definition) with a comment on every column."""
    from psycopg import sql

    schema, m = pg_build
    held = {(t, c): d for t, c, d in pg.execute(sql.SQL("SELECT table_name, column_name, description FROM {}")
                                                 .format(sql.Identifier(schema, "descriptions")))}
    for v in m["views"]:
        described = psql_describe(pg_url, schema, v["name"])
        assert described["title"] == f'View "{schema}.{v["name"]}"'
        assert "View definition" in described["sections"]
        assert described["columns"]
        for column, cells in described["columns"].items():
            assert cells["Description"] == held[(v["name"], column)], (v["name"], column)
