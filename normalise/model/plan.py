"""Plan pass: the relational model as plain data.

A plan says which tables will be made, with which keys, from which input
columns; it holds no data. ``infer_plan`` derives one from decoded exports;
``build`` executes it. Everything here is dataclasses of strings, numbers and
lists, so a plan can be printed, compared, saved and replayed.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields
from typing import ClassVar, NamedTuple

from .kinds import Kind, Role, Type
from .settings import Settings

TYPES = tuple(Type)  # a column's type, as plans and plan files name it (kinds.Type)
TEXT_TYPES = (Type.TEXT, Type.DECIMAL, Type.DATE, Type.TIMESTAMP)  # the types whose values are text


class MetaTable(NamedTuple):
    """A bookkeeping table: its role, and its columns after the surrogate key as (name, type, nullable)."""

    role: Role
    columns: tuple[tuple[str, Type, bool], ...]


# The bookkeeping tables every database has, in the order they are made and loaded: what the run did not
# load as data, kept so that every input row, nested element and value is accounted for.
META_TABLES = {
    "rejected_rows": MetaTable(Role.REJECTED, (("file", Type.TEXT, False), ("line", Type.INTEGER, False),
                                            ("reason", Type.TEXT, False), ("raw", Type.TEXT, False))),
    "set_aside_rows": MetaTable(Role.SET_ASIDE, (("file", Type.TEXT, False), ("line", Type.INTEGER, False),
                                              ("natural_key", Type.TEXT, True), ("reason", Type.TEXT, False),
                                              ("kept_line", Type.INTEGER, True), ("cells", Type.TEXT, False))),
    "unmatched_rows": MetaTable(Role.UNMATCHED, (("file", Type.TEXT, False), ("line", Type.INTEGER, False),
                                              ("join_key", Type.TEXT, True), ("reason", Type.TEXT, False),
                                              ("cells", Type.TEXT, False))),
    "quarantined_cells": MetaTable(Role.QUARANTINE, (("file", Type.TEXT, False), ("line", Type.INTEGER, False),
                                                  ("column_name", Type.TEXT, False), ("position", Type.INTEGER, True),
                                                  ("excerpt", Type.TEXT, False), ("message", Type.TEXT, False))),
    "attribute_variants": MetaTable(Role.VARIANTS, (("entity_table", Type.TEXT, False),
                                                 ("entity_sk", Type.INTEGER, False),
                                                 ("natural_key", Type.TEXT, False), ("attribute", Type.TEXT, False),
                                                 ("value", Type.TEXT, True), ("occurrences", Type.INTEGER, False),
                                                 ("chosen", Type.BOOLEAN, False))),
    # a value the model's columns cannot give back exactly, kept verbatim (original: Python literal text
    # that ast.literal_eval reads back; NULL when the key was absent), at its place in a row
    "value_traces": MetaTable(Role.TRACES, (("table_name", Type.TEXT, False), ("row_sk", Type.INTEGER, False),
                                         ("owner_sk", Type.INTEGER, True), ("position", Type.INTEGER, True),
                                         ("column_name", Type.TEXT, False), ("path", Type.TEXT, False),
                                         ("reason", Type.TEXT, False), ("original", Type.TEXT, True),
                                         ("file", Type.TEXT, True), ("line", Type.INTEGER, True))),
    # every name taken from the data (file, header, object key) and the SQL name it was given
    "name_map": MetaTable(Role.NAMES, (("table_name", Type.TEXT, False), ("column_name", Type.TEXT, True),
                                    ("name_in_input", Type.TEXT, False), ("found_in", Type.TEXT, False))),
    # what the data dictionary says of every table, view and column (describe.descriptions); SQLite keeps no
    # comments, PostgreSQL has them also as COMMENT ON
    "descriptions": MetaTable(Role.DESCRIPTIONS, (("table_name", Type.TEXT, False),
                                                   ("column_name", Type.TEXT, True),
                                               ("description", Type.TEXT, False))),
}
META_ROLES = frozenset(t.role for t in META_TABLES.values())
ROLES = tuple(Role)
assert set(ROLES) == {Role.RECORD, Role.RECORD_PART, Role.ENTITY, Role.BRIDGE, Role.CHILD} | META_ROLES


class Sealable:
    """A part of a plan that can be sealed (``seal``): once the plan is made, setting a field raises, so no pass
    after planning can change a decision under the ones that follow it. (Lists inside stay lists: that no pass
    changes them either is what ``tests/test_plan_untouched_14.py`` checks.)"""

    def __setattr__(self, name, value):
        if self.__dict__.get("_sealed"):
            raise AttributeError(f"the plan is made: {type(self).__name__}.{name} cannot be set now (every pass after "
                                 "planning reads the plan; a new decision makes a new plan)")
        super().__setattr__(name, value)


def seal(plan: Plan) -> Plan:
    """``plan`` with every part of it sealed (``Sealable``); returned for chaining.

    Example:
        >>> p = seal(Plan(tables=[Table("t", "record", [Column("t_sk", "integer")], ["t_sk"])]))
        >>> p.tables[0].columns[0].type = "text"
        Traceback (most recent call last):
        ...
        AttributeError: the plan is made: Column.type cannot be set now (every pass after planning reads the plan; a new decision makes a new plan)
    """
    seen = set()

    def walk(value):
        if isinstance(value, (list, tuple)):
            for v in value:
                walk(v)
        elif isinstance(value, dict):
            for v in value.values():
                walk(v)
        elif isinstance(value, Sealable) and id(value) not in seen:
            seen.add(id(value))
            for f in fields(value):
                walk(getattr(value, f.name))
            value.__dict__["_sealed"] = True

    walk(plan)
    return plan


class _Named(Sealable):
    """A dataclass whose fields named in ``_names`` hold members of an enum (``kinds``): text given is converted
    as it is set, at construction or later, so an unknown name fails where it is set."""

    _names: ClassVar[dict] = {}

    def __setattr__(self, name, value):
        convert = self._names.get(name)
        super().__setattr__(name, value if convert is None or value is None else convert(value))


@dataclass
class Column(_Named):
    name: str
    type: Type
    nullable: bool = True
    unique: bool = False
    source: str | None = None  # where the values come from: "file:column" or a path inside it
    scale: int | None = None  # a decimal's places (FieldMap.scale)
    _names: ClassVar[dict] = {"type": Type}



@dataclass
class ForeignKey(Sealable):
    columns: list[str]
    references: str
    ref_columns: list[str]


@dataclass
class Table(_Named):
    name: str
    role: Role
    columns: list[Column]
    primary_key: list[str]
    natural_key: list[str] = field(default_factory=list)
    position_column: str | None = None
    foreign_keys: list[ForeignKey] = field(default_factory=list)
    unique: list[list[str]] = field(default_factory=list)
    sources: list[dict] = field(default_factory=list)  # [{"file": str, "column": str | None}]
    _names: ClassVar[dict] = {"role": Role}


    def column(self, name: str) -> Column:
        for c in self.columns:
            if c.name == name:
                return c
        raise KeyError(f"{self.name} has no column {name!r}")


@dataclass
class FieldMap(_Named):
    """One field of nested objects (or one scalar column) and the column it becomes."""

    path: list[str]  # keys leading to the value inside an object; [column] for a scalar column
    column: str
    type: Type
    null_means: str = "null"  # what NULL in the column stands for: "null" (the value None) or "absent" (no key)
    as_text: bool = False  # the values arrive as text ("7") and the type is read from it (CSV cells)
    # an entity reference: ``path`` leads to a single object with an identity ([]: the object itself), held as
    # the entity table's surrogate key in ``column`` (a foreign key); the entity's attributes are in its table
    entity: str = ""
    references: str = ""  # a scalar column whose values are natural keys of this record table (a foreign key)
    scale: int | None = None  # a decimal column's places, the most in the sample: the scale of its Parquet type
    _names: ClassVar[dict] = {"type": Type}



@dataclass
class EntityGroup(_Named):
    """Nested columns whose objects are one kind of entity, sharing one entity table."""

    table: str
    key_column: str  # surrogate key column
    identity: str  # the identity field inside the objects
    identity_column: str  # its column in the entity table (the natural key)
    identity_type: Type
    attributes: list[FieldMap] = field(default_factory=list)  # entity attributes
    members: list[str] = field(default_factory=list)  # "file:column" of each nested column
    matched: bool = False  # identity is a field's normalised text (NFKC, case folded, spaces collapsed)
    _names: ClassVar[dict] = {"identity_type": Type}



@dataclass
class NestedColumn(_Named):
    """How one nested input column becomes tables."""

    file: str
    column: str
    kind: Kind
    table: str | None = None  # bridge, child or value-bridge table
    entity: str | None = None  # entity or value table
    # the fields kept on the rows this column makes: a bridge row's link attributes, a child row's fields, an
    # object column's columns of the record table
    row_fields: list[FieldMap] = field(default_factory=list)
    children: list["NestedColumn"] = field(default_factory=list)  # lists inside the objects
    path: str = ""  # path inside the record's column, for nested lists
    identity: str = ""  # identity field of an entity list
    matched: bool = False  # objects matched on the identity field's normalised text
    value_type: str = "text"  # a value list's values: integer, real, boolean or text (a list of numbers stays numbers)
    separator: str = ""  # a delimited column's separator text between values (", "): the cell is the values joined
    keyed: str = ""  # an object keyed by data, read as a list of objects: the field its keys go to ("" = not)
    keyed_value: str = ""  # ... and the field a scalar value goes to ("" when the values are objects)
    references: str = ""  # a value list whose values are natural keys of this record table (a foreign key)
    _names: ClassVar[dict] = {"kind": Kind, "value_type": Type}



@dataclass
class RecordSource(Sealable):
    """One input file and its record table."""

    file: str
    path: str
    table: str
    key_column: str
    natural_key: list[str]
    scalars: list[FieldMap] = field(default_factory=list)
    nested: list[NestedColumn] = field(default_factory=list)
    duplicates: str = "first"  # first | last | refuse
    parent_path: str = ""  # one-to-many: the main export whose records own these
    parent_column: str = ""  # ... and the column holding the owning record's key


@dataclass
class Plan(Sealable):
    records: list[RecordSource] = field(default_factory=list)
    entities: list[EntityGroup] = field(default_factory=list)
    tables: list[Table] = field(default_factory=list)
    views: list = field(default_factory=list)  # views.View
    # entity tables the sample kept apart and every record showed to be one (sharing.widened): what the run
    # reports; not part of a saved plan, whose entity members already say it
    widened: list = field(default_factory=list)
    settings: Settings = field(default_factory=Settings)  # what the run was made with (model/settings.py)

    def table(self, name: str) -> Table:
        for t in self.tables:
            if t.name == name:
                return t
        raise KeyError(name)

    def entity_group(self, table: str) -> EntityGroup:
        for g in self.entities:
            if g.table == table:
                return g
        raise KeyError(table)

    @property
    def violation_threshold(self) -> float:
        """The share of records that may break a dependency or a key and still keep it (``Settings``)."""
        return self.settings.violation_threshold
