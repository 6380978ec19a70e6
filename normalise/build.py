"""Build pass: turn decoded exports into table rows as the plan says.

Surrogate keys are deterministic and need no shared counter, so chunks or
partitions built apart agree (see DEVELOPERS.md, "Keys"):

* a record's key is the line on which its row starts in the file;
* an entity's key is the first 63 bits of the BLAKE2b hash of its typed
  natural key (``integer:7``, ``text:Ann``);
* a bridge or child row owned by a record gets ``record key * 2**24 +
  position``; one owned by another bridge or child row (a list inside an
  object) hashes its source column, its owner's key and its position.
"""

from __future__ import annotations

import json
from collections import Counter
from dataclasses import dataclass, field
from hashlib import blake2b
from itertools import chain
from operator import itemgetter

import numpy as np

from .describe import descriptions
from .errors import NormaliseError
from .exact import (ABSENT, VALUE_TYPES, InputDigests, expect_cell, expect_element, get, is_negative_zero, json_text,
                    keyed_items, literal, pointer, same, store, stored_back, usable_identity, value_key)
from .infer import get_path, match_key, reference_text
from .plan import META_TABLES, NestedColumn, Plan, RecordSource
from .schema import record_parts, record_row_columns, reference_columns

_MASK = (1 << 53) - 1  # keys of at most 53 bits: exact as IEEE 754 doubles


class DuplicateNaturalKey(NormaliseError):
    """Records share a natural key and the policy is to refuse."""


class TooManyColumns(NormaliseError):
    """A planned table has more columns than the database allows in one table."""


def _max_columns() -> int:
    import sqlite3
    try:
        return sqlite3.connect(":memory:").getlimit(sqlite3.SQLITE_LIMIT_COLUMN)
    except (AttributeError, sqlite3.Error):  # pragma: no cover - before Python 3.11
        return 2000  # SQLITE_MAX_COLUMN's default (sqlite.org/limits.html)


def check_width(plan: Plan, limit: int | None = None, backend: str = "SQLite") -> None:
    """Refuse, before anything is written, a table wider than the database allows (it would fail half-way).

    Record tables are split in the plan (``schema.split_wide_records``); what can still be too wide is a nested
    table (a single object with thousands of keys) or a record with as many foreign keys. ``limit``: the
    backend's columns per table (default: this SQLite's).
    """
    if limit is None and max((len(t.columns) for t in plan.tables), default=0) <= 999:  # below any SQLite build's
        return
    limit = _max_columns() if limit is None else limit
    for t in plan.tables:
        if len(t.columns) > limit:
            where = ", ".join(f"{s['file']}" + (f" column {s['column']}" if s.get("column") else "")
                              for s in t.sources) or t.name
            raise TooManyColumns(
                f"{where}: table {t.name!r} ({t.role}) would have {len(t.columns):,} columns, more than the "
                f"{limit:,} {backend} allows in one table; nothing was written. Record tables are split into 1:1 "
                f"tables, nested ones are not: keep the wide nested column as text (--decode COLUMN=text), or "
                f"split the export's columns into files that share the key column (they are joined by key)")


def key_of(text: str) -> int:
    """A deterministic 53-bit surrogate key for a text: every key is an integer a JSON reader that
    keeps numbers as IEEE 754 doubles (JavaScript, spreadsheets) reads back exactly (at most 2**53).

    Example:
        >>> key_of("integer:7") == key_of("integer:7"), key_of("integer:7") == key_of("text:7")
        (True, False)
        >>> key_of("integer:7") < 2**53
        True
    """
    digest = blake2b(text.encode("utf-8", "surrogatepass"), digest_size=8).digest()
    return int.from_bytes(digest, "big") & _MASK


class KeySpace:
    """The surrogate keys of one table's natural keys: ``key_of`` the text, or, in the rare case that
    another text of the table already has that key (about n**2 / 2**54 for n keys), ``key_of`` the text
    with a count appended, the first free one. The first text to reach a key (in input order, the
    same for any chunking) keeps it; ``collisions`` counts the others.

    Example:
        >>> space = KeySpace()
        >>> space.claim("integer:7") == key_of("integer:7") == space.claim("integer:7")
        True
        >>> space.taken[key_of("text:x")] = "text:other"  # as if another text had that key
        >>> space.claim("text:x") == key_of("text:x\\x001"), space.collisions
        (True, 1)
    """

    def __init__(self):
        self.taken: dict[int, str] = {}  # key -> text
        self.keys: dict[str, int] = {}  # text -> key
        self.collisions = 0

    def claim(self, text: str) -> int:
        key = self.keys.get(text)
        if key is not None:
            return key
        key, n = key_of(text), 0
        while self.taken.get(key, text) != text:
            n += 1
            key = key_of(f"{text}\x00{n}")
        self.collisions += n > 0
        self.taken[key] = text
        self.keys[text] = key
        return key

    def holds(self, text: str, key: int) -> None:
        """A key already in the database (build --append)."""
        self.taken[key] = text
        self.keys[text] = key


# Rows owned by a record get record key * 2**24 + position: with record keys below 2**29 every such key is
# below 2**53, like the hashed ones.
_RECORD_KEY_LIMIT = 1 << 29
_POSITION_BITS = 24


def row_key(source: str, owner_sk: int, position: int) -> int:
    """The key of a bridge or child row: its record's key and its position, or a hash below that.

    Rows owned by a record get ``record key * 2**24 + position``: keys that grow
    in file order, which SQLite appends cheaply. Rows owned by other bridge or
    child rows (lists inside objects) hash their source, owner and position.

    Example:
        >>> row_key("f:c", 12, 3) == 12 * 2**24 + 3
        True
    """
    if owner_sk < _RECORD_KEY_LIMIT and position < (1 << _POSITION_BITS):
        return (owner_sk << _POSITION_BITS) | position
    return key_of(f"{source}:{owner_sk}:{position}")


_INT64_MIN, _INT64_MAX = -(1 << 63), (1 << 63) - 1


def to_sql_value(value, type_: str):
    """A decoded value as the column type stores it (None stays None)."""
    if value is None:
        return None
    if type_ == "integer":
        if isinstance(value, bool):
            return int(value)
        if not isinstance(value, int):
            try:
                value = int(value)
            except (TypeError, ValueError, OverflowError):  # OverflowError: int(inf)
                return None
        # SQLite's INTEGER holds 64 bits; a bigger value is not an integer of the column
        # (stored as NULL and reported, like any value of another type)
        return value if _INT64_MIN <= value <= _INT64_MAX else None
    if type_ == "real":
        try:
            return float(value)
        except (TypeError, ValueError, OverflowError):  # OverflowError: float(10**400)
            return None
    if type_ == "boolean":
        if isinstance(value, str):
            return value.strip().lower() in ("true", "1", "yes")
        return bool(value)
    if isinstance(value, str):
        return value
    return json_text(value)


def value_text(value, type_: str) -> str:
    """The typed text a value of a value list is keyed by (its surrogate key is the hash of it).

    Example:
        >>> value_text("7", "text"), value_text(7, "integer"), value_text(44, "real"), value_text(44.0, "real")
        ('text:7', 'integer:7', 'real:44.0', 'real:44.0')
    """
    if type(value) is str:
        return "text:" + value
    if type_ == "real" and type(value) in (int, float):
        # 44 and 44.0 are one REAL value (the 44 is traced); so are -0.0 and 0.0, one value to SQL's UNIQUE
        return "real:" + repr(float(value) + 0.0)
    return canonical(value, type_)


def canonical(value, type_: str) -> str:
    """The typed text form of a natural key, the input of its surrogate key."""
    if type_ == "integer" and isinstance(value, int) and not isinstance(value, bool):
        return f"integer:{value}"
    return "text:" + (value if isinstance(value, str) else json_text(value))


@dataclass
class FileCounts:
    file: str
    path: str
    rows_read: int = 0
    records_loaded: int = 0
    rows_set_aside: int = 0
    rows_rejected: int = 0
    rows_unmatched: int = 0  # one-to-many: rows naming no main record, kept in unmatched_rows
    elements_decoded: int = 0
    elements_written: int = 0
    elements_quarantined: int = 0
    cells_quarantined: int = 0

    @property
    def reconciled(self) -> bool:
        rows = self.rows_read == (self.records_loaded + self.rows_set_aside + self.rows_rejected
                                  + self.rows_unmatched)
        elements = self.elements_decoded == self.elements_written + self.elements_quarantined
        return rows and elements


@dataclass
class Built:
    rows: dict[str, list[tuple]]
    counts: list[FileCounts]
    conflicts: int = 0
    merges: list[dict] = field(default_factory=list)  # entities matched from several spellings
    cells_quarantined_by_file: dict = field(default_factory=dict)  # every input file, joined ones too
    updates: dict = field(default_factory=dict)  # entity table -> rows to rewrite with their chosen values
    inputs: object = None  # exact.InputDigests of the loaded cells
    trace_reasons: dict = field(default_factory=dict)  # why values were kept in value_traces, and how many
    rejoined: dict = field(default_factory=dict)  # "file:column" -> values whose name suffix was rejoined
    column_updates: dict = field(default_factory=dict)  # (table, column) -> [(value, row sk)] to set at the end
    references: list = field(default_factory=list)  # per reference to a record table: values, matched, unmatched


class _Audit:
    """What the model, inferred from the first records, could not hold: reported, never dropped quietly.

    A key that appears in objects but not in the plan (with more than an empty
    list or object), and a value that does not fit its column's type, each
    become rows of ``quarantined_cells`` (one per column and key, with the first
    line and the count).
    """

    def __init__(self, quarantine: list):
        self.quarantine = quarantine
        self._known: dict[int, frozenset] = {}
        self.unplanned: dict[tuple, list] = {}  # (file, column, key) -> [first line, count]
        self.mismatched: dict[tuple, list] = {}  # (file, column, type) -> [first line, count, example]

    def known(self, nested: NestedColumn, entities: dict) -> frozenset:
        found = self._known.get(id(nested))
        if found is None:
            keys = {f.path[0] for f in nested.row_fields if f.path} | {c.path.split(".")[0] for c in nested.children}
            if nested.identity:
                keys.add(nested.identity)
            if nested.kind == "entity-list":
                keys |= {f.path[0] for f in entities[nested.entity].group.attributes}
            found = self._known[id(nested)] = frozenset(keys)
        return found

    def note_keys(self, nested: NestedColumn, obj: dict, path: str, line: int) -> None:
        """Count the keys of an object that the model does not hold (``known`` has been asked for ``nested``).

        An empty list or object carries nothing: the model leaves out keys that
        only ever hold such markers (``infer.scalar_fields``), so none is a lost value.
        """
        for key in obj.keys() - self._known[id(nested)]:
            value = obj[key]
            if isinstance(value, (list, tuple, dict, set)) and not value:
                continue
            entry = self.unplanned.setdefault((path, nested.column, str(key)), [line, 0])
            entry[0] = min(entry[0], line)  # the first line in the file, whatever order the columns are read in
            entry[1] += 1

    def note_type(self, path: str, column: str, type_: str, value, line: int) -> None:
        entry = self.mismatched.setdefault((path, column, type_), [line, 0, value])
        if line < entry[0]:  # the first line in the file and its value, whatever order the columns are read in
            entry[0], entry[2] = line, value
        entry[1] += 1

    def report(self) -> None:
        for (path, column, key), (line, n) in self.unplanned.items():
            self.quarantine.append((path, line, f"{column}.{key}", None, f"key {key!r}",
                                    f"key {key!r} appears in {n} object(s) from this line on but is not in the "
                                    f"model (inferred from the first records); its values are kept as given in "
                                    f"value_traces, not in columns: write a plan with `normalise plan` and add it"))
        for (path, column, type_), (line, n, example) in self.mismatched.items():
            self.quarantine.append((path, line, column, None, repr(example)[:40],
                                    f"{n} value(s) from this line on are not {type_}, the column's type "
                                    f"(inferred from the first records); the column holds NULL (a text column "
                                    f"their text) and value_traces each value as given"))


class _ValueTable:
    """The distinct values of a list of scalars, and those first seen since they were last taken."""

    def __init__(self):
        self.rows: dict[str, tuple] = {}  # canonical -> (sk, value)
        self.new: list[tuple] = []
        self.space = KeySpace()

    def key(self, value, value_type: str) -> int:
        """The surrogate key of a value of the list, its row made when first seen."""
        text = value_text(value, value_type)
        entry = self.rows.get(text)
        if entry is None:
            stored = store(value, value_type)[0] if value_type != "text" else to_sql_value(value, "text")
            entry = self.rows[text] = (self.space.claim(text), stored)
            self.new.append(entry)
        return entry[0]

    def existing(self, rows: dict[str, tuple]) -> None:
        """The values already in the database (build --append), with their keys."""
        self.rows.update(rows)
        for text, (sk, _) in rows.items():
            self.space.holds(text, sk)


class _Entities:
    """Occurrences of each entity, to choose attribute values by frequency.

    An entity's row is made when it is first seen (so it can be written before
    the bridge rows that refer to it). For every attribute, each (entity, value)
    pair is counted and the place it was first seen kept — (line, column,
    position in the list) — so the chosen value (most frequent; ties to the
    first seen in the file) is the same however the input is chunked.
    """

    def __init__(self, group):
        self.group = group
        self.seen: dict = {}  # type of natural key -> {natural key value: (canonical text, sk)}
        self.first: dict[str, tuple] = {}  # canonical -> the row as first written
        self.new_rows: list[tuple] = []
        self.keys = [(f.column, f.path[0], f.type) for f in group.attributes]
        self.counts = [Counter() for _ in self.keys]  # per attribute: (canonical, value key) -> occurrences
        self.preexisting: set = set()  # entities already in the database (build --append)
        self.space = KeySpace()
        self.first_at = [{} for _ in self.keys]  # per attribute: (canonical, value key) -> first place
        self.values = [{} for _ in self.keys]  # per attribute: value key -> the value itself
        # Each occurrence's own value must come back (value_traces keeps those the entity row does not
        # hold). Per attribute: a reference value key per entity (its first occurrence's), and every occurrence
        # whose value differs from it, with its place; the occurrences holding the reference value are
        # found in the bridges at the end, when the reference is not the value the entity row holds.
        self.reference = [{} for _ in self.keys]  # per attribute: canonical -> value key
        self.differing = [[] for _ in self.keys]  # per attribute: (canonical, value key, value, place)
        self.pending: list[tuple] = []  # this partition's occurrences, compared with the references by settle

    def lookup(self, ident) -> tuple[str, int]:
        seen = self.seen.get(type(ident))
        if seen is None:
            seen = self.seen[type(ident)] = {}
        hit = seen.get(ident)
        if hit is None:
            text = canonical(ident, self.group.identity_type)
            hit = seen[ident] = (text, self.space.claim(text))
        return hit

    def new_entity(self, text: str, sk: int, ident, obj: dict) -> None:
        if text not in self.first:
            row = (sk, to_sql_value(ident, self.group.identity_type),
                   *[store(obj.get(f.path[0]), f.type, f.as_text)[0] for f in self.group.attributes])
            self.first[text] = row
            self.new_rows.append(row)

    def add_column(self, idents: list, objects: list[dict], places: list[tuple], where, rows: list[int]) -> list[int]:
        """Occurrences of entities, a column at a time: their identities and objects; returns their entity keys.

        ``places`` are their (line, column, position) in the file, ``rows`` the partition's record row each is in,
        ``where(j)`` occurrence ``j``'s row: (table, row_sk, owner_sk, position, column, file, line, path).
        """
        kinds = set(map(type, idents))
        if len(kinds) == 1:  # one type of identity: the values themselves are the lookup keys
            found = dict(zip(reversed(idents), reversed(range(len(idents)))))  # each one's first occurrence
            seen = self.seen.setdefault(kinds.pop(), {})
            # an entity looked up before has its row already: only those never seen need Python here
            for ident, hit in zip(list(found), list(map(seen.get, found))):
                if hit is None:
                    text, sk = self.lookup(ident)
                    self.new_entity(text, sk, ident, objects[found[ident]])
            keyed = list(map(seen.__getitem__, idents))
        else:
            keyed = []
            for ident, obj in zip(idents, objects):
                text, sk = self.lookup(ident)
                self.new_entity(text, sk, ident, obj)
                keyed.append((text, sk))
        text_col = [t for t, _ in keyed]
        if self.keys:
            numbered: dict[str, int] = {}
            entity_codes = np.array([numbered.setdefault(t, len(numbered)) for t in text_col], dtype=np.int64)
            attributes = []
            for k, (_, key, _) in enumerate(self.keys):
                values = [o.get(key, ABSENT) for o in objects]
                # text, None and ABSENT are their own keys (exact.value_key): most columns need no call per value
                hkeys = values if set(map(type, values)) <= _OWN_KEYS else list(map(value_key, values))
                known = self.values[k]
                for h, v in dict(zip(reversed(hkeys), reversed(values))).items():  # each key's first value
                    known.setdefault(h, v)
                self._count(k, text_col, entity_codes, hkeys, places)
                attributes.append((hkeys, values))
            self.pending.append((text_col, attributes, where, rows))
        return [sk for _, sk in keyed]

    def settle(self) -> None:
        """Compare the partition's occurrences with each entity's reference value, once all its columns are in.

        An entity's reference is the value of its first occurrence in file order: the partition's first row
        holding it, and in that row the first column read (the order the columns are read in is the same in
        every partition). So the references, and which occurrences are traced against them, are the same
        however the records are partitioned.
        """
        pending, self.pending = self.pending, []
        if not pending:
            return
        firsts = [dict(zip(reversed(text_col), reversed(range(len(text_col))))) for text_col, *_ in pending]
        for k in range(len(self.keys)):
            reference = self.reference[k]
            new: dict[str, tuple] = {}  # entity first met in this partition -> ((row, column read), value key)
            for c, ((_, attributes, _, rows), first) in enumerate(zip(pending, firsts)):
                hkeys = attributes[k][0]
                for text, j in first.items():
                    if text not in reference:
                        at = (rows[j], c)
                        got = new.get(text)
                        if got is None or at < got[0]:
                            new[text] = (at, hkeys[j])
            for text, (_, h) in new.items():
                reference[text] = h
            for text_col, attributes, where, _ in pending:
                hkeys, values = attributes[k]
                refs = list(map(reference.__getitem__, text_col))
                if refs != hkeys:
                    for j in [j for j, (a, b) in enumerate(zip(refs, hkeys)) if a != b]:
                        self.differing[k].append((text_col[j], hkeys[j], values[j], where(j)))

    def _count(self, k: int, text_col: list, entity_codes, values: list, places: list) -> None:
        """Count attribute ``k``'s (entity, value key) pairs of one column and keep where each was first seen.

        The same as ``Counter.update`` on the pairs (absent values are not counted), but Python touches only
        the distinct pairs: numpy finds them, their counts and their first occurrences (places come in file
        order, so the first occurrence is the first place).
        """
        numbered: dict = {}
        codes = np.array([numbered.setdefault(v, len(numbered)) if v is not ABSENT else -1 for v in values],
                         dtype=np.int64)
        pairs = entity_codes * max(len(numbered), 1) + codes
        present = None
        if (codes < 0).any():  # objects without the key: not counted
            present = np.flatnonzero(codes >= 0)
            pairs = pairs[present]
        if not len(pairs):
            return
        _, first, n = np.unique(pairs, return_index=True, return_counts=True)
        if present is not None:
            first = present[first]
        first = first.tolist()
        pairs = list(zip(map(text_col.__getitem__, first), map(values.__getitem__, first)))  # all distinct
        where = list(map(places.__getitem__, first))
        self.counts[k].update(dict(zip(pairs, n.tolist())))
        first_at = self.first_at[k]
        before = list(map(first_at.setdefault, pairs, where))  # a pair seen before keeps its place...
        for j in [j for j, (old, new) in enumerate(zip(before, where)) if new < old]:
            first_at[pairs[j]] = where[j]  # ...unless this one comes earlier in the file

    def choose(self):
        """Per entity: its chosen attribute values, and per attribute the variants (value, count, first place)."""
        variants: dict[str, list[list]] = {text: [[] for _ in self.keys] for text in self.first}
        for k, counter in enumerate(self.counts):
            first_at, values = self.first_at[k], self.values[k]
            for (text, h), n in counter.items():
                variants[text][k].append((values[h], n, first_at[(text, h)]))
        for text in sorted(self.first):
            per_attribute = variants[text]
            chosen = []
            for found in per_attribute:
                found.sort(key=lambda v: v[2])  # in the order first seen in the file
                chosen.append(max(found, key=lambda v: v[1])[0] if found else None)  # ties: the first seen
            yield text, chosen, per_attribute

    def take_new_rows(self) -> list[tuple]:
        rows, self.new_rows = self.new_rows, []
        return rows


_OWN_KEYS = {str, type(None), type(ABSENT)}

class _References:
    """Values that are natural keys of record tables (``references`` in the plan), resolved to those records'
    surrogate keys.

    The record a value names may come later in the file or in another file: a value no record has yet is
    noted and resolved at the end (``finish``: value rows rewritten whole, record columns set), so one chunk
    or many give the same rows. A value no record has at the end keeps NULL and is counted, never dropped
    (its own text stays in its column either way).
    """

    def __init__(self, plan: Plan, state: dict | None):
        self.value_lists = {n.entity: n for r in plan.records for n in r.nested
                            if n.kind == "value-list" and n.references}
        self.columns = {r.table: reference_columns(r) for r in plan.records}  # [(FieldMap, foreign-key column)]
        self.targets = ({n.references for n in self.value_lists.values()}
                        | {f.references for found in self.columns.values() for f, _ in found})
        self.records: dict[str, dict] = {}  # record table -> {natural key's reference text: record sk}
        self.linked = {t: {} for t in self.value_lists}  # value table -> {value sk: record sk or None}
        self.unlinked = {t: {} for t in self.value_lists}  # value table -> {value sk: value} with no record yet
        self.used = {t: Counter() for t in self.value_lists}  # value table -> bridge rows naming each value
        self.cells: dict[tuple, int] = {}  # (record table, foreign-key column) -> values seen
        self.pending: dict[tuple, list] = {}  # (record table, foreign-key column) -> [(row sk, text)] unresolved
        if state:  # build --append: the records already there are named too; their value rows stay as they are
            for table in self.targets:
                self.records[table] = dict(state["natural_keys"].get(table, {}))
            for table, links in state.get("value_links", {}).items():
                if table in self.linked:
                    self.linked[table].update(links)

    def add_keys(self, record: RecordSource, columns: dict, kept: list[int], keys: list[int]) -> None:
        """The natural keys of the records just kept, before any row names them."""
        if record.table not in self.targets or not record.natural_key:
            return
        source = next(f.path[0] for f in record.scalars if f.column == record.natural_key[0])
        values = columns[source].values
        found = self.records.setdefault(record.table, {})
        for i, sk in zip(kept, keys):
            text = reference_text(values[i])
            if text is not None:
                found.setdefault(text, sk)

    def cell_keys(self, record: RecordSource, columns: dict, kept: list[int], keys: list[int]) -> list[list]:
        """Per referring scalar column of the record: the referenced record's key for each kept record."""
        out = []
        for f, column in self.columns[record.table]:
            found = self.records.get(f.references, {})
            values = columns[f.path[0]].values
            pending = self.pending.setdefault((record.table, column), [])
            col = []
            seen = 0
            for i, sk in zip(kept, keys):
                v = values[i]
                if v is None:
                    col.append(None)
                    continue
                seen += 1
                text = reference_text(v)
                target = found.get(text)
                if target is None:
                    pending.append((sk, text))
                col.append(target)
            self.cells[(record.table, column)] = self.cells.get((record.table, column), 0) + seen
            out.append(col)
        return out

    def link_values(self, table: str, rows: list[tuple]) -> list[tuple]:
        """New value rows of a referring value list, each with its record's key (None: none yet)."""
        nested = self.value_lists.get(table)
        if nested is None or not rows:
            return rows
        found = self.records.get(nested.references, {})
        linked, unlinked = self.linked[table], self.unlinked[table]
        out = []
        for sk, value in rows:
            target = found.get(reference_text(value))
            linked[sk] = target
            if target is None:
                unlinked[sk] = value
            out.append((sk, value, target))
        return out

    def finish(self, plan: Plan) -> tuple[dict, dict, list[dict]]:
        """(value rows to rewrite, record columns to set, the figures of each reference), once all records are in."""
        updates, column_updates, figures = {}, {}, []
        for table, nested in self.value_lists.items():
            found = self.records.get(nested.references, {})
            linked, unlinked = self.linked[table], self.unlinked[table]
            for sk, value in list(unlinked.items()):
                target = found.get(reference_text(value))
                if target is not None:
                    linked[sk] = target
                    del unlinked[sk]
                    updates.setdefault(table, []).append((sk, value, target))
            used = self.used[table]
            missing = [sk for sk in used if linked.get(sk) is None]
            unmatched = sum(used[sk] for sk in missing)
            figures.append(_reference_figures(
                f"{nested.file}:{nested.column}", "value-list", table, plan.table(table).columns[-1].name,
                nested.references, sum(used.values()), unmatched, len(missing),
                [unlinked[sk] for sk in missing if sk in unlinked], len(used)))
        for record in plan.records:
            for f, column in self.columns[record.table]:
                found = self.records.get(f.references, {})
                sets, unmatched = [], Counter()
                for sk, text in self.pending.get((record.table, column), ()):
                    target = found.get(text)
                    if target is None:
                        unmatched[text] += 1
                    else:
                        sets.append((target, sk))
                if sets:
                    column_updates[(record.table, column)] = sets
                figures.append(_reference_figures(
                    f"{record.file}:{f.path[0]}", "column", record.table, column, f.references,
                    self.cells.get((record.table, column), 0), sum(unmatched.values()), len(unmatched),
                    [t for t in unmatched if t is not None]))
        return updates, column_updates, figures


def _reference_figures(column: str, kind: str, table: str, key: str, references: str, values: int,
                       unmatched: int, distinct_unmatched: int, examples: list, distinct: int | None = None) -> dict:
    """The manifest's entry of one reference: values seen, matched to a record, and kept without one."""
    out = {"column": column, "kind": kind, "foreign_key": f"{table}.{key}", "references": references,
           "values": values, "matched": values - unmatched, "unmatched": unmatched,
           "distinct_unmatched": distinct_unmatched, "unmatched_examples": sorted(map(str, examples))[:5]}
    if distinct is not None:
        out["distinct_values"] = distinct
    return out


def set_column(plan: Plan, rows: dict, table: str, column: str, pairs: list[tuple]) -> None:
    """Set one column of rows held in memory: ``pairs`` of (value, primary key)."""
    at = [c.name for c in plan.table(table).columns].index(column)
    values = {sk: v for v, sk in pairs}
    rows[table] = [r if r[0] not in values else (*r[:at], values[r[0]], *r[at + 1:]) for r in rows[table]]


class Builder:
    """Builds rows chunk by chunk; entity and value tables and the meta tables come at the end.

    ``add`` takes one chunk of one export (any number of rows); ``take_rows``
    hands over the record, bridge and child rows made so far, so a caller can
    write them and let them go; ``finish`` makes the entity, value and meta
    rows and the counts. One chunk or many give the same rows: keys need no
    counter, duplicates are judged against every key seen before, and entity
    attributes are chosen from counts over all chunks.
    """

    def __init__(self, plan: Plan, extra: dict | None = None, state: dict | None = None):
        check_width(plan)
        self.plan = plan
        self.state = state  # what an existing database holds (build --append), else None
        self.meta: dict[str, list[tuple]] = {name: list((extra or {}).get(name, [])) for name in META_TABLES}
        self.rows: dict[str, list[tuple]] = {t.name: [] for t in plan.tables if t.name not in self.meta}
        self.entities = {g.table: _Entities(g) for g in plan.entities}
        self.groups = {g.table: g for g in plan.entities}
        self.values: dict[str, _ValueTable] = {}
        self.counts: dict[str, FileCounts] = {}
        self.quarantined_by_file: Counter = Counter()
        self.first_seen: dict[str, dict] = {}  # record table -> {natural key: line kept}
        self.last: dict[str, dict] = {}  # record table (duplicates = "last") -> {natural key: (record key, line)}
        self.refused: dict[str, list] = {}  # record table (duplicates = "refuse") -> [path, repeats, first lines]
        self.audit = _Audit(self.meta["quarantined_cells"])
        self.traces = self.meta["value_traces"]
        self.inputs = InputDigests()  # the digest of every loaded cell, for the lossless proof
        self.trace_reasons: Counter = Counter()
        self.rejoined: Counter = Counter()  # "file:column" -> delimited values with a name suffix rejoined
        self.record_references = _References(plan, state)  # values that are natural keys of record tables
        self.parts = _record_splits(plan)  # wide record tables: how a row is shared among their 1:1 tables
        if state:
            for table, keys in state["natural_keys"].items():
                self.first_seen[table] = dict(keys)
            for table, rows in state["entities"].items():
                acc = self.entities[table]
                acc.first.update(rows)
                acc.preexisting = set(rows)
                for text, row in rows.items():
                    acc.space.holds(text, row[0])
            for table, rows in state["values"].items():
                found = self.values[table] = _ValueTable()
                found.existing(rows)

    def key_columns(self) -> set:
        """The natural-key columns whose holders must be known before the first record is kept: those of
        records whose duplicates keep the last (``learn_last``); empty when none does."""
        return {next(f.path[0] for f in r.scalars if f.column == r.natural_key[0])
                for r in self.plan.records if r.duplicates == "last" and r.natural_key}

    def learn_last(self, export, columns: dict) -> None:
        """One partition of a first pass over the records: the last record of each natural key keeps it.

        With duplicates = "last" a record is kept only when no later one repeats its key; knowing the holders
        beforehand lets every partition decide alone, so one partition or many keep the same records.
        """
        record_keys = export.record_keys or export.lines
        inner_unmatched = export.inner_unmatched or {}
        for record in self.plan.records:
            if record.path != export.path or record.duplicates != "last" or not record.natural_key:
                continue
            source = next(f.path[0] for f in record.scalars if f.column == record.natural_key[0])
            holders = self.last.setdefault(record.table, {})
            for i, k in enumerate(columns[source].values):
                if k is not None and i not in inner_unmatched:
                    holders[k] = (record_keys[i], export.lines[i])

    def add(self, export, columns: dict) -> None:
        """Rows of one partition of one export (``columns`` is its decoded columns)."""
        for record in self.plan.records:
            if record.path == export.path:
                self._add_record(record, export, columns)
        for acc in self.entities.values():
            acc.settle()

    def _add_record(self, record: RecordSource, export, columns: dict) -> None:
        rows, meta = self.rows, self.meta
        main_rows = export.number_of_records if export.main_rows is None else export.main_rows
        c = self.counts.get(export.path)
        if c is None:
            c = self.counts[export.path] = FileCounts(record.file, export.path)
        c.rows_read += (export.rows_read if export.main_rows_read is None else export.main_rows_read)
        c.rows_rejected += len(export.rejected)
        c.rows_unmatched += export.rows_unmatched
        for r in export.rejected:
            meta["rejected_rows"].append((r.file, r.line, r.reason, r.raw))
        for col in columns.values():
            for q in col.quarantined:
                meta["quarantined_cells"].append((q.file, q.line, q.column, q.position, q.excerpt, q.message))
                c.cells_quarantined += q.file == export.path
                self.quarantined_by_file[q.file] += 1
        record_keys = export.record_keys or export.lines
        kept = self._keep(record, export, columns, record_keys)
        loaded = sum(i < main_rows for i in kept)
        c.records_loaded += loaded
        c.rows_set_aside += main_rows - loaded
        keys = [record_keys[i] for i in kept]
        self.record_references.add_keys(record, columns, kept, keys)
        for name in [f.path[0] for f in record.scalars]:
            col = columns[name]
            self.inputs.add(record.table, name, keys, [col.values[i] for i in kept], kept, col.impure)
        for nested in record.nested:
            col = columns[nested.column]
            if getattr(col, "rejoined", 0):
                self.rejoined[f"{export.path}:{nested.column}"] += col.rejoined
            if nested.separator and col.format == "delimited":  # the proof compares the cell's own text
                texts = self._delimited_cells(record, nested, col, kept, keys, export)
                self.inputs.add(record.table, nested.column, keys, texts, kept, set())
            else:
                self.inputs.add(record.table, nested.column, keys, [col.values[i] for i in kept], kept,
                                col.impure)
        scalar_cols = [self._stored_column(record, f, columns[f.path[0]].values, kept, record_keys, export)
                       for f in record.scalars]
        columns = self._keyed_columns(record, columns, kept, record_keys, export)
        reference_cols = self.record_references.cell_keys(record, columns, kept, keys)
        out = rows[record.table]
        # a single object made columns of the record: its columns, entity references among them
        held = [self._object_columns(record, nested, order, columns[nested.column].values, kept, record_keys, export)
                for order, nested in enumerate(record.nested) if nested.kind == "object-columns"]
        out += map(tuple, zip(keys, *scalar_cols, *[col for cols in held for col in cols], *reference_cols))
        if record.table in self.parts:
            self._split_rows(record.table, len(out) - len(kept))
        # Then the rows of every nested column. A cell its rows cannot give back is kept in value_traces: field
        # by field for a top-level list of plain objects or values (``_by_field``), else the cell whole when it
        # differs from what its rows give back (``_check_cell``). The columns compared whole come first (a
        # stable sort): the order in which the value traces of one row are numbered, as before.
        for order, nested in sorted(enumerate(record.nested), key=lambda on: _by_field(on[1])):
            col = columns[nested.column]
            cells = [(col.values[i], record_keys[i], i) for i in kept if col.values[i] is not None]
            if not cells:
                continue
            values, owners, rows_of = map(list, zip(*cells))
            by_field = _by_field(nested)
            whole = self._rows(nested, order, values, owners, rows_of, export, c, by_field)
            given = getattr(col, "given", None) or {}
            if by_field:
                for i in sorted(whole):
                    self.trace(record.table, record_keys[i], None, None, nested.column, "",
                               "the cell as given (its rows differ)", given.get(i, col.values[i]), export.path,
                               export.lines[i])
                continue
            for value, sk, i in cells:
                self._check_cell(record, nested, value, sk, export, i, col)

    def _keep(self, record: RecordSource, export, columns: dict, record_keys: list) -> list[int]:
        """Indices of the partition's records to load; the others are set aside (``set_aside_rows``).

        A natural key is judged against every key kept before, in earlier partitions too (and with
        ``--append`` the database's). With duplicates = "last" the record that keeps each key is known
        beforehand (``learn_last``); with "refuse" the repeats of every partition are counted and refused
        once, by ``finish``. So one partition or many keep the same records.
        """
        n = export.number_of_records
        inner_unmatched = export.inner_unmatched or {}
        if not record.natural_key and not inner_unmatched:
            return list(range(n))
        keys = [None] * n
        if record.natural_key:
            keys = columns[next(f.path[0] for f in record.scalars if f.column == record.natural_key[0])].values
        first = self.first_seen.setdefault(record.table, {})
        last = self.last.get(record.table, {}) if record.duplicates == "last" else None
        kept, dropped = [], []
        for i in range(n):
            k = keys[i]
            if i in inner_unmatched:
                dropped.append((i, None, inner_unmatched[i]))
            elif not record.natural_key:
                kept.append(i)
            elif k is None:
                dropped.append((i, None, "no natural key"))
            elif k in first:
                dropped.append((i, first[k], f"duplicate natural key {k!r}"))
            elif last is not None and last[k][0] != record_keys[i]:
                dropped.append((i, last[k][1], f"duplicate natural key {k!r}"))  # a later record keeps it
            else:
                first[k] = export.lines[i]
                kept.append(i)
        repeated = [export.lines[i] for i, kept_line, _ in dropped if kept_line is not None]
        if repeated and record.duplicates == "refuse":
            found = self.refused.setdefault(record.table, [export.path, 0, []])
            found[1] += len(repeated)
            found[2] += repeated[:5 - len(found[2])]
        set_aside = self.meta["set_aside_rows"]
        for i, kept_line, reason in dropped:
            cells = {c: (export.cells[c][i] if isinstance(export.cells[c][i], str) or export.cells[c][i] is None
                         else json.dumps(export.cells[c][i], ensure_ascii=False)) for c in export.columns}
            set_aside.append((export.path, export.lines[i], None if keys[i] is None else str(keys[i]),
                              reason + ("" if kept_line is None else f"; kept line {kept_line}"),
                              kept_line, json.dumps(cells, ensure_ascii=False)))
        return kept

    def _refuse_duplicates(self) -> None:
        """With duplicates = "refuse", records that repeat a natural key stop the build, counted over all of it."""
        for record in self.plan.records:
            found = self.refused.get(record.table)
            if found:
                path, n, lines = found
                raise DuplicateNaturalKey(f"{path}: {n} record(s) repeat a natural key ({record.natural_key[0]}): "
                                          f"{', '.join(f'line {line}' for line in lines)}; use --duplicates first "
                                          f"or last to keep one and set the others aside")

    def _split_rows(self, table: str, start: int) -> None:
        """Share the record rows made from ``start`` on among the record table and its parts (1:1 tables)."""
        made = self.rows[table][start:]
        del self.rows[table][start:]
        for name, columns in self.parts[table]:
            self.rows[name] += map(columns, made)

    def _keyed_columns(self, record: RecordSource, columns: dict, kept: list[int], record_keys, export) -> dict:
        """The columns with each object keyed by data read as its list (``exact.keyed_items``), once, here.

        The input digests were taken on the cells as given, so the proof compares the objects rebuilt from
        the rows with them. A cell that does not fit the keyed form (a key that is not text, a value of
        another shape) makes no rows and is kept whole in value_traces.
        """
        keyed = [n for n in record.nested if n.keyed]
        if not keyed:
            return columns
        columns = dict(columns)
        for nested in keyed:
            given = columns[nested.column].values
            values = [None] * len(given)
            for i in kept:
                v = given[i]
                if v is None:
                    continue
                items = keyed_items(v, nested.keyed, nested.keyed_value)
                if items is None:
                    self.trace(record.table, record_keys[i], None, None, nested.column, "",
                               "the cell as given (not an object keyed by data of the column's form)", v,
                               export.path, export.lines[i])
                values[i] = items
            columns[nested.column] = _KeyedColumn(values, {i: given[i] for i in kept if given[i] is not None})
        return columns

    def _stored_column(self, record: RecordSource, f, values: list, kept: list[int], record_keys, export) -> list:
        """A scalar column's stored values for the kept records; values it cannot give back are traced."""
        vals = [values[i] for i in kept]
        if f.type == "text" and set(map(type, vals)) <= {str, type(None)}:
            return vals  # text stays text: the common case, nothing to check
        out = []
        for v, i in zip(vals, kept):
            stored, exact = store(v, f.type, f.as_text)
            out.append(stored)
            if not exact:
                self.audit.note_type(export.path, f.column, f.type, v, export.lines[i])
                self.trace(record.table, record_keys[i], None, None, f.path[0], "", f"not {f.type} as given",
                           v, export.path, export.lines[i])
        return out

    def _delimited_cells(self, record, nested: NestedColumn, col, kept: list[int], keys: list[int], export) -> list:
        """The text of each kept delimited cell; a cell that is not its values joined by the plan's separator
        (quotes, uneven spacing, empty pieces) is kept as written in value_traces."""
        sep, values = nested.separator, col.values
        texts = delimited_texts(col, kept, sep)
        for i, sk, written in zip(kept, keys, texts):
            pieces = values[i]
            if pieces is None:
                continue
            if written != sep.join(pieces):
                self.trace(record.table, sk, None, None, nested.column, "",
                           "the cell as written (quotes, spacing or empty pieces around its values)", written,
                           export.path, export.lines[i])
        return texts

    def trace(self, table, row_sk, owner_sk, position, column, path, reason, original, file, line) -> None:
        """Keep a value the model's columns cannot give back (``original`` ABSENT: the key was absent)."""
        self.traces.append((table, row_sk, owner_sk, position, column, path, reason,
                            None if original is ABSENT else literal(original), file, line))
        self.trace_reasons[reason] += 1

    def _object_columns(self, record: RecordSource, nested: NestedColumn, order: int, values: list, kept: list[int],
                        record_keys, export) -> list[list]:
        """The record's columns of a single object (``object-columns``) for the kept records, a list per field;
        a reference among them holds the entity's key (``_refer``)."""
        objects = [values[i] if isinstance(values[i], dict) else {} for i in kept]
        lines = export.lines
        out = []
        for f in nested.row_fields:
            if f.entity:
                out.append(self._refer(f, objects, [(lines[i], order, 0) for i in kept], lambda j, f=f: (
                    record.table, record_keys[kept[j]], None, None, nested.column, export.path, lines[kept[j]],
                    f.path), kept))
                continue
            col = []
            for o, i in zip(objects, kept):
                value = get_path(o, f.path)
                stored, exact = store(value, f.type, f.as_text)
                col.append(stored)
                if not exact:  # the cell is traced whole (_check_cell); the column is named here
                    self.audit.note_type(export.path, f.column, f.type, value, lines[i])
            out.append(col)
        return out

    def _refer(self, f, objects: list, places: list, where, rows: list) -> list:
        """The entity key of the single object a reference (``FieldMap.entity``) finds in each object, or None.

        ``where(j)`` is the row holding object ``j``: (table, row_sk, owner_sk, position, column, file, line,
        path). An object that is not there, or has no usable identity, gives NULL; its cell does not come back
        from the rows and is kept whole in value_traces.
        """
        acc = self.entities[f.entity]
        identity, identity_type = acc.group.identity, acc.group.identity_type
        found = [get(o, f.path) if f.path else o for o in objects]
        picked = [j for j, sub in enumerate(found)
                  if type(sub) is dict and usable_identity(sub.get(identity), identity_type)]
        out = [None] * len(objects)
        if picked:
            keys = acc.add_column([found[j].get(identity) for j in picked], [found[j] for j in picked],
                                  [places[j] for j in picked], lambda q: where(picked[q]), [rows[j] for j in picked])
            for j, sk in zip(picked, keys):
                out[j] = sk
        return out

    def _check_cell(self, record: RecordSource, nested: NestedColumn, value, sk: int, export, i: int,
                    col=None) -> None:
        """A cell whose rows do not give it back exactly is traced whole (columns not traced ``_by_field``)."""
        group = self.entities[nested.entity].group if nested.kind == "entity-list" else None
        expected = expect_cell(nested, value, group.identity_type if group else None,
                               group.attributes if group else (), self.groups)
        if not same(expected, value):
            self.trace(record.table, sk, None, None, nested.column, "", "the cell as given (its rows differ)",
                       getattr(col, "given", {}).get(i, value), export.path, export.lines[i])

    def _rows(self, nested: NestedColumn, order: int, values: list, owners: list[int], rows_of: list[int], export,
              c: FileCounts, by_field: bool = False) -> set:
        """Rows of one nested column for a batch of its values, a column at a time: the one row engine.

        Every shape (lists of values, of objects with or without an identity, a single object as a 1:1 child
        row or as record columns) at every depth: the batch is a partition's cells of a top-level column
        (``owners``: their records' keys) or what the objects of an owning column hold at the column's path
        (``owners``: the owning rows' keys; ``_inside``), and ``rows_of`` the record row of each value. Keys,
        interned values and entities, references, quarantine and counts are made here, a column at a time;
        an element that needs care (not an object, no usable identity) is set apart first. ``order``: the
        top-level column's place in the row, for where an entity was first seen (line, column, position).

        ``by_field`` (``_by_field``): what the rows cannot give back is kept field by field on the element's
        row (a key the model lacks, null where NULL means absent and the reverse, a value of another type);
        the record rows whose cell must be kept whole are returned. Otherwise the caller compares each cell
        whole (``_check_cell``).
        """
        kind, lines = nested.kind, export.lines
        if kind == "object-columns":  # its fields are the record's columns (_object_columns): the lists inside
            found = [(v, o, i) for v, o, i in zip(values, owners, rows_of) if isinstance(v, dict)]
            c.elements_decoded += len(found)
            c.elements_written += len(found)
            if found:
                self._inside(nested, order, *map(list, zip(*found)), export, c)
            return set()
        whole: set = set()  # record rows whose cell the rows cannot give back (by_field)
        items, item_owners, positions, item_rows, idents = self._elements(nested, values, owners, rows_of, export,
                                                                          c, whole)
        if not items:
            return whole
        vt = nested.value_type if kind == "value-list" else None
        if max(item_owners) < _RECORD_KEY_LIMIT and max(positions) < (1 << _POSITION_BITS):
            keys = [(o << _POSITION_BITS) | p for o, p in zip(item_owners, positions)]  # row_key, a column at once
        else:
            source = f"{nested.file}:{nested.column}" + (f".{nested.path}" if nested.path else "")
            keys = [row_key(source, o, p) for o, p in zip(item_owners, positions)]
        table = self.rows[nested.table]
        c.elements_written += len(keys)
        if kind == "value-list":
            found = self.values.get(nested.entity)
            if found is None:
                found = self.values[nested.entity] = _ValueTable()
            value_keys = [found.key(x, vt) for x in items]
            if nested.references and nested.entity in self.record_references.used:
                self.record_references.used[nested.entity].update(value_keys)
            table.extend(zip(keys, item_owners, value_keys, positions))
            return whole
        links = self._link_columns(nested, order, items, keys, item_owners, positions, item_rows, export, whole,
                                   by_field)
        if kind == "entity-list":
            places = [(lines[i], order, p) for i, p in zip(item_rows, positions)]

            def where(j):
                return (nested.table, keys[j], item_owners[j], positions[j], nested.column, export.path,
                        lines[item_rows[j]], [])

            entity_keys = self.entities[nested.entity].add_column(idents, items, places, where, item_rows)
            table.extend(zip(keys, item_owners, entity_keys, positions, *links))
        elif kind == "object-child":
            table.extend(zip(keys, item_owners, *links))
        else:
            table.extend(zip(keys, item_owners, positions, *links))
        if nested.children:
            self._inside(nested, order, items, keys, item_rows, export, c)
        return whole

    def _elements(self, nested: NestedColumn, values: list, owners: list[int], rows_of: list[int], export,
                  c: FileCounts, whole: set) -> tuple:
        """The elements of a batch of a nested column's values, with their owners, list positions (0: a single
        object), record rows and identities (entity lists); elements that are no value of the column (null, of
        another type, not an object, no usable identity) are quarantined and left out. Adds to ``whole`` the record
        rows whose cells the rows cannot give back (``by_field``)."""
        kind, audit = nested.kind, self.audit
        if kind == "object-child":
            items, item_owners, positions, item_rows = list(values), list(owners), [0] * len(values), list(rows_of)
        else:
            items, item_owners, positions, item_rows = [], [], [], []
            for v, o, i in zip(values, owners, rows_of):
                if type(v) is not list:
                    whole.add(i)  # a tuple, or one value where a list is expected: the rows hold a list
                if not isinstance(v, (list, tuple)):
                    v = [v]
                n = len(v)
                items.extend(v)
                item_owners.extend([o] * n)
                positions.extend(range(1, n + 1))
                item_rows.extend([i] * n)
        if not items:
            return [], [], [], [], None
        c.elements_decoded += len(items)
        vt = nested.value_type if kind == "value-list" else None
        if kind == "value-list":  # a value the list's type cannot hold is not a value of the list
            bad = [k for k, x in enumerate(items) if x is None or isinstance(x, (dict, list, tuple))
                   or vt != "text" and store(x, vt)[0] is None]
            want = VALUE_TYPES[vt]
            if not set(map(type, items)) <= {want} or (want is float and 0.0 in items):
                whole.update(item_rows[k] for k, x in enumerate(items) if type(x) is not want or is_negative_zero(x))
        else:
            bad = [k for k, x in enumerate(items) if type(x) is not dict]
        idents = None
        if kind == "entity-list":
            identity, identity_type = nested.identity, self.entities[nested.entity].group.identity_type
            given = [o.get(identity) if type(o) is dict else None for o in items]
            idents = [match_key(v) or None for v in given] if nested.matched else given
            if not _all_usable(idents, identity_type):
                bad = sorted(set(bad) | {k for k, v in enumerate(idents) if not usable_identity(v, identity_type)})
            want = int if identity_type == "integer" else str
            if nested.matched:
                whole.update(item_rows[k] for k, v in enumerate(given) if type(v) is not str)
            elif not set(map(type, idents)) <= {want}:
                whole.update(item_rows[k] for k, v in enumerate(idents) if type(v) is not want)
        if bad:
            whole.update(item_rows[k] for k in bad)
            for k in bad:
                x = items[k]
                if kind == "object-child":
                    message = "expected an object"
                elif x is None:
                    message = "null element in a list"
                elif kind == "value-list":
                    message = ("nested element in a list of values" if isinstance(x, (dict, list, tuple))
                               else f"not {vt}, the list's type")
                elif type(x) is not dict:
                    message = "expected an object in a list of objects"
                else:
                    message = f"object without a usable {nested.identity!r}"
                _quarantine_element(audit.quarantine, export, item_rows[k], nested, positions[k] or None, message, c)
            keep = sorted(set(range(len(items))) - set(bad))
            items, item_owners, positions, item_rows = ([column[k] for k in keep] for column in
                                                        (items, item_owners, positions, item_rows))
            if idents is not None:
                idents = [idents[k] for k in keep]
        return items, item_owners, positions, item_rows, idents

    def _link_columns(self, nested: NestedColumn, order: int, items: list[dict], keys: list[int], owners: list[int],
                      positions: list[int], rows_of: list[int], export, whole: set, by_field: bool) -> list[list]:
        """The stored link columns of a batch of objects (references to entities among them), a column at a time;
        ``by_field``, what a column cannot give back is traced on the element's row, or its cell kept whole."""
        lines, path, audit = export.lines, export.path, self.audit

        def keep(k: int, keys_in: list, original, reason: str) -> None:
            """One field of one element, as given, on its bridge or child row (the rows are still checked)."""
            self.trace(nested.table, keys[k], owners[k], positions[k], nested.column, pointer(keys_in), reason,
                       original, path, lines[rows_of[k]])

        known = audit.known(nested, self.entities)
        if by_field and any(len(f.path) > 1 or f.entity for f in nested.row_fields):
            # fields of sub-objects: a sub-object that is null, empty or holds more keys than the model cannot be
            # told from its fields, so each element is compared with what its row gives back (exact.expect_cell)
            group = self.entities[nested.entity].group if nested.kind == "entity-list" else None
            for k, o in enumerate(items):
                back = expect_element(nested, o, group.identity_type if group else None,
                                      group.attributes if group else (), self.groups)
                if not same(back, o):
                    whole.add(rows_of[k])
        if by_field and not set(map(type, chain.from_iterable(items))) <= {str}:
            # a key that is not text (a Python literal's {1: 'a'}): the plan names fields by text, so the
            # cell is kept whole
            whole.update(rows_of[k] for k, o in enumerate(items) if not set(map(type, o)) <= {str})
        # A key the model does not have is reported for the objects of a list; a single object's keys may be
        # the attributes of the entity it is (a reference), which ``known`` does not list, and its cell is
        # compared whole
        if nested.kind != "object-child" and not set(chain.from_iterable(items)) <= known:
            for k, (o, i) in enumerate(zip(items, rows_of)):
                if not o.keys() <= known:
                    audit.note_keys(nested, o, path, lines[i])
                    if by_field:
                        for key in [key for key in o if key not in known]:  # no column: the value as given
                            keep(k, [key], o[key], "a key the model does not have")
        links = []
        for f in nested.row_fields:
            if f.entity:
                links.append(self._refer(f, items, [(lines[i], order, p) for i, p in zip(rows_of, positions)],
                                         lambda j, f=f: (nested.table, keys[j], owners[j], positions[j] or None,
                                                         nested.column, path, lines[rows_of[j]], f.path), rows_of))
                continue
            col = ([o.get(f.path[0], ABSENT) for o in items] if len(f.path) == 1
                   else [get(o, f.path) for o in items])
            if not by_field:
                pass
            elif f.null_means == "absent" and None in col:
                for k in [k for k, v in enumerate(col) if v is None]:
                    keep(k, f.path, None, "null where the column's NULL means an absent key")
            elif f.null_means == "null" and ABSENT in col:
                for k in [k for k, v in enumerate(col) if v is ABSENT]:
                    keep(k, f.path, ABSENT, "an absent key where the column's NULL means null")
            col = [None if v is ABSENT else v for v in col]
            if not (set(map(type, col)) <= _STORED_AS_IS[f.type] and (f.type != "integer" or _fits_int64(col))
                    and not f.as_text and not (f.type == "real" and 0.0 in col)):
                converted = []
                for k, (v, i) in enumerate(zip(col, rows_of)):
                    stored, exact = store(v, f.type, f.as_text)
                    converted.append(stored)
                    if exact:
                        continue
                    if by_field:  # each such value is kept on its row, and the column reported
                        audit.note_type(path, f"{nested.column}.{f.column}", f.type, v, lines[i])
                        keep(k, f.path, v, f"not {f.type} as given")
                    elif stored is None and v is not None and nested.kind != "object-child":
                        # compared whole, a list's column is reported where it holds NULL for a value
                        audit.note_type(path, f"{nested.column}.{f.column}", f.type, v, lines[i])
                col = converted
            links.append(col)
        return links

    def _inside(self, nested: NestedColumn, order: int, objects: list[dict], owners: list[int], rows_of: list[int],
                export, c: FileCounts) -> None:
        """The lists and objects inside a batch of objects, each child column's batch (grandchild tables), owned
        by the objects' rows (``owners``)."""
        for child in nested.children:
            keys = child.path.split(".")
            batch = []
            for o, owner, i in zip(objects, owners, rows_of):
                inner = get_path(o, keys)
                if child.keyed and isinstance(inner, dict):  # read as its list; one that does not fit is kept whole
                    inner = keyed_items(inner, child.keyed, child.keyed_value)
                if inner:
                    batch.append((inner, owner, i))
            if batch:
                self._rows(child, order, *map(list, zip(*batch)), export, c)

    def _trace_occurrences(self, table: str, acc: _Entities, held: list, occurrences) -> None:
        """Trace every occurrence whose own value of an attribute is not the one its entity row gives back."""
        members = None
        for k, f in enumerate(acc.group.attributes):
            reason = f"entity attribute {f.column!r}: this occurrence's own value (the entity row holds another)"
            if acc.group.matched and f.path == [acc.group.identity]:
                reason = (f"matched on normalised {f.column!r} (--match): this occurrence's own spelling (the entity "
                          f"row holds the most frequent)")
            listed = set()  # every occurrence whose value differs from its entity's reference
            for text, h, v, where in acc.differing[k]:
                owning, row_sk, owner_sk, position, column, file, line, prefix = where
                listed.add((owning, row_sk, column, tuple(prefix)))
                if h != held[k].get(text, h):
                    self.trace(owning, row_sk, owner_sk, position, column, pointer(prefix + f.path), reason, v,
                               file, line)
            # entities whose reference value is not the one held: each occurrence holding the reference is
            # traced too; those are the occurrences not listed among the differing ones
            pending = {}
            for text, ref in acc.reference[k].items():
                if text in held[k] and ref != held[k][text]:
                    pending[acc.first[text][0]] = (ref, acc.values[k].get(ref, ABSENT))
            if not pending:
                continue
            if occurrences is None:
                raise RuntimeError("finish() needs the rows to trace occurrences")  # pragma: no cover
            if members is None:
                members = entity_members(self.plan, table)
            for owning, fk_column, column, prefix, file in members:
                for row_sk, owner_sk, position, entity_sk in occurrences(owning, fk_column, set(pending)):
                    if (owning, row_sk, column, tuple(prefix)) in listed:  # traced above when need be
                        continue
                    self.trace(owning, row_sk, owner_sk, position, column, pointer(prefix + f.path), reason,
                               pending[entity_sk][1], file, None)

    def _entity_path(self, group) -> str:
        """The input file an entity group's first member column comes from."""
        stem = group.members[0].split(":", 1)[0] if group.members else ""
        for record in self.plan.records:
            if record.file == stem:
                return record.path
        return self.plan.records[0].path if self.plan.records else ""

    def take_rows(self) -> dict[str, list[tuple]]:
        """Rows made since the last call: records, bridges, children, and entities and values first seen."""
        taken = self.rows
        self.rows = {name: [] for name in taken}
        for table, acc in self.entities.items():
            taken[table] = acc.take_new_rows()
        for table, found in self.values.items():
            taken[table], found.new = found.new, []
            taken[table] = self.record_references.link_values(table, taken[table])
        return taken

    def finish(self, occurrences=None) -> Built:
        """Meta rows, counts, and the entity rows whose chosen values differ from those first written.

        Call once, after the last chunk (and after the last ``take_rows``). ``occurrences(table, column, sks)``
        gives the rows ``(row_sk, owner_sk, position, entity_sk)`` of a table whose foreign key ``column``
        refers to one of the entities ``sks`` (``entity_members``): the occurrences whose value an entity
        row no longer holds are traced.
        """
        self._refuse_duplicates()
        rows = self.take_rows()
        self.audit.report()
        conflicts = 0
        merges: list[dict] = []
        updates, column_updates, references = self.record_references.finish(self.plan)
        for table, acc in self.entities.items():
            held = [{} for _ in acc.keys]  # per attribute: canonical -> key of the value the entity row gives back
            for text, chosen_values, per_attribute in acc.choose():
                first = acc.first[text]
                sk, natural = first[0], first[1]
                chosen = []
                for k, ((column, _, type_), best, found) in enumerate(zip(acc.keys, chosen_values, per_attribute)):
                    f = acc.group.attributes[k]
                    stored, exact = store(best, f.type, f.as_text) if found else (None, True)
                    chosen.append(stored)
                    # appended: an entity already in the database keeps its row, so that row's value is held
                    kept = first[2 + k] if text in acc.preexisting else stored
                    held[k][text] = value_key(stored_back(kept, f.type, f.as_text) if kept is not None
                                              else ABSENT if f.null_means == "absent" else None)
                    for v, n, place in found:  # values the attribute's type (from the first records) cannot hold
                        if v is not None and not store(v, f.type, f.as_text)[1]:
                            self.audit.quarantine.append(
                                (self._entity_path(acc.group), place[0], f"{table}.{column}", None, repr(v)[:40],
                                 f"{n} value(s) of {column!r} for {table} {natural!r} are not {type_}, the "
                                 f"attribute's type (inferred from the first records); they were stored as NULL "
                                 f"and kept as given in value_traces"))
                    if len(found) > 1:
                        conflicts += 1
                        for v, n, _ in found:
                            self.meta["attribute_variants"].append(
                                (table, sk, str(natural), column,
                                 None if v is None else str(to_sql_value(v, "text")), n, same(v, best)))
                if acc.group.matched and len(per_attribute[0]) > 1:
                    merges.append({"table": table, "key": natural,
                                   "spellings": {v: n for v, n, _ in per_attribute[0]}})
                row = (sk, natural, *chosen)
                if row != first and text not in acc.preexisting:  # appended: existing rows stay as they are
                    updates.setdefault(table, []).append(row)
            self._trace_occurrences(table, acc, held, occurrences)
        self.meta["name_map"] = name_map(self.plan) if not self.state else []  # appended: the map is there
        self.meta["descriptions"] = descriptions(self.plan) if not self.state else []  # the data dictionary's text
        offsets = self.state["meta_offset"] if self.state else {}
        for name in META_TABLES:
            if name != "attribute_variants":  # variants are already in a fixed order
                self.meta[name].sort(key=_meta_order)
            rows[name] = [(n, *r) for n, r in enumerate(self.meta[name], start=offsets.get(name, 0) + 1)]
        counts = [self.counts[r.path] if r.path in self.counts else FileCounts(r.file, r.path)
                  for r in self.plan.records]
        return Built(rows, counts, conflicts, merges=merges,
                     cells_quarantined_by_file=dict(self.quarantined_by_file), updates=updates,
                     inputs=self.inputs, trace_reasons=dict(self.trace_reasons),
                     rejoined=dict(self.rejoined), column_updates=column_updates, references=references)


@dataclass
class _KeyedColumn:
    """A column of objects keyed by data, read as lists (``values``), with the cells as given (``given``)."""

    values: list
    given: dict  # row -> the cell as given, for the traces of whole cells


def delimited_texts(col, rows: list[int], sep: str) -> list:
    """The text of a delimited column's cells as written (``decode.DecodedColumn.layout``), None where empty."""
    layout, values = col.layout, col.values
    out = []
    for i in rows:
        pieces = values[i]
        if pieces is None:
            out.append(None)
        elif layout is not None and layout[i] is not None:
            out.append(layout[i])
        else:
            out.append((col.join_separator or sep).join(pieces))
    return out


def reference_values(record: RecordSource, column: str, col, rows: list[int]) -> list:
    """What the lossless proof compares a column's cells with: the decoded values, and a delimited cell's text."""
    nested = next((n for n in record.nested if n.column == column), None)
    if nested is not None and nested.separator and col.format == "delimited":
        return delimited_texts(col, rows, nested.separator)
    return [col.values[i] for i in rows]


def _all_usable(idents: list, type_: str) -> bool:
    """Whether every value is a usable identity (``usable_identity``), judged on the column at once."""
    kinds = set(map(type, idents))
    if type_ == "integer":
        return kinds == {int} and _INT64_MIN <= min(idents) and max(idents) <= _INT64_MAX
    return not kinds & {type(None), dict, list, tuple, set, bool}


def _fits_int64(col: list) -> bool:
    """Whether a column of ints (and None) fits SQLite's 64-bit INTEGER."""
    ints = [v for v in col if v is not None]
    return not ints or (_INT64_MIN <= min(ints) and max(ints) <= _INT64_MAX)


_STORED_AS_IS = {  # Python types a column stores without conversion (None is NULL)
    "integer": {int, type(None)}, "real": {float, type(None)}, "text": {str, type(None)},
    "boolean": {bool, type(None)}, "date": {str, type(None)}, "timestamp": {str, type(None)},
    "decimal": {str, type(None)},
}


def _by_field(nested: NestedColumn) -> bool:
    """A top-level list without lists inside its objects keeps what its rows cannot give back field by field
    (a key the model lacks, null for absent, a value of another type, each on its bridge or child row); any
    other nested column, its cell whole when its rows differ from it (``Builder._check_cell``)."""
    return nested.kind in ("entity-list", "child-list", "value-list") and not nested.children and not nested.path


def name_map(plan: Plan) -> list[tuple]:
    """Every name taken from the data and the SQL name it became: (table, column, name in the input, where).

    Names are mapped to ``[a-z0-9_]`` (``names.sql_name``) and quoted in every
    statement, so none can change the SQL that runs; this table says which is which.
    """
    rows = []
    for record in plan.records:
        rows.append((record.table, None, record.file, f"file {record.path}"))
        for f in record.scalars:
            rows.append((record.table, f.column, f.path[0], f"column of {record.file}"))
        stack = [(record, n) for n in record.nested]
        while stack:
            owner, nested = stack.pop()
            where = f"column {nested.column!r} of {nested.file}"
            if nested.table:
                rows.append((nested.table, None, nested.column + (f".{nested.path}" if nested.path else ""), where))
            table = nested.table or record.table
            for f in nested.row_fields:
                rows.append((table, f.column, ".".join(f.path), f"key in the objects of {where}"))
            stack.extend((nested, child) for child in nested.children)
    for group in plan.entities:
        rows.append((group.table, group.identity_column, group.identity,
                     f"identity key in {', '.join(group.members)}"))
        for f in group.attributes:
            rows.append((group.table, f.column, ".".join(f.path), f"key in {', '.join(group.members)}"))
    return rows


def entity_members(plan: Plan, entity: str) -> list[tuple]:
    """Every column of the written tables that refers to an entity table: (table, foreign key column, input
    column, path of the object inside the element, input file), for bridges and for references alike."""
    out = []

    def visit(nested, path: str, owner_table: str) -> None:
        here = nested.table or owner_table
        if nested.kind == "entity-list" and nested.entity == entity:
            fk = next(k for k in plan.table(nested.table).foreign_keys if k.references == entity)
            out.append((nested.table, fk.columns[0], nested.column, [], path))
        for f in nested.row_fields:
            if f.entity == entity:
                out.append((here, f.column, nested.column, list(f.path), path))
        for child in nested.children:
            visit(child, path, here)

    for record in plan.records:
        for nested in record.nested:
            visit(nested, record.path, record.table)
    return out


def occurrence_columns(plan: Plan, table: str, fk_column: str) -> tuple:
    """Where in a table's rows the key, the owner, the list position and a foreign key are (None: none)."""
    t = plan.table(table)
    names = [c.name for c in t.columns]
    owner = names.index(t.foreign_keys[0].columns[0]) if t.role in ("bridge", "child") else None
    position = names.index(t.position_column) if t.position_column else None
    return 0, owner, position, names.index(fk_column)


def _record_splits(plan: Plan) -> dict[str, list[tuple]]:
    """Per wide record table: (table, the getter of its columns from a whole row) for it and each of its parts
    (``schema.split_wide_records``); a row is made whole, as for any record, then shared among them."""
    out = {}
    for record in plan.records:
        parts = record_parts(plan, record.table)
        if parts:
            at = {name: j for j, name in enumerate(record_row_columns(record))}
            out[record.table] = [(t.name, itemgetter(*[at[c.name] for c in t.columns]))
                                 for t in [plan.table(record.table), *parts]]
    return out


def _meta_order(row: tuple):
    """Bookkeeping rows in file and line order, whatever order the chunks found them in."""
    return tuple((0, "") if v is None else (1, v) if isinstance(v, str) else (2, v) for v in row[:4])


def build_partitions(plan: Plan, partitions, rows, extra: dict | None = None, state: dict | None = None,
                     progress=None) -> Built:
    """Rows for every table of the plan, made a partition at a time and handed to ``rows`` as they are made.

    The one build path: the records come in partitions of any size (``partitions(columns)`` iterates every
    record, in order, as ``(export, decoded)``; with ``columns`` only those need decoding), and the rows are
    the same for any partition size. ``rows`` takes them (``insert``), gives back the occurrences of
    entities (``occurrences``, see ``Builder.finish``) and applies the rewrites ``finish`` asks for
    (``complete``): ``InMemory`` holds them, ``pipeline`` writes them to SQLite as they come. ``extra`` holds
    rows made by earlier passes (the join's set-aside and unmatched rows); ``state`` what an existing database
    holds (``--append``); ``progress(records and rows rejected so far, characters read)``.
    """
    builder = Builder(plan, extra, state)
    needed = builder.key_columns()
    if needed:  # duplicates = "last": the record that keeps each key is known before any is kept
        for export, columns in partitions(needed):
            builder.learn_last(export, columns)
    done = 0
    for export, columns in partitions(None):
        builder.add(export, columns)
        rows.insert(builder.take_rows())
        done += export.number_of_records + len(export.rejected)
        if progress:
            progress(done, export.chars_read)
    built = builder.finish(rows.occurrences)
    rows.complete(built)
    return built


class InMemory:
    """The rows of a build held in memory (``build_partitions``'s ``rows``), whole once complete."""

    def __init__(self, plan: Plan):
        self.plan = plan
        self.rows: dict[str, list[tuple]] = {}

    def insert(self, made: dict[str, list[tuple]]) -> None:
        for name, rows in made.items():
            self.rows.setdefault(name, []).extend(rows)

    def occurrences(self, table: str, fk_column: str, sks: set) -> list[tuple]:
        at = occurrence_columns(self.plan, table, fk_column)
        return [tuple(None if j is None else r[j] for j in at) for r in self.rows.get(table, ()) if r[at[3]] in sks]

    def complete(self, built: Built) -> None:
        """``built.rows`` made whole: every row of the build, rewritten as ``finish`` asked."""
        self.insert(built.rows)
        built.rows = self.rows
        for table, changed in built.updates.items():
            chosen = {row[0]: row for row in changed}
            built.rows[table] = [chosen.get(row[0], row) for row in built.rows[table]]
        built.updates = {}
        for (table, column), pairs in built.column_updates.items():
            set_column(self.plan, built.rows, table, column, pairs)
        built.column_updates = {}


def build(plan: Plan, exports: list, decoded: dict, extra: dict | None = None, state: dict | None = None) -> Built:
    """Rows for every table of the plan, and the counts that reconcile them, all in memory (each export one
    partition).

    ``extra`` holds rows made by earlier passes (the join's set-aside and unmatched rows).
    """
    def partitions(columns=None):
        for export in exports:
            yield export, decoded[export.path]

    return build_partitions(plan, partitions, InMemory(plan), extra, state)


def _quarantine_element(quarantine: list, export, i, nested, position, message, c: FileCounts) -> None:
    column = nested.column + (f".{nested.path}" if nested.path else "")
    path, line = export.path, export.lines[i]
    origin = export.origin.get(nested.column)
    if origin is not None:  # a column of a joined file: name its own file and line
        path, column = origin[0], origin[1] + (f".{nested.path}" if nested.path else "")
        line = export.origin_lines[nested.column][i] or line
    quarantine.append((path, line, column, position,
                                      f"element {position}" if position else "", message))
    c.elements_quarantined += 1
