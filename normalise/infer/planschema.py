"""What a plan file may hold: each block's keys, the kind of each value and the keys it needs (``SCHEMA``), checked
before anything else is read (``check_shape``), each fault with its line and the closest known key.
"""

from __future__ import annotations

import os
from difflib import get_close_matches

from ..model.errors import EXIT_USAGE, NormaliseError
from ..model.kinds import Kind
from ..model.plan import TYPES
from .plantext import toml_value

KINDS = (Kind.ENTITY_LIST, Kind.CHILD_LIST, Kind.VALUE_LIST, Kind.OBJECT_COLUMNS, Kind.OBJECT_CHILD)


class InvalidPlan(NormaliseError):
    """A plan file that cannot be read or does not fit the data (the plan given: a usage error)."""

    exit_code = EXIT_USAGE


NAME = "name"  # a SQL name as the tool makes them: [a-z0-9_], not starting with a digit, at most 60 characters
TEXT, FLAG, WHOLE, SHARE, TEXTS = "text", "true or false", "a whole number", "a number from 0 to 1", "texts"
REQUIRED = "required"  # a block's keys that must be there
FIELD = {REQUIRED: ("key", "name", "type"), "key": "path", "name": NAME, "type": TYPES, "null": ("null", "absent"), "as_text": FLAG,
         "references": NAME, "entity": NAME, "scale": WHOLE}


NESTED = {REQUIRED: ("column", "kind"), "column": TEXT, "path": TEXT, "file": TEXT, "kind": KINDS, "table": NAME, "entity": NAME,
          "values_table": NAME, "identity": TEXT, "matched": FLAG, "separator": TEXT,
          "value_type": ("integer", "real", "boolean", "text"), "references": NAME, "keyed": TEXT,
          "keyed_value": TEXT, "fields": [FIELD]}


NESTED["children"] = [NESTED]
SCHEMA = {
    "version": WHOLE, "violation_threshold": SHARE,
    "join": {"how": ("left", "inner", "full"), "cardinality": ("one-to-one", "one-to-many"), "separate": FLAG,
             "on": "map of texts"},
    "record": [{REQUIRED: ("file", "table", "key"), "file": TEXT, "table": NAME, "key": NAME, "natural_key": TEXT,
                "duplicates": ("first", "last", "refuse"), "columns": [FIELD], "nested": [NESTED]}],
    "entity": [{REQUIRED: ("handle", "table", "identity", "identity_column", "identity_type"), "handle": TEXT, "table": NAME, "identity": TEXT, "identity_column": NAME,
                "identity_type": TYPES, "matched": FLAG, "members": TEXTS, "attributes": [FIELD]}],
    "view": [{REQUIRED: ("name", "kind", "table"), "name": NAME, "kind": ("record_summary", "entity_summary"), "table": NAME, "lists": TEXTS,
              "date_column": TEXT, "separator": TEXT,
              "pick": [{REQUIRED: ("name", "list", "attribute", "value"), "name": NAME, "list": TEXT, "attribute": TEXT, "value": "a text or number"}]}],
}


def check_shape(doc: dict, text: str) -> None:
    """Every key of the plan file known and every value of the kind the schema (``SCHEMA``) says, or one
    ``InvalidPlan`` naming the line, the key, what was expected and what arrived."""
    _shape(doc, SCHEMA, "", text)


def _shape(value, spec, where: str, text: str) -> None:
    if isinstance(spec, dict):
        if not isinstance(value, dict):
            _wrong(text, where, "a table of keys", value)
        missing = [k for k in spec.get(REQUIRED, ()) if k not in value]
        if missing:
            refuse(text, f"{where or 'the plan'} lacks {', '.join(missing)}",
                  f"every such block needs {', '.join(spec[REQUIRED])}; or write a fresh plan with `normalise plan`",
                  *_needles(value))
        for key, inner in value.items():
            if key not in spec or key == REQUIRED:
                known = [k for k in spec if k != REQUIRED]
                close = get_close_matches(str(key), known, n=1, cutoff=0.6)
                refuse(text, f"{where or 'the plan'}: unknown key {key!r}"
                      + (f" (did you mean {close[0]!r}?)" if close else ""),
                      f"use one of: {', '.join(known)}; or write a fresh plan with `normalise plan`",
                      f"{key} =", f'"{key}"', f"{key}")
            _shape(inner, spec[key], f"{where}.{key}" if where else key, text)
    elif isinstance(spec, list):
        if not isinstance(value, list):
            _wrong(text, where, "a list of [[...]] blocks or { ... } entries", value)
        for n, item in enumerate(value):
            _shape(item, spec[0], f"{where}[{n + 1}]", text)
    elif isinstance(spec, tuple):
        if value not in spec:
            key = where.rsplit(".", 1)[-1].split("[")[0]
            refuse(text, f"{where}: unknown {key} {value!r}", f"use one of {', '.join(spec)}",
                  f"{key} = {toml_value(value) if isinstance(value, (str, int, float, bool)) else ''}".strip(), f"{key} =")
    elif not _fits(value, spec):
        _wrong(text, where, spec, value)


def _needles(block: dict) -> list[str]:
    """Text that finds a block's line: its naming keys with their values first."""
    keys = [k for k in ("name", "column", "handle", "file", "table") if isinstance(block.get(k), str)]
    keys += [k for k, v in block.items() if k not in keys and isinstance(v, (str, int, float))]
    return [f"{k} = {toml_value(block[k])}" for k in keys]


def _fits(value, spec: str) -> bool:
    from ..model.names import sql_name

    if spec == NAME:
        return isinstance(value, str) and sql_name(value) == value and len(value.encode()) <= 63
    if spec == TEXT:
        return isinstance(value, str)
    if spec == FLAG:
        return isinstance(value, bool)
    if spec == WHOLE:
        return isinstance(value, int) and not isinstance(value, bool)
    if spec == SHARE:
        return isinstance(value, (int, float)) and not isinstance(value, bool) and 0 <= value < 1
    if spec == TEXTS:
        return isinstance(value, list) and all(isinstance(v, str) for v in value)
    if spec == "path":
        return isinstance(value, str) or isinstance(value, list) and all(isinstance(v, str) for v in value)
    if spec == "map of texts":
        return isinstance(value, dict) and all(isinstance(v, str) for v in value.values())
    return isinstance(value, (str, int, float)) and not isinstance(value, bool)  # a pick's value


def _wrong(text: str, where: str, expected: str, value) -> None:
    key = where.rsplit(".", 1)[-1].split("[")[0]
    shown = toml_value(value) if isinstance(value, (str, int, float, bool, list)) else type(value).__name__
    hint = f"write {key} = <{expected}>"
    if expected == NAME:  # the name the data would have given it, as the suggestion
        from ..model.names import sql_name

        cleaned = sql_name(value) if isinstance(value, str) else ""
        hint = ("names are lower case letters, digits and _ (not first), at most 60 characters"
                + (f", as {key} = {toml_value(cleaned)} would be" if cleaned else ""))
    refuse(text, f"{where}: expected {expected}, got {shown[:60]}", hint, f"{key} = {shown}", f"{key} =")


def line_of(text: str, *needles: str, after: str | None = None) -> int | None:
    lines = text.splitlines()
    start = 0
    if after:
        start = next((n for n, line in enumerate(lines) if after in line), 0)
    for needle in needles:
        for n, line in enumerate(lines[start:], start=start + 1):
            if needle in line:
                return n
    return None


class PlanText(str):
    """A plan file's text that knows the file it was read from, so that every refusal can name it."""

    path: str = ""

    @classmethod
    def of(cls, text: str, path: str) -> "PlanText":
        out = cls(text)
        out.path = os.fspath(path)
        return out


def refuse(text: str, message: str, hint: str, *needles: str, after: str | None = None):
    line = line_of(text, *needles, after=after) if needles else None
    where = " ".join(filter(None, [getattr(text, "path", ""), f"line {line}" if line else ""]))
    raise InvalidPlan(f"plan {where + ': ' if where else ''}{message}\n  hint: {hint}", line=line,
                      file=getattr(text, "path", None) or None)
