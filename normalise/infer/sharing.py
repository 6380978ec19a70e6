"""Infer pass, over every record: whether entity tables the sample kept apart are one identity space.

The model is inferred from the first records of each input (``pipeline.SAMPLE_ROWS``). Two columns whose
objects carry the same identity field (``person_id`` in ``contributors`` and in ``production_team``) share one
entity table when they agree on the identities they have in common (``infer._group_entities``); when the
sample holds no identity in common, that is no evidence either way, and the first one they share may come
later in the file. Left there, the same person would get a row in two tables and counting people across
columns would be wrong on exactly the files too big to read whole.

So, for every pair of entity tables with the same identity field that the sample kept apart for want of a
common identity, one cheap pass reads those columns over every record (``identity_statistics``: per table,
how often each identity carries each attribute value; counts that add up over partitions) and
``widened`` says which pairs share identities and agree on their attributes, by the same rule and threshold
as the sample. Those become ``--merge`` groups: the plan is inferred again with them, and the run says so
(the manifest's ``widened``, the summary, the report). A plan read from a file is the user's decision and
is not widened.

Example (the rule on counts; identities 7 and 9 in both tables, 7's names agree, 9's do not):
    >>> a = {(7, None, None): 2, (7, "name", "Ann"): 2, (9, None, None): 1, (9, "name", "Bo"): 1}
    >>> b = {(7, None, None): 1, (7, "name", "Ann"): 1, (9, None, None): 4, (9, "name", "Bob"): 4}
    >>> agreement(a, b, ["name"])
    (2, 0.5)
"""

from __future__ import annotations

from collections import Counter
from dataclasses import replace
from pathlib import Path

from ..model.exact import keyed_items
from .dependencies import hashable
from .shapes import objects_of

__all__ = ["undecided_pairs", "identity_statistics", "widened", "agreement", "widened_sentence"]


def _members_of(plan) -> dict[str, tuple]:
    """Each top-level nested column's member name -> (record path, the NestedColumn)."""
    return {f"{nested.file}:{nested.column}": (record.path, nested)
            for record in plan.records for nested in record.nested}


def _walk(member: str, tops: dict):
    """(record path, the top NestedColumn, path inside) of a member, or None when it cannot be read simply (a
    list keyed by data below the top, a column name that matches no column)."""
    file, _, rest = member.partition(":")
    for name, (path, nested) in tops.items():
        top = name.partition(":")[2]
        if name.partition(":")[0] != file or not (rest == top or rest.startswith(top + ".")):
            continue
        inside = rest[len(top) + 1:].split(".") if rest != top else []
        if any(c.keyed for c in _descendants(nested)) and inside:
            return None
        return path, nested, inside
    return None


def _descendants(nested):
    for child in nested.children:
        yield child
        yield from _descendants(child)


def undecided_pairs(plan, options) -> list[tuple[str, str]]:
    """Pairs of entity tables (names) with the same identity field, neither matched on normalised text nor
    kept apart by ``--no-merge``, whose members can all be read over every record (``widened`` keeps those
    the sample held no identity in common for)."""
    tops = _members_of(plan)
    forbidden = set(options.no_merge)
    usable = [g for g in plan.entities
              if not g.matched and not forbidden & set(g.members)
              and all(_walk(m, tops) is not None for m in g.members)]
    return [(a.table, b.table) for i, a in enumerate(usable) for b in usable[i + 1:]
            if a.identity == b.identity]


def _objects(value, keyed: tuple | None, inside: list[str]):
    """The objects a member finds in one cell's value."""
    if keyed and isinstance(value, dict):
        value = keyed_items(value, *keyed)
    found = _flat(value)
    for key in inside:
        found = [x for o in found for x in _flat(o.get(key))]
    return found


def _flat(value) -> list[dict]:
    """The objects of one value: itself, or those in the list (``infer.objects_of`` on one cell)."""
    return objects_of([value])[0]


def identity_statistics(plan, tables: set[str], partitions) -> dict[str, Counter]:
    """Per entity table of ``tables``: a Counter of (identity, attribute, value) over every record that
    ``partitions(columns)`` gives (``partition.Inputs.partitions``), reading only its members' columns.
    Counters of partitions add up to those of the whole (``Counter.update``)."""
    tops = _members_of(plan)
    reads = []  # (record path, column, keyed, inside, table, identity, attributes)
    for group in plan.entities:
        if group.table not in tables:
            continue
        attributes = [f.path[0] for f in group.attributes if len(f.path) == 1 and f.path[0] != group.identity]
        for m in group.members:
            path, nested, inside = _walk(m, tops)
            keyed = (nested.keyed, nested.keyed_value) if nested.keyed else None
            reads.append((path, nested.column, keyed, inside, group.table, group.identity, attributes))
    stats = {t: Counter() for t in tables}
    columns = {r[1] for r in reads}
    for export, decoded in partitions(columns):
        for path, column, keyed, inside, table, identity, attributes in reads:
            if export.path != path or column not in decoded:
                continue
            counts = stats[table]
            for value in decoded[column].values:
                for o in _objects(value, keyed, inside):
                    ident = o.get(identity)
                    if ident is None or isinstance(ident, (dict, list, tuple)):
                        continue
                    # every identity counts once even with no attribute, so identities in common are seen
                    counts[(ident, None, None)] += 1
                    for a in attributes:
                        if a in o:
                            counts[(ident, a, hashable(o[a]))] += 1
    return stats


def _compared(a, b) -> list[str]:
    """The top-level attributes both entity tables hold: what their common identities are compared on."""
    return sorted({f.path[0] for f in a.attributes if len(f.path) == 1}
                  & {f.path[0] for f in b.attributes if len(f.path) == 1})


def agreement(a: Counter, b: Counter, fields: list[str]) -> tuple[int, float]:
    """Identities in both tables, and the share of their attributes (``fields``, where both sides carry one)
    whose most frequent values agree (ties to the first seen), the rule ``infer._agreement`` applies to the
    sample."""
    def tops(counts):
        best = {}
        for (ident, f, v), n in counts.items():
            if f is None:
                best.setdefault((ident, None), (n, None))
            elif (ident, f) not in best or n > best[(ident, f)][0]:
                best[(ident, f)] = (n, v)
        return best

    ta, tb = tops(a), tops(b)
    common = {k[0] for k in ta if k[1] is None} & {k[0] for k in tb if k[1] is None}
    if not common:
        return 0, 1.0
    checks = agree = 0
    for ident in common:
        for f in fields:
            if (ident, f) in ta and (ident, f) in tb:
                checks += 1
                agree += ta[(ident, f)][1] == tb[(ident, f)][1]
    return len(common), (agree / checks if checks else 1.0)


def widened(plan, options, sample: tuple, partitions) -> tuple[object, list[dict]]:
    """The options with a ``--merge`` group for every pair of entity tables that the sample (``(exports,
    decoded)``) kept apart holding no identity in common, and that share identities over every record
    (``partitions``) and agree on them; and what was found, for the manifest. The options unchanged when
    no pair does."""
    groups = {g.table: g for g in plan.entities}
    pairs = undecided_pairs(plan, options)
    if pairs:  # a pair the sample had identities in common for was decided on that evidence
        exports, decoded = sample
        seen = identity_statistics(plan, {t for p in pairs for t in p},
                                   lambda columns: ((e, decoded[e.path]) for e in exports))
        pairs = [(a, b) for a, b in pairs if not agreement(seen[a], seen[b], [])[0]]
    if not pairs:
        return options, []
    stats = identity_statistics(plan, {t for p in pairs for t in p}, partitions)
    merges, found = [], []
    for a, b in pairs:
        fields = _compared(groups[a], groups[b])
        common, share = agreement(stats[a], stats[b], fields)
        if common and share >= 1 - plan.violation_threshold:
            merges.append(groups[a].members + groups[b].members)
            found.append({"tables": [a, b], "members": groups[a].members + groups[b].members,
                          "identity": groups[a].identity, "identities_in_common": common,
                          "attributes_agree": round(share, 4), "compared": fields})
    if not merges:
        return options, []
    return replace(options, merge=list(options.merge) + merges), found


def widened_sentence(w: dict) -> str:
    """What the run says of one widening (a manifest ``widened`` entry), in the summary and the report.

    Example:
        >>> widened_sentence({"tables": ["person", "person_2"], "members": ["c:authors", "c:editors"],
        ...                   "identity": "person_id", "identities_in_common": 2, "compared": ["name"]})
        'c:authors and c:editors share 2 person_id values past the first records the model was made from, and agree on name: one entity table (person), not person and person_2'
    """
    if "contradicted" in w:  # a record past the first ones that the plan made from them could not hold (pipeline)
        where = f"line {w.get('line', 0):,} of {Path(str(w.get('file', ''))).name}"
        if w["contradicted"] == "dependency":
            occurrences, violations = w.get("occurrences", 0), w.get("violations", 0)
            why = ("some occurrences of an identity carry the field and others do not"
                   if w.get("presence_varies") else
                   f"{violations:,} of {occurrences:,} occurrences of repeated identities disagree with the most "
                   f"frequent value")
            return (f"{w.get('column', '')}: over every record {w.get('dependency', '')} does not hold ({why}; a "
                    f"second value first on {where}): the field is kept on each link, not on the entity; the plan "
                    f"was made again")
        if w["contradicted"] == "key":
            return (f"{w.get('column', '')} carries key {w.get('key', '')!r} on {where}, which no object in the "
                    f"first records had: the plan was made again with that record in its sample")
        return (f"{w.get('column', '')} holds {w.get('value', '')} on {where}, which is not {w.get('type', '')}, "
                f"the type the first records gave: the column's type was decided again with that value")
    if "column" in w:  # a column with no value in the first records (partition.py)
        return (f"{w['column']} has no value in the first {w.get('first_records', 0):,} records; its format "
                f"({w.get('format', '')}) and its model come from the {w.get('records', 0):,} records from its first "
                f"value, on line {w.get('first_value_line', 0):,} of {Path(str(w.get('file', ''))).name}")
    members, tables = [str(m) for m in w.get("members", [])], [str(t) for t in w.get("tables", [])]
    compared = ", ".join(map(str, w.get("compared", []))) or "no attribute"
    common = w.get("identities_in_common", 0)  # a manifest read back may hold anything
    return (f"{' and '.join(members)} share {common if isinstance(common, int) else 0:,} {w.get('identity', '')} values "
            f"past the first records the model was made from, and agree on {compared}: one entity table "
            f"({tables[0] if tables else ''}), not {' and '.join(tables)}")
