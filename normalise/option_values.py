"""Option values are checked before any work: types, ranges and encodings, one line per refusal.

``options_check.py`` checks that options naming files, columns and fields name ones that are there, which
needs the decoded inputs; the values checked here need nothing but themselves, so they are checked first,
by the command line (as argparse ``type=`` functions, ``as_argument``) and by the Python API
(``check_values``, called by ``build_database``, ``make_plan`` and ``survey``) alike, with the same message:

    --max-depth -1: expected a whole number of at least 1, got -1

Each check returns the value in the form the passes use (``delimiter("tab")`` is ``"\\t"``) or raises
``UsageError``.
"""

from __future__ import annotations

import argparse
import codecs
import math

from .model.errors import UsageError
from .model.settings import CARDINALITIES, DUPLICATES, HOWS


def _refuse(option: str, value, expected: str, got: str):
    raise UsageError(f"{option} {value}: expected {expected}, got {got}")


def encoding(value: str, option: str = "--encoding") -> str:
    """A text encoding Python knows, as given.

    ``codecs.lookup`` finds every codec, including the ones that turn bytes into bytes (``base64``) or text
    into text (``rot13``); ``CodecInfo._is_text_encoding`` is how the standard library itself tells a text
    encoding from those (Python's ``codecs`` module documentation, "Standard Encodings" and "Binary/Text
    Transforms"; the attribute is what ``str.encode`` and ``open`` check).

    Example:
        >>> encoding("latin-1")
        'latin-1'
        >>> encoding("rot13")  # doctest: +ELLIPSIS
        Traceback (most recent call last):
        ...
        normalise.model.errors.UsageError: --encoding rot13: expected a text encoding ..., got a text-to-text transform
    """
    expected = "a text encoding such as utf-8, cp1252 or latin-1"
    if not isinstance(value, str) or not value.strip():
        _refuse(option, repr(value), expected, "nothing" if not value else "blanks")
    try:
        info = codecs.lookup(value)
    except LookupError:
        _refuse(option, value, expected, "a name Python's codecs do not know")
    if not getattr(info, "_is_text_encoding", True):
        kind = "a bytes-to-bytes transform" if value.lower().replace("-", "_") in _BYTES_CODECS \
            else "a text-to-text transform"
        _refuse(option, value, expected, kind)
    return value


# the binary transforms of the codecs documentation; every other non-text codec there is text to text (rot13)
_BYTES_CODECS = frozenset({"base64", "base64_codec", "base_64", "bz2", "bz2_codec", "hex", "hex_codec",
                           "quopri", "quopri_codec", "quotedprintable", "quoted_printable", "uu", "uu_codec",
                           "zip", "zlib", "zlib_codec"})


def delimiter(value: str, option: str = "--delimiter") -> str:
    """One character between fields; ``\\t`` or ``tab`` for a tab.

    The double quote is the CSV quote character and a line break ends a record (RFC 4180 section 2, from
    memory), so neither can separate fields.

    Example:
        >>> delimiter("tab"), delimiter(";")
        ('\\t', ';')
        >>> delimiter("ab")
        Traceback (most recent call last):
        ...
        normalise.model.errors.UsageError: --delimiter 'ab': expected one character (or tab), got 2 characters
    """
    if value in ("\\t", "tab"):
        return "\t"
    expected = "one character (or tab)"
    if not isinstance(value, str):
        _refuse(option, repr(value), expected, type(value).__name__)
    if len(value) != 1:
        _refuse(option, repr(value), expected, "nothing" if not value else f"{len(value)} characters")
    if value == '"':
        _refuse(option, repr(value), "a character other than the quote character", "the quote character")
    if value in "\r\n":
        _refuse(option, repr(value), "a character other than a line break", "a line break")
    return value


def whole_number(option: str, minimum: int, value) -> int:
    """An integer of at least ``minimum``, from an int or its text.

    Example:
        >>> whole_number("--max-depth", 1, "12")
        12
        >>> whole_number("--max-depth", 1, "-1")
        Traceback (most recent call last):
        ...
        normalise.model.errors.UsageError: --max-depth -1: expected a whole number of at least 1, got -1
    """
    expected = f"a whole number of at least {minimum}"
    if isinstance(value, bool) or not isinstance(value, (int, str)):
        _refuse(option, repr(value), expected, type(value).__name__)
    if isinstance(value, str):
        try:
            number = int(value.strip())
        except ValueError:
            _refuse(option, repr(value) if not value.strip() else value, expected, "text that is not a number")
    else:
        number = value
    if number < minimum:
        _refuse(option, value, expected, number)
    return number


def share(option: str, value) -> float:
    """A finite share in [0, 1): the tolerated share of functional-dependency violations.

    A share of 1 or more would accept any dependency, NaN compares false with every bound.

    Example:
        >>> share("--threshold", "0.1")
        0.1
        >>> share("--threshold", "nan")  # doctest: +ELLIPSIS
        Traceback (most recent call last):
        ...
        normalise.model.errors.UsageError: --threshold nan: expected a number from 0 up to ..., got NaN, which is not a number
    """
    expected = "a number from 0 up to (not including) 1"
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        _refuse(option, repr(value), expected, type(value).__name__)
    try:
        number = float(value)
    except ValueError:
        _refuse(option, repr(value) if not value.strip() else value, expected, "text that is not a number")
    if math.isnan(number):
        _refuse(option, value, expected, "NaN, which is not a number")
    if not 0 <= number < 1:
        _refuse(option, value, expected, "a number outside that range")
    return number


def choice(option: str, choices: tuple, value) -> str:
    """One of ``choices``."""
    if value not in choices:
        _refuse(option, value if isinstance(value, str) and value else repr(value),
                f"one of {', '.join(choices)}", "a value not among them")
    return value


def check_values(*, encoding_name=None, delimiter_char=None, limits=None, chunk_rows=None,
                 settings=None) -> str | None:
    """Refuse values no pass can work with, before any work; returns the delimiter as the reader takes it.

    Raises:
        UsageError: naming the option, what was expected and what arrived.

    Example:
        >>> from normalise.decode.literal import Limits
        >>> check_values(limits=Limits(max_depth=0))
        Traceback (most recent call last):
        ...
        normalise.model.errors.UsageError: --max-depth 0: expected a whole number of at least 1, got 0
    """
    if encoding_name is not None:
        encoding(encoding_name)
    if delimiter_char is not None:
        delimiter_char = delimiter(delimiter_char)
    if limits is not None:
        whole_number("--max-depth", 1, limits.max_depth)
        whole_number("--max-cell-chars", 1, limits.max_cell_chars)
    if chunk_rows is not None:
        whole_number("--chunk-rows", 0, chunk_rows)  # 0: read the file at once
    if settings is not None:  # model.settings.Settings
        share("--threshold", settings.violation_threshold)
        choice("--duplicates", DUPLICATES, settings.duplicates)
        choice("--how", HOWS, settings.how)
        choice("--cardinality", CARDINALITIES, settings.cardinality)
    return delimiter_char


def as_argument(check, *leading):
    """An argparse ``type=`` function: the check's message, kept whole, exit 2 (see ``cli._Parser.error``)."""
    def convert(text: str):
        try:
            return check(*leading, text)
        except UsageError as exc:
            raise argparse.ArgumentTypeError(str(exc)) from None
    convert.__name__ = getattr(check, "__name__", "value")
    return convert
