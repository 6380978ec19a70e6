"""The type of a column or a field from its values (integer, real, decimal, boolean, date, timestamp, text), and a
record's natural key.
"""

from __future__ import annotations

import re

from ..model.decimals import is_decimal_text
from .dependencies import ID_NAME, is_scalar
from .options import NATURAL_KEY_MIN_DISTINCT

_INTEGER = re.compile(r"[-+]?(0|[1-9]\d{0,17})")  # leading zeros are codes, not numbers
_REAL = re.compile(r"[-+]?((0|[1-9]\d*)(\.\d*)?|\.\d+)([eE][-+]?\d+)?")
_DATE = re.compile(r"\d{4}-\d{2}-\d{2}")
_TIMESTAMP = re.compile(r"\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(:\d{2}(\.\d+)?)?(Z|[+-]\d{2}:?\d{2})?")


def _is_calendar_date(text: str) -> bool:
    from datetime import date

    try:
        date.fromisoformat(text)
    except ValueError:
        return False
    return True


def scalar_type(values: list) -> str:
    """The narrowest type that holds every value: integer, real, date, timestamp, boolean or text.

    Example:
        >>> scalar_type(["1", "2"]), scalar_type(["1", "2.5"]), scalar_type(["2024-01-31"]), scalar_type(["x", "1"])
        ('integer', 'real', 'date', 'text')
        >>> scalar_type(["007", "12"]), scalar_type(["2024-13-45"])
        ('text', 'text')
    """
    if not values:
        return "empty"
    if all(isinstance(v, bool) for v in values):
        return "boolean"
    texts = [v if isinstance(v, str) else repr(v) for v in values]
    for name, pattern in (("integer", _INTEGER), ("real", _REAL), ("date", _DATE), ("timestamp", _TIMESTAMP)):
        if all(pattern.fullmatch(t) for t in texts):
            if name in ("date", "timestamp") and not all(_is_calendar_date(t[:10]) for t in texts):
                continue
            return name
    return "text"


def value_type(values, types: set | None = None) -> str:
    """The SQL-side type of decoded scalar values: integer, real, boolean, date, timestamp or text.

    ``types``, when given, is ``set(map(type, values))``, already known.

    Example:
        >>> value_type([1, 2]), value_type([1, 2.5]), value_type([True]), value_type(["2024-01-02"]), value_type([1, "a"])
        ('integer', 'real', 'boolean', 'date', 'text')
    """
    types = set(map(type, values)) if types is None else types
    kinds = types - {type(None)}
    if not kinds:
        return "text"
    if kinds == {bool}:
        return "boolean"
    if kinds <= {int, float}:
        ints = values if types == {int} else [v for v in values if type(v) is int] if int in kinds else []
        if ints and not (-(1 << 63) <= min(ints) and max(ints) < (1 << 63)):
            return "text"  # beyond 64 bits: kept exactly as text
        return "integer" if kinds == {int} else "real"
    if kinds == {str}:
        texts = values if types == {str} else [v for v in values if v is not None]
        t = scalar_type(texts[:10000])
        return t if t in ("date", "timestamp") else "text"
    return "text"


def scalar_column_type(values: list) -> str:
    """Type of a plain-text column (cells are strings)."""
    present = [v for v in values if v is not None]
    if present and not all(isinstance(v, str) for v in present):
        return value_type(present)
    t = scalar_type(present)
    # a number column gives back each cell's own text: "+7", "007", "1.50" or "1e3" would come back as
    # "7", "7", "1.5" and "1000.0", so such a column stays text (the Python reference: str(int), repr(float))
    if t == "integer" and not all(str(int(v)) == v for v in present):
        return "text"
    if t == "real" and any(len(v) > 15 and _INTEGER_TEXT.fullmatch(v) for v in present):
        # integers of more digits than a float holds exactly: as integers when they all fit 64 bits, else
        # as text, never rounded to a float
        ints = [v for v in present if _INTEGER_TEXT.fullmatch(v)]
        fits = len(ints) == len(present) and all(len(v) <= 20 and -(1 << 63) <= int(v) < (1 << 63) for v in ints)
        return "integer" if fits and all(str(int(v)) == v for v in ints) else "text"
    if t == "real" and not all(repr(float(v)) == v for v in present):
        # "12.50", "0.10": a float would drop the digits, so an exact decimal (its text; NUMERIC on PostgreSQL)
        return "decimal" if all(is_decimal_text(v) for v in present) else "text"
    return "text" if t == "empty" else t


_INTEGER_TEXT = re.compile(r"[-+]?[1-9][0-9]*")


def detect_natural_key(columns: list[str], values: dict[str, list], types: dict[str, str]) -> str | None:
    """The column that identifies the records: present everywhere, (nearly) unique, an identifier's name first.

    Example:
        >>> detect_natural_key(["title", "key"], {"title": ["A", "B", "C"], "key": ["k1", "k2", "k3"]},
        ...                    {"title": "text", "key": "text"})
        'key'
    """
    best = None
    for position, name in enumerate(columns):
        vals = values[name]
        if not vals or any(v is None for v in vals) or types.get(name) not in ("integer", "text"):
            continue
        if not all(map(is_scalar, vals)):  # a set or a list among the values: no key (nor hashable)
            continue
        distinct = len(set(vals)) / len(vals)
        if distinct < NATURAL_KEY_MIN_DISTINCT:
            continue
        score = (bool(ID_NAME.search(name)), distinct == 1.0, -position)
        if best is None or score > best[0]:
            best = (score, name)
    return None if best is None else best[1]


def list_value_type(lists: list) -> str:
    """The type of a value list's values: integer or boolean when every value is one, real when every value
    is a number (a list of numbers stays numbers, RFC 8259 section 6), else text.

    Example:
        >>> list_value_type([[1, 2], None, [3]]), list_value_type([[1.5, 2.0]]), list_value_type([[1, "a"]])
        ('integer', 'real', 'text')
    """
    kinds = {type(x) for v in lists if isinstance(v, (list, tuple)) for x in v if x is not None}
    if kinds == {int}:
        values = [x for v in lists if isinstance(v, (list, tuple)) for x in v if x is not None]
        return "integer" if -(1 << 63) <= min(values) and max(values) < (1 << 63) else "text"
    if kinds and kinds <= {int, float}:
        return "real"  # numbers: an integer among them comes back as 3.0 and is traced as the 3 it was
    return {frozenset([bool]): "boolean"}.get(frozenset(kinds), "text")
