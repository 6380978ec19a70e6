"""The row engine: every table's rows from a partition's decoded columns (``Builder``), a column at a time for every
nested shape and depth; what the model cannot hold goes to quarantine or to ``value_traces``.

One class of about 660 lines: its methods share the partition's interning state (keys, entities, references,
traces), which splitting it would have to pass around.
"""

from __future__ import annotations

import json
from collections import Counter
from dataclasses import dataclass
from itertools import chain

from ..infer import get_path, match_key
from ..model.describe import descriptions
from ..model.digests import InputDigests
from ..model.errors import NormaliseError
from ..model.exact import (ABSENT, get, is_negative_zero, keyed_items, literal, pointer, same, store, stored_back,
                           value_key)
from ..model.expected import VALUE_TYPES, expect_cell, expect_element, usable_identity
from ..model.kinds import Format, Kind
from ..model.plan import META_TABLES, NestedColumn, Plan, RecordSource
from .bookkeeping import entity_members, meta_order, name_map, record_splits
from .counts import Audit, Built, FileCounts
from .entities import EntityTable, ValueTable
from .keys import POSITION_BITS, RECORD_KEY_LIMIT, row_key
from .references import References, delimited_texts
from .values import STORED_AS_IS, all_usable, fits_int64, to_sql_value
from .width import check_width


class DuplicateNaturalKey(NormaliseError):
    """Records share a natural key and the policy is to refuse."""


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
        self.entities = {g.table: EntityTable(g) for g in plan.entities}
        self.groups = {g.table: g for g in plan.entities}
        self.values: dict[str, ValueTable] = {}
        self.counts: dict[str, FileCounts] = {}
        self.quarantined_by_file: Counter = Counter()
        self.first_seen: dict[str, dict] = {}  # record table -> {natural key: line kept}
        self.last: dict[str, dict] = {}  # record table (duplicates = "last") -> {natural key: (record key, line)}
        self.refused: dict[str, list] = {}  # record table (duplicates = "refuse") -> [path, repeats, first lines]
        self.audit = Audit(self.meta["quarantined_cells"])
        self.traces = self.meta["value_traces"]
        self.inputs = InputDigests()  # the digest of every loaded cell, for the lossless proof
        self.trace_reasons: Counter = Counter()
        self.rejoined: Counter = Counter()  # "file:column" -> delimited values with a name suffix rejoined
        self.record_references = References(plan, state)  # values that are natural keys of record tables
        self.parts = record_splits(plan)  # wide record tables: how a row is shared among their 1:1 tables
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
                found = self.values[table] = ValueTable()
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
            if nested.separator and col.format == Format.DELIMITED:  # the proof compares the cell's own text
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
                for order, nested in enumerate(record.nested) if nested.kind == Kind.OBJECT_COLUMNS]
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
        texts = set(map(type, vals)) <= {str, type(None)}  # a CSV cell's text: a plan made again may widen it
        for v, i in zip(vals, kept):
            stored, exact = store(v, f.type, f.as_text)
            out.append(stored)
            if not exact:
                self.audit.note_type(export.path, f.column, f.type, v, export.lines[i], widen=texts and v is not None)
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
        group = self.entities[nested.entity].group if nested.kind == Kind.ENTITY_LIST else None
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
        if kind == Kind.OBJECT_COLUMNS:  # its fields are the record's columns (_object_columns): the lists inside
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
        vt = nested.value_type if kind == Kind.VALUE_LIST else None
        if max(item_owners) < RECORD_KEY_LIMIT and max(positions) < (1 << POSITION_BITS):
            keys = [(o << POSITION_BITS) | p for o, p in zip(item_owners, positions)]  # row_key, a column at once
        else:
            source = f"{nested.file}:{nested.column}" + (f".{nested.path}" if nested.path else "")
            keys = [row_key(source, o, p) for o, p in zip(item_owners, positions)]
        table = self.rows[nested.table]
        c.elements_written += len(keys)
        if kind == Kind.VALUE_LIST:
            found = self.values.get(nested.entity)
            if found is None:
                found = self.values[nested.entity] = ValueTable()
            value_keys = [found.key(x, vt) for x in items]
            if nested.references and nested.entity in self.record_references.used:
                self.record_references.used[nested.entity].update(value_keys)
            table.extend(zip(keys, item_owners, value_keys, positions))
            return whole
        links = self._link_columns(nested, order, items, keys, item_owners, positions, item_rows, export, whole,
                                   by_field)
        if kind == Kind.ENTITY_LIST:
            places = [(lines[i], order, p) for i, p in zip(item_rows, positions)]

            def where(j):
                return (nested.table, keys[j], item_owners[j], positions[j], nested.column, export.path,
                        lines[item_rows[j]], [])

            entity_keys = self.entities[nested.entity].add_column(idents, items, places, where, item_rows)
            table.extend(zip(keys, item_owners, entity_keys, positions, *links))
        elif kind == Kind.OBJECT_CHILD:
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
        if kind == Kind.OBJECT_CHILD:
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
        vt = nested.value_type if kind == Kind.VALUE_LIST else None
        if kind == Kind.VALUE_LIST:  # a value the list's type cannot hold is not a value of the list
            bad = [k for k, x in enumerate(items) if x is None or isinstance(x, (dict, list, tuple))
                   or vt != "text" and store(x, vt)[0] is None]
            want = VALUE_TYPES[vt]
            if not set(map(type, items)) <= {want} or (want is float and 0.0 in items):
                whole.update(item_rows[k] for k, x in enumerate(items) if type(x) is not want or is_negative_zero(x))
        else:
            bad = [k for k, x in enumerate(items) if type(x) is not dict]
        idents = None
        if kind == Kind.ENTITY_LIST:
            identity, identity_type = nested.identity, self.entities[nested.entity].group.identity_type
            given = [o.get(identity) if type(o) is dict else None for o in items]
            idents = [match_key(v) or None for v in given] if nested.matched else given
            if not all_usable(idents, identity_type):
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
                if kind == Kind.OBJECT_CHILD:
                    message = "expected an object"
                elif x is None:
                    message = "null element in a list"
                elif kind == Kind.VALUE_LIST:
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
            # told from its fields, so each element is compared with what its row gives back (model.expected.expect_cell)
            group = self.entities[nested.entity].group if nested.kind == Kind.ENTITY_LIST else None
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
        if nested.kind != Kind.OBJECT_CHILD and not set(chain.from_iterable(items)) <= known:
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
            if not (set(map(type, col)) <= STORED_AS_IS[f.type] and (f.type != "integer" or fits_int64(col))
                    and not f.as_text and not (f.type == "real" and 0.0 in col
                                               and any(map(is_negative_zero, [v for v in col if v == 0.0])))):
                converted = []
                for k, (v, i) in enumerate(zip(col, rows_of)):
                    stored, exact = store(v, f.type, f.as_text)
                    converted.append(stored)
                    if exact:
                        continue
                    if by_field:  # each such value is kept on its row, and the column reported
                        audit.note_type(path, f"{nested.column}.{f.column}", f.type, v, lines[i])
                        keep(k, f.path, v, f"not {f.type} as given")
                    elif stored is None and v is not None and nested.kind != Kind.OBJECT_CHILD:
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

    def _trace_occurrences(self, table: str, acc: EntityTable, held: list, occurrences) -> None:
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
            # per attribute, over every record: [occurrences of repeated identities, violations, presence
            # varies, first line of a second value] (infer.dependencies' measure, absence a value of its own)
            measured = [[0, 0, False, None] for _ in acc.keys]
            for text, chosen_values, per_attribute in acc.choose():
                for k, found in enumerate(per_attribute):
                    _measure(measured[k], found)
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
            if not acc.group.matched and not self.state:
                for (column, _, _), figures in zip(acc.keys, measured):
                    occurrences_, violations, varies, _ = figures
                    if occurrences_ and (varies or violations / occurrences_ > self.plan.violation_threshold):
                        self.audit.note_dependency(self._entity_path(acc.group), table, column, acc.group, figures)
        self.meta["name_map"] = name_map(self.plan) if not self.state else []  # appended: the map is there
        self.meta["descriptions"] = descriptions(self.plan) if not self.state else []  # the data dictionary's text
        offsets = self.state["meta_offset"] if self.state else {}
        for name in META_TABLES:
            if name != "attribute_variants":  # variants are already in a fixed order
                self.meta[name].sort(key=meta_order)
            rows[name] = [(n, *r) for n, r in enumerate(self.meta[name], start=offsets.get(name, 0) + 1)]
        counts = [self.counts[r.path] if r.path in self.counts else FileCounts(r.file, r.path)
                  for r in self.plan.records]
        return Built(rows, counts, conflicts, merges=merges,
                     cells_quarantined_by_file=dict(self.quarantined_by_file), updates=updates,
                     inputs=self.inputs, trace_reasons=dict(self.trace_reasons),
                     rejoined=dict(self.rejoined), column_updates=column_updates, references=references,
                     contradictions=self.audit.contradictions())


def _measure(figures: list, found: list) -> None:
    """Add one entity's variants of one attribute (``(value, count, first place)``, in file order) to
    ``figures``: a repeated identity's occurrences, those that differ from its most frequent value, whether
    some occurrences carry the field and others not, and the first line where a second value appears."""
    total = sum(n for _, n, _ in found)
    if total < 2:
        return
    figures[0] += total
    figures[1] += total - max(n for _, n, _ in found)
    if len(found) > 1:
        absent = [v is ABSENT for v, _, _ in found]
        figures[2] = figures[2] or any(absent) and not all(absent)
        line = found[1][2][0]
        figures[3] = line if figures[3] is None else min(figures[3], line)


@dataclass
class _KeyedColumn:
    """A column of objects keyed by data, read as lists (``values``), with the cells as given (``given``)."""

    values: list
    given: dict  # row -> the cell as given, for the traces of whole cells


def _by_field(nested: NestedColumn) -> bool:
    """A top-level list without lists inside its objects keeps what its rows cannot give back field by field
    (a key the model lacks, null for absent, a value of another type, each on its bridge or child row); any
    other nested column, its cell whole when its rows differ from it (``Builder._check_cell``)."""
    return nested.kind in (Kind.ENTITY_LIST, Kind.CHILD_LIST, Kind.VALUE_LIST) and not nested.children and not nested.path


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
