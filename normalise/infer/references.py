"""References back to records: values of a column or a field that name the records of another export by its
natural key (most of the values, at least a few), made foreign keys.
"""

from __future__ import annotations

from ..model.kinds import Kind
from ..model.names import singular
from .dependencies import ID_NAME, is_scalar

# A value list or scalar column refers to a record table when at least this share of its distinct values are
# natural keys of that table, and at least REFERENCE_MIN_VALUES of them are: a few codes with no record (a
# territory with no row of its own) do not break the reference; they are kept and counted. The figures are a
# choice of this project, not a published rule; a plan sets or removes any reference (``references = ...``).
REFERENCE_MIN_SHARE = 0.9
REFERENCE_MIN_VALUES = 3


def reference_text(value) -> str | None:
    """The text a value is compared by with natural keys: a text as it is, an integer's digits, else None.

    CSV cells are text and JSON values may be numbers, so ``7`` and ``"7"`` name the same record (the join
    pass compares keys the same way); a real, a boolean or a nested value names no record.

    Example:
        >>> reference_text("DEU"), reference_text(7), reference_text(7.0), reference_text(True)
        ('DEU', '7', None, None)
    """
    if type(value) is str:
        return value
    if type(value) is int:
        return str(value)
    return None


def reference_texts(values: list, listed: bool) -> set:
    """The distinct reference texts of a column's values (of the values inside its lists when ``listed``)."""
    if not listed:
        return set(map(reference_text, set(v for v in values if v is not None and is_scalar(v)))) - {None}
    found = set()
    for v in values:
        if v is None:
            continue
        found.update(x for x in (v if isinstance(v, (list, tuple)) else [v]) if is_scalar(x))
    return set(map(reference_text, found)) - {None}


def natural_key_texts(records: list, decoded: dict) -> dict[str, set]:
    """Per record table with a natural key: the reference texts of its keys."""
    out = {}
    for record in records:
        if not record.natural_key:
            continue
        column = next(f.path[0] for f in record.scalars if f.column == record.natural_key[0])
        out[record.table] = reference_texts(decoded[record.path][column].values, False)
    return out


def reference_evidence(texts: set, keys: dict[str, set]) -> tuple[str, int, int] | None:
    """The record table whose natural keys most of ``texts`` are: (table, distinct values, values matched).

    Example:
        >>> reference_evidence({"DEU", "FRA", "XKX"}, {"countries": {"DEU", "FRA", "ITA"}})
        ('countries', 3, 2)
    """
    best = None
    for table, found in keys.items():
        matched = len(texts & found)
        if matched and (best is None or matched > best[2]):
            best = (table, len(texts), matched)
    return best


def is_reference(evidence, name: str, texts: set, key_columns: dict[str, str]) -> bool:
    """Whether the evidence is enough to make the column a reference.

    Integers are the most common of keys (a line number, a count, a rank), so a column of them must also be
    named like one (``parent_id``, the record table's or its key's name); text codes need no such name.
    """
    if evidence is None:
        return False
    target, distinct, matched = evidence
    if matched < REFERENCE_MIN_VALUES or matched < REFERENCE_MIN_SHARE * distinct:
        return False
    if all(t.lstrip("-").isdigit() for t in texts):
        lowered = name.lower()
        return bool(ID_NAME.search(name)) or singular(target) in lowered or key_columns[target].lower() in lowered
    return True


def infer_references(plan, decoded: dict) -> None:
    """Mark the value lists and scalar columns whose values are natural keys of a record table of the build.

    Record tables refer to one another without a cycle (a record table may refer to itself, a parent
    region): a reference that would close one is left out, so the tables still load in an order.
    """
    keys = natural_key_texts(plan.records, decoded)
    if not keys:
        return
    by_path = {r.path: r for r in plan.records}
    edges = {(r.table, by_path[r.parent_path].table) for r in plan.records if r.parent_path in by_path}

    def reaches(start: str, goal: str) -> bool:
        seen, todo = set(), [start]
        while todo:
            t = todo.pop()
            if t == goal:
                return True
            seen.add(t)
            todo += [b for a, b in edges if a == t and b not in seen]
        return False

    key_columns = {r.table: r.natural_key[0] for r in plan.records if r.natural_key}
    for record in plan.records:
        columns = decoded[record.path]
        for nested in record.nested:
            if nested.kind != Kind.VALUE_LIST or nested.path or nested.value_type not in ("text", "integer"):
                continue
            texts = reference_texts(columns[nested.column].values, True)
            found = reference_evidence(texts, keys)
            if is_reference(found, nested.column, texts, key_columns):
                nested.references = found[0]
        for f in record.scalars:
            if [f.column] == record.natural_key or f.path[0] == record.parent_column or f.type not in (
                    "text", "integer"):
                continue
            texts = reference_texts(columns[f.path[0]].values, False)
            found = reference_evidence(texts, keys)
            if not is_reference(found, f.path[0], texts, key_columns):
                continue
            if found[0] != record.table and reaches(found[0], record.table):
                continue
            f.references = found[0]
            edges.add((record.table, found[0]))
