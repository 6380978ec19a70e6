"""normalise: turn flat exports with nested cells into a linked relational database."""

from .decode import DecodedColumn, QuarantinedCell, decode, decode_column
from .decode.literal import CellError, decode_json, decode_python_literal
from .model.errors import NormaliseError, NotClean, UnreadableFile, UsageError
from .model.export import Export, RejectedRow
from .model.settings import JoinOptions, Limits, Options, Settings
from .pipeline import build_database, make_plan
from .read import read
from .result import Built
from .survey import survey

__all__ = [
    "Built",
    "CellError",
    "DecodedColumn",
    "Export",
    "JoinOptions",
    "Limits",
    "NormaliseError",
    "NotClean",
    "Options",
    "QuarantinedCell",
    "RejectedRow",
    "Settings",
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
