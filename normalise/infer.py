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
from itertools import chain
from pathlib import Path
from collections import Counter, defaultdict
from dataclasses import dataclass

import networkx as nx

from .decimals import decimal_scale, is_decimal_text
from .exact import ABSENT as _ABSENT, get
from .names import Namer, singular, sql_name
from .plan import META_TABLES

DEFAULT_VIOLATION_THRESHOLD = 0.05
_ID_NAME = re.compile(r"(?i)^(id|key|code|uuid|guid|slug)$|(_id|_key|_code|_uuid|Id|ID|_no|_number)$")
_POSITION_NAME = re.compile(r"(?i)^(position|pos|order|ordinal|index|idx|rank|seq|sequence|sort_order)$")


def _hashable(value):
    if isinstance(value, (list, dict, set, tuple)):  # a tuple may hold a list
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
    An object without the field holds a value of its own (absent), different
    from every present value and from null.

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
        values[_hashable(k)][_hashable(obj[field]) if field in obj else _MISSING] += 1
    occurrences = violations = 0
    for counter in values.values():
        total = sum(counter.values())
        if total < 2:
            continue
        occurrences += total
        violations += total - counter.most_common(1)[0][1]
    return Dependency(key, field, occurrences, violations)


_MISSING = object()

# A table keeps the columns it has read while they hold at most this many values in all; beyond that (thousands
# of sparse keys) a column is read again whenever it is asked for, as it would be without a table.
CACHED_VALUES = 1 << 22


class ObjectTable:
    """Objects as columns, read once and factorised, so that many questions about them are answered quickly.

    The inference asks many questions of one list of objects (its keys, each field's types and values,
    dependencies between fields); a table answers them from columns read in one pass over the objects, and
    ``concat`` joins tables without reading their objects again. ``measure`` gives what
    ``measure_dependency`` gives (the pure-Python definition, kept as the reference), with the counting
    done by numpy.
    """

    def __init__(self, objects: list[dict], parts: tuple = ()):
        self.objects = objects
        self._parts = parts  # tables whose objects, one table after another, these are
        self._keys = None
        self._columns: dict = {}
        self._values: dict = {}
        self._kinds: dict = {}
        self._codes: dict = {}
        self._uniques: dict = {}
        self._held = 0  # values held in _columns and _values
        self._all_read = False  # _columns holds every key's column

    @classmethod
    def concat(cls, tables: list["ObjectTable"]) -> "ObjectTable":
        """The table of the tables' objects, one table after another."""
        if len(tables) == 1:
            return tables[0]
        return cls([o for t in tables for o in t.objects], tuple(tables))

    def _read_all(self) -> bool:
        """Every column in one pass: each object is visited once, which costs far fewer cache misses than a
        pass per key. False (nothing kept) when the columns would hold more than ``CACHED_VALUES`` values."""
        n = len(self.objects)
        room = CACHED_VALUES // max(n, 1)
        columns: dict = {}
        for i, obj in enumerate(self.objects):
            for k, v in obj.items():
                col = columns.get(k)
                if col is None:
                    if len(columns) >= room:
                        return False
                    col = columns[k] = [_MISSING] * n
                col[i] = v
        self._keys, self._columns, self._held = list(columns), columns, n * len(columns)
        self._all_read = True
        return True

    def _keep(self, cache: dict, field, found: list) -> None:
        if self._held + len(found) <= CACHED_VALUES:
            cache[field] = found
            self._held += len(found)

    def keys(self) -> list:
        """Every key of the objects, in first-seen order."""
        if self._keys is None:
            if self._parts:
                self._keys = list(dict.fromkeys(chain.from_iterable(t.keys() for t in self._parts)))
            elif not self._read_all():
                self._keys = list(dict.fromkeys(chain.from_iterable(self.objects)))
        return self._keys

    def column(self, field) -> list:
        """Each object's value of ``field``; ``_MISSING`` where the object lacks the key."""
        self.keys()  # reads every column at once when they fit
        found = self._columns.get(field)
        if found is None:
            if self._parts:
                found = list(chain.from_iterable(t.column(field) for t in self._parts))
            elif self._all_read:  # a key no object has (another list's field)
                found = [_MISSING] * len(self.objects)
            else:
                found = [o.get(field, _MISSING) for o in self.objects]
            self._keep(self._columns, field, found)
        return found

    def values(self, field) -> list:
        """Each object's ``obj.get(field)``: None where the object lacks the key."""
        found = self._values.get(field)
        if found is None:
            if self._parts:
                found = list(chain.from_iterable(t.values(field) for t in self._parts))
                self._keep(self._values, field, found)
                return found
            col = self.column(field)
            if _MISSING not in col:
                found = self._values[field] = col  # the same list: nothing more to hold
            else:
                found = [None if v is _MISSING else v for v in col]
                self._keep(self._values, field, found)
        return found

    def kinds(self, field) -> set:
        """The types of ``values(field)``."""
        found = self._kinds.get(field)
        if found is None:
            if self._parts:
                found = set().union(*(t.kinds(field) for t in self._parts))
            else:
                found = set(map(type, self.values(field)))
            self._kinds[field] = found
        return found

    def codes(self, field):
        """The values of ``field`` factorised (codes in first-seen order), with masks: key present, value null.

        A missing key reads as None, as in ``measure_dependency``'s ``obj.get(field)``.
        """
        found = self._codes.get(field)
        if found is None:
            found = self._codes[field] = self._joined_codes(field) if self._parts else self._factorise(field)
        return found

    def _factorise(self, field):
        import numpy as np
        import pandas as pd

        n = len(self.objects)
        if self._all_read and n and field not in self._columns:  # no object has the key: every value None
            _, self._uniques[field] = pd.factorize(np.array([None], dtype=object), use_na_sentinel=False)
            return np.zeros(n, dtype=np.int64), np.zeros(n, dtype=bool), np.ones(n, dtype=bool)
        col, values = self.column(field), self.values(field)
        present = (np.ones(n, dtype=bool) if values is col
                   else np.array([v is not _MISSING for v in col], dtype=bool))
        kinds = self.kinds(field)
        if kinds <= {str, type(None)}:
            # text hashes far faster in a dict (str caches its hash) than in pandas' table, and text and None
            # compare alike in both, so the codes (first-seen order) are the same
            seen: dict = {}
            codes = np.fromiter((seen.setdefault(v, len(seen)) for v in values), dtype=np.int64, count=n)
            self._uniques[field] = np.array(list(seen), dtype=object)
            isnull = codes == seen[None] if None in seen else np.zeros(n, dtype=bool)
            return codes, present, isnull
        array = None
        if kinds == {int}:  # plain integers factorise as int64, far faster than as objects, in the same order
            try:
                array = np.array(values, dtype=np.int64)
            except OverflowError:  # beyond 64 bits
                pass
        if array is None:
            if kinds & {list, dict, set, tuple}:
                values = [_hashable(v) for v in values]
            # fromiter keeps each value whole (np.array would make equal-length tuples a second dimension)
            array = np.fromiter(values, dtype=object, count=len(values))
        # == None compares elementwise; for decoded values it is exactly ``is None``
        isnull = np.asarray(array == None, dtype=bool)  # noqa: E711
        codes, self._uniques[field] = pd.factorize(array, use_na_sentinel=False)
        return codes.astype(np.int64), present, isnull

    def _joined_codes(self, field):
        """Codes of a concatenation from its parts' codes: the parts' distinct values, one part after another,
        meet the joined values' distinct values in the same first-seen order."""
        import numpy as np
        import pandas as pd

        coded = [t.codes(field) for t in self._parts]
        uniques = [t._uniques[field] for t in self._parts]
        remap, self._uniques[field] = pd.factorize(np.concatenate(uniques), use_na_sentinel=False)
        remap = remap.astype(np.int64)
        codes, start = [], 0
        for (part_codes, _, _), part_uniques in zip(coded, uniques):
            codes.append(remap[start:start + len(part_uniques)][part_codes])
            start += len(part_uniques)
        return (np.concatenate(codes), np.concatenate([c[1] for c in coded]),
                np.concatenate([c[2] for c in coded]))

    def presence_varies(self, key: str, field: str) -> bool:
        """Whether some identity's objects carry ``field`` in some occurrences and not in others.

        The violation threshold tolerates a misspelt value; it does not tolerate a
        field that one occurrence has and another lacks (a flag on one link).
        """
        import numpy as np

        kc, _, knull = self.codes(key)
        _, vpresent, _ = self.codes(field)
        if vpresent.all() or not vpresent.any():
            return False
        keep = ~knull
        pairs = np.unique(kc[keep] * 2 + vpresent[keep])
        return bool(len(np.unique(pairs // 2)) < len(pairs))

    def measure(self, key: str, field: str, carrying_only: bool = False) -> Dependency:
        """The dependency key -> field over the objects whose key is not null.

        An absent field is a value of its own, different from every present value
        and from null (so a flag carried by some occurrences of an entity only is
        a violation); ``carrying_only`` counts only the objects that carry the field.
        """
        import numpy as np

        kc, _, knull = self.codes(key)
        vc, vpresent, _ = self.codes(field)
        keep = ~knull
        if carrying_only:
            keep &= vpresent
        elif not vpresent.all():
            vc = np.where(vpresent, vc, (int(vc.max()) + 1) if len(vc) else 0)
        kc, vc = kc[keep], vc[keep]
        if not len(kc):
            return Dependency(key, field, 0, 0)
        width = int(vc.max()) + 1
        pairs, counts = np.unique(kc * width + vc, return_counts=True)
        owner = pairs // width  # sorted, as pairs are: each key's pairs are one run
        starts = np.flatnonzero(np.concatenate(([True], owner[1:] != owner[:-1])))
        total = np.add.reduceat(counts, starts)
        top = np.maximum.reduceat(counts, starts)
        repeated = total >= 2
        occurrences = int(total[repeated].sum())
        return Dependency(key, field, occurrences, int(occurrences - top[repeated].sum()))


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


# Objects with more fields than this are weighed on their fields named like identifiers and then their first
# fields, so that a wide object (thousands of keys) costs thousands of dependency measures, not millions.
MAX_WEIGHED_FIELDS = 64


def identity_candidates(objects: list[dict], owners: list[int], threshold: float = DEFAULT_VIOLATION_THRESHOLD,
                        table: ObjectTable | None = None) -> list[IdentityCandidate]:
    """Fields that could identify the objects of a nested column, best first.

    A candidate is a scalar (integer or text) field present in nearly every
    object, not repeated inside one list, and either named like an identifier
    or functionally determining another field. ``table``, when given, is
    the ``ObjectTable`` of these objects (its columns are reused).

    Example:
        >>> objs = [{"pid": 1, "name": "A", "role": "x"}, {"pid": 2, "name": "B", "role": "x"},
        ...         {"pid": 1, "name": "A", "role": "y"}]
        >>> [c.field for c in identity_candidates(objs, [0, 0, 1])]
        ['pid', 'name']
    """
    if not objects:
        return []
    import numpy as np

    out = []
    n = len(objects)
    table = table or ObjectTable(objects)
    keys = table.keys()
    owner_codes = np.asarray(owners, dtype=np.int64)
    if len(keys) > MAX_WEIGHED_FIELDS:  # pairs of fields grow with the square: weigh the likeliest only
        keys = ([k for k in keys if _ID_NAME.search(k)] + [k for k in keys if not _ID_NAME.search(k)])
        keys = keys[:MAX_WEIGHED_FIELDS]
    for key in keys:
        kinds = table.kinds(key) - {type(None)}
        if not kinds or not kinds <= {int, str}:
            continue
        codes, _, isnull = table.codes(key)
        present_count = int((~isnull).sum())
        if present_count < 0.95 * n:
            continue
        present_codes = codes[~isnull]
        width = int(present_codes.max()) + 1
        pairs = np.unique(owner_codes[~isnull] * width + present_codes)
        unique_within = len(pairs) / max(1, present_count)  # 1 - repeats inside a list / values
        distinct = len(np.unique(present_codes))
        named = bool(_ID_NAME.search(key))
        repeats = unique_within < 0.99 or (distinct < 2 and n > 1)
        if repeats and not named:
            continue  # a value repeated inside lists (or one value only) identifies nothing by itself
        determines = []
        for other in keys:
            if other == key:
                continue
            d = table.measure(key, other)
            if d.occurrences and d.violation_rate <= threshold and not _POSITION_NAME.match(other):
                determines.append(other)
        if not named and not determines:
            continue
        if repeats and not determines:
            # an identifier repeated inside one list (one person as author and as editor) is still an
            # identity when it determines the entity's other fields: each repeat is a link of its own
            continue
        integer = kinds == {int}  # every present value an int (bool is a kind of its own)
        out.append(IdentityCandidate(key, present_count / n, distinct, unique_within, determines,
                                     named, integer))
    out.sort(key=lambda c: (-c.named_like_identity, -c.is_integer, -len(c.determines),
                            -c.fill_rate, c.field))
    return out


# --- the model ------------------------------------------------------------------

NATURAL_KEY_MIN_DISTINCT = 0.98  # a few duplicates are set aside, not a reason to reject the key
WIDE_OBJECT_KEYS = 20  # a single object with more keys becomes a 1:1 child table


@dataclass
class Options:
    """Choices a user can make instead of the inference."""

    natural_keys: dict = None  # file stem -> column name
    duplicates: str = "first"  # first | last | refuse
    violation_threshold: float = DEFAULT_VIOLATION_THRESHOLD
    identities: dict = None  # "file:column" or "column" -> identity field ("" = none)
    merge: list = None  # lists of "file:column" forced into one entity
    match: dict = None  # "file:column" or "column" -> field matched on its normalised text
    no_merge: list = None  # "file:column" never merged with another column
    keyed: dict = None  # "file:column" or "column" -> field the keys of an object keyed by data go to ("" = not)

    def __post_init__(self):
        self.keyed = self.keyed or {}
        self.natural_keys = self.natural_keys or {}
        self.identities = self.identities or {}
        self.match = self.match or {}
        self.merge = self.merge or []
        self.no_merge = self.no_merge or []


_INTEGER = re.compile(r"[-+]?(0|[1-9]\d{0,17})")  # leading zeros are codes, not numbers
_REAL = re.compile(r"[-+]?((0|[1-9]\d*)(\.\d*)?|\.\d+)([eE][-+]?\d+)?")
_DATE = re.compile(r"\d{4}-\d{2}-\d{2}")
_TIMESTAMP = re.compile(r"\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(:\d{2}(\.\d+)?)?(Z|[+-]\d{2}:?\d{2})?")


def _is_calendar_date(text: str) -> bool:
    from datetime import date

    try:
        date.fromisoformat(text)
    except ValueError:
        return False
    return True


def scalar_type(values: list) -> str:
    """The narrowest type that holds every value: integer, real, date, timestamp, boolean or text.

    Example:
        >>> scalar_type(["1", "2"]), scalar_type(["1", "2.5"]), scalar_type(["2024-01-31"]), scalar_type(["x", "1"])
        ('integer', 'real', 'date', 'text')
        >>> scalar_type(["007", "12"]), scalar_type(["2024-13-45"])
        ('text', 'text')
    """
    if not values:
        return "empty"
    if all(isinstance(v, bool) for v in values):
        return "boolean"
    texts = [v if isinstance(v, str) else repr(v) for v in values]
    for name, pattern in (("integer", _INTEGER), ("real", _REAL), ("date", _DATE), ("timestamp", _TIMESTAMP)):
        if all(pattern.fullmatch(t) for t in texts):
            if name in ("date", "timestamp") and not all(_is_calendar_date(t[:10]) for t in texts):
                continue
            return name
    return "text"


def value_type(values, types: set | None = None) -> str:
    """The SQL-side type of decoded scalar values: integer, real, boolean, date, timestamp or text.

    ``types``, when given, is ``set(map(type, values))``, already known.

    Example:
        >>> value_type([1, 2]), value_type([1, 2.5]), value_type([True]), value_type(["2024-01-02"]), value_type([1, "a"])
        ('integer', 'real', 'boolean', 'date', 'text')
    """
    types = set(map(type, values)) if types is None else types
    kinds = types - {type(None)}
    if not kinds:
        return "text"
    if kinds == {bool}:
        return "boolean"
    if kinds <= {int, float}:
        ints = values if types == {int} else [v for v in values if type(v) is int] if int in kinds else []
        if ints and not (-(1 << 63) <= min(ints) and max(ints) < (1 << 63)):
            return "text"  # beyond 64 bits: kept exactly as text
        return "integer" if kinds == {int} else "real"
    if kinds == {str}:
        texts = values if types == {str} else [v for v in values if v is not None]
        t = scalar_type(texts[:10000])
        return t if t in ("date", "timestamp") else "text"
    return "text"


def scalar_column_type(values: list) -> str:
    """Type of a plain-text column (cells are strings)."""
    present = [v for v in values if v is not None]
    if present and not all(isinstance(v, str) for v in present):
        return value_type(present)
    t = scalar_type(present)
    # a number column gives back each cell's own text: "+7", "007", "1.50" or "1e3" would come back as
    # "7", "7", "1.5" and "1000.0", so such a column stays text (the Python reference: str(int), repr(float))
    if t == "integer" and not all(str(int(v)) == v for v in present):
        return "text"
    if t == "real" and any(len(v) > 15 and _INTEGER_TEXT.fullmatch(v) for v in present):
        # integers of more digits than a float holds exactly: as integers when they all fit 64 bits, else
        # as text, never rounded to a float
        ints = [v for v in present if _INTEGER_TEXT.fullmatch(v)]
        fits = len(ints) == len(present) and all(len(v) <= 20 and -(1 << 63) <= int(v) < (1 << 63) for v in ints)
        return "integer" if fits and all(str(int(v)) == v for v in ints) else "text"
    if t == "real" and not all(repr(float(v)) == v for v in present):
        # "12.50", "0.10": a float would drop the digits, so an exact decimal (its text; NUMERIC on PostgreSQL)
        return "decimal" if all(is_decimal_text(v) for v in present) else "text"
    return "text" if t == "empty" else t


_INTEGER_TEXT = re.compile(r"[-+]?[1-9][0-9]*")


def detect_natural_key(columns: list[str], values: dict[str, list], types: dict[str, str]) -> str | None:
    """The column that identifies the records: present everywhere, (nearly) unique, an identifier's name first.

    Example:
        >>> detect_natural_key(["title", "key"], {"title": ["A", "B", "C"], "key": ["k1", "k2", "k3"]},
        ...                    {"title": "text", "key": "text"})
        'key'
    """
    best = None
    for position, name in enumerate(columns):
        vals = values[name]
        if not vals or any(v is None for v in vals) or types.get(name) not in ("integer", "text"):
            continue
        if not all(map(is_scalar, vals)):  # a set or a list among the values: no key (nor hashable)
            continue
        distinct = len(set(vals)) / len(vals)
        if distinct < NATURAL_KEY_MIN_DISTINCT:
            continue
        score = (bool(_ID_NAME.search(name)), distinct == 1.0, -position)
        if best is None or score > best[0]:
            best = (score, name)
    return None if best is None else best[1]


def shape_of(values: list) -> str:
    """The dominant shape of a column's decoded values: object-list, object, scalar-list or scalar.

    Example:
        >>> shape_of([[{"a": 1}], None, [{"a": 2}, {"a": 3}]]), shape_of([["x"], ["y", "z"]]), shape_of([{"a": 1}])
        ('object-list', 'scalar-list', 'object')
    """
    counts = Counter()
    for v in values:
        if v is None:
            continue
        if isinstance(v, (list, tuple)):
            present = [x for x in v if x is not None]
            counts["object-list" if present and all(type(x) is dict for x in present) else "scalar-list"] += 1
        elif isinstance(v, dict):
            counts["object"] += 1
        else:
            counts["scalar"] += 1
    return counts.most_common(1)[0][0] if counts else "scalar"


def objects_of(values: list) -> tuple[list[dict], list[int]]:
    """Every object inside a column's values, with the row it came from."""
    objects, owners = [], []
    for row, v in enumerate(values):
        if isinstance(v, dict):
            objects.append(v)
            owners.append(row)
        elif isinstance(v, (list, tuple)):
            for item in v:
                if isinstance(item, dict):
                    objects.append(item)
                    owners.append(row)
    return objects, owners


def entity_attributes(objects: list[dict], identity: str, fields: list[str],
                      threshold: float, table: ObjectTable | None = None) -> list[str]:
    """Fields functionally determined by the identity (X -> A within the tolerated violation rate).

    An object without the field is evidence too: absence is a value of its own,
    so a field carried by some occurrences of an identity only (a flag on one
    record's link) is not determined by the identity. With no repeated
    identity at all nothing can be measured; such fields count as entity
    attributes unless their name says they are a position in a list.
    ``table``, when given, is the ``ObjectTable`` of these objects.
    """
    out = []
    table = table or ObjectTable(objects)
    for f in fields:
        if f == identity:
            continue
        d = table.measure(identity, f)
        if d.occurrences and table.presence_varies(identity, f):
            continue  # carried by some occurrences of an identity only: a link attribute, whatever the share
        if d.occurrences == 0:
            if not _POSITION_NAME.match(f):
                out.append(f)
        elif d.violation_rate <= threshold:
            out.append(f)
    return out


def scalar_fields(objects: list[dict], prefix: list[str] | None = None,
                  table: ObjectTable | None = None) -> tuple[list[list[str]], list[list[str]]]:
    """Paths to scalar fields (flattening sub-objects) and to list fields, in first-seen order.

    A key that holds a non-empty list anywhere is a list field; one that holds
    only objects (or nulls) is flattened into its sub-keys; any other key is a
    scalar field, even when it is always null. Keys only ever holding empty
    lists carry nothing and are left out. ``table``, when given, is the
    ``ObjectTable`` of these objects.

    Example:
        >>> scalar_fields([{"id": 1, "tags": ["a"], "place": {"city": "X"}}, {"id": 2, "note": None}])
        ([['id'], ['place', 'city'], ['note']], [['tags']])
    """
    prefix = prefix or []
    table = table or ObjectTable(objects)
    scalars: list[list[str]] = []
    lists: list[list[str]] = []
    for k in table.keys():
        kinds = table.kinds(k)
        path = prefix + [str(k)]
        if kinds & {list, tuple, set}:
            if any(isinstance(v, (list, tuple, set)) and v for v in table.values(k)):
                lists.append(path)
            elif kinds - {list, tuple, set, type(None)}:
                scalars.append(path)
        elif dict in kinds and kinds <= {dict, type(None)}:
            inner = [v for v in table.values(k) if isinstance(v, dict)]
            if keyed_shape(inner):  # keyed by data: a list of its keys (_child_lists)
                lists.append(path)
                continue
            sub_scalars, sub_lists = scalar_fields(inner, path)
            scalars += sub_scalars
            lists += sub_lists
        else:
            scalars.append(path)
    return scalars, lists


def get_path(obj, path: list[str]):
    for k in path:
        if not isinstance(obj, dict):
            return None
        obj = obj.get(k)
    return obj


# --- objects keyed by data --------------------------------------------------------

# A key that reads as a code: short, no spaces (ISO 4217 "EUR", ISO 639-3 "deu", a year "2018", "1F3FB")
_CODE_KEY = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.+-]{0,11}")
KEYED_MIN_VARYING = 5  # keys, each in a few objects only, that make objects keyed by data


def _key_form(key: str) -> str:
    """A key's form: each letter as A or a, each digit as 9 ("EUR" -> "AAA", "1F3FB" -> "9A9AA")."""
    return "".join("A" if c.isupper() else "a" if c.islower() else "9" if c.isdigit() else c for c in key)


def keyed_shape(objects: list[dict]) -> str:
    """Whether objects are keyed by data rather than by field names: "objects" or "scalars" (their values), or "".

    The evidence, over every object of a column: many distinct keys in all (more than a wide object's
    ``WIDE_OBJECT_KEYS``), or keys that each turn up in a few objects only (the objects fill at most half
    of the key-by-object grid, and at most a fifth of the keys are in nearly every object: a few fixed
    keys with rare extras are fields); keys that look like codes (short, no spaces, most of one form: "EUR" and
    "USD" are both three capitals); and values of one shape (all scalars, or all objects with a few fields).

    Example:
        >>> rows = [{"EUR": {"name": "Euro"}}, {"USD": {"name": "US dollar"}, "USN": {"name": "US dollar (next day)"}},
        ...         {"GBP": {"name": "Pound"}}, {"EUR": {"name": "Euro"}, "CHF": {"name": "Franc"}}]
        >>> keyed_shape(rows), keyed_shape([{"city": "X", "zip": "1"}, {"city": "Y", "zip": "2"}])
        ('objects', '')
        >>> keyed_shape([{"deu": "German"}, {"fra": "French"}, {"ita": "Italian"}, {"nld": "Dutch"},
        ...              {"por": "Portuguese"}])
        'scalars'
    """
    counts = Counter(chain.from_iterable(objects))
    distinct = len(counts)
    if len(objects) < 2 or distinct < 2:
        return ""
    if not all(type(k) is str and _CODE_KEY.fullmatch(k) for k in counts):
        return ""
    many = distinct > WIDE_OBJECT_KEYS
    shared = sum(n >= 0.9 * len(objects) for n in counts.values())  # keys nearly every object has
    varying = (distinct >= KEYED_MIN_VARYING and 2 * sum(counts.values()) <= len(objects) * distinct
               and 5 * shared <= distinct)
    if not (many or varying):
        return ""
    if Counter(map(_key_form, counts)).most_common(1)[0][1] < 0.8 * distinct:
        return ""  # keys of many forms ("city", "zip", "street") are names, not codes
    values = [v for o in objects for v in o.values()]
    if all(type(v) is dict for v in values):
        fields = set(chain.from_iterable(values))
        return "objects" if 0 < len(fields) <= WIDE_OBJECT_KEYS else ""
    if not any(isinstance(v, (dict, list, tuple, set, frozenset)) for v in values):
        return "scalars"
    return ""


def keyed_fields(objects: list[dict], name: str, forced: str | None = None) -> tuple[str, str]:
    """The fields an object keyed by data is read into: (its keys' field, a scalar value's field), or ("", "").

    ``forced`` (from ``Options.keyed``) names the keys' field whatever the evidence; "" says not keyed.

    Example:
        >>> keyed_fields([{"deu": "German"}, {"fra": "French"}], "languages", forced="code")
        ('code', 'value')
    """
    if forced == "":
        return "", ""
    shape = keyed_shape(objects)
    if not shape and forced:
        values = [v for o in objects for v in o.values()]
        shape = "objects" if values and all(type(v) is dict for v in values) else "scalars"
    if not shape:
        return "", ""
    fields = set(chain.from_iterable(v for o in objects for v in o.values())) if shape == "objects" else set()
    key = forced or Namer(fields)(f"{singular(sql_name(name))}_code")
    return key, ("value" if shape == "scalars" else "")


def _keyed_column(nested, values: list, options: "Options", file: str) -> list:
    """A column of objects keyed by data as lists of objects (``nested.keyed`` says so); else its values."""
    from .exact import keyed_items

    forced = options.keyed.get(f"{nested.file}:{nested.column}", options.keyed.get(
        f"{file}:{nested.column}", options.keyed.get(nested.column)))
    key, value_field = keyed_fields([v for v in values if isinstance(v, dict)], nested.column, forced)
    if not key:
        return values
    nested.keyed, nested.keyed_value = key, value_field
    return [keyed_items(v, key, value_field) if isinstance(v, dict) else None for v in values]


_GENERIC_IDENTITY = frozenset(["id", "key", "code", "uuid", "guid", "slug"])


def _entity_name(identity: str, column: str) -> str:
    """An entity table's name: the identity without its id suffix (person_id -> person), else the column's singular.

    Example:
        >>> _entity_name("person_id", "contributors"), _entity_name("id", "people"), _entity_name("name", "authors")
        ('person', 'person', 'author')
    """
    base = re.sub(r"(?i)(_id|_key|_code|_uuid|id)$", "", identity).strip("_")
    if len(base) < 3 or base == identity or identity.lower() in _GENERIC_IDENTITY:  # "qid" names no "q"
        return singular(sql_name(column))
    return sql_name(base)


SAME_SHAPE_FIELDS = 4  # objects with at least this many fields, nearly all in common, are of one kind
SAME_SHAPE_SHARE = 0.8  # Jaccard share of the field names two object sets have in common


def _same_shape(a: ObjectTable, b: ObjectTable) -> bool:
    """Whether two sets of objects with no identity in common are still of one kind: the same fields, nearly
    all (a reviewer and a sender, both carrying id, login, type, url, ...). Shared identities would be the
    stronger evidence; with none, one shape is what says they are one identity space.

    Example:
        >>> person = lambda i: {"id": i, "login": f"u{i}", "type": "User", "url": f"/u/{i}"}
        >>> _same_shape(ObjectTable([person(1)]), ObjectTable([person(2)]))
        True
        >>> _same_shape(ObjectTable([person(1)]), ObjectTable([{"id": 2, "title": "t", "state": "open"}]))
        False
    """
    fa, fb = set(map(str, a.keys())), set(map(str, b.keys()))
    return len(fa & fb) >= SAME_SHAPE_FIELDS and len(fa & fb) >= SAME_SHAPE_SHARE * len(fa | fb)


def _agreement(a: ObjectTable, b: ObjectTable, identity: str, table: ObjectTable) -> tuple[int, float]:
    """Common identities of two object sets and the share of shared attributes that agree.

    For each identity in both sets and each scalar attribute both carry, the
    most frequent value on each side (ties to the first seen) is compared.
    ``table`` is ``ObjectTable.concat([a, b])``.
    """
    import numpy as np

    side = np.zeros(len(a.objects) + len(b.objects), dtype=bool)
    side[len(a.objects):] = True
    ident, _, inull = table.codes(identity)
    in_a = set(np.unique(ident[~inull & ~side]).tolist())
    in_b = set(np.unique(ident[~inull & side]).tolist())
    common = in_a & in_b
    if not common:
        return 0, 1.0
    in_both = set(b.keys())
    fields = [f for f in a.keys() if f != identity and f in in_both]
    checks = agree = 0
    mask_common = np.isin(ident, np.fromiter(common, dtype=np.int64)) & ~inull
    for f in fields:
        if table.kinds(f) & {list, dict, tuple, set}:
            continue
        vc, present, _ = table.codes(f)
        tops = []
        for which in (False, True):
            keep = mask_common & present & (side == which)
            tops.append(_most_frequent(ident[keep], vc[keep]))
        shared = tops[0].keys() & tops[1].keys()
        checks += len(shared)
        agree += sum(tops[0][k] == tops[1][k] for k in shared)
    return len(common), (agree / checks if checks else 1.0)


def _most_frequent(keys, values) -> dict:
    """Per key code, the most frequent value code (ties to the smallest, i.e. first-seen, code)."""
    import numpy as np

    if not len(keys):
        return {}
    width = int(values.max()) + 1
    pairs, counts = np.unique(keys * width + values, return_counts=True)
    order = np.lexsort((pairs % width, -counts, pairs // width))
    k_sorted = (pairs // width)[order]
    first = np.unique(k_sorted, return_index=True)[1]
    return dict(zip(k_sorted[first].tolist(), (pairs % width)[order][first].tolist()))


def infer_plan(exports: list, decoded: dict, options: Options | None = None):
    """Infer the relational model of decoded exports.

    ``decoded`` maps each export's path to its ``{column: DecodedColumn}``.
    """
    from .plan import FieldMap, NestedColumn, Plan, RecordSource

    options = options or Options()
    plan = Plan(violation_threshold=options.violation_threshold)
    tables = Namer(META_TABLES)
    found = _Found(options)  # where entities are: lists of them and single objects with an identity

    for export in exports:
        columns = decoded[export.path]
        record_table = tables(export.name)
        scalar_values, scalar_types = {}, {}
        record = RecordSource(file=export.name, path=export.path, table=record_table,
                              key_column=f"{singular(record_table)}_sk", natural_key=[],
                              duplicates=options.duplicates)
        names = Namer([record.key_column])
        for name, col in columns.items():
            shape = "scalar"
            if col.format not in ("scalar", "empty"):
                shape = shape_of(col.values)
            if shape == "scalar":
                t = scalar_column_type(col.values)
                scalar_values[name] = col.values
                scalar_types[name] = t
                as_text = t in ("integer", "real") and any(type(v) is str for v in col.values)
                record.scalars.append(FieldMap([name], names(name), t, as_text=as_text,
                                               scale=decimal_scale(col.values) if t == "decimal" else None))
                continue
            origin = export.origin.get(name)
            nested = NestedColumn(file=Path(origin[0]).stem if origin else export.name, column=name, kind="")
            values = col.values
            if shape == "object":
                values = _keyed_column(nested, values, options, export.name)
                if nested.keyed:
                    shape = "object-list"
            if shape == "scalar-list":
                nested.kind = "value-list"
                if col.format == "delimited":
                    nested.separator = col.join_separator or col.separator or ""
                else:
                    nested.value_type = list_value_type(col.values)
            elif shape == "object":
                objects, _ = objects_of(col.values)
                table = ObjectTable(objects)
                fields, lists = scalar_fields(objects, table=table)
                wide = len(fields) > WIDE_OBJECT_KEYS
                nested.kind = "object-child" if wide else "object-columns"
                refs = found.references(nested, export.name, objects, table, itself=True)
                found.row_fields(nested, objects, table, fields, refs, Namer() if wide else names,
                            "" if wide else name + "_")
                nested.children = _child_lists(export.name, name, objects, lists, table, found)
            else:
                objects, owners = objects_of(values)
                table = ObjectTable(objects)
                # FILE:COLUMN names the file the column comes from (a joined file's own name), as
                # entity members and --no-merge do; the main file's name and the bare column also work
                wanted = options.identities.get(f"{nested.file}:{name}", options.identities.get(
                    f"{export.name}:{name}", options.identities.get(name)))
                matched = options.match.get(f"{nested.file}:{name}", options.match.get(
                    f"{export.name}:{name}", options.match.get(name)))
                if matched:
                    wanted, nested.matched = matched, True
                if wanted is None:
                    candidates = identity_candidates(objects, owners, options.violation_threshold, table)
                    wanted = candidates[0].field if candidates else ""
                nested.kind = "entity-list" if wanted else "child-list"
                nested.identity = wanted
                if wanted:
                    found.members.append(_Member(nested, table, wanted, nested.matched,
                                                 f"{nested.file}:{nested.column}", nested.column))
                fields, lists = scalar_fields(objects, table=table)
                refs = found.references(nested, export.name, objects, table)
                found.row_fields(nested, objects, table, fields, refs, Namer(["list_position"] if wanted else []), "")
                nested.children = _child_lists(export.name, name, objects, lists, table, found)
            record.nested.append(nested)
        chosen = options.natural_keys.get(export.name)
        if chosen is None:
            chosen = detect_natural_key(list(scalar_values), scalar_values, scalar_types)
        if chosen:
            if chosen not in scalar_values:
                from .errors import UsageError
                raise UsageError(f"--key {export.name}={chosen}: {export.path} has no scalar column {chosen!r}")
            record.natural_key = [next(f.column for f in record.scalars if f.path == [chosen])]
        record.parent_path = export.parent_path
        record.parent_column = export.parent_column
        plan.records.append(record)

    found.settle()
    _group_entities(plan, found.members, options, tables)
    found.make_row_fields(plan)
    for record in plan.records:
        owner = singular(record.table)
        for nested in record.nested:
            if nested.kind in ("entity-list", "value-list", "child-list", "object-child"):
                nested.table = tables(f"{owner}_{nested.column}")
            if nested.kind == "value-list":
                nested.entity = tables(singular(sql_name(nested.column)))
            for child in nested.children:
                _name_children(child, nested.table or record.table, tables)
            _free_key_names(plan, nested, record.key_column)
    infer_references(plan, decoded)
    from .schema import add_tables
    from .views import default_views

    add_tables(plan)
    plan.views = default_views(plan)
    return plan


def _name_children(nested, owner_table: str, tables: Namer) -> None:
    nested.table = tables(f"{singular(owner_table)}_{nested.path.replace('.', '_')}")
    if nested.kind == "value-list":
        nested.entity = tables(singular(sql_name(nested.path.split(".")[-1])) + "_value")
    for child in nested.children:
        _name_children(child, nested.table, tables)


def _type_at(objects: list[dict], path: list[str], table: ObjectTable | None = None) -> str:
    if len(path) == 1:
        key = path[0]
        if table is not None:
            return value_type(table.values(key), table.kinds(key))
        return value_type([o.get(key) for o in objects])
    return value_type([get_path(o, path) for o in objects])


def _field_maps(objects: list[dict], paths: list[list[str]], names: Namer, table: ObjectTable | None = None) -> list:
    return [field_map(objects, p, names("_".join(p)), table) for p in paths]


def field_map(objects: list[dict], path: list[str], column: str, table: ObjectTable | None = None):
    """The column a field of the objects becomes: its type, and whether NULL stands for null or for no key.

    NULL stands for whichever of the two the objects have more often (ties: null);
    the other kind is kept as a trace, so both come back exactly.
    """
    from .exact import ABSENT, get
    from .plan import FieldMap

    if table is not None and len(path) == 1:
        col = table.column(path[0])
        absent = sum(v is _MISSING for v in col)
        nulls = sum(v is None for v in col)
    else:
        found = [get(o, path) for o in objects]
        absent = sum(v is ABSENT for v in found)
        nulls = sum(v is None for v in found)
    return FieldMap(path, column, _type_at(objects, path, table), "absent" if absent > nulls else "null")


def _child_lists(file: str, column: str, objects: list[dict], lists: list[list[str]],
                 table: ObjectTable | None = None, found: "_Found | None" = None) -> list:
    """Lists inside objects become grandchild tables: value lists, entity lists or child lists, recursively.

    A list of objects with an identity named like one (``id``, ``user_id``) is an entity list, its entities
    shared with the other columns of the same identity space; ``found`` collects them.
    """
    from .plan import NestedColumn

    out = []
    for path in lists:
        if table is not None and len(path) == 1:
            inner = table.values(path[0])
        else:
            inner = [get_path(o, path) for o in objects]
        key, value_field = keyed_fields([v for v in inner if isinstance(v, dict)], path[-1])
        if key:  # an object keyed by data: read as the list of its keys (exact.keyed_items)
            from .exact import keyed_items

            inner = [keyed_items(v, key, value_field) if isinstance(v, dict) else v for v in inner]
        # a value that is not a list is taken as a list of one (build.rows, ``Builder._rows``), so its type counts too
        wrapped = [v if isinstance(v, (list, tuple)) else [v] for v in inner if v is not None]
        inner = [v for v in inner if isinstance(v, (list, tuple))]
        items = [x for v in inner for x in v if x is not None]
        nested = NestedColumn(file, column, "", path=".".join(path), keyed=key, keyed_value=value_field)
        if items and all(isinstance(x, dict) for x in items):
            nested.kind = "child-list"
            sub_table = ObjectTable(items)
            fields, sub = scalar_fields(items, table=sub_table)
            if found is None:
                nested.row_fields = _field_maps(items, fields, Namer(), sub_table)
            else:
                owners = [k for k, v in enumerate(inner) for x in v if x is not None]
                wanted = found.identity_of(nested, file, owners, items, sub_table)
                if wanted:
                    nested.kind, nested.identity = "entity-list", wanted
                    found.members.append(_Member(nested, sub_table, wanted, False, found.name_of(nested),
                                                 path[-1]))
                refs = found.references(nested, file, items, sub_table)
                found.row_fields(nested, items, sub_table, fields, refs, Namer(["list_position"] if wanted else []),
                            "")
            nested.children = _child_lists(file, column + "." + ".".join(path), items, sub, sub_table, found)
        else:
            nested.kind = "value-list"
            nested.value_type = list_value_type(wrapped)
        out.append(nested)
    return out


@dataclass
class _Member:
    """One place entities are found: a list of them, or single objects at a path (a reference)."""

    holder: object  # the NestedColumn of an entity list, or the FieldMap of a reference
    table: ObjectTable  # the objects
    identity: str
    matched: bool
    name: str  # "file:column", "file:column.path" (a list inside objects), or the reference's path
    column: str  # what the entity table is named after when this is its first member
    tentative: bool = False  # single objects whose identities never repeat: an entity only if shared


class _Found:
    """Entities wherever they are, collected while the columns are read; links made once attributes are known.

    The fields an entity's table holds (its identity and attributes) are not columns of the rows that refer
    to it, so the rows' columns (``NestedColumn.row_fields``) are made after the entities are grouped.
    """

    def __init__(self, options: "Options"):
        self.options = options
        self.members: list[_Member] = []
        self.pending: list[tuple] = []

    @staticmethod
    def name_of(nested, path: list[str] = ()) -> str:
        inside = ".".join(([nested.path] if nested.path else []) + list(path))
        return f"{nested.file}:{nested.column}" + (f".{inside}" if inside else "")

    def _forced(self, nested, file: str, path: list[str] = ()):
        """The identity an option names for these objects (``--identity``), or None."""
        name = self.name_of(nested, path)
        bare = name.split(":", 1)[1]
        for key in (name, f"{file}:{bare}", bare):
            if key in self.options.identities:
                return self.options.identities[key]
        return None

    def identity_of(self, nested, file: str, owners: list[int], objects: list[dict], table: ObjectTable) -> str:
        """The identity of objects inside objects: one an option names, or a field named like an identifier."""
        forced = self._forced(nested, file)
        if forced is not None:
            return forced
        candidates = identity_candidates(objects, owners, self.options.violation_threshold, table)
        named = [c for c in candidates if c.named_like_identity]
        return named[0].field if named else ""

    def references(self, nested, file: str, objects: list[dict], table: ObjectTable, itself: bool = False) -> list:
        """Single objects with an identity inside the objects (at any depth; ``itself``: the objects too)."""
        from .plan import FieldMap

        out = []
        paths = ([([], objects, table)] if itself else []) + _object_paths(objects, table)
        for path, subs, sub_table in paths:
            wanted = self.identity_of_single(nested, file, path, subs, sub_table)
            if not wanted:
                continue
            found = [get(o, path) for o in objects] if path else objects
            absent = sum(v is _ABSENT for v in found)
            nulls = sum(v is None for v in found)
            ref = FieldMap(list(path), "", "integer", "absent" if absent > nulls else "null")
            forced = self._forced(nested, file, path) is not None
            codes, _, isnull = sub_table.codes(wanted)
            repeats = len(set(codes[~isnull].tolist())) < int((~isnull).sum())
            self.members.append(_Member(ref, sub_table, wanted, False, self.name_of(nested, path),
                                        path[-1] if path else nested.column, tentative=not (forced or repeats)))
            out.append(ref)
        return out

    def settle(self) -> None:
        """Single objects whose identities never repeat are an entity only when another member (a list or
        a reference) shares identities with them; otherwise they stay fields of the rows holding them (a
        one-to-one object identifies nothing shared; its keys may as well be codes, e.g. ``id`` Indonesian)."""
        def identities(m):
            return set(map(_hashable, m.table.values(m.identity))) - {None}

        dropped = []
        for m in self.members:
            if m.tentative:
                own = identities(m)
                if not any(o is not m and o.identity == m.identity and own & identities(o)
                           for o in self.members):
                    dropped.append(m)
        gone = {id(m.holder) for m in dropped}
        self.members = [m for m in self.members if id(m.holder) not in gone]
        for entry in self.pending:
            entry[4][:] = [r for r in entry[4] if id(r) not in gone]

    def identity_of_single(self, nested, file: str, path, objects: list[dict], table: ObjectTable) -> str:
        forced = self._forced(nested, file, path)
        if forced is not None:
            return forced if forced in table.keys() else ""
        if _keys_like_codes(table):
            return ""  # {"de": ..., "id": ...}: keyed by codes, its "id" a language, not an identity
        return self.identity_of(nested, file, list(range(len(objects))), objects, table) if objects else ""

    def row_fields(self, nested, objects, table, fields, refs, names: Namer, prefix: str) -> None:
        if not refs and nested.kind != "entity-list":
            nested.row_fields = [field_map(objects, p, names(prefix + "_".join(p)), table) for p in fields]
            return
        self.pending.append((nested, objects, table, fields, refs, names, prefix))

    def make_row_fields(self, plan) -> None:
        """Each row's columns: references first (the entity's key), then the fields no entity table holds."""
        for nested, objects, table, fields, refs, names, prefix in self.pending:
            held = set()
            if nested.kind == "entity-list":
                group = plan.entity_group(nested.entity)
                held |= {(nested.identity,)} | {tuple(f.path) for f in group.attributes}
            for ref in refs:
                group = plan.entity_group(ref.entity)
                held |= {tuple(ref.path + [group.identity])} | {tuple(ref.path + f.path) for f in group.attributes}
                ref.column = names(prefix + "_".join(ref.path + ["sk"]))
            nested.row_fields = list(refs) + [field_map(objects, p, names(prefix + "_".join(p)), table)
                                         for p in fields if tuple(p) not in held]


_SHORT_CODE = re.compile(r"[a-z]{2,3}([_-][A-Za-z0-9]{2,4})?|[A-Z]{2,3}")  # "de", "pt_BR", "EUR"


def _keys_like_codes(table: ObjectTable) -> bool:
    """Whether objects are keyed by codes (languages, countries, currencies: many short keys, one kind of
    value) rather than by field names."""
    keys = table.keys()
    if len(keys) < 5 or not all(isinstance(k, str) and _SHORT_CODE.fullmatch(k) for k in keys):
        return False
    kinds = set().union(*(table.kinds(k) for k in keys)) - {type(None)}
    return len(kinds) == 1


def _object_paths(objects: list[dict], table: ObjectTable | None = None, prefix: tuple = ()) -> list:
    """The paths to single objects inside objects (keys holding only objects or nulls), at any depth, with
    the objects found there: the keys ``scalar_fields`` flattens."""
    table = table or ObjectTable(objects)
    out = []
    for k in table.keys():
        kinds = table.kinds(k)
        if dict in kinds and kinds <= {dict, type(None)}:
            inner = [v for v in table.values(k) if isinstance(v, dict)]
            if keyed_shape(inner):
                continue  # keyed by data: a list of its keys (scalar_fields), not one object
            path = list(prefix) + [str(k)]
            sub = ObjectTable(inner)
            out.append((path, inner, sub))
            out += _object_paths(inner, sub, tuple(path))
    return out


def _free_key_names(plan, nested, owner_key: str) -> None:
    """A row's column named like a key its table is given (its own, its owner's, the entity's) is renamed."""
    if nested.table:
        taken = {f"{nested.table}_sk", owner_key, "list_position"}
        if nested.kind == "entity-list":
            taken.add(f"{nested.entity}_sk")
        names = Namer(sorted(taken))
        for f in nested.row_fields:
            f.column = names(f.column)
    for child in nested.children:
        _free_key_names(plan, child, f"{nested.table}_sk" if nested.table else owner_key)


def list_value_type(lists: list) -> str:
    """The type of a value list's values: integer or boolean when every value is one, real when every value
    is a number (a list of numbers stays numbers, RFC 8259 section 6), else text.

    Example:
        >>> list_value_type([[1, 2], None, [3]]), list_value_type([[1.5, 2.0]]), list_value_type([[1, "a"]])
        ('integer', 'real', 'text')
    """
    kinds = {type(x) for v in lists if isinstance(v, (list, tuple)) for x in v if x is not None}
    if kinds == {int}:
        values = [x for v in lists if isinstance(v, (list, tuple)) for x in v if x is not None]
        return "integer" if -(1 << 63) <= min(values) and max(values) < (1 << 63) else "text"
    if kinds and kinds <= {int, float}:
        return "real"  # numbers: an integer among them comes back as 3.0 and is traced as the 3 it was
    return {frozenset([bool]): "boolean"}.get(frozenset(kinds), "text")


def _group_entities(plan, members: list, options: Options, tables: Namer) -> None:
    """Put the members (entity lists and references) of one identity space into one entity table.

    Two members share a table when they have the same identity field and agree on the entities they
    have in common; ``--merge`` forces members together, ``--no-merge`` keeps one apart. The tables are
    the connected components of the graph of those pairs, each in the order of its first member.
    """
    from .plan import EntityGroup, FieldMap

    pairs = nx.Graph()
    pairs.add_nodes_from(range(len(members)))  # in order: components come out by their first member
    ref = [m.name for m in members]
    forbidden = set(options.no_merge)
    merged = {}  # (i, j) -> the table of both lists: a group of just those two measures on it again
    for i in range(len(members)):
        for j in range(i + 1, len(members)):
            a, b = members[i], members[j]
            if a.identity != b.identity or a.matched != b.matched or ref[i] in forbidden or ref[j] in forbidden:
                continue
            both = ObjectTable.concat([a.table, b.table])
            common, agree = _agreement(a.table, b.table, a.identity, both)
            if common and agree >= 1 - options.violation_threshold or not common and _same_shape(a.table, b.table):
                pairs.add_edge(i, j)
                merged[(i, j)] = both
    for group in options.merge:
        chosen = [ref.index(m) for m in group if m in ref]
        pairs.add_edges_from((chosen[0], m) for m in chosen[1:])

    for chosen in (sorted(component) for component in nx.connected_components(pairs)):
        first = members[chosen[0]]
        identity = first.identity
        both = merged.get(tuple(chosen))
        objects_table = both if both is not None else ObjectTable.concat([members[m].table for m in chosen])
        objects = objects_table.objects
        # named after what its members call it most often (user, in sender, user, owner, user); ties to a list's
        # name (a list names the kind, "watchers"; a single object its role, "opened_by"), then the first
        called = Counter(singular(sql_name(members[m].column)) for m in chosen)
        listed = {singular(sql_name(members[m].column)) for m in chosen if not isinstance(members[m].holder, FieldMap)}
        best = max(called, key=lambda name: (called[name], name in listed, -list(called).index(name)))
        column = next(members[m].column for m in chosen if singular(sql_name(members[m].column)) == best)
        table = tables(_entity_name(identity, column))
        names = Namer([f"{table}_sk"])
        matched = first.matched
        identity_column = names(f"{identity}_key" if matched else identity)
        group = EntityGroup(table=table, key_column=f"{table}_sk", identity=identity,
                            identity_column=identity_column,
                            identity_type="text" if matched else _identity_type(objects_table, identity),
                            members=[ref[m] for m in chosen], matched=matched)
        all_fields, _ = scalar_fields(objects, table=objects_table)
        top = [p[0] for p in all_fields if len(p) == 1]
        if matched:
            # the field itself is an attribute (its most frequent spelling); others by dependency on the match key
            keyed = [dict(o, **{_MATCH_KEY: match_key(o.get(identity))}) for o in objects]
            attrs = [identity] + [f for f in entity_attributes(keyed, _MATCH_KEY, top, options.violation_threshold)
                                  if f != identity]
        else:
            attrs = entity_attributes(objects, identity, top, options.violation_threshold, objects_table)
        group.attributes = [field_map(objects, [f], names(f), objects_table) for f in attrs]
        plan.entities.append(group)
        for m in chosen:
            members[m].holder.entity = table


_MATCH_KEY = "\x00match_key"


def match_key(value):
    """The normalised natural key objects are matched on: Unicode NFKC, case folded, white space collapsed.

    Example:
        >>> match_key("  Ann\u00a0 O'HARA "), match_key("ﬁona"), match_key(7)
        ("ann o'hara", 'fiona', 7)
    """
    if not isinstance(value, str):
        return value
    import unicodedata

    return " ".join(unicodedata.normalize("NFKC", value).casefold().split())


def _identity_type(table: ObjectTable, identity: str) -> str:
    t = value_type(table.values(identity), table.kinds(identity))
    return t if t in ("integer", "text") else "text"


# --- references back to records -------------------------------------------------

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
        return bool(_ID_NAME.search(name)) or singular(target) in lowered or key_columns[target].lower() in lowered
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
            if nested.kind != "value-list" or nested.path or nested.value_type not in ("text", "integer"):
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
