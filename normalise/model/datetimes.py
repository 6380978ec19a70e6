"""Date and timestamp columns in PostgreSQL's own types, given back as the text they came in (write pass).

A ``date`` or ``timestamp`` column of the plan holds ISO 8601 text (ISO 8601-1:2019, the extended
format: ``2024-01-31``, ``2024-01-31T09:30:00.250+01:00``). SQLite has no date type and keeps that
text, which sorts and compares correctly. PostgreSQL has DATE, TIMESTAMP and TIMESTAMP WITH TIME ZONE,
which BI tools and SQL clients read as dates; but they keep the instant, not the text: ``12:00`` and
``12:00:00`` are one value, and a TIMESTAMP WITH TIME ZONE keeps no offset at all (PostgreSQL
documentation, "8.5.1.3. Time Stamps": the value is stored in UTC and shown in the session's zone).

So a column is stored natively only when one written form (``TextForm``) gives every one of its values
back exactly: ``TextForm.text_sql`` is the ``to_char`` expression that writes the stored value in that
form (PostgreSQL documentation, "9.8. Data Type Formatting Functions"), and the lossless proof reads the
column through it. A timestamp column goes WITH TIME ZONE when its values carry an offset, and then
only when every value carries the same one, written the same way (``Z`` throughout, or ``+01:00``
throughout): that offset is written back after the local time at it. A column whose values take
several forms, carry several offsets, or are not calendar dates and times (a value after the sample
the types were inferred from) keeps TEXT, and ``text_form`` says why.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from datetime import date, datetime, time, timedelta, timezone

# ISO 8601 extended format, as infer.py's types accept it: a calendar date; then a time of hours and
# minutes, seconds, a fraction of at most 6 digits (PostgreSQL keeps microseconds, and rounds more),
# and an offset: Z, +hh:mm or +hhmm
_DATE = re.compile(r"(\d{4})-(\d{2})-(\d{2})")
_TIMESTAMP = re.compile(r"(\d{4})-(\d{2})-(\d{2})([T ])(\d{2}):(\d{2})(?::(\d{2})(?:\.(\d+))?)?"
                        r"(Z|[+-]\d{2}:?\d{2})?")
# PostgreSQL refuses a displacement of 16 hours or more ("time zone displacement out of range")
_MAX_OFFSET_HOURS = 15
_MICROSECOND_DIGITS = 6


@dataclass(frozen=True)
class TextForm:
    """How every value of a column is written, so that the stored value gives its text back.

    ``digits`` fraction digits (0: none); ``bare_whole``: a value at a whole second is written
    without its fraction (as Python's ``datetime.isoformat`` writes), the others with ``digits``;
    ``offset``: the offset every value carries, as written (None: none, a TIMESTAMP).

    Example:
        >>> TextForm("timestamp", digits=3, offset="Z").sql_type
        'TIMESTAMP WITH TIME ZONE'
        >>> TextForm("timestamp", digits=3, offset="Z").text_sql('"sent"')
        'to_char("sent" AT TIME ZONE INTERVAL \\'+00:00\\', \\'YYYY-MM-DD"T"HH24:MI:SS.FF3\\') || \\'Z\\''
    """

    kind: str  # date | timestamp
    separator: str = "T"
    seconds: bool = True
    digits: int = 0
    bare_whole: bool = False
    offset: str | None = None

    @property
    def sql_type(self) -> str:
        if self.kind == "date":
            return "DATE"
        return "TIMESTAMP WITH TIME ZONE" if self.offset is not None else "TIMESTAMP"

    def pattern(self) -> str:
        """The ``to_char`` pattern of the form (without a fraction written only when not whole)."""
        if self.kind == "date":
            return "YYYY-MM-DD"
        text = "YYYY-MM-DD" + ('"T"' if self.separator == "T" else " ") + "HH24:MI" + (":SS" if self.seconds else "")
        return text + (f".FF{self.digits}" if self.digits and not self.bare_whole else "")

    def text_sql(self, expr: str) -> str:
        """A PostgreSQL expression giving the stored value as the text it came in (``to_char``)."""
        local = expr if self.offset is None else f"{expr} AT TIME ZONE INTERVAL {_literal(_interval(self.offset))}"
        text = f"to_char({local}, {_literal(self.pattern())})"
        if self.bare_whole:
            text = (f"{text} || CASE WHEN date_trunc('second', {local}) = {local} THEN '' "
                    f"ELSE to_char({local}, '.FF{self.digits}') END")
        return text if self.offset is None else f"{text} || {_literal(self.offset)}"


def _literal(text: str) -> str:
    return "'" + text.replace("'", "''") + "'"


def _interval(offset: str) -> str:
    """The ISO 8601 offset as PostgreSQL's interval (positive east of Greenwich, as ISO 8601 counts)."""
    if offset == "Z":
        return "+00:00"
    return offset if ":" in offset else f"{offset[:3]}:{offset[3:]}"


def _offset_delta(offset: str) -> timedelta | None:
    if offset == "Z":
        return timedelta(0)
    hours, minutes = int(offset[1:3]), int(offset[-2:])
    if hours > _MAX_OFFSET_HOURS or minutes > 59:
        return None
    delta = timedelta(hours=hours, minutes=minutes)
    return -delta if offset[0] == "-" else delta


def parse(kind: str, text) -> date | datetime | None:
    """The date or timestamp a value writes in ISO 8601 (aware when it carries an offset), or None when
    it is not one: not text, not a calendar date, a time out of range (a leap second ``:60``, hour 24),
    more fraction digits than microseconds, an offset PostgreSQL refuses.

    Example:
        >>> parse("date", "2024-02-29"), parse("date", "2023-02-29")
        (datetime.date(2024, 2, 29), None)
        >>> parse("timestamp", "2024-01-31T09:30+01:00")
        datetime.datetime(2024, 1, 31, 9, 30, tzinfo=datetime.timezone(datetime.timedelta(seconds=3600)))
    """
    if type(text) is not str:
        return None
    found = (_DATE if kind == "date" else _TIMESTAMP).fullmatch(text)
    if found is None:
        return None
    year, month, day = (int(found.group(k)) for k in (1, 2, 3))
    try:
        day_value = date(year, month, day)
        if kind == "date":
            return day_value
        fraction = found.group(8) or ""
        if len(fraction) > _MICROSECOND_DIGITS:
            return None
        clock = time(int(found.group(5)), int(found.group(6)), int(found.group(7) or 0),
                     int(fraction.ljust(_MICROSECOND_DIGITS, "0")))
    except ValueError:
        return None
    zone = None
    if found.group(9):
        delta = _offset_delta(found.group(9))
        if delta is None:
            return None
        zone = timezone(delta)
    return datetime.combine(day_value, clock, zone)


def _shape(kind: str, text: str) -> tuple:
    """(separator, seconds written, fraction digits, offset as written) of a value ``parse`` accepts."""
    if kind == "date":
        return ()
    found = _TIMESTAMP.fullmatch(text)
    return found.group(4), found.group(7) is not None, len(found.group(8) or ""), found.group(9)


def text_form(kind: str, values) -> tuple[TextForm | None, str]:
    """The one form every value of a column is written in, or None and why there is none.

    ``values`` are the column's values (None for NULL). No values at all: the plain form (an empty
    column holds nothing to give back).

    Example:
        >>> text_form("timestamp", ["2024-01-31T09:30:00.250Z", "2024-02-01T10:00:00.000Z"])[0]
        TextForm(kind='timestamp', separator='T', seconds=True, digits=3, bare_whole=False, offset='Z')
        >>> text_form("timestamp", ["2024-01-31T09:30:00+01:00", "2024-07-01T09:30:00+02:00"])[1]
        "values carry different offsets ('+01:00', '+02:00'); TIMESTAMP WITH TIME ZONE keeps none"
        >>> text_form("date", ["2024-01-31", "31/01/2024"])[1]
        "'31/01/2024' is not an ISO 8601 calendar date PostgreSQL's DATE holds"
    """
    what = "calendar date PostgreSQL's DATE holds" if kind == "date" else "date and time PostgreSQL's TIMESTAMP holds"
    shapes: dict[tuple, str] = {}
    whole_with_fraction = None
    for value in values:
        if value is None:
            continue
        parsed = parse(kind, value)
        if parsed is None:
            return None, f"{value!r} is not an ISO 8601 {what}"
        shape = _shape(kind, value)
        if shape not in shapes:
            shapes[shape] = value
            if len(shapes) > 2:
                break
        if kind == "timestamp" and shape[2] and whole_with_fraction is None and parsed.microsecond == 0:
            whole_with_fraction = value
    if kind == "date":
        return TextForm("date"), ""
    if not shapes:
        return TextForm("timestamp"), ""
    offsets = list(dict.fromkeys(s[3] for s in shapes))
    if len(offsets) > 1:
        shown = ", ".join(repr(o) if o else "none" for o in offsets[:3])
        return None, f"values carry different offsets ({shown}); TIMESTAMP WITH TIME ZONE keeps none"
    rest = {s[:3] for s in shapes}
    if len(rest) == 1:
        separator, seconds, n = rest.pop()
        return TextForm("timestamp", separator, seconds, n, offset=offsets[0]), ""
    # two forms: a fraction of n digits, left out at a whole second (datetime.isoformat's way)
    separators, seconds, digits = {s[0] for s in rest}, {s[1] for s in rest}, {s[2] for s in rest}
    if len(rest) == 2 and len(separators) == 1 and seconds == {True} and 0 in digits and whole_with_fraction is None:
        n = max(digits)
        return TextForm("timestamp", separators.pop(), True, n, bare_whole=True, offset=offsets[0]), ""
    first, second = list(shapes.values())[:2]
    return None, f"values are written in different forms ({first!r}, {second!r})"
