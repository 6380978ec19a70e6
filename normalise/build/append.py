"""Appending to a database built from the same plan (``build --append``).

The new records get keys after the existing ones (record key = the largest
key already there + the line), entities and values already in the database
keep their rows and keys (keys are hashes of natural keys, so a shared entity
gets the same key), natural keys already there are set aside as duplicates,
and the bookkeeping tables go on numbering. The database must have exactly the
tables and columns the plan makes; otherwise nothing is written.
"""

from __future__ import annotations

import sqlite3

import sqlalchemy as sa

from ..model.errors import EXIT_USAGE, NormaliseError
from ..model.kinds import Role
from ..model.names import quote_name as _q
from ..model.plan import META_ROLES, Plan
from .values import canonical, value_text


class SchemaMismatch(NormaliseError):
    """The database was not built from this plan: --append would mix two models (a usage error)."""

    exit_code = EXIT_USAGE


def read_state(database: str, plan: Plan) -> dict:
    """What the existing database already holds, after checking that its tables are the plan's."""
    columns = _columns(database, [t.name for t in plan.tables])
    con = sqlite3.connect(database)
    try:
        problems = []
        for t in plan.tables:
            found = columns.get(t.name, [])
            wanted = [c.name for c in t.columns]
            if not found:
                problems.append(f"table {t.name} is missing")
            elif found != wanted:
                problems.append(f"table {t.name} has columns {', '.join(found)}; the plan makes {', '.join(wanted)}")
        if problems:
            raise SchemaMismatch(f"{database} was not built from this plan, so nothing was appended: "
                                 + "; ".join(problems[:5]) + ("; ..." if len(problems) > 5 else "")
                                 + ". Append with the plan it was built from (--plan), or rebuild with --replace")
        state = {"record_offset": {}, "natural_keys": {}, "entities": {}, "values": {}, "meta_offset": {}}
        for record in plan.records:
            key = record.key_column
            state["record_offset"][record.table] = con.execute(
                f"SELECT coalesce(max({_q(key)}), 0) FROM {_q(record.table)}").fetchone()[0]
            if record.natural_key:
                state["natural_keys"][record.table] = {
                    (str(v) if isinstance(v, (int, float)) else v): sk for sk, v in con.execute(
                        f"SELECT {_q(key)}, {_q(record.natural_key[0])} FROM {_q(record.table)}")}
        for group in plan.entities:
            rows = con.execute(f"SELECT * FROM {_q(group.table)}").fetchall()
            state["entities"][group.table] = {canonical(r[1], group.identity_type): r for r in rows}
        for t in plan.tables:
            if t.role == Role.ENTITY and t.name not in state["entities"]:  # tables of scalar values
                value_type = t.columns[1].type
                state["values"][t.name] = {value_text(v if value_type != "boolean" else bool(v), value_type): (sk, v)
                                           for sk, v, *_ in con.execute(f"SELECT * FROM {_q(t.name)}")}
                if len(t.columns) > 2:  # a value list whose values name records: which value rows do
                    state.setdefault("value_links", {})[t.name] = dict(
                        con.execute(f"SELECT {_q(t.columns[0].name)}, {_q(t.columns[2].name)} FROM {_q(t.name)}"))
            if t.role in META_ROLES:
                state["meta_offset"][t.name] = con.execute(
                    f"SELECT coalesce(max({_q(t.primary_key[0])}), 0) FROM {_q(t.name)}").fetchone()[0]
        return state
    finally:
        con.close()


def _columns(database: str, tables: list[str]) -> dict[str, list[str]]:
    """The columns of each of ``tables`` the database has, in order, from its catalog (``sqlalchemy.inspect``).
    Generated columns are left out, as ``PRAGMA table_info`` leaves them out: the rows appended never name them."""
    engine = sa.create_engine(sa.URL.create("sqlite", database=database), poolclass=sa.pool.NullPool)
    try:
        catalog = sa.inspect(engine)
        return {name: [c["name"] for c in catalog.get_columns(name) if "computed" not in c]
                for name in tables if catalog.has_table(name)}
    finally:
        engine.dispose()


def offset_record_keys(plan: Plan, exports: list, state: dict) -> None:
    """New records get keys after the existing ones: the largest key there plus the line."""
    for record in plan.records:
        offset = state["record_offset"].get(record.table, 0)
        for export in exports:
            if export.path == record.path:
                keys = export.record_keys or export.lines
                export.record_keys = [offset + k for k in keys]
