"""Exact decimals: a column of numbers written with a fixed point whose text a float does not give back
("12.50", "0.10", "19.990"). SQLite has no exact decimal type, so there the column keeps its text; PostgreSQL's
NUMERIC keeps each value's digits and scale, so its text comes back as written (PostgreSQL documentation, "8.1.2.
Arbitrary Precision Numbers": "the scale of the value" is kept as given), and that is where the column is NUMERIC.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

# a plain decimal numeral: an optional minus, no leading zeros, digits after a point (or none, a whole number)
DECIMAL = re.compile(r"-?(0|[1-9][0-9]*)(\.[0-9]+)?")
_NEGATIVE_ZERO = re.compile(r"-0(\.0+)?")  # NUMERIC has no negative zero: '-0.00' comes back '0.00'


@dataclass(frozen=True)
class DecimalForm:
    """A decimal column PostgreSQL holds as NUMERIC; ``text_sql`` gives each value's text back.

    Example:
        >>> DecimalForm().sql_type, DecimalForm().text_sql('"price"')
        ('NUMERIC', '("price")::text')
    """

    kind: str = "decimal"

    @property
    def sql_type(self) -> str:
        return "NUMERIC"

    def text_sql(self, expr: str) -> str:
        return f"({expr})::text"


def is_decimal_text(value: str) -> bool:
    """Whether NUMERIC gives ``value`` back as written.

    Example:
        >>> [is_decimal_text(v) for v in ("12.50", "-3", "0.0", "-0.0", "+1.5", "007.5", "1e3", "1.")]
        [True, True, True, False, False, False, False, False]
    """
    return DECIMAL.fullmatch(value) is not None and _NEGATIVE_ZERO.fullmatch(value) is None


def decimal_form(values) -> tuple[DecimalForm | None, str]:
    """The NUMERIC form of a decimal column, or None and why its values need TEXT (``values``: None for NULL).

    Example:
        >>> decimal_form(["12.50", None, "3"])[0]
        DecimalForm(kind='decimal')
        >>> decimal_form(["12.50", "n/a"])[1]
        "'n/a' is not a decimal numeral NUMERIC gives back as written"
    """
    for value in values:
        if value is not None and not (isinstance(value, str) and is_decimal_text(value)):
            return None, f"{value!r} is not a decimal numeral NUMERIC gives back as written"
    return DecimalForm(), ""


def decimal_scale(values) -> int:
    """The most places after the point among ``values`` (None and non-numerals passed over).

    Example:
        >>> decimal_scale(["12.50", None, "3", "0.125"])
        3
    """
    return max((len(v.partition(".")[2]) for v in values if isinstance(v, str) and is_decimal_text(v)), default=0)


def arrow_decimal(values: list, scale: int | None = None):
    """``(pyarrow decimal128(38, scale), decimal.Decimal values)``, or None when a value is no numeral, has
    more places than ``scale`` or more than 38 digits at it. ``scale`` is the plan's (``FieldMap.scale``), so
    the files of two runs have one type, an empty table's too; without it, the values' own. Each number is
    exact; one of fewer places than the scale is shown with zeros after it ("3.1" as 3.10).

    Example:
        >>> arrow_decimal(["12.50", None, "3.1"], 2)
        (Decimal128Type(decimal128(38, 2)), [Decimal('12.50'), None, Decimal('3.10')])
        >>> arrow_decimal([], 2)[0], arrow_decimal(["0.125"], 2)
        (Decimal128Type(decimal128(38, 2)), None)
    """
    import decimal

    import pyarrow as pa

    present = [v for v in values if v is not None]
    if not all(isinstance(v, str) and is_decimal_text(v) for v in present):
        return None
    scale = decimal_scale(present) if scale is None else scale
    if decimal_scale(present) > scale or any(len(v.lstrip("-").partition(".")[0]) + scale > 38 for v in present):
        return None
    step = decimal.Decimal(1).scaleb(-scale)
    return pa.decimal128(38, scale), [None if v is None else decimal.Decimal(v).quantize(step) for v in values]
