"""A plan as TOML text a person can read, edit and give back with ``--plan`` (``plan_to_toml``): every decision
with a comment saying what it means.
"""

from __future__ import annotations

import json
import re

from ..model.kinds import Kind
from ..model.plan import TYPES, FieldMap, NestedColumn, Plan

PLAN_VERSION = 1  # the plan file format's version, written at its top


def toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, str):
        return _toml_string(value)
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{_k(k)} = {toml_value(v)}" for k, v in value.items()) + " }"
    raise TypeError(value)


def _k(key: str) -> str:
    return key if re.fullmatch(r"[A-Za-z0-9_-]+", key) else _toml_string(key)


def _toml_string(text: str) -> str:
    """A TOML basic string: JSON's escapes are TOML's (toml.io v1.0.0, "String"), and DEL, which JSON leaves
    as it is, is a control character TOML wants escaped too.

    Example:
        >>> import tomllib
        >>> tomllib.loads("k = " + _toml_string('a"b' + chr(127)))["k"] == 'a"b' + chr(127)
        True
    """
    return json.dumps(text, ensure_ascii=False).replace("\x7f", "\\u007f")


def _fields(maps: list[FieldMap]) -> list[dict]:
    out = []
    for f in maps:
        d = {"key": f.path, "name": f.column, "type": f.type}
        if f.null_means != "null":
            d["null"] = f.null_means
        if f.as_text:
            d["as_text"] = True
        if f.scale is not None:
            d["scale"] = f.scale  # a decimal's places: its Parquet type's scale
        if f.references:
            d["references"] = f.references
        if f.entity:
            d["entity"] = f.entity  # a reference: the key of the [[entity]] the object at `key` is
        out.append(d)
    return out


def plan_to_toml(plan: Plan, joins: dict | None = None) -> str:
    """The plan as readable, commented TOML."""
    out = ["# normalise plan: the relational model of these exports, as decisions.",
           "# Edit and replay with: normalise build FILE... --plan THIS_FILE --db PATH",
           f"# Types: {', '.join(TYPES)}.", "",
           f"version = {PLAN_VERSION}",
           "# share of functional-dependency violations tolerated when deciding entity attributes",
           f"violation_threshold = {toml_value(plan.violation_threshold)}", ""]
    joins = joins or {}
    out += ["# Further files attach to the first one by key: how = left | inner | full",
            "[join]", f"how = {toml_value(joins.get('how', 'left'))}",
            f"cardinality = {toml_value(joins.get('cardinality', 'one-to-one'))}",
            f"separate = {toml_value(bool(joins.get('separate', False)))}"]
    for file, (column, _) in sorted(joins.get("on", {}).items()):
        out.append(f"on.{_k(file)} = {toml_value(column)}  # the column of {file} holding the main file's keys")
    out.append("")
    for record in plan.records:
        out += ["# One record table per input file (joined files add their columns to it).",
                "[[record]]", f"file = {toml_value(record.file)}", f"table = {toml_value(record.table)}",
                f"key = {toml_value(record.key_column)}  # surrogate key: the line the row starts on",
                f"natural_key = {toml_value(record.natural_key[0] if record.natural_key else '')}",
                f"duplicates = {toml_value(record.duplicates)}  # first | last | refuse",
                "columns = ["]
        if any(f.references for f in record.scalars):
            out.insert(-1, "# references = TABLE: the column's values are natural keys of that record table "
                           "(a foreign key beside it); remove it to keep the values only")
        out += [f"  {toml_value(f)}," for f in _fields(record.scalars)]
        out.append("]")
        for nested in record.nested:
            out += _nested_toml(nested, "record.nested")
        out.append("")
    for group in plan.entities:
        out += ["# An entity table: one row per distinct identity; the attributes are functionally",
                "# determined by the identity. Other fields of the objects are link attributes.",
                "[[entity]]", f"handle = {toml_value(group.table)}", f"table = {toml_value(group.table)}",
                f"identity = {toml_value(group.identity)}", f"identity_column = {toml_value(group.identity_column)}",
                f"identity_type = {toml_value(group.identity_type)}",
                f"matched = {toml_value(group.matched)}  # true: identity is the field's normalised text (NFKC, case folded)",
                f"members = {toml_value(group.members)}  # nested columns whose objects are these entities",
                "attributes = ["]
        out += [f"  {toml_value(f)}," for f in _fields(group.attributes)]
        out += ["]", ""]
    for view in plan.views:
        out += ["[[view]]", f"name = {toml_value(view.name)}",
                f"kind = {toml_value(view.kind)}  # record_summary | entity_summary", f"table = {toml_value(view.table)}",
                f"lists = {toml_value(view.lists)}"]
        if view.date_column:
            out.append(f"date_column = {toml_value(view.date_column)}")
        out.append(f"separator = {toml_value(view.separator)}")
        for pick in view.picks:
            out += ["[[view.pick]]  # the first entity of a list whose link attribute equals a value",
                    f"name = {toml_value(pick.name)}", f"list = {toml_value(pick.bridge)}", f"attribute = {toml_value(pick.attribute)}",
                    f"value = {toml_value(pick.value)}"]
        out.append("")
    return "\n".join(out)


def _nested_toml(nested: NestedColumn, header: str) -> list[str]:
    out = [f"[[{header}]]", f"column = {toml_value(nested.column)}"]
    if nested.path:
        out.append(f"path = {toml_value(nested.path)}")
    out += [f"file = {toml_value(nested.file)}",
            f"kind = {toml_value(nested.kind)}  # entity-list | child-list | value-list | object-columns | object-child"]
    if nested.table:
        out.append(f"table = {toml_value(nested.table)}")
    if nested.keyed:
        out.append(f"keyed = {toml_value(nested.keyed)}  # an object keyed by data: a row per key, the key in this field "
                   f"(\"\" = not keyed)")
        if nested.keyed_value:
            out.append(f"keyed_value = {toml_value(nested.keyed_value)}  # the field of each key's scalar value")
    if nested.kind == Kind.ENTITY_LIST:
        out += [f"entity = {toml_value(nested.entity)}  # handle of an [[entity]]", f"identity = {toml_value(nested.identity)}"]
        if nested.matched:
            out.append("matched = true")
    if nested.kind == Kind.VALUE_LIST:
        out.append(f"values_table = {toml_value(nested.entity)}")
        if nested.separator:
            out.append(f"separator = {toml_value(nested.separator)}  # between the values of a delimited cell")
        if nested.value_type != "text":
            out.append(f"value_type = {toml_value(nested.value_type)}  # integer | real | boolean | text")
        if nested.references:
            out.append(f"references = {toml_value(nested.references)}  # the values are natural keys of this record table")
    label = {Kind.ENTITY_LIST: "link attributes (kept on the bridge)", Kind.CHILD_LIST: "fields",
             Kind.OBJECT_COLUMNS: "record columns", Kind.OBJECT_CHILD: "fields"}.get(nested.kind)
    if label:
        out.append(f"fields = [  # {label}")
        out += [f"  {toml_value(f)}," for f in _fields(nested.row_fields)]
        out.append("]")
    for child in nested.children:
        out += _nested_toml(child, header + ".children")
    return out
