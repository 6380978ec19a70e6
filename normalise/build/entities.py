"""Entity tables as a build fills them: one row per distinct identity, its attributes counted over every
occurrence and the most frequent value chosen (ties: the first seen), the other values kept as variants.
"""

from __future__ import annotations

from collections import Counter

import numpy as np

from ..model.exact import ABSENT, store, value_key
from .keys import KeySpace
from .references import OWN_KEYS
from .values import canonical, to_sql_value, value_text


class ValueTable:
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


class EntityTable:
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
                hkeys = values if set(map(type, values)) <= OWN_KEYS else list(map(value_key, values))
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
