"""Which entity tables are one: lists whose objects share an identity and agree on their attributes are grouped
into one entity table, named after the identity.
"""

from __future__ import annotations

import re
from collections import Counter
from dataclasses import dataclass

import networkx as nx

from ..model.names import Namer, singular, sql_name
from ..model.settings import Settings
from .dependencies import ObjectTable, entity_attributes
from .shapes import field_map, scalar_fields
from .types import value_type

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


@dataclass
class Member:
    """One place entities are found: a list of them, or single objects at a path (a reference)."""

    holder: object  # the NestedColumn of an entity list, or the FieldMap of a reference
    table: ObjectTable  # the objects
    identity: str
    matched: bool
    name: str  # "file:column", "file:column.path" (a list inside objects), or the reference's path
    column: str  # what the entity table is named after when this is its first member
    tentative: bool = False  # single objects whose identities never repeat: an entity only if shared


def group_entities(plan, members: list, options: Settings, tables: Namer) -> None:
    """Put the members (entity lists and references) of one identity space into one entity table.

    Two members share a table when they have the same identity field and agree on the entities they
    have in common; ``--merge`` forces members together, ``--no-merge`` keeps one apart. The tables are
    the connected components of the graph of those pairs, each in the order of its first member.
    """
    from ..model.plan import EntityGroup, FieldMap

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
        links = {f for m, f in options.link_fields if m in group.members}  # every record said so (widening)
        group.attributes = [field_map(objects, [f], names(f), objects_table) for f in attrs if f not in links]
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
