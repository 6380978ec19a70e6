"""Exact values: what a column stores, what it gives back, and a canonical digest of a decoded value.

A decoded value is stored in a column of the plan's type only when reading
the column back gives the same value of the same type (``store``); any other
value is kept verbatim as a *trace* (table ``value_traces``), so the lossless
proof (``prove.py``) can give every cell back as it was. ``stored_back`` is
the one definition of "reading back", shared by the build (to decide what
needs a trace) and by the proof (to rebuild).
"""

from __future__ import annotations

import ast
import json
import math
from hashlib import blake2b

_INT64_MIN, _INT64_MAX = -(1 << 63), (1 << 63) - 1

ABSENT = object()  # a key an object does not have (None is a value: null)


def value_key(value):
    """A hashable key equal for two values exactly when ``same`` holds (ABSENT is its own key).

    Example:
        >>> value_key(1) == value_key(True), value_key("1") == value_key(1), value_key([1]) == value_key((1,))
        (False, False, False)
    """
    if value is ABSENT or value is None or type(value) is str:
        return value  # text equals only text, and None only None: the value is its own key
    kind = type(value)
    if kind in (int, bool):
        return (kind, value)
    if kind is float:
        return (kind, repr(value))
    return (kind, canonical_text(value))


def is_negative_zero(value) -> bool:
    """Whether a value is the float -0.0, which SQLite gives back as 0.0 (so it is traced, never stored as such).

    Example:
        >>> is_negative_zero(-0.0), is_negative_zero(0.0), is_negative_zero(0)
        (True, False, False)
    """
    return type(value) is float and value == 0.0 and math.copysign(1.0, value) < 0


def to_column(value, type_: str, as_text: bool):
    """The value a column of ``type_`` holds for ``value``, before any check (None when it cannot hold it)."""
    if value is None:
        return None
    kind = type(value)
    if type_ == "integer":
        if as_text:
            if kind is not str:
                return None
            try:
                value = int(value)
            except ValueError:
                return None
        elif kind is bool:
            return None
        elif kind is not int:
            return None
        return value if _INT64_MIN <= value <= _INT64_MAX else None
    if type_ == "real":
        if as_text:
            if kind is not str:
                return None
            try:
                return float(value)
            except ValueError:
                return None
        return value if kind is float else None
    if type_ == "boolean":
        return int(value) if kind is bool else None
    return value if kind is str else None  # text, date, timestamp


def stored_back(stored, type_: str, as_text: bool):
    """The decoded value a stored column value stands for (None for NULL)."""
    if stored is None:
        return None
    if type_ == "integer":
        return str(stored) if as_text else int(stored)
    if type_ == "real":
        return repr(float(stored)) if as_text else float(stored)
    if type_ == "boolean":
        return bool(stored)
    return stored


def same(a, b) -> bool:
    """Equal values of the same types, all the way down (Python's ``==`` says ``1 == True == 1.0``).

    Example:
        >>> same([1, {"a": 2.0}], [1, {"a": 2.0}]), same(1, True), same((1,), [1]), same(0.0, -0.0)
        (True, False, False, False)
    """
    if type(a) is not type(b):
        return False
    if type(a) in (float, complex):
        return repr(a) == repr(b)  # exact (the sign of a zero too), and a NaN is the same as a NaN
    if type(a) in (list, tuple):
        return len(a) == len(b) and all(map(same, a, b))
    if type(a) is dict:
        return a.keys() == b.keys() and all(same(v, b[k]) for k, v in a.items())
    if type(a) in (set, frozenset):
        return canonical_text(a) == canonical_text(b)
    return a == b


def store(value, type_: str, as_text: bool = False):
    """``(stored, exact)``: the column value and whether reading it back gives ``value`` exactly.

    Example:
        >>> store("7", "integer", True), store("007", "integer", True), store(True, "integer"), store(7, "text")
        ((7, True), (None, False), (None, False), ('7', False))
    """
    if value is ABSENT:
        return None, True  # what NULL then stands for is the field's null_means (field_back)
    stored = to_column(value, type_, as_text)
    if stored is None:
        if type_ == "real" and type(value) is int and -(1 << 53) <= value <= (1 << 53):
            return float(value), False  # the number, readable; that it was written 3, not 3.0, is traced
        if value is not None and type_ == "text":
            # a text column shows another type's value as its JSON text (a Python literal's where JSON has
            # none); the value itself is not held, so it is kept in value_traces
            return json_text(value), False
        return None, value is None
    if is_negative_zero(stored):
        return 0.0, False  # SQLite gives a REAL -0.0 back as 0.0 (its sign is kept in value_traces)
    if same(stored_back(stored, type_, as_text), value):
        return stored, True
    return None, False


# --- verbatim text of any decoded value ---------------------------------------------

# Values ast.literal_eval gives that JSON has no form for (Python language reference, "Literals")
_PYTHON_ONLY = (bytes, complex, set, frozenset, type(...))


_INF = float("inf")


def literal(value) -> str:
    """Text that ``from_literal`` reads back as exactly ``value`` (any value decoding gives).

    Example:
        >>> literal({"a": (1, 2.5), "b": [None, True, b"x", 1j]})
        "{'a': (1, 2.5), 'b': [None, True, b'x', 1j]}"
        >>> from_literal(literal([Ellipsis, {1, 2}, float("nan")]))
        [Ellipsis, {1, 2}, nan]
    """
    if _json_pure(value):
        text = repr(value)
        if "inf" not in text and "nan" not in text:
            return text
    return python_text(value, exact=True)


def python_text(value, exact: bool = False) -> str:
    """A decoded Python literal as Python literal text, which ``ast.literal_eval`` reads back to an equal value.

    That is ``repr``, but ``...`` for Ellipsis (whose repr is a name) and a set's
    elements sorted: a set's repr follows its hash order, which for strings
    changes from one process to the next, and the database must not.

    Example:
        >>> python_text(b"x"), python_text(1j), python_text(...), python_text({"b", "a"}), python_text([set(), (1,)])
        ("b'x'", '1j', '...', "{'a', 'b'}", '[set(), (1,)]')
    """
    if isinstance(value, (set, frozenset)):
        items = list(value)
        try:
            items.sort()
        except TypeError:  # elements of several types: in the order of their text
            items.sort(key=python_text)
        inner = "{" + ", ".join(python_text(v, exact) for v in items) + "}"
        if type(value) is set:
            return inner if items else "set()"
        return f"frozenset({inner if items else ''})"
    if type(value) is dict:
        return "{" + ", ".join(f"{python_text(k, exact)}: {python_text(v, exact)}" for k, v in value.items()) + "}"
    if type(value) is list:
        return "[" + ", ".join(python_text(v, exact) for v in value) + "]"
    if type(value) is tuple:
        return "(" + ", ".join(python_text(v, exact) for v in value) + ("," if len(value) == 1 else "") + ")"
    if exact and type(value) is float and (value != value or value in (_INF, -_INF)):
        return f"float({repr(value)!r})"  # no literal: from_literal reads this call back
    if exact and type(value) is complex and repr(ast.literal_eval(repr(value))) != repr(value):
        return f"complex({repr(value)!r})"  # (-0-1j): the literal reads back with +0.0 as its real part
    return "..." if value is ... else repr(value)


def _python_only(value):
    if isinstance(value, _PYTHON_ONLY):
        return python_text(value)
    raise TypeError(f"{type(value).__name__} is not a decoded value")


def _text_keys(value):
    """The value with every dict key JSON cannot hold (a tuple, bytes, a number) as its literal text."""
    if type(value) is dict:
        return {k if isinstance(k, (str, int, float, bool)) or k is None else python_text(k): _text_keys(v)
                for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_text_keys(v) for v in value]
    return value


def json_text(value, ensure_ascii: bool = False) -> str:
    """A decoded value as the text a column stores: JSON, and what JSON has no form for as Python literal text.

    A bytes, complex, set or Ellipsis value is its ``python_text``; inside a list
    or an object it is a string of that text, and so is a dict key JSON cannot
    hold (JSON makes ``1`` the key ``"1"`` likewise).

    Example:
        >>> json_text({1, 2}), json_text(["a", 1j]), json_text({(1, 2): ...})
        ('{1, 2}', '["a", "1j"]', '{"(1, 2)": "..."}')
    """
    if isinstance(value, _PYTHON_ONLY):
        return python_text(value)
    try:
        return json.dumps(value, ensure_ascii=ensure_ascii, default=_python_only)
    except TypeError:  # a dict key JSON cannot hold
        return json.dumps(_text_keys(value), ensure_ascii=ensure_ascii, default=_python_only)



def from_literal(text: str):
    """The value ``literal`` wrote (``float('nan')`` and the infinities, which have no literal, included)."""
    if "float(" not in text and "complex(" not in text:
        return ast.literal_eval(text)
    tree = ast.parse(text, mode="eval")

    class Floats(ast.NodeTransformer):
        def visit_Call(self, node):
            if (isinstance(node.func, ast.Name) and node.func.id in ("float", "complex") and len(node.args) == 1
                    and isinstance(node.args[0], ast.Constant) and isinstance(node.args[0].value, str)):
                return ast.Constant((float if node.func.id == "float" else complex)(node.args[0].value))
            return self.generic_visit(node)

    return ast.literal_eval(Floats().visit(tree))


# --- canonical digest ---------------------------------------------------------------

def canonical_text(value) -> str:
    """A text that is equal for two values exactly when ``same`` holds (object keys in any order).

    JSON objects are unordered (RFC 8259, section 4), so keys are sorted; every
    other type keeps its own tag, so a tuple is not a list and ``1`` is not ``True``.
    """
    kind = type(value)
    if kind is dict:
        items = sorted((canonical_text(k), canonical_text(v)) for k, v in value.items())
        return "{" + ",".join(f"{k}:{v}" for k, v in items) + "}"
    if kind is list:
        return "[" + ",".join(map(canonical_text, value)) + "]"
    if kind is tuple:
        return "(" + ",".join(map(canonical_text, value)) + ")"
    if kind in (set, frozenset):
        return kind.__name__ + "{" + ",".join(sorted(map(canonical_text, value))) + "}"
    if kind is str:
        return json.dumps(value, ensure_ascii=False)
    if kind is float:
        return "f" + repr(value)
    return repr(value)  # int, bool, None, bytes, complex, Ellipsis


def _json_pure(value) -> bool:
    """Whether ``json.dumps`` renders the value without merging types (no tuples, no non-string keys)."""
    kind = type(value)
    if kind is dict:
        return all(type(k) is str for k in value) and all(map(_json_pure, value.values()))
    if kind is list:
        return all(map(_json_pure, value))
    return kind in (str, int, float, bool, type(None))


_encode = json.JSONEncoder(ensure_ascii=False, sort_keys=True, check_circular=False).encode


def keyed_digest(key: int, value, pure: bool = False) -> int:
    """A 128-bit number that is equal for two (record key, value) pairs exactly when the keys are and ``same``
    holds for the values.

    ``pure`` says the value holds only what JSON holds (dicts with text keys,
    lists, text, numbers, booleans, None), as every cell of a JSON column does:
    then ``json.dumps`` with sorted keys is the canonical text, in C.

    Example:
        >>> keyed_digest(7, {"a": 1, "b": [2.0]}, True) == keyed_digest(7, {"b": [2.0], "a": 1})
        True
        >>> keyed_digest(7, [1]) == keyed_digest(7, (1,)), keyed_digest(7, [1]) == keyed_digest(7, [True])
        (False, False)
    """
    if pure or _json_pure(value):
        text = "j" + _encode(value)
    else:
        text = "c" + canonical_text(value)
    return int.from_bytes(blake2b(key.to_bytes(9, "big", signed=True) + text.encode("utf-8", "surrogatepass"),
                                  digest_size=16).digest(), "big")


# --- paths inside a value (JSON Pointer, RFC 6901) ------------------------------------

def pointer(path) -> str:
    """The JSON Pointer (RFC 6901) of a path of keys: ``~`` as ``~0``, ``/`` as ``~1``.

    Example:
        >>> pointer(["a/b", "m~n"]), pointer([])
        ('/a~1b/m~0n', '')
    """
    return "".join("/" + str(k).replace("~", "~0").replace("/", "~1") for k in path)


def pointer_keys(text: str) -> list[str]:
    """The keys of a JSON Pointer (RFC 6901, section 4: ``~1`` before ``~0``)."""
    if not text:
        return []
    return [k.replace("~1", "/").replace("~0", "~") for k in text[1:].split("/")]


def put(obj: dict, keys: list, value) -> None:
    """Set ``value`` at the path ``keys`` inside ``obj``, making objects on the way; ABSENT removes the key."""
    for k in keys[:-1]:
        inner = obj.get(k)
        if not isinstance(inner, dict):
            inner = obj[k] = {}
        obj = inner
    if value is ABSENT:
        obj.pop(keys[-1], None)
    else:
        obj[keys[-1]] = value


def get(obj, keys: list):
    """The value at the path ``keys`` inside ``obj``; ABSENT where a key is missing."""
    for k in keys:
        if not isinstance(obj, dict) or k not in obj:
            return ABSENT
        obj = obj[k]
    return obj


# --- what the model gives back ----------------------------------------------------------

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
    if kind in ("object-columns", "object-child"):
        if type(value) is not dict:
            return NOT_HELD
        expected = _object_expected(nested, value, identity_type, attributes, groups)
        if kind == "object-columns" and not any(
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
    if nested.kind == "entity-list" and groups and nested.entity in groups:
        group = groups[nested.entity]
        return group.identity_type, group.attributes
    return identity_type, attributes


def expect_element(nested, x, identity_type, attributes, groups: dict | None = None):
    kind = nested.kind
    if kind == "value-list":
        if type(x) is not VALUE_TYPES[nested.value_type] or is_negative_zero(x):
            return NOT_HELD  # a value of another type than the list's (or a null, a list, -0.0) is not held
        return x
    if type(x) is not dict:
        return NOT_HELD
    out = _object_expected(nested, x, identity_type, attributes, groups)
    if kind == "entity-list":
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


# --- objects keyed by data -------------------------------------------------------------

def keyed_items(value, key: str, value_field: str = ""):
    """The list an object keyed by data stands for, its keys in order; None when the object does not fit.

    ``{k1: v1, k2: v2}`` is ``[{key: k1, **v1}, {key: k2, **v2}]`` when the values are objects, or
    ``[{key: k1, value_field: v1}, ...]`` when ``value_field`` is given and they are scalars. A key that is
    not text, a value of the other shape, or a value object that has a field named ``key`` does not fit:
    such a cell is kept whole in value_traces. ``keyed_object`` gives the object back.

    Example:
        >>> keyed_items({"EUR": {"name": "Euro"}, "USD": {"name": "US dollar"}}, "code")
        [{'code': 'EUR', 'name': 'Euro'}, {'code': 'USD', 'name': 'US dollar'}]
        >>> keyed_items({"deu": "German"}, "code", "value"), keyed_items({1: "a"}, "code", "value")
        ([{'code': 'deu', 'value': 'German'}], None)
    """
    if type(value) is not dict:
        return None
    out = []
    for k, v in value.items():
        if type(k) is not str:
            return None
        if value_field:
            if isinstance(v, (dict, list, tuple, set, frozenset)):
                return None
            out.append({key: k, value_field: v})
        else:
            if type(v) is not dict or key in v:
                return None
            out.append({key: k, **v})
    return out


def keyed_object(items, key: str, value_field: str = ""):
    """The object keyed by data that ``keyed_items`` read as ``items`` (anything else is given back as it is).

    Example:
        >>> keyed_object([{"code": "EUR", "name": "Euro"}], "code")
        {'EUR': {'name': 'Euro'}}
        >>> keyed_object([{"code": "deu", "value": "German"}], "code", "value")
        {'deu': 'German'}
    """
    if type(items) is not list or not all(type(x) is dict and type(x.get(key)) is str for x in items):
        return items
    if value_field:
        if not all(x.keys() == {key, value_field} for x in items):
            return items
        return {x[key]: x[value_field] for x in items}
    return {x[key]: {k: v for k, v in x.items() if k != key} for x in items}


def _keyed_expected(nested, obj: dict, identity_type, attributes):
    """What the rows of an object keyed by data (inside another object) give back: its list's rows, as an object."""
    items = keyed_items(obj, nested.keyed, nested.keyed_value)
    if items is None or not items:
        return NOT_HELD  # kept whole: its rows cannot hold it (an empty object makes no rows at all)
    return keyed_object(expect_cell(nested, items, identity_type, attributes), nested.keyed, nested.keyed_value)


DIGEST_MODULUS = 1 << 128  # digest sums are kept modulo this


class InputDigests:
    """Per record table and input column: the number of non-empty cells and a running sum of their digests.

    The sum is over (record key, cell digest) pairs, so it does not depend on the
    order (or the chunks) the records come in, and it changes when any one cell does.
    """

    def __init__(self):
        self.sums: dict[tuple[str, str], list] = {}  # (record table, column) -> [cells, sum]
        self.records: dict[str, set] = {}  # record table -> keys of the records loaded by this build

    def add(self, table: str, column: str, keys: list[int], values: list, rows: list[int],
            impure: set | None) -> None:
        """The cells ``values`` of the records ``keys`` (rows ``rows`` of their column); ``impure``: the rows
        whose value may hold what JSON has not (``DecodedColumn.impure``; None: any)."""
        self.records.setdefault(table, set()).update(keys)
        entry = self.sums.setdefault((table, column), [0, 0])
        total = entry[1]
        n = 0
        for sk, v, i in zip(keys, values, rows):
            if v is not None:
                total += keyed_digest(sk, v, impure is not None and i not in impure)
                n += 1
        entry[0] += n
        entry[1] = total % DIGEST_MODULUS
