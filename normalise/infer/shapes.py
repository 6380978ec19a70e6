"""What a nested value holds (a list of objects, of values, one object...), the objects of a column, and the
fields of those objects with their paths and types.
"""

from __future__ import annotations

from collections import Counter

from ..model.names import Namer
from .dependencies import MISSING, ObjectTable
from .keyed import keyed_shape
from .types import value_type


def shape_of(values: list) -> str:
    """The dominant shape of a column's decoded values: object-list, object, scalar-list or scalar.

    Example:
        >>> shape_of([[{"a": 1}], None, [{"a": 2}, {"a": 3}]]), shape_of([["x"], ["y", "z"]]), shape_of([{"a": 1}])
        ('object-list', 'scalar-list', 'object')
    """
    counts = Counter()
    for v in values:
        if v is None:
            continue
        if isinstance(v, (list, tuple)):
            present = [x for x in v if x is not None]
            counts["object-list" if present and all(type(x) is dict for x in present) else "scalar-list"] += 1
        elif isinstance(v, dict):
            counts["object"] += 1
        else:
            counts["scalar"] += 1
    return counts.most_common(1)[0][0] if counts else "scalar"


def objects_of(values: list) -> tuple[list[dict], list[int]]:
    """Every object inside a column's values, with the row it came from."""
    objects, owners = [], []
    for row, v in enumerate(values):
        if isinstance(v, dict):
            objects.append(v)
            owners.append(row)
        elif isinstance(v, (list, tuple)):
            for item in v:
                if isinstance(item, dict):
                    objects.append(item)
                    owners.append(row)
    return objects, owners


def scalar_fields(objects: list[dict], prefix: list[str] | None = None,
                  table: ObjectTable | None = None) -> tuple[list[list[str]], list[list[str]]]:
    """Paths to scalar fields (flattening sub-objects) and to list fields, in first-seen order.

    A key that holds a non-empty list anywhere is a list field; one that holds
    only objects (or nulls) is flattened into its sub-keys; any other key is a
    scalar field, even when it is always null. Keys only ever holding empty
    lists carry nothing and are left out. ``table``, when given, is the
    ``ObjectTable`` of these objects.

    Example:
        >>> scalar_fields([{"id": 1, "tags": ["a"], "place": {"city": "X"}}, {"id": 2, "note": None}])
        ([['id'], ['place', 'city'], ['note']], [['tags']])
    """
    prefix = prefix or []
    table = table or ObjectTable(objects)
    scalars: list[list[str]] = []
    lists: list[list[str]] = []
    for k in table.keys():
        kinds = table.kinds(k)
        path = prefix + [str(k)]
        if kinds & {list, tuple, set}:
            if any(isinstance(v, (list, tuple, set)) and v for v in table.values(k)):
                lists.append(path)
            elif kinds - {list, tuple, set, type(None)}:
                scalars.append(path)
        elif dict in kinds and kinds <= {dict, type(None)}:
            inner = [v for v in table.values(k) if isinstance(v, dict)]
            if keyed_shape(inner):  # keyed by data: a list of its keys (_child_lists)
                lists.append(path)
                continue
            sub_scalars, sub_lists = scalar_fields(inner, path)
            scalars += sub_scalars
            lists += sub_lists
        else:
            scalars.append(path)
    return scalars, lists


def get_path(obj, path: list[str]):
    for k in path:
        if not isinstance(obj, dict):
            return None
        obj = obj.get(k)
    return obj


def type_at(objects: list[dict], path: list[str], table: ObjectTable | None = None) -> str:
    if len(path) == 1:
        key = path[0]
        if table is not None:
            return value_type(table.values(key), table.kinds(key))
        return value_type([o.get(key) for o in objects])
    return value_type([get_path(o, path) for o in objects])


def field_maps(objects: list[dict], paths: list[list[str]], names: Namer, table: ObjectTable | None = None) -> list:
    return [field_map(objects, p, names("_".join(p)), table) for p in paths]


def field_map(objects: list[dict], path: list[str], column: str, table: ObjectTable | None = None):
    """The column a field of the objects becomes: its type, and whether NULL stands for null or for no key.

    NULL stands for whichever of the two the objects have more often (ties: null);
    the other kind is kept as a trace, so both come back exactly.
    """
    from ..model.exact import ABSENT, get
    from ..model.plan import FieldMap

    if table is not None and len(path) == 1:
        col = table.column(path[0])
        absent = sum(v is MISSING for v in col)
        nulls = sum(v is None for v in col)
    else:
        found = [get(o, path) for o in objects]
        absent = sum(v is ABSENT for v in found)
        nulls = sum(v is None for v in found)
    return FieldMap(path, column, type_at(objects, path, table), "absent" if absent > nulls else "null")


def object_paths(objects: list[dict], table: ObjectTable | None = None, prefix: tuple = ()) -> list:
    """The paths to single objects inside objects (keys holding only objects or nulls), at any depth, with
    the objects found there: the keys ``scalar_fields`` flattens."""
    table = table or ObjectTable(objects)
    out = []
    for k in table.keys():
        kinds = table.kinds(k)
        if dict in kinds and kinds <= {dict, type(None)}:
            inner = [v for v in table.values(k) if isinstance(v, dict)]
            if keyed_shape(inner):
                continue  # keyed by data: a list of its keys (scalar_fields), not one object
            path = list(prefix) + [str(k)]
            sub = ObjectTable(inner)
            out.append((path, inner, sub))
            out += object_paths(inner, sub, tuple(path))
    return out
