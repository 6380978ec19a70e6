"""Rows and lists a build makes from the plan alone: the name map (every name taken from the input and the SQL
name it became), the members of each entity table, the columns whose occurrences are traced, how a record
table is split, and the order of bookkeeping rows.
"""

from __future__ import annotations

from operator import itemgetter

from ..model.kinds import Kind, Role
from ..model.plan import Plan
from ..model.schema import record_parts, record_row_columns


def name_map(plan: Plan) -> list[tuple]:
    """Every name taken from the data and the SQL name it became: (table, column, name in the input, where).

    Names are mapped to ``[a-z0-9_]`` (``names.sql_name``) and quoted in every
    statement, so none can change the SQL that runs; this table says which is which.
    """
    rows = []
    for record in plan.records:
        rows.append((record.table, None, record.file, f"file {record.path}"))
        for f in record.scalars:
            rows.append((record.table, f.column, f.path[0], f"column of {record.file}"))
        stack = [(record, n) for n in record.nested]
        while stack:
            owner, nested = stack.pop()
            where = f"column {nested.column!r} of {nested.file}"
            if nested.table:
                rows.append((nested.table, None, nested.column + (f".{nested.path}" if nested.path else ""), where))
            table = nested.table or record.table
            for f in nested.row_fields:
                rows.append((table, f.column, ".".join(f.path), f"key in the objects of {where}"))
            stack.extend((nested, child) for child in nested.children)
    for group in plan.entities:
        rows.append((group.table, group.identity_column, group.identity,
                     f"identity key in {', '.join(group.members)}"))
        for f in group.attributes:
            rows.append((group.table, f.column, ".".join(f.path), f"key in {', '.join(group.members)}"))
    return rows


def entity_members(plan: Plan, entity: str) -> list[tuple]:
    """Every column of the written tables that refers to an entity table: (table, foreign key column, input
    column, path of the object inside the element, input file), for bridges and for references alike."""
    out = []

    def visit(nested, path: str, owner_table: str) -> None:
        here = nested.table or owner_table
        if nested.kind == Kind.ENTITY_LIST and nested.entity == entity:
            fk = next(k for k in plan.table(nested.table).foreign_keys if k.references == entity)
            out.append((nested.table, fk.columns[0], nested.column, [], path))
        for f in nested.row_fields:
            if f.entity == entity:
                out.append((here, f.column, nested.column, list(f.path), path))
        for child in nested.children:
            visit(child, path, here)

    for record in plan.records:
        for nested in record.nested:
            visit(nested, record.path, record.table)
    return out


def occurrence_columns(plan: Plan, table: str, fk_column: str) -> tuple:
    """Where in a table's rows the key, the owner, the list position and a foreign key are (None: none)."""
    t = plan.table(table)
    names = [c.name for c in t.columns]
    owner = names.index(t.foreign_keys[0].columns[0]) if t.role in (Role.BRIDGE, Role.CHILD) else None
    position = names.index(t.position_column) if t.position_column else None
    return 0, owner, position, names.index(fk_column)


def record_splits(plan: Plan) -> dict[str, list[tuple]]:
    """Per wide record table: (table, the getter of its columns from a whole row) for it and each of its parts
    (``schema.split_wide_records``); a row is made whole, as for any record, then shared among them."""
    out = {}
    for record in plan.records:
        parts = record_parts(plan, record.table)
        if parts:
            at = {name: j for j, name in enumerate(record_row_columns(record))}
            out[record.table] = [(t.name, itemgetter(*[at[c.name] for c in t.columns]))
                                 for t in [plan.table(record.table), *parts]]
    return out


def meta_order(row: tuple):
    """Bookkeeping rows in file and line order, whatever order the chunks found them in."""
    return tuple((0, "") if v is None else (1, v) if isinstance(v, str) else (2, v) for v in row[:4])
