"""Plan pass: the relational model as plain data.

A plan says which tables will be made, with which keys, from which input
columns; it holds no data. ``infer_plan`` derives one from decoded exports;
``build`` executes it. Everything here is dataclasses of strings, numbers and
lists, so a plan can be printed, compared, saved and replayed.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import NamedTuple

# A column's type, as plans and plan files name it (``write.TYPES`` gives each its SQL type). Dates and timestamps
# are ISO 8601 text: SQLite has no date type, and such text sorts and compares correctly. A decimal is a number
# whose written digits matter ("12.50"): its text on SQLite, NUMERIC on PostgreSQL (decimals.py).
TYPES = ("integer", "real", "decimal", "text", "boolean", "date", "timestamp")
TEXT_TYPES = ("text", "decimal", "date", "timestamp")  # the types whose values are text


class MetaTable(NamedTuple):
    """A bookkeeping table: its role, and its columns after the surrogate key as (name, type, nullable)."""

    role: str
    columns: tuple[tuple[str, str, bool], ...]


# The bookkeeping tables every database has, in the order they are made and loaded: what the run did not
# load as data, kept so that every input row, nested element and value is accounted for.
META_TABLES = {
    "rejected_rows": MetaTable("rejected", (("file", "text", False), ("line", "integer", False),
                                            ("reason", "text", False), ("raw", "text", False))),
    "set_aside_rows": MetaTable("set_aside", (("file", "text", False), ("line", "integer", False),
                                              ("natural_key", "text", True), ("reason", "text", False),
                                              ("kept_line", "integer", True), ("cells", "text", False))),
    "unmatched_rows": MetaTable("unmatched", (("file", "text", False), ("line", "integer", False),
                                              ("join_key", "text", True), ("reason", "text", False),
                                              ("cells", "text", False))),
    "quarantined_cells": MetaTable("quarantine", (("file", "text", False), ("line", "integer", False),
                                                  ("column_name", "text", False), ("position", "integer", True),
                                                  ("excerpt", "text", False), ("message", "text", False))),
    "attribute_variants": MetaTable("variants", (("entity_table", "text", False), ("entity_sk", "integer", False),
                                                 ("natural_key", "text", False), ("attribute", "text", False),
                                                 ("value", "text", True), ("occurrences", "integer", False),
                                                 ("chosen", "boolean", False))),
    # a value the model's columns cannot give back exactly, kept verbatim (original: Python literal text
    # that ast.literal_eval reads back; NULL when the key was absent), at its place in a row
    "value_traces": MetaTable("traces", (("table_name", "text", False), ("row_sk", "integer", False),
                                         ("owner_sk", "integer", True), ("position", "integer", True),
                                         ("column_name", "text", False), ("path", "text", False),
                                         ("reason", "text", False), ("original", "text", True),
                                         ("file", "text", True), ("line", "integer", True))),
    # every name taken from the data (file, header, object key) and the SQL name it was given
    "name_map": MetaTable("names", (("table_name", "text", False), ("column_name", "text", True),
                                    ("name_in_input", "text", False), ("found_in", "text", False))),
    # what the data dictionary says of every table, view and column (describe.descriptions); SQLite keeps no
    # comments, PostgreSQL has them also as COMMENT ON
    "descriptions": MetaTable("descriptions", (("table_name", "text", False), ("column_name", "text", True),
                                               ("description", "text", False))),
}
META_ROLES = frozenset(t.role for t in META_TABLES.values())
ROLES = ("record", "record_part", "entity", "bridge", "child", *(t.role for t in META_TABLES.values()))


@dataclass
class Column:
    name: str
    type: str  # one of TYPES
    nullable: bool = True
    unique: bool = False
    source: str | None = None  # where the values come from: "file:column" or a path inside it
    scale: int | None = None  # a decimal's places (FieldMap.scale)


@dataclass
class ForeignKey:
    columns: list[str]
    references: str
    ref_columns: list[str]


@dataclass
class Table:
    name: str
    role: str
    columns: list[Column]
    primary_key: list[str]
    natural_key: list[str] = field(default_factory=list)
    position_column: str | None = None
    foreign_keys: list[ForeignKey] = field(default_factory=list)
    unique: list[list[str]] = field(default_factory=list)
    sources: list[dict] = field(default_factory=list)  # [{"file": str, "column": str | None}]

    def column(self, name: str) -> Column:
        for c in self.columns:
            if c.name == name:
                return c
        raise KeyError(f"{self.name} has no column {name!r}")


@dataclass
class FieldMap:
    """One field of nested objects (or one scalar column) and the column it becomes."""

    path: list[str]  # keys leading to the value inside an object; [column] for a scalar column
    column: str
    type: str
    null_means: str = "null"  # what NULL in the column stands for: "null" (the value None) or "absent" (no key)
    as_text: bool = False  # the values arrive as text ("7") and the type is read from it (CSV cells)
    # an entity reference: ``path`` leads to a single object with an identity ([]: the object itself), held as
    # the entity table's surrogate key in ``column`` (a foreign key); the entity's attributes are in its table
    entity: str = ""
    references: str = ""  # a scalar column whose values are natural keys of this record table (a foreign key)
    scale: int | None = None  # a decimal column's places, the most in the sample: the scale of its Parquet type


@dataclass
class EntityGroup:
    """Nested columns whose objects are one kind of entity, sharing one entity table."""

    table: str
    key_column: str  # surrogate key column
    identity: str  # the identity field inside the objects
    identity_column: str  # its column in the entity table (the natural key)
    identity_type: str
    attributes: list[FieldMap] = field(default_factory=list)  # entity attributes
    members: list[str] = field(default_factory=list)  # "file:column" of each nested column
    matched: bool = False  # identity is a field's normalised text (NFKC, case folded, spaces collapsed)


@dataclass
class NestedColumn:
    """How one nested input column becomes tables."""

    file: str
    column: str
    kind: str  # entity-list | child-list | value-list | object-columns | object-child | scalar
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


@dataclass
class RecordSource:
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
class Plan:
    records: list[RecordSource] = field(default_factory=list)
    entities: list[EntityGroup] = field(default_factory=list)
    tables: list[Table] = field(default_factory=list)
    views: list = field(default_factory=list)  # views.View
    violation_threshold: float = 0.05
    # entity tables the sample kept apart and every record showed to be one (sharing.widened): what the run
    # reports; not part of a saved plan, whose entity members already say it
    widened: list = field(default_factory=list)

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

    def to_dict(self) -> dict:
        return asdict(self)
