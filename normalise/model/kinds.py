"""The names a plan is made of, each declared once: column formats, nested kinds, table roles, column types, view kinds.

Each is a ``StrEnum``: a member is its text ("entity-list" == Kind.ENTITY_LIST), so plans, plan files, the manifest
and the survey hold plain text, and code compares with members, which a typo cannot miss silently. A member's
``repr`` is its text's, so messages read as they would with the text.

Example:
    >>> Kind("entity-list") is Kind.ENTITY_LIST, f"{Role.BRIDGE}", repr(Type.TEXT)
    (True, 'bridge', "'text'")
"""

from __future__ import annotations

from enum import StrEnum


class _Text(StrEnum):
    def __repr__(self) -> str:
        return repr(self.value)


class Format(_Text):
    """How a column's cells are written (``decode``): the format detected, or forced with ``--decode``."""

    JSON = "json"  # RFC 8259 text
    PYTHON_LITERAL = "python-literal"  # the repr of lists, dicts, tuples, strings, numbers, None/True/False
    DELIMITED = "delimited"  # values joined by a separator ("poetry|essays")
    TEXT = "text"  # plain text or numbers, each cell one value
    MIXED = "mixed"  # JSON and Python-literal cells, both enough to be values
    EMPTY = "empty"  # no value at all


class Kind(_Text):
    """How one nested column becomes tables (``NestedColumn.kind``)."""

    ENTITY_LIST = "entity-list"  # a list of objects with an identity: an entity table and a bridge
    CHILD_LIST = "child-list"  # a list of objects without one: a child table
    VALUE_LIST = "value-list"  # a list of scalars: a value table and a bridge
    OBJECT_COLUMNS = "object-columns"  # a single object: columns of the record table
    OBJECT_CHILD = "object-child"  # a single object too wide for that: a 1:1 child table
    SCALAR = "scalar"  # a single scalar: a column of the record table


class Role(_Text):
    """What a table is for (``Table.role``): data tables first, then the bookkeeping (``plan.META_TABLES``)."""

    RECORD = "record"
    RECORD_PART = "record_part"  # the 1:1 part of a record (an object too wide for its table)
    ENTITY = "entity"
    BRIDGE = "bridge"
    CHILD = "child"
    REJECTED = "rejected"
    SET_ASIDE = "set_aside"
    UNMATCHED = "unmatched"
    QUARANTINE = "quarantine"
    VARIANTS = "variants"
    TRACES = "traces"
    NAMES = "names"
    DESCRIPTIONS = "descriptions"


class Type(_Text):
    """A column's type as plans and plan files name it (``write.TYPES`` gives each its SQL type).

    Dates and timestamps are ISO 8601 text: SQLite has no date type, and such text sorts and compares
    correctly. A decimal is a number whose written digits matter ("12.50"): its text on SQLite, NUMERIC on
    PostgreSQL (``decimals.py``)."""

    INTEGER = "integer"
    REAL = "real"
    DECIMAL = "decimal"
    TEXT = "text"
    BOOLEAN = "boolean"
    DATE = "date"
    TIMESTAMP = "timestamp"


class ViewKind(_Text):
    """The summary views (``views.View.kind``)."""

    RECORD_SUMMARY = "record_summary"  # one row per record, each list counted and its names joined
    ENTITY_SUMMARY = "entity_summary"  # one row per entity, the records it appears in counted
