"""Text fit to print or to store: lone surrogates and control characters written as escapes.

The reader keeps bytes its encoding cannot read as lone surrogates (Python's ``surrogateescape``
error handler, PEP 383), and a JSON escape (``"\\ud800"``) can make one too. No UTF-8 stream, text
column or web page can hold them, so whatever shows or stores such text goes through here. This
module imports nothing of the package: every pass may use it.
"""

from __future__ import annotations

import re

SURROGATE = re.compile("[\ud800-\udfff]")  # a lone surrogate: no character, and no UTF-8 text holds it
# what a page or a terminal should not be handed raw: C0 and C1 controls (tab and line breaks kept),
# lone surrogates and the two noncharacters of the Basic Multilingual Plane
_UNPRINTABLE = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f\ud800-\udfff\ufffe\uffff]")


def _escape(match: re.Match) -> str:
    code = ord(match.group())
    return f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}"


def printable(value):
    """Text with undecodable bytes written as ``\\xNN`` escapes (a surrogate no byte made, from a JSON escape,
    as ``\\udNNN``); other values as they are. For names and for the bookkeeping tables, which quote raw input.

    Example:
        >>> printable("An\\udce9"), printable("na\\udcffme"), printable("\\ud800"), printable("name"), printable(7)
        ('An\\\\xe9', 'na\\\\xffme', '\\\\ud800', 'name', 7)
    """
    if not isinstance(value, str) or value.isascii() or not SURROGATE.search(value):
        return value
    try:
        return value.encode("utf-8", "surrogateescape").decode("utf-8", "backslashreplace")
    except UnicodeEncodeError:  # a surrogate from a JSON escape, not from an undecodable byte
        return value.encode("utf-8", "backslashreplace").decode("utf-8")


def escape_surrogates(text: str) -> str:
    """Lone surrogates written as ``\\udcXX``: valid inside a JSON string, and a strict UTF-8 stdout can
    print it.

    Example:
        >>> escape_surrogates('"caf\\udce9"')
        '"caf\\\\udce9"'
    """
    return SURROGATE.sub(_escape, text)


def clean(value) -> str:
    """Text fit to show in a report: control characters and lone surrogates written as escapes.

    Example:
        >>> clean("a\\x00b"), clean(None), clean("caf\\udce9"), clean(3)
        ('a\\\\x00b', '', 'caf\\\\udce9', '3')
    """
    text = "" if value is None else value if isinstance(value, str) else str(value)
    return _UNPRINTABLE.sub(_escape, text)
