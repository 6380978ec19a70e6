"""How a value is stored in a column of a plan type, and spelt as text for keys and comparisons."""

from __future__ import annotations

from ..model.exact import INT64_MAX, INT64_MIN, json_text


def to_sql_value(value, type_: str):
    """A decoded value as the column type stores it (None stays None)."""
    if value is None:
        return None
    if type_ == "integer":
        if isinstance(value, bool):
            return int(value)
        if not isinstance(value, int):
            try:
                value = int(value)
            except (TypeError, ValueError, OverflowError):  # OverflowError: int(inf)
                return None
        # SQLite's INTEGER holds 64 bits; a bigger value is not an integer of the column
        # (stored as NULL and reported, like any value of another type)
        return value if INT64_MIN <= value <= INT64_MAX else None
    if type_ == "real":
        try:
            return float(value)
        except (TypeError, ValueError, OverflowError):  # OverflowError: float(10**400)
            return None
    if type_ == "boolean":
        if isinstance(value, str):
            return value.strip().lower() in ("true", "1", "yes")
        return bool(value)
    if isinstance(value, str):
        return value
    return json_text(value)


def value_text(value, type_: str) -> str:
    """The typed text a value of a value list is keyed by (its surrogate key is the hash of it).

    Example:
        >>> value_text("7", "text"), value_text(7, "integer"), value_text(44, "real"), value_text(44.0, "real")
        ('text:7', 'integer:7', 'real:44.0', 'real:44.0')
    """
    if type(value) is str:
        return "text:" + value
    if type_ == "real" and type(value) in (int, float):
        # 44 and 44.0 are one REAL value (the 44 is traced); so are -0.0 and 0.0, one value to SQL's UNIQUE
        return "real:" + repr(float(value) + 0.0)
    return canonical(value, type_)


def canonical(value, type_: str) -> str:
    """The typed text form of a natural key, the input of its surrogate key."""
    if type_ == "integer" and isinstance(value, int) and not isinstance(value, bool):
        return f"integer:{value}"
    return "text:" + (value if isinstance(value, str) else json_text(value))


def all_usable(idents: list, type_: str) -> bool:
    """Whether every value is a usable identity (``usable_identity``), judged on the column at once."""
    kinds = set(map(type, idents))
    if type_ == "integer":
        return kinds == {int} and INT64_MIN <= min(idents) and max(idents) <= INT64_MAX
    return not kinds & {type(None), dict, list, tuple, set, bool}


def fits_int64(col: list) -> bool:
    """Whether a column of ints (and None) fits SQLite's 64-bit INTEGER."""
    ints = [v for v in col if v is not None]
    return not ints or (INT64_MIN <= min(ints) and max(ints) <= INT64_MAX)


STORED_AS_IS = {  # Python types a column stores without conversion (None is NULL)
    "integer": {int, type(None)}, "real": {float, type(None)}, "text": {str, type(None)},
    "boolean": {bool, type(None)}, "date": {str, type(None)}, "timestamp": {str, type(None)},
    "decimal": {str, type(None)},
}
