"""Decode pass: find each column's format and decode whole columns at once.

``columns`` decides a column's format and decodes it (``decode``, ``decode_column``); ``nested`` reads JSON and
Python-literal cells a whole column at a time (with the C accelerator when it is built); ``delimited`` splits
values joined by a separator and keeps what gives every cell back; ``literal`` is the exact per-cell path, the
grammar of Python literals and JSON with its limits and messages.
"""

from .columns import (EMPTY_MARKERS, FORMATS, ColumnFormat, DecodedColumn, QuarantinedCell, decisions, decode,
                      decode_column, excerpt, first_value, format_choices, late_decision, parse_decode_option)
from .delimited import NAME_SUFFIXES, detect_separator, join_delimited, join_separator_of, split_delimited
from .nested import ACCELERATED, paused_gc, python_literals_as_json, rewrite_as_json

__all__ = ["ACCELERATED", "ColumnFormat", "DecodedColumn", "EMPTY_MARKERS", "FORMATS", "NAME_SUFFIXES",
           "QuarantinedCell", "decisions", "decode", "decode_column", "detect_separator", "excerpt",
           "first_value", "format_choices", "join_delimited", "join_separator_of", "late_decision",
           "parse_decode_option", "paused_gc", "python_literals_as_json", "rewrite_as_json",
           "split_delimited"]
