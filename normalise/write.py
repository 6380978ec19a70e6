"""Write pass: the planned schema and the built rows into a database, through SQLAlchemy.

SQLite databases are written to a temporary file beside the destination and
moved into place only when complete, so a failed run leaves the destination
as it was. Every connection has ``PRAGMA foreign_keys=ON``.
"""

from __future__ import annotations

import os
from pathlib import Path

import sqlalchemy as sa
from sqlalchemy import event

from .errors import NormaliseError
from .plan import Plan
from .views import view_sql

TYPES = {
    "integer": sa.BigInteger,
    "real": sa.Float,
    "text": sa.Text,
    "boolean": sa.Boolean,
    "date": sa.Text,  # ISO 8601 text: SQLite has no date type, and text sorts and compares correctly
    "timestamp": sa.Text,
}


class DestinationExists(NormaliseError):
    """The destination database exists and --replace was not given."""


def metadata_for(plan: Plan) -> sa.MetaData:
    """SQLAlchemy tables with PRIMARY KEY, FOREIGN KEY, UNIQUE, NOT NULL and foreign-key indexes."""
    md = sa.MetaData()
    for t in plan.tables:
        cols = []
        for c in t.columns:
            kind = TYPES[c.type]
            col_type = kind(create_constraint=False) if kind is sa.Boolean else kind()
            cols.append(sa.Column(c.name, col_type, nullable=c.nullable and c.name not in t.primary_key,
                                  unique=c.unique, autoincrement=False))
        args = [sa.PrimaryKeyConstraint(*t.primary_key, name=f"pk_{t.name}")]
        for fk in t.foreign_keys:
            args.append(sa.ForeignKeyConstraint(fk.columns, [f"{fk.references}.{c}" for c in fk.ref_columns],
                                                name=f"fk_{t.name}_{'_'.join(fk.columns)}"))
        for u in t.unique:
            args.append(sa.UniqueConstraint(*u, name=f"uq_{t.name}_{'_'.join(u)}"))
        table = sa.Table(t.name, md, *cols, *args)
        for fk in t.foreign_keys:
            sa.Index(f"ix_{t.name}_{'_'.join(fk.columns)}", *[table.c[c] for c in fk.columns])
    return md


def _quote(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def _foreign_keys_on(dbapi_connection, _record) -> None:
    cursor = dbapi_connection.cursor()
    cursor.execute("PRAGMA foreign_keys=ON")
    cursor.close()


def sqlite_engine(path: str) -> sa.Engine:
    engine = sa.create_engine(f"sqlite:///{path}")
    event.listen(engine, "connect", _foreign_keys_on)
    return engine


def write_sqlite(plan: Plan, rows: dict[str, list[tuple]], order: list[str], destination: str,
                 replace: bool = False) -> dict:
    """Write a complete SQLite database at ``destination``; returns SQLite's own integrity checks."""
    destination = os.fspath(destination)
    if os.path.exists(destination) and not replace:
        raise DestinationExists(f"{destination} exists; use --replace to overwrite it")
    Path(destination).parent.mkdir(parents=True, exist_ok=True)
    temporary = f"{destination}.partial-{os.getpid()}"
    if os.path.exists(temporary):
        os.remove(temporary)
    engine = sqlite_engine(temporary)
    try:
        md = metadata_for(plan)
        with engine.begin() as conn:
            for name in order:  # indexes come after the rows: building them once is faster
                conn.execute(sa.schema.CreateTable(md.tables[name]))
            raw = conn.connection.driver_connection
            cursor = raw.cursor()
            for name in order:
                data = rows[name]
                if not data:
                    continue
                width = len(md.tables[name].columns)
                quoted = ", ".join(conn.dialect.identifier_preparer.quote(c.name) for c in md.tables[name].columns)
                sql = (f"INSERT INTO {conn.dialect.identifier_preparer.quote(name)} ({quoted}) "
                       f"VALUES ({', '.join('?' * width)})")
                cursor.executemany(sql, data)
            for name in order:
                for index in md.tables[name].indexes:
                    index.create(conn)
            for view in plan.views:
                conn.exec_driver_sql(f"CREATE VIEW {_quote(view.name)} AS {view_sql(view, plan, 'sqlite')}")
        with engine.connect() as conn:
            violations = conn.exec_driver_sql("PRAGMA foreign_key_check").fetchall()
            integrity = conn.exec_driver_sql("PRAGMA integrity_check").scalar()
        engine.dispose()
        os.replace(temporary, destination)
    except BaseException:
        engine.dispose()
        if os.path.exists(temporary):
            os.remove(temporary)
        raise
    return {"foreign_key_violations": len(violations), "integrity_check": integrity}


def write_parquet(database: str, plan: Plan, directory: str) -> list[str]:
    """Every table and view of a written SQLite database as a Parquet file; returns the paths."""
    import sqlite3

    import pyarrow as pa
    import pyarrow.parquet as pq

    Path(directory).mkdir(parents=True, exist_ok=True)
    written = []
    arrow_types = {"integer": pa.int64(), "real": pa.float64(), "boolean": pa.bool_()}
    with sqlite3.connect(database) as conn:
        names = [t.name for t in plan.tables] + [v.name for v in plan.views]
        declared = {t.name: {c.name: c.type for c in t.columns} for t in plan.tables}
        for name in names:
            cursor = conn.execute(f"SELECT * FROM {_quote(name)}")
            columns = [d[0] for d in cursor.description]
            data = list(zip(*cursor.fetchall())) or [[] for _ in columns]
            arrays = []
            for column, values in zip(columns, data):
                kind = declared.get(name, {}).get(column)
                values = list(values)
                if kind == "boolean":
                    values = [None if v is None else bool(v) for v in values]
                arrays.append(pa.array(values, type=arrow_types.get(kind)))
            path = os.path.join(directory, f"{name}.parquet")
            pq.write_table(pa.Table.from_arrays(arrays, names=columns), path)
            written.append(path)
    return written
