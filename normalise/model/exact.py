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

INT64_MIN = -(1 << 63)  # what SQLite's INTEGER and PostgreSQL's BIGINT hold
INT64_MAX = (1 << 63) - 1

class _Absent:
    """The type of ``ABSENT``: one instance, which stays itself when pickled (a partition built in another
    process hands its values back; ``build.parallel``)."""

    __slots__ = ()

    def __reduce__(self):
        return "ABSENT"  # pickled by name: unpickling gives this module's ABSENT

    def __repr__(self):
        return "ABSENT"


ABSENT = _Absent()  # a key an object does not have (None is a value: null)


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
        return value if INT64_MIN <= value <= INT64_MAX else None
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
    if json_pure(value):
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


def json_pure(value) -> bool:
    """Whether ``json.dumps`` renders the value without merging types (no tuples, no non-string keys)."""
    kind = type(value)
    if kind is dict:
        return all(type(k) is str for k in value) and all(map(json_pure, value.values()))
    if kind is list:
        return all(map(json_pure, value))
    return kind in (str, int, float, bool, type(None))


encode_canonical = json.JSONEncoder(ensure_ascii=False, sort_keys=True, check_circular=False).encode


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
