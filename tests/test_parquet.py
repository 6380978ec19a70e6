"""--parquet writes every table and view, typed by the plan, and other engines read them so.

The references, named beside each check:

* pyarrow's Parquet reader (``pyarrow.parquet.read_table``) and ``pyarrow.concat_tables``, which refuses tables
  whose schemas differ;
* DuckDB (PyPI ``duckdb``): ``read_parquet`` and ``DESCRIBE``, its own names of the types it reads
  (https://duckdb.org/docs/sql/data_types/overview);
* Polars (PyPI ``polars``): ``read_parquet`` and its schema's data types;
* the SQLite database the same build wrote: its declared column types (``PRAGMA table_info``), with the
  manifest's plan types for the ISO 8601 text SQLite keeps for dates and timestamps, and ``count(*)``;
* Python's ISO 8601 parser (``datetime.fromisoformat``) for the date or instant each SQLite text names.
"""

from __future__ import annotations

import csv
import datetime
import decimal
import sqlite3

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from demo.generate import generate
from normalise.pipeline import build_database, make_plan

# what each declared SQLite type (schema.py, write.TYPES) reads as, in pyarrow, DuckDB and Polars; a TEXT column the
# manifest types date or timestamp is a date or a timestamp (in UTC where the values carry offsets)
EXPECTED = {  # SQLite declared type or plan type -> (pyarrow, DuckDB, Polars)
    "INTEGER": ("int64", "BIGINT", "Int64"), "BIGINT": ("int64", "BIGINT", "Int64"),
    "FLOAT": ("double", "DOUBLE", "Float64"), "BOOLEAN": ("bool", "BOOLEAN", "Boolean"),
    "TEXT": ("string", "VARCHAR", "String"),
    "date": ("date32[day]", "DATE", "Date"),
    "timestamp": ("timestamp[us]", "TIMESTAMP", "Datetime(time_unit='us', time_zone=None)"),
    "timestamp with offsets": ("timestamp[us, tz=UTC]", "TIMESTAMP WITH TIME ZONE",
                               "Datetime(time_unit='us', time_zone='UTC')"),
    # an exact decimal at the plan's scale (its places in the sample; the demo's prices have 2)
    "decimal": ("decimal128(38, 2)", "DECIMAL(38,2)", "Decimal(precision=38, scale=2)"),
}


def _sqlite_types(db: str, m: dict) -> dict[str, dict[str, str]]:
    """Reference: the SQLite database's declared types (PRAGMA table_info), per table and view; a TEXT column the
    manifest types date or timestamp by that plan type."""
    planned = {t["name"]: {c["name"]: c["type"] for c in t["columns"]} for t in m["tables"]}
    out = {}
    with sqlite3.connect(db) as con:
        for name in [t["name"] for t in m["tables"]] + [v["name"] for v in m["views"]]:
            out[name] = {}
            for _, column, declared, *_ in con.execute(f'PRAGMA table_info("{name}")'):
                kind = planned.get(name, {}).get(column)
                out[name][column] = kind if kind in ("date", "timestamp", "decimal") else declared or _held(con, name, column)
    return out


def _held(con, view: str, column: str) -> str | None:
    """A view column's type where SQLite declares none (an expression): what it holds, by SQLite's typeof; text
    that is every time an ISO 8601 date (reference: ``date.fromisoformat``) is a date. None when it holds nothing."""
    values = con.execute(f'SELECT typeof("{column}"), "{column}" FROM "{view}" WHERE "{column}" IS NOT NULL').fetchall()
    kinds = {k for k, _ in values}
    if kinds == {"text"} and all(len(v) == 10 and _is_date(v) for _, v in values):
        return "date"
    if kinds == {"text"} and all(len(v) > 10 and _instant(v) for _, v in values):  # datetime.fromisoformat
        aware = {_instant(v).tzinfo is not None for _, v in values}
        return "timestamp with offsets" if aware == {True} else "timestamp" if aware == {False} else "TEXT"
    return {frozenset({"integer"}): "INTEGER", frozenset({"real"}): "FLOAT",
            frozenset({"text"}): "TEXT"}.get(frozenset(kinds))


def _instant(text: str) -> datetime.datetime | None:
    try:
        return datetime.datetime.fromisoformat(text)
    except ValueError:
        return None


def _is_date(text: str) -> bool:
    try:
        datetime.date.fromisoformat(text)
    except ValueError:
        return False
    return True


def _comparable(value):
    """A value as SQLite holds it: a boolean as 0 or 1."""
    if isinstance(value, bool):
        return int(value)
    return value


def _same(parquet_value, sqlite_value) -> bool:
    """Reference for dates and timestamps: Python's ISO 8601 parser, on SQLite's text."""
    if isinstance(parquet_value, datetime.datetime) and isinstance(sqlite_value, str):
        parsed = datetime.datetime.fromisoformat(sqlite_value)
        if parsed.tzinfo is not None:
            return parquet_value == parsed
        return parquet_value == parsed and parquet_value.tzinfo is None
    if isinstance(parquet_value, datetime.date) and isinstance(sqlite_value, str):
        return parquet_value == datetime.date.fromisoformat(sqlite_value)
    if isinstance(parquet_value, decimal.Decimal) and isinstance(sqlite_value, str):
        # reference for exact decimals: Python's decimal module reading SQLite's text (the same number, to the
        # last digit; the Parquet type's scale may add zeros after it)
        return parquet_value == decimal.Decimal(sqlite_value) and parquet_value.as_tuple().exponent <= \
            decimal.Decimal(sqlite_value).as_tuple().exponent
    return _comparable(parquet_value) == sqlite_value


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("parquet")
    generate(out, size=60, seed=3)
    paths = [str(out / "titles.csv"), str(out / "contributions.csv")]
    db, parquet = out / "demo.db", out / "parquet"
    m = build_database(paths, str(db), parquet_dir=str(parquet))
    return out, paths, str(db), parquet, m


@pytest.fixture(scope="module")
def events(tmp_path_factory):
    """Dates and timestamps in the forms exports write them, a date column with a late value that is none."""
    from tests.test_types_16 import _events

    out = tmp_path_factory.mktemp("parquet_events")
    rows = _events()
    path = out / "events.csv"
    with open(path, "w", newline="", encoding="utf-8") as f:
        writer = csv.DictWriter(f, fieldnames=list(rows[0]))
        writer.writeheader()
        writer.writerows(rows)
    db, parquet = out / "events.db", out / "parquet"
    m = build_database([str(path)], str(db), parquet_dir=str(parquet))
    return str(db), parquet, m


def _names(m: dict) -> list[str]:
    return [t["name"] for t in m["tables"]] + [v["name"] for v in m["views"]]


@pytest.mark.parametrize("which", ["demo", "events"])
def test_every_table_and_view_holds_what_the_database_holds(which, request):
    """One file per table and view, its columns and rows those of SQLite (reference: pyarrow's reader)."""
    built = request.getfixturevalue(which)
    db, parquet, m = built[-3:] if which == "demo" else built
    names = _names(m)
    assert sorted(p.stem for p in parquet.glob("*.parquet")) == sorted(names)
    con = sqlite3.connect(db)
    for name in names:
        table = pq.read_table(parquet / f"{name}.parquet")
        cursor = con.execute(f'SELECT * FROM "{name}"')
        columns = [d[0] for d in cursor.description]
        assert table.column_names == columns
        as_sqlite = {r[0]: r for r in cursor.fetchall()}  # the first column is the key, of tables and views
        rows = list(zip(*[table.column(c).to_pylist() for c in columns]))
        assert len(rows) == len(as_sqlite), name
        for r in rows:
            assert all(_same(p, s) for p, s in zip(r, as_sqlite[r[0]])), (name, r, as_sqlite[r[0]])


@pytest.mark.parametrize("which", ["demo", "events"])
def test_types_match_the_database_in_pyarrow_duckdb_and_polars(which, request):
    """Each column's type in pyarrow, DuckDB and Polars is the one its SQLite declared type (or plan type) reads
    as (``EXPECTED``), and each engine counts the rows SQLite counts."""
    import duckdb
    import polars as pl

    built = request.getfixturevalue(which)
    db, parquet, m = built[-3:] if which == "demo" else built
    declared = _sqlite_types(db, m)
    # the export's timestamps written with an offset (``summer`` with two: Parquet keeps the instants, in UTC)
    offsets = {("events", "sent"), ("events", "local"), ("events", "summer")}
    con = sqlite3.connect(db)
    duck = duckdb.connect()
    kinds = set()
    for name in _names(m):
        path = str(parquet / f"{name}.parquet")
        arrow = pq.read_schema(path)
        described = {r[0]: r[1] for r in duck.execute("DESCRIBE SELECT * FROM read_parquet(?)", [path]).fetchall()}
        frame = pl.read_parquet(path)
        count = con.execute(f'SELECT count(*) FROM "{name}"').fetchone()[0]
        assert duck.execute("SELECT count(*) FROM read_parquet(?)", [path]).fetchone()[0] == count == frame.height
        for column, kind in declared[name].items():
            if kind is None:  # a view column holding nothing here: typed all the same
                assert not pa.types.is_null(arrow.field(column).type), (name, column)
                continue
            if (name, column) in offsets:
                kind = "timestamp with offsets"
            if arrow.field(column).metadata and b"normalise.kept_as_text" in arrow.field(column).metadata:
                kind = "TEXT"  # a date or timestamp column some value of which is none (the field says why)
            kinds.add(kind)
            assert (str(arrow.field(column).type), described[column], repr(frame.schema[column])) == EXPECTED[kind], \
                (name, column)
    if which == "events":
        assert {"date", "timestamp", "timestamp with offsets"} <= kinds
        due = pq.read_schema(str(parquet / "events.parquet")).field("due")
        assert due.metadata == {b"normalise.kept_as_text": b"'2024-02-30' is not an ISO 8601 date"}


def test_empty_tables_are_typed_and_combine_with_full_ones(demo, tmp_path):
    """A run whose tables are empty writes them with the same schema as a run whose tables are full, so the
    files of both runs combine: pyarrow's concat_tables (which refuses differing schemas), DuckDB's
    read_parquet of both files and Polars' concat all give the sum of the rows."""
    import duckdb
    import polars as pl

    out, paths, _, full, m = demo
    plan = str(tmp_path / "plan.toml")
    make_plan(paths, plan)
    empty_inputs = []
    for path in paths:  # the same exports, with only their header lines
        with open(path, encoding="utf-8") as f:
            header = f.readline()
        (tmp_path / path.rsplit("/", 1)[1]).write_text(header, encoding="utf-8")
        empty_inputs.append(str(tmp_path / path.rsplit("/", 1)[1]))
    empty = tmp_path / "parquet"
    m_empty = build_database(empty_inputs, str(tmp_path / "empty.db"), plan_path=plan, parquet_dir=str(empty))
    assert _names(m_empty) == _names(m)
    emptied = [t["name"] for t in m_empty["tables"] if not t["rows"]]
    assert {"titles", "person", "contribution_contributors"} <= set(emptied)
    duck = duckdb.connect()
    for name in _names(m):
        a, b = pq.read_table(full / f"{name}.parquet"), pq.read_table(empty / f"{name}.parquet")
        assert b.schema.remove_metadata() == a.schema.remove_metadata() or _kept_apart(a, b), name
        if _kept_apart(a, b):
            continue
        assert pa.concat_tables([a, b]).num_rows == a.num_rows + b.num_rows
        files = [str(full / f"{name}.parquet"), str(empty / f"{name}.parquet")]
        assert duck.execute("SELECT count(*) FROM read_parquet(?)", [files]).fetchone()[0] == a.num_rows + b.num_rows
        assert pl.concat([pl.read_parquet(f) for f in files]).height == a.num_rows + b.num_rows
    assert not any(pa.types.is_null(f.type) for name in emptied for f in pq.read_schema(empty / f"{name}.parquet"))


def _kept_apart(a: pa.Table, b: pa.Table) -> bool:
    """Whether a date or timestamp column is text in one file (a value that is none) and typed in the other."""
    return any(a.schema.field(c).metadata != b.schema.field(c).metadata for c in a.column_names)
