"""What the model's rows give back of a cell or an element: the value the lossless proof expects from the tables
(``expect_cell``, ``expect_element``) and the objects rebuilt from a row's columns (``object_back``).
"""

from __future__ import annotations

from .exact import ABSENT, get, is_negative_zero, keyed_items, keyed_object, put, store, stored_back
from .kinds import Kind


class _Mismatch:
    """Stands for a part of a cell the model's rows do not hold (it never equals a decoded value)."""

    def __repr__(self) -> str:
        return "<not held by the model>"


NOT_HELD = _Mismatch()
VALUE_TYPES = {"text": str, "integer": int, "real": float, "boolean": bool}  # a value list's type: its values


def field_back(value, f):
    """What a column of FieldMap ``f`` gives back for ``value`` (ABSENT for a key it reads as absent)."""
    if value is ABSENT:
        stored = None
    else:
        stored, _ = store(value, f.type, f.as_text)
    if stored is None:
        return ABSENT if f.null_means == "absent" else None
    return stored_back(stored, f.type, f.as_text)


def object_back(fields, stored: list, entities: dict | None = None) -> dict:
    """The object a row's field columns give back (``stored``: the column values, in ``fields`` order).

    A reference (``FieldMap.entity``) puts its entity's object at its path: ``entities[table][key]``, or,
    without ``entities``, the stored value is that object already. References come first, so the
    fields of the same object kept on the row (its link attributes) are put into it.
    """
    obj: dict = {}
    nulled = []  # paths a reference left null: no field of the row goes inside them
    order = sorted(range(len(fields)), key=lambda j: (not fields[j].entity, len(fields[j].path)))
    for j in order:
        f, v = fields[j], stored[j]
        if f.entity:
            if v is None:
                if f.null_means != "absent":
                    if f.path:
                        put(obj, f.path, None)
                    nulled.append(f.path)
                continue
            found = dict(entities[f.entity][v] if entities is not None else v)
            if f.path:
                put(obj, f.path, found)
            else:
                obj.update(found)
            continue
        if v is None:
            if f.null_means == "absent" or any(f.path[:len(p)] == p for p in nulled):
                continue
            put(obj, f.path, None)
        else:
            put(obj, f.path, stored_back(v, f.type, f.as_text))
    return obj


def expect_cell(nested, value, identity_type: str | None = None, attributes=(), groups: dict | None = None):
    """What the model's rows give back for one decoded cell of a nested column, before cell traces.

    Mirrors the build: fields through their columns (``field_back``), lists inside
    objects through their own tables, an entity's attributes as each occurrence
    gave them (the occurrences the entity row does not match are traced element
    by element). ``NOT_HELD`` marks what the rows cannot hold at all: the cell then
    needs a trace of its own. ``groups`` maps entity tables to their ``EntityGroup`` (references).
    """
    kind = nested.kind
    if kind in (Kind.OBJECT_COLUMNS, Kind.OBJECT_CHILD):
        if type(value) is not dict:
            return NOT_HELD
        expected = _object_expected(nested, value, identity_type, attributes, groups)
        if kind == Kind.OBJECT_COLUMNS and not any(
                (_referred(value, f, groups) if f.entity else store(get(value, f.path), f.type, f.as_text)[0])
                is not None for f in nested.row_fields) and not any(
                    type(get(value, c.path.split("."))) is list and get(value, c.path.split(".")) for c in nested.children):
            return NOT_HELD  # its record's columns are all NULL: read back as no object at all
        return expected
    if type(value) is not list:
        return NOT_HELD
    return [expect_element(nested, x, identity_type, attributes, groups) for x in value]


def usable_identity(value, type_: str) -> bool:
    """Whether a value can be an entity's identity of that type (stored in a NOT NULL UNIQUE column).

    Example:
        >>> usable_identity(7, "integer"), usable_identity("7", "integer"), usable_identity(2**64, "integer")
        (True, False, False)
    """
    if value is None or type(value) in (dict, list, tuple, set, bool):
        return False
    return type_ != "integer" or (type(value) is int and -(1 << 63) <= value < (1 << 63))


def _referred(obj, f, groups) -> dict | None:
    """The entity object a reference's row gives back for ``obj``: its identity and the attributes as this
    occurrence gave them (the others are traced); None where the build stores no key."""
    sub = get(obj, f.path) if f.path else obj
    if type(sub) is not dict:
        return None
    group = groups[f.entity]
    ident = sub.get(group.identity)
    if not usable_identity(ident, group.identity_type):
        return None  # the build stores no key
    out = {group.identity: ident if type(ident) is (int if group.identity_type == "integer" else str) else NOT_HELD}
    for a in group.attributes:
        v = get(sub, a.path)
        if v is not ABSENT:
            put(out, a.path, v)
    return out


def _object_expected(nested, obj: dict, identity_type, attributes, groups=None) -> dict:
    if any(f.entity for f in nested.row_fields):
        stored = [_referred(obj, f, groups) if f.entity else store(get(obj, f.path), f.type, f.as_text)[0]
                  for f in nested.row_fields]
        out = object_back(nested.row_fields, stored)
    else:
        out = {}
        for f in nested.row_fields:
            v = field_back(get(obj, f.path), f)
            if v is not ABSENT:
                put(out, f.path, v)
    for child in nested.children:
        keys = child.path.split(".")
        inner = get(obj, keys)
        if getattr(child, "keyed", "") and type(inner) is dict:
            put(out, keys, _keyed_expected(child, inner, identity_type, attributes))
            continue
        if inner is ABSENT or inner is None or (type(inner) is list and not inner):
            continue  # nothing stored: the cell's own comparison finds an empty list or null that went missing
        put(out, keys, expect_cell(child, inner, *_own(child, identity_type, attributes, groups), groups)
            if type(inner) is list else NOT_HELD)
    return out


def _own(nested, identity_type, attributes, groups) -> tuple:
    """The identity type and attributes of a nested column's own entities (an entity list inside objects)."""
    if nested.kind == Kind.ENTITY_LIST and groups and nested.entity in groups:
        group = groups[nested.entity]
        return group.identity_type, group.attributes
    return identity_type, attributes


def expect_element(nested, x, identity_type, attributes, groups: dict | None = None):
    kind = nested.kind
    if kind == Kind.VALUE_LIST:
        if type(x) is not VALUE_TYPES[nested.value_type] or is_negative_zero(x):
            return NOT_HELD  # a value of another type than the list's (or a null, a list, -0.0) is not held
        return x
    if type(x) is not dict:
        return NOT_HELD
    out = _object_expected(nested, x, identity_type, attributes, groups)
    if kind == Kind.ENTITY_LIST:
        ident = x.get(nested.identity, ABSENT)
        if nested.matched:
            if ident is ABSENT or not isinstance(ident, str):
                return NOT_HELD
        elif identity_type == "integer" and type(ident) is not int or identity_type == "text" and type(ident) is not str:
            return NOT_HELD
        out[nested.identity] = ident
        for f in attributes:
            v = get(x, f.path)
            if v is not ABSENT:
                put(out, f.path, v)
    return out


def _keyed_expected(nested, obj: dict, identity_type, attributes):
    """What the rows of an object keyed by data (inside another object) give back: its list's rows, as an object."""
    items = keyed_items(obj, nested.keyed, nested.keyed_value)
    if items is None or not items:
        return NOT_HELD  # kept whole: its rows cannot hold it (an empty object makes no rows at all)
    return keyed_object(expect_cell(nested, items, identity_type, attributes), nested.keyed, nested.keyed_value)
