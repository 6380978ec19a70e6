"""Infer pass: identities and functional dependencies inside nested objects.

An *identity* is the field (or fields) that names the thing an object stands
for: the same ``person_id`` in many rows is one person. Given an identity,
each other field is an *entity attribute* when the identity functionally
determines it (X -> A: every occurrence of one X value carries the same A,
up to a tolerated share of violations such as misspellings) and a *link
attribute* otherwise (a role or a position that varies from record to record).
"""

from __future__ import annotations

import re
from collections import Counter, defaultdict
from dataclasses import dataclass

DEFAULT_VIOLATION_THRESHOLD = 0.05
_ID_NAME = re.compile(r"(?i)^(id|key|code|uuid|guid|slug)$|(_id|_key|_code|_uuid|Id|ID|_no|_number)$")
_POSITION_NAME = re.compile(r"(?i)^(position|pos|order|ordinal|index|idx|rank|seq|sequence|sort_order)$")


def _hashable(value):
    if isinstance(value, (list, dict, set)):
        return repr(value)
    return value


def is_scalar(value) -> bool:
    return not isinstance(value, (list, tuple, dict, set))


@dataclass
class Dependency:
    """How well ``key -> field`` holds across the occurrences of repeated key values."""

    key: str
    field: str
    occurrences: int  # occurrences of key values seen more than once
    violations: int  # of those, occurrences that disagree with their key's most frequent value

    @property
    def violation_rate(self) -> float:
        return self.violations / self.occurrences if self.occurrences else 0.0


def measure_dependency(objects: list[dict], key: str, field: str) -> Dependency:
    """Measure the functional dependency ``key -> field`` over objects.

    Only key values that occur more than once carry evidence; each occurrence
    that differs from its key's most frequent value counts as one violation.

    Example (the "tournament winners" table of the Wikipedia article *Third
    normal form*: Winner -> Winner's date of birth holds):
        >>> rows = [{"winner": "Al Fredrickson", "dob": "1975-07-21"},
        ...         {"winner": "Bob Albertson", "dob": "1968-09-28"},
        ...         {"winner": "Al Fredrickson", "dob": "1975-07-21"},
        ...         {"winner": "Chip Masterson", "dob": "1977-03-14"}]
        >>> d = measure_dependency(rows, "winner", "dob"); (d.occurrences, d.violations)
        (2, 0)
    """
    values: dict = defaultdict(Counter)
    for obj in objects:
        k = obj.get(key)
        if k is None:
            continue
        values[_hashable(k)][_hashable(obj.get(field))] += 1
    occurrences = violations = 0
    for counter in values.values():
        total = sum(counter.values())
        if total < 2:
            continue
        occurrences += total
        violations += total - counter.most_common(1)[0][1]
    return Dependency(key, field, occurrences, violations)


@dataclass
class IdentityCandidate:
    field: str
    fill_rate: float
    distinct: int
    unique_within_lists: float
    determines: list[str]
    named_like_identity: bool
    is_integer: bool = False

    def to_json(self) -> dict:
        return {"field": self.field, "fill_rate": round(self.fill_rate, 4), "distinct": self.distinct,
                "unique_within_lists": round(self.unique_within_lists, 4),
                "determines": self.determines, "named_like_identity": self.named_like_identity}


def identity_candidates(objects: list[dict], owners: list[int],
                        threshold: float = DEFAULT_VIOLATION_THRESHOLD) -> list[IdentityCandidate]:
    """Fields that could identify the objects of a nested column, best first.

    A candidate is a scalar (integer or text) field present in nearly every
    object, not repeated inside one list, and either named like an identifier
    or functionally determining another field.

    Example:
        >>> objs = [{"pid": 1, "name": "A", "role": "x"}, {"pid": 2, "name": "B", "role": "x"},
        ...         {"pid": 1, "name": "A", "role": "y"}]
        >>> [c.field for c in identity_candidates(objs, [0, 0, 1])]
        ['pid', 'name']
    """
    if not objects:
        return []
    keys: list[str] = []
    for obj in objects:
        for k in obj:
            if k not in keys:
                keys.append(k)
    out = []
    n = len(objects)
    for key in keys:
        vals = [obj.get(key) for obj in objects]
        present = [v for v in vals if v is not None]
        if len(present) < 0.95 * n:
            continue
        if not all(isinstance(v, (int, str)) and not isinstance(v, bool) for v in present):
            continue
        per_list: dict = defaultdict(list)
        for owner, v in zip(owners, vals):
            if v is not None:
                per_list[owner].append(v)
        dup = sum(len(v) - len(set(v)) for v in per_list.values())
        unique_within = 1 - dup / max(1, len(present))
        if unique_within < 0.99:
            continue
        distinct = len(set(present))
        if distinct < 2 and n > 1:
            continue
        determines = []
        for other in keys:
            if other == key:
                continue
            d = measure_dependency(objects, key, other)
            if d.occurrences and d.violation_rate <= threshold and not _POSITION_NAME.match(other):
                determines.append(other)
        named = bool(_ID_NAME.search(key))
        if not named and not determines:
            continue
        integer = all(isinstance(v, int) for v in present)
        out.append(IdentityCandidate(key, len(present) / n, distinct, unique_within, determines,
                                     named, integer))
    out.sort(key=lambda c: (-c.named_like_identity, -c.is_integer, -len(c.determines),
                            -c.fill_rate, c.field))
    return out
