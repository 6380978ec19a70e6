"""normalise: turn flat exports with nested cells into a linked relational database."""

from .decode import DecodedColumn, QuarantinedCell, decode, decode_column
from .errors import NormaliseError, UnreadableFile, UsageError
from .literal import CellError, Limits, decode_json, decode_python_literal
from .read import Export, RejectedRow, read
from .pipeline import build_database, make_plan
from .survey import survey

__all__ = [
    "CellError",
    "DecodedColumn",
    "Export",
    "Limits",
    "NormaliseError",
    "QuarantinedCell",
    "RejectedRow",
    "UnreadableFile",
    "UsageError",
    "build_database",
    "decode",
    "decode_column",
    "decode_json",
    "decode_python_literal",
    "make_plan",
    "read",
    "survey",
]
