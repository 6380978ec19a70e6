"""Parquet: one file per table and view, with the plan's explicit Arrow schema (empty tables typed alike)."""

from __future__ import annotations

import os
from datetime import timezone
from pathlib import Path

from ..model.names import quote_name as _quote
from ..model.plan import Plan

ARROW_TYPES = {"integer": "int64", "real": "float64", "boolean": "bool", "text": "string"}  # pyarrow type names


def arrow_field(name: str, type_: str, values: list, scale: int | None = None):
    """The Arrow field of a column of a plan type, and its values as Arrow takes them.

    Integers are int64, reals float64, booleans bool (SQLite's 0 and 1), text string; a date column is
    date32 and a timestamp column timestamp in microseconds, in UTC (``tz="UTC"``) when its values carry
    offsets (Arrow keeps the instant; Apache Arrow columnar format, "Timestamp"), when every value is one
    (``datetimes.parse``). Otherwise, and for a timestamp column whose values mix offsets and none, the
    column stays ISO 8601 text, and the field's metadata says why (``normalise.kept_as_text``). An empty
    column has the type of a full one (a timestamp column without offsets).

    Example:
        >>> arrow_field("day", "date", ["2024-01-31", None])
        (pyarrow.Field<day: date32[day]>, [datetime.date(2024, 1, 31), None])
        >>> arrow_field("sent", "timestamp", ["2024-01-31T09:30:00+01:00"])[0]
        pyarrow.Field<sent: timestamp[us, tz=UTC]>
        >>> arrow_field("due", "date", ["2024-02-30"])[0].metadata
        {b'normalise.kept_as_text': b"'2024-02-30' is not an ISO 8601 date"}
    """
    import pyarrow as pa

    from ..model.datetimes import parse

    if type_ in ("date", "timestamp"):
        parsed = [None if v is None else parse(type_, v) for v in values]
        bad = next((v for v, p in zip(values, parsed) if v is not None and p is None), None)
        zones = {p.utcoffset() is not None for p in parsed if p is not None} if type_ == "timestamp" else set()
        if bad is not None or len(zones) > 1:
            why = f"{bad!r} is not an ISO 8601 {type_}" if bad is not None else "values with and without offsets"
            return pa.field(name, pa.string(), metadata={"normalise.kept_as_text": why}), values
        if type_ == "date":
            return pa.field(name, pa.date32()), parsed
        if zones == {True}:
            return pa.field(name, pa.timestamp("us", tz="UTC")), [
                None if p is None else p.astimezone(timezone.utc) for p in parsed]
        return pa.field(name, pa.timestamp("us")), parsed
    if type_ == "decimal":
        from ..model.decimals import arrow_decimal

        typed = arrow_decimal(values, scale)
        if typed is None:
            return pa.field(name, pa.string(), metadata={"normalise.kept_as_text": f"a value of more places than "
                                                         f"the plan's scale ({scale}) or more than 38 digits: "
                                                         "decimal128 would not hold it exactly"}), values
        return pa.field(name, typed[0]), typed[1]
    if type_ == "boolean":
        values = [None if v is None else bool(v) for v in values]
    return pa.field(name, pa.type_for_alias(ARROW_TYPES[type_])), values


def write_parquet(database: str, plan: Plan, directory: str) -> list[str]:
    """Every table and view of a written SQLite database as a Parquet file; returns the paths.

    Each file has the plan's types as an explicit Arrow schema (``arrow_field``), so an empty table is typed
    like a full one and the files of two runs combine.
    """
    import sqlite3

    import pyarrow as pa
    import pyarrow.parquet as pq

    from ..model.views import view_columns

    Path(directory).mkdir(parents=True, exist_ok=True)
    written = []
    relations = [(t.name, [(c.name, c.type, c.scale) for c in t.columns]) for t in plan.tables]
    relations += [(v.name, [(c.name, c.type, None) for c in view_columns(v, plan)]) for v in plan.views]
    with sqlite3.connect(database) as conn:
        for name, columns in relations:
            rows = conn.execute(f"SELECT {', '.join(_quote(c) for c, _, _ in columns)} FROM {_quote(name)}").fetchall()
            data = list(zip(*rows)) or [() for _ in columns]
            fields, arrays = [], []
            for (column, type_, scale), values in zip(columns, data):
                field, values = arrow_field(column, type_, list(values), scale)
                fields.append(field)
                arrays.append(pa.array(values, type=field.type))
            path = os.path.join(directory, f"{name}.parquet")
            pq.write_table(pa.Table.from_arrays(arrays, schema=pa.schema(fields)), path)
            written.append(path)
    return written
