"""Issue 16: exact decimals. A column of fixed-point numbers whose text a float does not give back ("12.50")
is typed ``decimal``: its text on SQLite, NUMERIC on PostgreSQL, decimal128 in Parquet; every value comes back
as written.

References, named beside each check:

* a real PostgreSQL server: ``CAST(text AS NUMERIC)`` and back to text (PostgreSQL documentation, "8.1.2.
  Arbitrary Precision Numbers": NUMERIC keeps the scale it is given); ``format_type`` of ``pg_attribute``;
* Python's ``repr(float(text))`` (the shortest text of the nearest double, Python language reference and
  ``float.__repr__``): a column whose every text it gives back stays ``real``;
* pyarrow, DuckDB and Polars reading the Parquet file (their own decimal types);
* the input file itself, for the text each value must have.
"""

from __future__ import annotations

import csv
import decimal
import sqlite3

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from normalise.model.decimals import is_decimal_text
from normalise.infer import scalar_column_type
from normalise.pipeline import build_database
from tests.test_postgresql import _drop, _new_schema, pg, pg_url  # noqa: F401 (fixtures)
from tests.test_types_16 import _column_types

# invented order lines: prices with two places, a weight with three, a rate that a float gives back
def _ident(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


ROWS = [("L1", "12.50", "0.250", "0.5"), ("L2", "3.10", "1.000", "0.25"), ("L3", "100.00", "12.125", "1.5"),
        ("L4", "", "", ""), ("L5", "-7.05", "0.001", "2.0")]


@pytest.mark.parametrize("values, expected", [
    (["12.50", "3.10"], "decimal"),  # repr(float("12.50")) is "12.5": a float drops the digit
    (["12.5", "3.1"], "real"),  # repr gives each text back
    (["12.50", "3"], "decimal"),
    (["-0.00", "1.50"], "text"),  # NUMERIC has no negative zero
    (["+1.50", "2.00"], "text"),  # nor a plus sign
    (["1.50", "1e3"], "text"),  # an exponent is no fixed-point numeral
    (["007", "12"], "text"),  # leading zeros: codes (unchanged)
])
def test_the_type_a_column_of_numbers_gets(values, expected):
    assert scalar_column_type(values) == expected


@pytest.fixture(scope="module")
def lines(tmp_path_factory):
    out = tmp_path_factory.mktemp("lines")
    path = out / "lines.csv"
    with open(path, "w", newline="", encoding="utf-8") as f:
        writer = csv.writer(f)
        writer.writerow(["line_id", "price", "weight", "rate"])
        writer.writerows(ROWS)
    db = out / "lines.db"
    built = build_database(str(path), str(db), parquet_dir=str(out / "parquet"))
    return path, db, out / "parquet", built


def test_sqlite_keeps_each_text(lines):
    _, db, _, built = lines
    types = {c["name"]: c["type"] for t in built.tables if t["name"] == "lines" for c in t["columns"]}
    assert (types["price"], types["weight"], types["rate"]) == ("decimal", "decimal", "real")
    with sqlite3.connect(db) as con:
        got = con.execute("SELECT line_id, price, weight, typeof(price) FROM lines ORDER BY line_id").fetchall()
    assert [(r[0], r[1], r[2]) for r in got] == [(k, p or None, w or None) for k, p, w, _ in ROWS]
    assert {r[3] for r in got} == {"text", "null"}  # SQLite's typeof: no float rounding


def test_parquet_is_decimal_in_every_reader(lines):
    """pyarrow, DuckDB and Polars read decimal128(38, scale); the numbers are the texts' (``decimal.Decimal``)."""
    import duckdb
    import polars as pl
    import pyarrow.parquet as pq

    _, _, parquet, _ = lines
    table = pq.read_table(parquet / "lines.parquet")
    assert str(table.schema.field("price").type) == "decimal128(38, 2)"
    assert str(table.schema.field("weight").type) == "decimal128(38, 3)"
    assert table.column("price").to_pylist() == [decimal.Decimal(p) if p else None for _, p, _, _ in ROWS]
    assert [str(v) for v in table.column("price").to_pylist() if v is not None] == [p for _, p, _, _ in ROWS if p]
    duck = duckdb.sql(f"SELECT typeof(price), typeof(weight) FROM '{parquet / 'lines.parquet'}' LIMIT 1").fetchall()[0]
    assert duck == ("DECIMAL(38,2)", "DECIMAL(38,3)")
    frame = pl.read_parquet(parquet / "lines.parquet")
    assert frame.schema["price"] == pl.Decimal(38, 2) and frame.height == len(ROWS)


def test_postgresql_holds_numeric_and_gives_each_text_back(lines, pg, pg_url):
    path, _, _, _ = lines
    name = _new_schema()
    try:
        build_database(str(path), pg_url, schema=name)
        types = _column_types(pg, name, "lines")
        assert (types["price"], types["weight"], types["rate"]) == ("numeric", "numeric", "double precision")
        back = pg.execute(f'SELECT line_id, price::text, weight::text FROM {_ident(name)}.lines ORDER BY line_id').fetchall()
        assert back == [(k, p or None, w or None) for k, p, w, _ in ROWS]
    finally:
        _drop(pg, name)


def test_a_late_value_that_is_no_numeral_keeps_text_on_postgresql(tmp_path, pg, pg_url):
    """The type is inferred from the first 5,000 records; a later "n/a" keeps the column TEXT there (said in
    the manifest's ``kept_as_text``), never a lost value."""
    path = tmp_path / "late.csv"
    with open(path, "w", newline="", encoding="utf-8") as f:
        writer = csv.writer(f)
        writer.writerow(["line_id", "price"])
        writer.writerows([(f"L{k}", f"{k}.50") for k in range(5_005)] + [("L9999", "n/a")])
    name = _new_schema()
    try:
        built = build_database(str(path), pg_url, schema=name)
        assert _column_types(pg, name, "late")["price"] == "text"
        assert built["kept_as_text"] == {"late.price": "'n/a' is not a decimal numeral NUMERIC gives back as written"}
        assert pg.execute(f'SELECT price FROM {_ident(name)}.late WHERE line_id = %s', ("L9999",)).fetchone() == ("n/a",)
    finally:
        _drop(pg, name)


@given(st.decimals(allow_nan=False, allow_infinity=False).map(str) | st.from_regex(r"-?(0|[1-9][0-9]{0,5})(\.[0-9]{1,4})?|[-+]?0+[0-9]*(\.[0-9]*)?", fullmatch=True))
@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
def test_is_decimal_text_is_what_numeric_gives_back(pg, text):
    """``is_decimal_text`` holds exactly when PostgreSQL's NUMERIC gives the text back as written.
    Reference: a real PostgreSQL server."""
    from psycopg import errors

    try:
        with pg.transaction():
            back = pg.execute("SELECT CAST(%s AS NUMERIC)::text", (text,)).fetchone()[0]
    except (errors.InvalidTextRepresentation, errors.NumericValueOutOfRange):
        back = None
    assert is_decimal_text(text) == (back == text), (text, back)
