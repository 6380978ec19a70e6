"""Check pass, after writing: every decoded cell is rebuilt from the tables written and compared with the input.

A count that reconciles is not proof that values survived; a rebuilt value
that equals the input is. ``InputDigests`` takes a canonical digest of every
non-empty decoded cell of the loaded records while the build runs (chunk by
chunk, in constant memory: one running sum per column). ``prove`` then reads
the written database back — record columns, bridge rows joined to their
entities in list order, child and grandchild rows, value tables, and the
values kept verbatim in ``value_traces`` — rebuilds each cell, and compares
the sums. A difference is located cell by cell when the decoded input is at
hand, and named by file, line, column and the first differing path.
"""

from __future__ import annotations

import sqlite3
from hashlib import blake2b

from .errors import NormaliseError
from .exact import ABSENT, digest, from_literal, object_back, pointer, pointer_keys, put, same, stored_back

_MOD = 1 << 128


class LossDetected(NormaliseError):
    """A value rebuilt from the database differs from the value in the export."""


def _mix(sk: int, cell_digest: bytes) -> int:
    return int.from_bytes(blake2b(sk.to_bytes(9, "big", signed=True) + cell_digest, digest_size=16).digest(), "big")


class InputDigests:
    """Per record table and input column: the number of non-empty cells and a running sum of their digests.

    The sum is over (record key, cell digest) pairs, so it does not depend on the
    order (or the chunks) the records come in, and it changes when any one cell does.
    """

    def __init__(self):
        self.sums: dict[tuple[str, str], list] = {}  # (record table, column) -> [cells, sum]
        self.records: dict[str, set] = {}  # record table -> keys of the records loaded by this build

    def add(self, table: str, column: str, keys: list[int], values: list, pure: bool) -> None:
        self.records.setdefault(table, set()).update(keys)
        entry = self.sums.setdefault((table, column), [0, 0])
        total = entry[1]
        n = 0
        for sk, v in zip(keys, values):
            if v is not None:
                total += _mix(sk, digest(v, pure))
                n += 1
        entry[0] += n
        entry[1] = total % _MOD


def rebuild_cells(plan, fetch) -> dict[tuple[str, str], dict[int, object]]:
    """Every non-empty cell of the loaded records, rebuilt from the database: (table, column) -> {sk: value}.

    ``fetch(sql)`` runs a query on the written database and returns its rows.
    """
    traces = _traces(fetch, {r.table for r in plan.records})
    out: dict[tuple[str, str], dict[int, object]] = {}
    for record in plan.records:
        table = plan.table(record.table)
        names = [c.name for c in table.columns]
        rows = fetch(f"SELECT * FROM {_q(record.table)}")
        at = {n: j for j, n in enumerate(names)}
        for f in record.scalars:
            j = at[f.column]
            out[(record.table, f.path[0])] = {r[0]: stored_back(r[j], f.type, f.as_text) for r in rows
                                               if r[j] is not None}
        for nested in record.nested:
            cells: dict[int, object] = {}
            if nested.kind == "object-columns":
                js = [at[f.column] for f in nested.links]
                lists = _child_lists(plan, nested, fetch, traces)
                for r in rows:
                    stored = [r[j] for j in js]
                    obj = object_back(nested.links, stored)
                    inside = False
                    for child, found in lists:
                        if r[0] in found:
                            put(obj, child.path.split("."), found[r[0]])
                            inside = True
                    if inside or any(v is not None for v in stored):  # all NULL: the record has no object
                        cells[r[0]] = obj
            else:
                cells = _owned(plan, nested, fetch, traces)
                if nested.separator:  # a delimited cell: its values joined, as the cell wrote them
                    cells = {sk: nested.separator.join(v) for sk, v in cells.items()}
            out[(record.table, nested.column)] = cells
        for (t, sk, column), original in traces["cells"].items():
            if t == record.table:
                found = out.setdefault((t, column), {})
                found[sk] = from_literal(original)
    return out


def _q(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def _traces(fetch, record_tables: set) -> dict:
    """Values kept verbatim: whole cells (of record tables, at path "") and parts of elements."""
    cells, elements = {}, {}
    for table, row_sk, column, path, original in fetch(
            "SELECT table_name, row_sk, column_name, path, original FROM value_traces"):
        if path == "" and table in record_tables:
            cells[(table, row_sk, column)] = original
        else:
            elements.setdefault((table, row_sk), []).append((path, original))
    return {"cells": cells, "elements": elements}


def _apply(obj, edits) -> object:
    for path, original in edits:
        value = ABSENT if original is None else from_literal(original)
        if path == "":
            obj = value
        else:
            put(obj, pointer_keys(path), value)
    return obj


def _owned(plan, nested, fetch, traces) -> dict[int, object]:
    """The lists (or single objects) of a nested table, per owning row key, rebuilt from its rows."""
    table = plan.table(nested.table)
    names = [c.name for c in table.columns]
    rows = fetch(f"SELECT * FROM {_q(nested.table)}")
    elements = traces["elements"]
    if nested.kind == "object-child":
        lists = _child_lists(plan, nested, fetch, traces)
        out = {}
        for r in rows:
            obj = object_back(nested.links, list(r[2:]))
            for child, found in lists:
                if r[0] in found:
                    put(obj, child.path.split("."), found[r[0]])
            out[r[1]] = _apply(obj, elements.get((nested.table, r[0]), ()))
        return out
    rows.sort(key=lambda r: (r[1], r[names.index("list_position")]))
    if nested.kind == "value-list":
        value_table = plan.table(nested.entity)
        values = dict(fetch(f"SELECT * FROM {_q(nested.entity)}"))
        del value_table
        made = [(r[1], values[r[2]]) for r in rows]
    else:
        start = 4 if nested.kind == "entity-list" else 3
        if nested.kind == "entity-list":
            group = plan.entity_group(nested.entity)
            entity = {r[0]: r for r in fetch(f"SELECT * FROM {_q(group.table)}")}
            attributes = group.attributes
        lists = _child_lists(plan, nested, fetch, traces)
        made = []
        for r in rows:
            obj = object_back(nested.links, list(r[start:]))
            if nested.kind == "entity-list":
                e = entity[r[2]]
                if not nested.matched:
                    obj[nested.identity] = stored_back(e[1], group.identity_type, False)
                for f, v in zip(attributes, e[2:]):
                    if v is None:
                        if f.null_means != "absent":
                            put(obj, f.path, None)
                    else:
                        put(obj, f.path, stored_back(v, f.type, f.as_text))
            for child, found in lists:
                if r[0] in found:
                    put(obj, child.path.split("."), found[r[0]])
            made.append((r[1], _apply(obj, elements.get((nested.table, r[0]), ()))))
    out: dict[int, list] = {}
    for owner, element in made:
        found = out.get(owner)
        if found is None:
            found = out[owner] = []
        found.append(element)
    return out


def _child_lists(plan, nested, fetch, traces) -> list:
    return [(child, _owned(plan, child, fetch, traces)) for child in nested.children]


def prove(plan, inputs: InputDigests, fetch, locate=None) -> dict:
    """Compare the rebuilt cells with the input's digests; returns the figures of the manifest's ``integrity``.

    ``locate(table, column)``, when given, yields ``(sk, value, file, line)`` for each input cell of that
    column, to find the cells that differ.
    """
    rebuilt = rebuild_cells(plan, fetch)
    for (table, column), cells in rebuilt.items():  # only this build's records (--append adds to others)
        loaded = inputs.records.get(table, set())
        if len(cells) != len(loaded) or not loaded.issuperset(cells):
            rebuilt[(table, column)] = {sk: v for sk, v in cells.items() if sk in loaded}
    checked = exact = 0
    differing: list[dict] = []
    for key in sorted(set(inputs.sums) | set(rebuilt)):
        n, total = inputs.sums.get(key, (0, 0))
        cells = rebuilt.get(key, {})
        got = 0
        for sk, v in cells.items():
            got += _mix(sk, digest(v))
        checked += n
        if len(cells) == n and got % _MOD == total:
            exact += n
            continue
        found = []
        if locate is not None:
            seen = set()
            for sk, value, file, line in locate(*key):
                if value is None:
                    continue
                seen.add(sk)
                back = cells.get(sk, ABSENT)
                if back is ABSENT or not same(back, value):
                    found.append({"file": file, "line": line, "column": key[1],
                                  "path": first_difference(value, back)})
            for sk in set(cells) - seen:
                found.append({"file": None, "line": None, "column": key[1], "path": "",
                              "note": f"record {sk}: a value where the input has none"})
        if not found:  # not located (no input at hand, or no cell compares unequal): the digests still differ
            found.append({"file": None, "line": None, "column": key[1], "path": None,
                          "note": f"{key[0]}.{key[1]}: the rebuilt cells differ"})
        exact += max(0, n - len(found))
        differing += found
    return {"cells_checked": checked, "cells_rebuilt_exactly": exact, "cells_differing": len(differing),
            "differences": differing[:20]}


def first_difference(a, b, path=()) -> str:
    """The JSON Pointer (RFC 6901) of the first place where two values differ."""
    if type(a) is dict and type(b) is dict:
        for k in list(a) + [k for k in b if k not in a]:
            if k not in a or k not in b or not same(a[k], b[k]):
                return first_difference(a.get(k, ABSENT), b.get(k, ABSENT), path + (k,))
    if type(a) is list and type(b) is list and len(a) == len(b):
        for j, (x, y) in enumerate(zip(a, b)):
            if not same(x, y):
                return first_difference(x, y, path + (j,))
    return pointer(path)


def sqlite_fetch(path: str):
    """A ``fetch`` on a SQLite file, and the function that closes it."""
    con = sqlite3.connect(path)

    def fetch(sql: str) -> list:
        return con.execute(sql).fetchall()

    return fetch, con.close


def loss_message(figures: dict) -> str:
    first = figures["differences"][0] if figures["differences"] else {}
    where = (f"{first.get('file')}, line {first.get('line')}, column {first.get('column')!r}, at "
             f"{first.get('path')!r}" if first.get("file") else first.get("note", ""))
    return (f"{figures['cells_differing']} of {figures['cells_checked']} cells rebuilt from the database differ "
            f"from the export (first: {where}); the database was not moved into place (--allow-lossy keeps it)")
