"""normalise: turn flat exports with nested cells into a linked relational database."""

from .decode import DecodedColumn, QuarantinedCell, decode, decode_column
from .errors import NormaliseError, UnreadableFile, UsageError
from .literal import CellError, Limits, decode_json, decode_python_literal
from .read import Export, RejectedRow, read
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
    "decode",
    "decode_column",
    "decode_json",
    "decode_python_literal",
    "read",
    "survey",
]
