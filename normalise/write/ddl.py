"""The SQL side of a plan: each plan type's SQL type (``TYPES``) and the SQLAlchemy schema of every table, with
its keys, constraints and foreign-key indexes (``metadata_for``), for SQLite and PostgreSQL alike.
"""

from __future__ import annotations

import sqlalchemy as sa

from ..model.plan import Plan

TYPES = {  # the SQL type of each of plan.TYPES
    "integer": sa.BigInteger,
    "real": sa.Float,
    "decimal": sa.Text,  # its text on SQLite; NUMERIC on PostgreSQL where every value comes back so (decimals.py)
    "text": sa.Text,
    "boolean": sa.Boolean,
    "date": sa.Text,  # ISO 8601 text (plan.TEXT_TYPES): SQLite has no date type, and text sorts and compares correctly
    "timestamp": sa.Text,  # (on PostgreSQL, DATE and TIMESTAMP where the text comes back exactly: native_forms)
}


# the SQLAlchemy type of each native form PostgreSQL may hold a column in (postgresql.native_forms)
NATIVE = {"NUMERIC": sa.Numeric(), "DATE": sa.Date(), "TIMESTAMP": sa.DateTime(),
          "TIMESTAMP WITH TIME ZONE": sa.DateTime(timezone=True)}


def metadata_for(plan: Plan, forms: dict | None = None) -> sa.MetaData:
    """SQLAlchemy tables with PRIMARY KEY, FOREIGN KEY, UNIQUE, NOT NULL and foreign-key indexes.

    ``forms`` maps (table, column) to the ``datetimes.TextForm`` of the date and timestamp columns
    PostgreSQL holds in its own types (``native_forms``); every other column has its plan type's ``TYPES``.
    """
    md = sa.MetaData()
    forms = forms or {}
    for t in plan.tables:
        cols = []
        for c in t.columns:
            kind = TYPES[c.type]
            col_type = kind(create_constraint=False) if kind is sa.Boolean else kind()
            if (t.name, c.name) in forms:
                col_type = NATIVE[forms[(t.name, c.name)].sql_type]
            if t.primary_key == [c.name] and c.type == "integer":
                # SQLite makes an INTEGER PRIMARY KEY the table's rowid: no second index to maintain
                col_type = sa.BigInteger().with_variant(sa.INTEGER(), "sqlite")
            cols.append(sa.Column(c.name, col_type, nullable=c.nullable and c.name not in t.primary_key,
                                  unique=c.unique, autoincrement=False))
        args = [sa.PrimaryKeyConstraint(*t.primary_key, name=f"pk_{t.name}")]
        for fk in t.foreign_keys:
            args.append(sa.ForeignKeyConstraint(fk.columns, [f"{fk.references}.{c}" for c in fk.ref_columns],
                                                name=f"fk_{t.name}_{'_'.join(fk.columns)}"))
        for u in t.unique:
            args.append(sa.UniqueConstraint(*u, name=f"uq_{t.name}_{'_'.join(u)}"))
        table = sa.Table(t.name, md, *cols, *args)
        keyed = [t.primary_key] + t.unique + [[c.name] for c in t.columns if c.unique]
        for fk in t.foreign_keys:
            if any(k[: len(fk.columns)] == fk.columns for k in keyed):
                continue  # a key that starts with these columns already indexes them
            sa.Index(f"ix_{t.name}_{'_'.join(fk.columns)}", *[table.c[c] for c in fk.columns])
    return md
