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
from operator import itemgetter

from .model.digests import DIGEST_MODULUS, InputDigests, keyed_digest
from .model.errors import NormaliseError
from .model.exact import ABSENT, from_literal, keyed_object, pointer, pointer_keys, put, same, stored_back
from .model.expected import object_back
from .model.kinds import Kind
from .model.names import quote_name as _q
from .model.plan import TEXT_TYPES
from .model.schema import record_parts


class LossDetected(NormaliseError):
    """A value rebuilt from the database differs from the value in the export."""


def table_query(table: str) -> str:
    """The query the proof reads a whole table with; a ``fetch`` may answer it its own way (PostgreSQL's
    native dates and timestamps are read as the text they came in, ``write.proof_queries``)."""
    return f"SELECT * FROM {_q(table)}"


def rebuild_cells(plan, fetch, impure: set | None = None, only: set | None = None, traces: dict | None = None
                  ) -> dict[tuple[str, str], dict[int, object]]:
    """Every non-empty cell of the loaded records, rebuilt from the database: (table, column) -> {sk: value}.

    ``fetch(sql)`` runs a query on the written database and returns its rows. ``impure``, when given,
    receives the (table, column) and (table, column, sk) whose values came partly from ``value_traces``
    (only those may hold what JSON has not). ``only``, when given, is the (table, column) to rebuild.
    ``traces``: the value traces and the entity and value objects already read (``read_traces``), when
    the cells are rebuilt a range of records at a time.
    """
    if traces is None:
        traces = read_traces(plan, fetch)
    traced_tables = {t for t, _ in traces["elements"]}
    impure = set() if impure is None else impure
    out: dict[tuple[str, str], dict[int, object]] = {}
    for record in plan.records:
        wanted = [f for f in record.scalars if only is None or (record.table, f.path[0]) in only]
        nested_wanted = [n for n in record.nested if only is None or (record.table, n.column) in only]
        if not wanted and not nested_wanted:
            continue
        needs_rows = wanted or any(n.kind == Kind.OBJECT_COLUMNS for n in nested_wanted)
        needed = {f.column for f in wanted} | {f.column for n in nested_wanted if n.kind == Kind.OBJECT_COLUMNS
                                               for f in n.row_fields}
        names, rows = _record_rows(plan, record.table, fetch, needed) if needs_rows else ([], [])
        at = {n: j for j, n in enumerate(names)}
        for f in wanted:
            j = at[f.column]
            out[(record.table, f.path[0])] = {r[0]: stored_back(r[j], f.type, f.as_text) for r in rows
                                               if r[j] is not None}
        for nested in nested_wanted:
            cells: dict[int, object] = {}
            if nested.kind == Kind.OBJECT_COLUMNS:
                js = [at[f.column] for f in nested.row_fields]
                lists = _child_lists(plan, nested, fetch, traces)
                entities = _referred(plan, nested.row_fields, fetch, traces)
                edits = traces["fields"]
                for r in rows:
                    stored = [r[j] for j in js]
                    obj = object_back(nested.row_fields, stored, entities)
                    if (record.table, r[0], nested.column) in edits:  # occurrences' own attribute values
                        obj = _apply(obj, edits[(record.table, r[0], nested.column)])
                        impure.add((record.table, nested.column, r[0]))
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
            if traced_tables & _tables_of(nested):
                impure.add((record.table, nested.column))
        for (t, sk, column), original in traces["cells"].items():
            if t == record.table and (only is None or (t, column) in only):
                found = out.setdefault((t, column), {})
                found[sk] = from_literal(original)
                impure.add((t, column, sk))
    return out


def _record_rows(plan, table: str, fetch, needed: set) -> tuple[list[str], list[tuple]]:
    """The column names and rows of a record table, with the columns of those of its 1:1 parts
    (``schema.split_wide_records``) that hold a column ``needed``, after its own. Each table is read apart:
    SQLite limits the columns of a query's result as it limits a table's (sqlite.org/limits.html)."""
    names = [c.name for c in plan.table(table).columns]
    rows = fetch(table_query(table))
    for part in record_parts(plan, table):
        columns = [c.name for c in part.columns[1:]]
        if needed.isdisjoint(columns):
            continue
        by_key = {r[0]: r[1:] for r in fetch(table_query(part.name))}
        missing = (None,) * len(columns)  # every record has a row in every part; a lost one shows as NULLs
        rows = [(*r, *by_key.get(r[0], missing)) for r in rows]
        names += columns
    return names, rows


def _tables_of(nested) -> set:
    found = {nested.table} if nested.table else set()
    for child in nested.children:
        found |= _tables_of(child)
    return found


def read_traces(plan, fetch) -> dict:
    """What every part of a rebuild reads once: the value traces, and room for the entity and value objects."""
    traces = _traces(fetch, {r.table for r in plan.records})
    traces["entities"] = {}  # entity table -> {key: its object}, read once
    traces["values"] = {}  # value table -> {key: its value}, read once
    return traces


def _traces(fetch, record_tables: set) -> dict:
    """Values kept verbatim: whole cells (of record tables, at path "") and parts of elements."""
    cells, elements, fields = {}, {}, {}
    for table, row_sk, column, path, original in fetch(
            "SELECT table_name, row_sk, column_name, path, original FROM value_traces"):
        if path == "" and table in record_tables:
            cells[(table, row_sk, column)] = original
        elif table in record_tables:  # a part of an object held in the record's columns (a reference)
            fields.setdefault((table, row_sk, column), []).append((path, original))
        else:
            elements.setdefault((table, row_sk), []).append((path, original))
    return {"cells": cells, "elements": elements, "fields": fields}


def _apply(obj, edits) -> object:
    for path, original in edits:
        value = ABSENT if original is None else from_literal(original)
        if path == "":
            obj = value
        else:
            put(obj, pointer_keys(path), value)
    return obj


def row_objects(fields, start: int, entities: dict | None = None):
    """A function giving the object a row's field columns (from index ``start`` on) stand for.

    The same as ``model.expected.object_back``, made once per table: the common case (one key per field, values
    SQLite gives back as they were decoded) is one dict comprehension per row. ``entities``: the objects
    of the entity tables the fields refer to (``_referred``).
    """
    if any(f.entity for f in fields):
        return lambda r: object_back(fields, r[start:], entities)
    keys = [f.path[0] for f in fields]
    plain = all(len(f.path) == 1 and (f.type in TEXT_TYPES or
                                      f.type in ("integer", "real") and not f.as_text) for f in fields)
    if not plain and any(len(f.path) != 1 for f in fields):
        return lambda r: object_back(fields, r[start:])
    if not plain:  # one key per field, some read back through their type (booleans, numbers kept as text, ...)
        read_back = [(f.path[0], f.type, f.as_text) for f in fields
                     if not (f.type in TEXT_TYPES or f.type in ("integer", "real") and not f.as_text)]
        absent = [f.path[0] for f in fields if f.null_means == "absent"]

        def make(r):
            obj = dict(zip(keys, r[start:]))
            for k, type_, as_text in read_back:
                v = obj[k]
                if v is not None:
                    obj[k] = stored_back(v, type_, as_text)
            for k in absent:
                if obj[k] is None:
                    del obj[k]
            return obj
        return make
    if all(f.null_means == "null" for f in fields):
        return lambda r: dict(zip(keys, r[start:]))
    if all(f.null_means == "absent" for f in fields):
        return lambda r: {k: v for k, v in zip(keys, r[start:]) if v is not None}
    absent = [f.null_means == "absent" for f in fields]
    return lambda r: {k: v for k, v, a in zip(keys, r[start:], absent) if v is not None or not a}


def _owned(plan, nested, fetch, traces) -> dict[int, object]:
    """The lists (or single objects) of a nested table, per owning row key, rebuilt from its rows."""
    table = plan.table(nested.table)
    names = [c.name for c in table.columns]
    rows = fetch(table_query(nested.table))
    elements = traces["elements"]
    traced = {sk for t, sk in elements if t == nested.table}
    lists = _child_lists(plan, nested, fetch, traces) if nested.kind != Kind.VALUE_LIST else []
    entities = _referred(plan, nested.row_fields, fetch, traces)
    if nested.kind == Kind.OBJECT_CHILD:
        make = row_objects(nested.row_fields, 2, entities)
        out = {}
        for r in rows:
            obj = make(r)
            for child, found in lists:
                if r[0] in found:
                    put(obj, child.path.split("."), found[r[0]])
            out[r[1]] = _apply(obj, elements[(nested.table, r[0])]) if r[0] in traced else obj
        return out
    rows.sort(key=itemgetter(1, names.index("list_position")))
    if nested.kind == Kind.VALUE_LIST:
        vt = getattr(nested, "value_type", "text")
        values = traces["values"].get(nested.entity)
        if values is None:
            values = traces["values"][nested.entity] = {  # a third column, when there, names the record (references)
                sk: stored_back(v, vt, False) for sk, v, *_ in fetch(table_query(nested.entity))}
        made = [(r[1], values[r[2]]) for r in rows]
    else:
        make = row_objects(nested.row_fields, 4 if nested.kind == Kind.ENTITY_LIST else 3, entities)
        if nested.kind == Kind.ENTITY_LIST:
            entity = _entity_objects(plan, nested.entity, fetch, traces)
            made = [(r[1], {**entity[r[2]], **make(r)}) for r in rows]
        else:
            made = [(r[1], make(r)) for r in rows]
        if lists or traced:
            for r, (_, obj) in zip(rows, made):
                for child, found in lists:
                    if r[0] in found:
                        put(obj, child.path.split("."), found[r[0]])
            made = [(owner, _apply(obj, elements[(nested.table, r[0])]) if r[0] in traced else obj)
                    for r, (owner, obj) in zip(rows, made)]
    out: dict[int, list] = {}
    for owner, element in made:
        found = out.get(owner)
        if found is None:
            found = out[owner] = []
        found.append(element)
    if getattr(nested, "keyed", ""):  # an object keyed by data: its list of keys read back as the object
        return {owner: keyed_object(items, nested.keyed, nested.keyed_value) for owner, items in out.items()}
    return out


def _entity_objects(plan, table: str, fetch, traces) -> dict:
    """Each entity of a table as an object, by its key: its identity and attributes (read once per proof)."""
    cache = traces["entities"]
    found = cache.get(table)
    if found is None:
        group = plan.entity_group(table)
        attributes = row_objects(group.attributes, 2)
        found = cache[table] = {}
        for e in fetch(table_query(table)):
            obj = attributes(e)
            if not group.matched:
                obj[group.identity] = stored_back(e[1], group.identity_type, False)
            found[e[0]] = obj
    return found


def _referred(plan, fields, fetch, traces) -> dict:
    """The objects of the entity tables that fields refer to (references), by table."""
    return {f.entity: _entity_objects(plan, f.entity, fetch, traces) for f in fields if f.entity}


def _child_lists(plan, nested, fetch, traces) -> list:
    return [(child, _owned(plan, child, fetch, traces)) for child in nested.children]


def _rebuilt(plan, fetch, key, records: dict, impure: set | None = None) -> dict:
    """One column's rebuilt cells, of this build's records only (``--append`` adds to others)."""
    cells = rebuild_cells(plan, fetch, impure, {key}).get(key, {})
    loaded = records.get(key[0], set())
    if len(cells) != len(loaded) or not loaded.issuperset(cells):
        cells = {sk: v for sk, v in cells.items() if sk in loaded}
    return cells


def _sums(plan, fetch, keys: set, records: dict, batch: int | None = None) -> dict:
    """(cells, digest sum) of each rebuilt column, as ``InputDigests`` sums the input's.

    ``batch``: the cells are rebuilt ``batch`` records at a time (by record key, each table's rows of those
    records read through its owner's index, ``_Scoped``), so memory is bounded by the batch, not the input.
    """
    out: dict = {key: [0, 0] for key in keys}
    traces = read_traces(plan, fetch)
    for table in sorted({t for t, _ in keys}):
        wanted = {k for k in keys if k[0] == table}
        loaded = records.get(table, set())
        ranges = [(None, None)]
        if batch and len(loaded) > batch:
            ordered = sorted(loaded)
            ranges = [(ordered[i], ordered[min(i + batch, len(ordered)) - 1]) for i in range(0, len(ordered), batch)]
        for lo, hi in ranges:
            impure: set = set()
            rebuilt = rebuild_cells(plan, fetch if lo is None else _Scoped(plan, fetch, lo, hi), impure, wanted, traces)
            for key, cells in rebuilt.items():
                whole = key in impure
                got, n = out.setdefault(key, [0, 0])[1], 0
                for sk, v in cells.items():
                    if sk in loaded and (lo is None or lo <= sk <= hi):  # traced cells come whatever the range
                        got += keyed_digest(sk, v, not whole and (key[0], key[1], sk) not in impure)
                        n += 1
                out[key][0] += n
                out[key][1] = got % DIGEST_MODULUS
    return {key: tuple(v) for key, v in out.items()}


class _Scoped:
    """A SQLite ``fetch`` whose whole-table queries (``table_query``) of record tables and the tables they own
    give only the rows of records keyed ``lo`` to ``hi``: a record table's (and its 1:1 parts') by key, a
    bridge's or child's through its owner column (the foreign-key index), a grandchild's through its owner's
    rows in range; entity, value and bookkeeping tables whole."""

    def __init__(self, plan, fetch, lo: int, hi: int):
        self.fetch = fetch
        self.where: dict[str, str] = {}
        owners: dict[str, tuple] = {}  # table -> (its owner column, the owning table; None for a record table)
        for record in plan.records:
            for t in [plan.table(record.table), *record_parts(plan, record.table)]:
                owners[t.name] = (t.columns[0].name, None)

            def walk(nested, parent):
                below = parent
                if nested.table:
                    owners[nested.table] = (plan.table(nested.table).columns[1].name, parent)
                    below = nested.table
                for child in nested.children:
                    walk(child, below)

            for nested in record.nested:
                walk(nested, record.table)

        def where(table: str) -> str:
            column, parent = owners[table]
            if parent is None or owners[parent][1] is None:
                return f"{_q(column)} BETWEEN {int(lo)} AND {int(hi)}"
            key = plan.table(parent).columns[0].name
            return f"{_q(column)} IN (SELECT {_q(key)} FROM {_q(parent)} WHERE {where(parent)})"

        for table in owners:
            self.where[table_query(table)] = where(table)

    def __call__(self, sql: str) -> list:
        scope = self.where.get(sql)
        return self.fetch(sql if scope is None else f"{sql} WHERE {scope}")


def _units(plan) -> list[set]:
    """The columns to rebuild, in parts that can be rebuilt apart: a record table's scalars, each nested column."""
    units = []
    for record in plan.records:
        units.append({(record.table, f.path[0]) for f in record.scalars})
        units += [{(record.table, n.column)} for n in record.nested]
    return [u for u in units if u]


# records rebuilt at a time by each process of the proof (``_sums``' batch): memory bounded by the batch
PROOF_BATCH = 5000


def _unit_sums(job) -> dict:
    path, plan, keys, records = job
    fetch, close = sqlite_fetch(path)
    try:
        return _sums(plan, fetch, keys, records, PROOF_BATCH)
    finally:
        close()


def _sums_in_processes(path: str, plan, units: list[set], records: dict) -> dict | None:
    """The column sums on every core: SQLite files are read by many processes at once; each rebuilds its
    share of the columns (Python objects, so threads would take turns). None when processes cannot start."""
    import multiprocessing
    import os

    workers = min(len(units), os.cpu_count() or 1)
    if workers < 2 or "fork" not in multiprocessing.get_all_start_methods():
        return None
    shares: list[set] = [set() for _ in range(workers)]
    for k, unit in enumerate(units):  # round robin: nested columns, the costly units, spread over the cores
        shares[k % workers] |= unit
    try:
        with multiprocessing.get_context("fork").Pool(workers) as pool:
            parts = pool.map(_unit_sums, [(path, plan, share, records) for share in shares])
    except (OSError, multiprocessing.ProcessError):  # pragma: no cover - no processes to be had
        return None
    out: dict = {}
    for part in parts:
        out.update(part)
    return out


def prove(plan, inputs: InputDigests, fetch, locate=None, path: str | None = None) -> dict:
    """Compare the rebuilt cells with the input's digests; returns the figures of the manifest's ``integrity``.

    ``locate(table, column)``, when given, yields ``(sk, value, file, line)`` for each input cell of that
    column, to find the cells that differ. ``path``, a SQLite file, lets the columns be rebuilt by a
    process per core.
    """
    units = _units(plan)
    sums = None
    if path is not None and len(units) > 1:
        sums = _sums_in_processes(path, plan, units, inputs.records)
    if sums is None:
        sums = _sums(plan, fetch, {k for unit in units for k in unit}, inputs.records)
    checked = exact = 0
    differing: list[dict] = []
    for key in sorted(set(inputs.sums) | set(sums)):
        n, total = inputs.sums.get(key, (0, 0))
        checked += n
        if tuple(sums.get(key, (0, 0))) == (n, total):
            exact += n
            continue
        cells = _rebuilt(plan, fetch, key, inputs.records)
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
