"""The reduce step of a partitioned build: a ``Builder`` that took one partition alone, merged into the
``Builder`` that holds every partition before it (``merge``), gives the state one ``Builder`` taking the
partitions in order would hold, and the rows it would have made.

Most of a partition's state merges by itself: counts add, lists of bookkeeping rows follow each other in
partition order, first places take the smaller, and keys need no counter (``keys.py``), so an entity or value
met in two partitions has the same key in both and its row is written once, from the earlier one. Three
things a partition cannot know alone, and ``conflict`` finds them before anything is merged:

* a natural key an earlier partition kept (the record is then set aside, which only the earlier rows say);
* an entity met before whose first value, in this partition, is not its first value in the file (each
  occurrence is compared with that value, ``EntityTable.settle``);
* two texts with the same 53-bit key across partitions (``keys.KeySpace``; about n**2 / 2**54 for n keys).

A partition with a conflict is built again by the merged ``Builder`` itself, as a single build would
(``build_partitions``), so the result never depends on how the input was partitioned.
"""

from __future__ import annotations

from dataclasses import fields

from .counts import FileCounts
from .entities import ValueTable
from .rows import Builder


def conflict(whole: Builder, part: Builder) -> str | None:
    """Why ``part`` cannot be merged into ``whole`` (None: it can)."""
    for table, seen in part.first_seen.items():
        before = whole.first_seen.get(table)
        if before and not before.keys().isdisjoint(seen):
            return f"{table}: a natural key an earlier partition kept"
    for table, acc in part.entities.items():
        held = whole.entities[table]
        if acc.space.collisions or not _same_keys(held.space, acc.space):
            return f"{table}: a key collision"
        for mine, theirs in zip(held.reference, acc.reference):
            if any(mine.get(text, h) != h for text, h in theirs.items()):
                return f"{table}: an entity whose first value is in an earlier partition"
    for table, found in part.values.items():
        held = whole.values.get(table)
        if found.space.collisions or held is not None and not _same_keys(held.space, found.space):
            return f"{table}: a key collision"
    return None


def _same_keys(whole, part) -> bool:
    """Whether every text of ``part``'s key space has the key ``whole``'s would give it."""
    taken, keys = whole.taken, whole.keys
    return all(taken.get(key, text) == text and keys.get(text, key) == key for text, key in part.keys.items())


def merge(whole: Builder, part: Builder, rows: dict[str, list[tuple]]) -> dict[str, list[tuple]]:
    """Merge ``part`` (one partition, built alone, with ``conflict`` None) into ``whole``; returns ``rows``
    (what ``part`` made) without the entity and value rows ``whole`` had already made."""
    for name, found in part.meta.items():
        whole.meta[name].extend(found)  # the audit's quarantine and the traces are these lists too
    for path, c in part.counts.items():
        held = whole.counts.get(path)
        if held is None:
            held = whole.counts[path] = FileCounts(c.file, c.path)
        for f in fields(FileCounts):
            if f.type == "int":
                setattr(held, f.name, getattr(held, f.name) + getattr(c, f.name))
    whole.quarantined_by_file.update(part.quarantined_by_file)
    whole.trace_reasons.update(part.trace_reasons)
    whole.rejoined.update(part.rejoined)
    for table, seen in part.first_seen.items():
        whole.first_seen.setdefault(table, {}).update(seen)
    for table, (path, n, lines) in part.refused.items():
        found = whole.refused.setdefault(table, [path, 0, []])
        found[1] += n
        found[2] += lines[:5 - len(found[2])]
    _merge_audit(whole.audit, part.audit)
    _merge_digests(whole.inputs, part.inputs)
    _merge_references(whole.record_references, part.record_references)
    rows = dict(rows)
    for table, found in part.values.items():
        held = whole.values.get(table)
        if held is None:
            held = whole.values[table] = ValueTable()
        rows[table] = _first_seen(held.rows, held.space, found.rows, rows.get(table, ()))
    for table, acc in part.entities.items():
        held = whole.entities[table]
        rows[table] = _first_seen(held.first, held.space, acc.first, rows.get(table, ()))
        for kind, seen in acc.seen.items():
            into = held.seen.setdefault(kind, {})
            for ident, hit in seen.items():
                into.setdefault(ident, hit)
        for k in range(len(acc.keys)):
            held.counts[k].update(acc.counts[k])
            first_at = held.first_at[k]
            for pair, place in acc.first_at[k].items():
                if pair not in first_at or place < first_at[pair]:
                    first_at[pair] = place
            values = held.values[k]
            for h, v in acc.values[k].items():
                values.setdefault(h, v)
            reference = held.reference[k]
            for text, h in acc.reference[k].items():
                reference.setdefault(text, h)
            held.differing[k] += acc.differing[k]
    return rows


def _first_seen(held: dict, space, found: dict, made) -> list[tuple]:
    """Add the texts of ``found`` (text -> row, its key first) that ``held`` lacks, with their keys; returns the
    rows of ``made`` that are theirs: the rows of entities or values no earlier partition made."""
    new = set()
    for text, row in found.items():
        if text not in held:
            held[text] = row
            space.holds(text, row[0])
            new.add(row[0])
    return [r for r in made if r[0] in new]


def _merge_audit(whole, part) -> None:
    for key, (line, n) in part.unplanned.items():
        entry = whole.unplanned.setdefault(key, [line, 0])
        entry[0] = min(entry[0], line)
        entry[1] += n
    for key, (line, n, example) in part.mismatched.items():
        entry = whole.mismatched.setdefault(key, [line, 0, example])
        if line < entry[0]:
            entry[0], entry[2] = line, example
        entry[1] += n
    for key, (line, value) in part.kinds.items():
        first = whole.kinds.setdefault(key, [line, value])
        if line < first[0]:
            first[:] = [line, value]


def _merge_digests(whole, part) -> None:
    from ..model.digests import DIGEST_MODULUS

    for key, (n, total) in part.sums.items():
        entry = whole.sums.setdefault(key, [0, 0])
        entry[0] += n
        entry[1] = (entry[1] + total) % DIGEST_MODULUS
    for table, keys in part.records.items():
        whole.records.setdefault(table, set()).update(keys)


def _merge_references(whole, part) -> None:
    """The values naming records: the earlier partition's record keeps a natural key's text, a value's row
    its first link; what a partition could not resolve alone is resolved at the end (``References.finish``)."""
    for table, found in part.records.items():
        into = whole.records.setdefault(table, {})
        for text, sk in found.items():
            into.setdefault(text, sk)
    for table, linked in part.linked.items():
        held, unlinked = whole.linked[table], part.unlinked[table]
        for sk, target in linked.items():
            if sk not in held:
                held[sk] = target
                if sk in unlinked:
                    whole.unlinked[table][sk] = unlinked[sk]
    for table, used in part.used.items():
        whole.used[table].update(used)
    for key, n in part.cells.items():
        whole.cells[key] = whole.cells.get(key, 0) + n
    for key, pending in part.pending.items():
        whole.pending.setdefault(key, []).extend(pending)
