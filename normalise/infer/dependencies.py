"""Functional dependencies inside nested objects (X -> A, with a tolerated share of violations) and the identity
candidates they point to; counted with numpy on factorised columns (``ObjectTable``), with ``measure_dependency``
as the plain reference (a textbook definition: every occurrence of one X value carries the same A).
"""

from __future__ import annotations

import re
from collections import Counter, defaultdict
from dataclasses import dataclass
from itertools import chain

from ..model.settings import DEFAULT_VIOLATION_THRESHOLD

ID_NAME = re.compile(r"(?i)^(id|key|code|uuid|guid|slug)$|(_id|_key|_code|_uuid|Id|ID|_no|_number)$")
_POSITION_NAME = re.compile(r"(?i)^(position|pos|order|ordinal|index|idx|rank|seq|sequence|sort_order)$")


def hashable(value):
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
        values[hashable(k)][hashable(obj[field]) if field in obj else MISSING] += 1
    occurrences = violations = 0
    for counter in values.values():
        total = sum(counter.values())
        if total < 2:
            continue
        occurrences += total
        violations += total - counter.most_common(1)[0][1]
    return Dependency(key, field, occurrences, violations)


MISSING = object()


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
                    col = columns[k] = [MISSING] * n
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
        """Each object's value of ``field``; ``MISSING`` where the object lacks the key."""
        self.keys()  # reads every column at once when they fit
        found = self._columns.get(field)
        if found is None:
            if self._parts:
                found = list(chain.from_iterable(t.column(field) for t in self._parts))
            elif self._all_read:  # a key no object has (another list's field)
                found = [MISSING] * len(self.objects)
            else:
                found = [o.get(field, MISSING) for o in self.objects]
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
            if MISSING not in col:
                found = self._values[field] = col  # the same list: nothing more to hold
            else:
                found = [None if v is MISSING else v for v in col]
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
                   else np.array([v is not MISSING for v in col], dtype=bool))
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
                values = [hashable(v) for v in values]
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
        keys = ([k for k in keys if ID_NAME.search(k)] + [k for k in keys if not ID_NAME.search(k)])
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
        named = bool(ID_NAME.search(key))
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
