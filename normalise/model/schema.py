"""Table definitions from the plan's decisions (part of the plan pass)."""

from __future__ import annotations

from .kinds import Kind, Role
from .names import Namer, singular
from .plan import META_TABLES, Column, FieldMap, ForeignKey, NestedColumn, Plan, RecordSource, Table

POSITION = "list_position"

# A table may have 1,600 columns on PostgreSQL (PostgreSQL documentation, "Appendix K. PostgreSQL Limits") and
# 2,000 on SQLite as built by default (SQLITE_MAX_COLUMN, sqlite.org/limits.html). A record table wider than the
# lower of the two is split whichever backend is written, so one plan gives the same tables on both.
POSTGRESQL_MAX_COLUMNS = 1600
SQLITE_MAX_COLUMNS = 2000
MAX_COLUMNS = min(POSTGRESQL_MAX_COLUMNS, SQLITE_MAX_COLUMNS)
# The columns of each table of a split record. PostgreSQL also needs a row to fit in one 8 kB page (Appendix K,
# "further limited by tuple size fitting on a single page"): 500 eight-byte integers take half of one.
PART_COLUMNS = 500


def add_tables(plan: Plan) -> None:
    """Fill ``plan.tables`` from the record sources and entity groups."""
    plan.tables = []
    for group in plan.entities:
        cols = [Column(group.key_column, "integer", nullable=False),
                Column(group.identity_column, group.identity_type, nullable=False, unique=True,
                       source=group.identity)]
        cols += [Column(f.column, f.type, source=".".join(f.path), scale=f.scale) for f in group.attributes]
        plan.tables.append(Table(group.table, "entity", cols, [group.key_column],
                                 natural_key=[group.identity_column],
                                 sources=[_source(m) for m in group.members]))
    for record in plan.records:
        cols = [Column(record.key_column, "integer", nullable=False)]
        for f in record.scalars:
            is_key = [f.column] == record.natural_key
            cols.append(Column(f.column, f.type, nullable=not is_key, unique=is_key,
                               source=f.path[0], scale=f.scale))
        for nested in record.nested:
            if nested.kind == Kind.OBJECT_COLUMNS:
                cols += [Column(f.column, f.type, source=".".join([nested.column, *f.path]), scale=f.scale)
                         for f in nested.row_fields]
        fks = [fk for nested in record.nested if nested.kind == Kind.OBJECT_COLUMNS
               for fk in _references(plan, nested.row_fields)]
        if record.parent_path:  # one-to-many: each record belongs to a record of the main export
            parent = next(r for r in plan.records if r.path == record.parent_path)
            column = next(f.column for f in record.scalars if f.path == [record.parent_column])
            fks.append(ForeignKey([column], parent.table, [parent.key_column]))
        for f, column in reference_columns(record):  # values that are natural keys of a record table
            target = next(r for r in plan.records if r.table == f.references)
            cols.append(Column(column, "integer"))
            fks.append(ForeignKey([column], target.table, [target.key_column]))
        plan.tables.append(Table(record.table, "record", cols, [record.key_column],
                                 natural_key=list(record.natural_key), foreign_keys=fks,
                                 sources=[{"file": record.file, "column": None}]))
        for nested in record.nested:
            _nested_tables(plan, nested, record.table, record.key_column)
    split_wide_records(plan)
    for name, meta in META_TABLES.items():
        cols = [Column(f"{singular(name)}_sk", "integer", nullable=False)]
        cols += [Column(c, t, nullable=nullable) for c, t, nullable in meta.columns]
        plan.tables.append(Table(name, meta.role, cols, [f"{singular(name)}_sk"]))


def _source(member: str, path: str = "") -> dict:
    file, _, column = member.partition(":")
    return {"file": file, "column": column + (("." + path) if path else "")}


def reference_columns(record: RecordSource) -> list[tuple[FieldMap, str]]:
    """The scalar columns of a record that refer to a record table, each with its foreign-key column's name.

    The column keeps its values as given (the lossless proof reads them); the foreign-key column beside it,
    at the end of the record table, holds the referenced record's surrogate key, NULL when no record has the
    value as its natural key.
    """
    taken = [record.key_column] + [f.column for f in record.scalars]
    taken += [f.column for n in record.nested if n.kind == Kind.OBJECT_COLUMNS for f in n.row_fields]
    names = Namer(taken)
    return [(f, names(f"{f.column}_sk")) for f in record.scalars if f.references]


def _reference_value_table(plan: Plan, table: Table, references: str) -> None:
    """A value table whose values are natural keys of a record table: each value row names its record (NULL
    when there is none), so ``bridge JOIN value JOIN record`` leads from a list to the records it names."""
    target = next(r for r in plan.records if r.table == references)
    column = Namer([c.name for c in table.columns])(target.key_column)
    table.columns.append(Column(column, "integer"))
    table.foreign_keys.append(ForeignKey([column], target.table, [target.key_column]))


def _references(plan: Plan, fields) -> list[ForeignKey]:
    """The foreign keys of a row's references to entities (``FieldMap.entity``)."""
    return [ForeignKey([f.column], f.entity, [plan.entity_group(f.entity).key_column]) for f in fields if f.entity]


def own_key(table: str) -> str:
    return f"{table}_sk"


def _nested_tables(plan: Plan, nested: NestedColumn, owner: str, owner_key: str) -> None:
    if nested.kind in (Kind.OBJECT_COLUMNS, "scalar"):
        for child in nested.children:
            _nested_tables(plan, child, owner, owner_key)
        return
    source = [_source(f"{nested.file}:{nested.column}", nested.path)]
    key = own_key(nested.table)
    names = Namer([key, owner_key, POSITION])
    cols = [Column(key, "integer", nullable=False), Column(owner_key, "integer", nullable=False)]
    fks = [ForeignKey([owner_key], owner, [owner_key])]
    unique = [[owner_key, POSITION]]
    position = POSITION
    role = "child"
    if nested.kind == Kind.ENTITY_LIST:
        group = plan.entity_group(nested.entity)
        entity_column = names(group.key_column)  # the owner's key column may carry the same name
        cols.append(Column(entity_column, "integer", nullable=False))
        fks.append(ForeignKey([entity_column], group.table, [group.key_column]))
        role = "bridge"
    elif nested.kind == Kind.VALUE_LIST:
        value_key = own_key(nested.entity)
        value_column = singular(nested.entity) if not nested.entity.endswith("_value") else "value"
        plan.tables.append(Table(nested.entity, "entity",
                                 [Column(value_key, "integer", nullable=False),
                                  Column(value_column, nested.value_type, nullable=False, unique=True)],
                                 [value_key], natural_key=[value_column], sources=source))
        if nested.references:
            _reference_value_table(plan, plan.tables[-1], nested.references)
        value_column = names(value_key)
        cols.append(Column(value_column, "integer", nullable=False))
        fks.append(ForeignKey([value_column], nested.entity, [value_key]))
        role = "bridge"
    elif nested.kind == Kind.OBJECT_CHILD:
        position = None
        unique = [[owner_key]]
    if position:
        cols.append(Column(POSITION, "integer", nullable=False))
    cols += [Column(f.column, f.type, source=".".join(f.path), scale=f.scale) for f in nested.row_fields]
    fks += _references(plan, nested.row_fields)
    if nested.keyed:  # an object keyed by data: one row per owner and key (a repeating group, first normal form)
        if nested.kind == Kind.ENTITY_LIST:
            key_column = entity_column if nested.identity == nested.keyed else None
        else:
            key_column = next((f.column for f in nested.row_fields if f.path == [nested.keyed]), None)
        if key_column:
            unique.append([owner_key, key_column])
    plan.tables.append(Table(nested.table, role, cols, [key], position_column=position,
                             foreign_keys=fks, unique=unique, sources=source))
    for child in nested.children:
        _nested_tables(plan, child, nested.table, key)


def split_wide_records(plan: Plan) -> None:
    """Split each record table wider than ``MAX_COLUMNS`` into 1:1 tables of at most ``PART_COLUMNS`` columns.

    The record table keeps its surrogate key, its natural key and every foreign-key column (so joins, views
    and references find them where they always are), then the other columns in their order until it is
    full; the rest go, in order, to ``<record>_part_2``, ``<record>_part_3``, ... (role "record_part"), each
    keyed by the record's surrogate key, which is also its foreign key to the record table. Every record has
    a row in every part. The split follows from the columns alone, so a replayed plan splits the same way.

    Example:
        >>> from normalise.model.plan import Plan, Table, Column
        >>> plan = Plan(tables=[Table("items", "record", [Column("items_sk", "integer", nullable=False)]
        ...                           + [Column(f"c{k}", "text") for k in range(1700)], ["items_sk"])])
        >>> split_wide_records(plan)
        >>> [(t.name, t.role, len(t.columns)) for t in plan.tables]  # doctest: +NORMALIZE_WHITESPACE
        [('items', 'record', 500), ('items_part_2', 'record_part', 500), ('items_part_3', 'record_part', 500),
         ('items_part_4', 'record_part', 204)]
    """
    names = Namer([t.name for t in plan.tables] + list(META_TABLES))
    for table in [t for t in plan.tables if t.role == Role.RECORD and len(t.columns) > MAX_COLUMNS]:
        key = table.primary_key[0]
        held = {key, *table.natural_key, *(c for fk in table.foreign_keys for c in fk.columns)}
        rest = [c for c in table.columns if c.name not in held]
        room = max(0, PART_COLUMNS - len(held))
        kept = held | {c.name for c in rest[:room]}
        table.columns = [c for c in table.columns if c.name in kept]
        rest = rest[room:]
        size = PART_COLUMNS - 1  # and the key
        parts = [Table(names(f"{table.name}_part_{n}"), "record_part",
                       [Column(key, "integer", nullable=False), *rest[start:start + size]], [key],
                       foreign_keys=[ForeignKey([key], table.name, [key])], sources=list(table.sources))
                 for n, start in enumerate(range(0, len(rest), size), start=2)]
        at = plan.tables.index(table) + 1
        plan.tables[at:at] = parts


def record_parts(plan: Plan, table: str) -> list[Table]:
    """The 1:1 tables holding the rest of a wide record table's columns, in order (``split_wide_records``)."""
    return [t for t in plan.tables if t.role == Role.RECORD_PART and t.foreign_keys[0].references == table]


def record_row_columns(record: RecordSource) -> list[str]:
    """The columns of a record's row as the build makes it, in order, before a wide one is split: its key,
    its scalars, the fields of its object columns, the keys of the records its values name."""
    names = [record.key_column] + [f.column for f in record.scalars]
    names += [f.column for n in record.nested if n.kind == Kind.OBJECT_COLUMNS for f in n.row_fields]
    return names + [column for _, column in reference_columns(record)]
