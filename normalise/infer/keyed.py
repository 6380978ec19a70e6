"""Objects keyed by data (``{"de": {...}, "fr": {...}}``): codes as keys, read as a list of their keys.
"""

from __future__ import annotations

import re
from collections import Counter
from itertools import chain

from ..model.names import Namer, singular, sql_name
from ..model.settings import Settings
from .dependencies import ObjectTable
from .options import WIDE_OBJECT_KEYS

# A key that reads as a code: short, no spaces (ISO 4217 "EUR", ISO 639-3 "deu", a year "2018", "1F3FB")
_CODE_KEY = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.+-]{0,11}")
KEYED_MIN_VARYING = 5  # keys, each in a few objects only, that make objects keyed by data


def _key_form(key: str) -> str:
    """A key's form: each letter as A or a, each digit as 9 ("EUR" -> "AAA", "1F3FB" -> "9A9AA")."""
    return "".join("A" if c.isupper() else "a" if c.islower() else "9" if c.isdigit() else c for c in key)


def keyed_shape(objects: list[dict]) -> str:
    """Whether objects are keyed by data rather than by field names: "objects" or "scalars" (their values), or "".

    The evidence, over every object of a column: many distinct keys in all (more than a wide object's
    ``WIDE_OBJECT_KEYS``), or keys that each turn up in a few objects only (the objects fill at most half
    of the key-by-object grid, and at most a fifth of the keys are in nearly every object: a few fixed
    keys with rare extras are fields); keys that look like codes (short, no spaces, most of one form: "EUR" and
    "USD" are both three capitals); and values of one shape (all scalars, or all objects with a few fields).

    Example:
        >>> rows = [{"EUR": {"name": "Euro"}}, {"USD": {"name": "US dollar"}, "USN": {"name": "US dollar (next day)"}},
        ...         {"GBP": {"name": "Pound"}}, {"EUR": {"name": "Euro"}, "CHF": {"name": "Franc"}}]
        >>> keyed_shape(rows), keyed_shape([{"city": "X", "zip": "1"}, {"city": "Y", "zip": "2"}])
        ('objects', '')
        >>> keyed_shape([{"deu": "German"}, {"fra": "French"}, {"ita": "Italian"}, {"nld": "Dutch"},
        ...              {"por": "Portuguese"}])
        'scalars'
    """
    counts = Counter(chain.from_iterable(objects))
    distinct = len(counts)
    if len(objects) < 2 or distinct < 2:
        return ""
    if not all(type(k) is str and _CODE_KEY.fullmatch(k) for k in counts):
        return ""
    many = distinct > WIDE_OBJECT_KEYS
    shared = sum(n >= 0.9 * len(objects) for n in counts.values())  # keys nearly every object has
    varying = (distinct >= KEYED_MIN_VARYING and 2 * sum(counts.values()) <= len(objects) * distinct
               and 5 * shared <= distinct)
    if not (many or varying):
        return ""
    if Counter(map(_key_form, counts)).most_common(1)[0][1] < 0.8 * distinct:
        return ""  # keys of many forms ("city", "zip", "street") are names, not codes
    values = [v for o in objects for v in o.values()]
    if all(type(v) is dict for v in values):
        fields = set(chain.from_iterable(values))
        return "objects" if 0 < len(fields) <= WIDE_OBJECT_KEYS else ""
    if not any(isinstance(v, (dict, list, tuple, set, frozenset)) for v in values):
        return "scalars"
    return ""


def keyed_fields(objects: list[dict], name: str, forced: str | None = None) -> tuple[str, str]:
    """The fields an object keyed by data is read into: (its keys' field, a scalar value's field), or ("", "").

    ``forced`` (from ``Settings.keyed``) names the keys' field whatever the evidence; "" says not keyed.

    Example:
        >>> keyed_fields([{"deu": "German"}, {"fra": "French"}], "languages", forced="code")
        ('code', 'value')
    """
    if forced == "":
        return "", ""
    shape = keyed_shape(objects)
    if not shape and forced:
        values = [v for o in objects for v in o.values()]
        shape = "objects" if values and all(type(v) is dict for v in values) else "scalars"
    if not shape:
        return "", ""
    fields = set(chain.from_iterable(v for o in objects for v in o.values())) if shape == "objects" else set()
    key = forced or Namer(fields)(f"{singular(sql_name(name))}_code")
    return key, ("value" if shape == "scalars" else "")


def keyed_column(nested, values: list, options: Settings, file: str) -> list:
    """A column of objects keyed by data as lists of objects (``nested.keyed`` says so); else its values."""
    from ..model.exact import keyed_items

    forced = options.keyed.get(f"{nested.file}:{nested.column}", options.keyed.get(
        f"{file}:{nested.column}", options.keyed.get(nested.column)))
    key, value_field = keyed_fields([v for v in values if isinstance(v, dict)], nested.column, forced)
    if not key:
        return values
    nested.keyed, nested.keyed_value = key, value_field
    return [keyed_items(v, key, value_field) if isinstance(v, dict) else None for v in values]


_SHORT_CODE = re.compile(r"[a-z]{2,3}([_-][A-Za-z0-9]{2,4})?|[A-Z]{2,3}")  # "de", "pt_BR", "EUR"


def keys_like_codes(table: ObjectTable) -> bool:
    """Whether objects are keyed by codes (languages, countries, currencies: many short keys, one kind of
    value) rather than by field names."""
    keys = table.keys()
    if len(keys) < 5 or not all(isinstance(k, str) and _SHORT_CODE.fullmatch(k) for k in keys):
        return False
    kinds = set().union(*(table.kinds(k) for k in keys)) - {type(None)}
    return len(kinds) == 1
