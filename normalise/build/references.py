"""References from records to entities named by a key in another column or file: the keys each record holds,
resolved once every record is in.
"""

from __future__ import annotations

from collections import Counter

from ..infer import reference_text
from ..model.exact import ABSENT
from ..model.kinds import Format, Kind
from ..model.plan import Plan, RecordSource
from ..model.schema import reference_columns

OWN_KEYS = {str, type(None), type(ABSENT)}


class References:
    """Values that are natural keys of record tables (``references`` in the plan), resolved to those records'
    surrogate keys.

    The record a value names may come later in the file or in another file: a value no record has yet is
    noted and resolved at the end (``finish``: value rows rewritten whole, record columns set), so one chunk
    or many give the same rows. A value no record has at the end keeps NULL and is counted, never dropped
    (its own text stays in its column either way).
    """

    def __init__(self, plan: Plan, state: dict | None):
        self.value_lists = {n.entity: n for r in plan.records for n in r.nested
                            if n.kind == Kind.VALUE_LIST and n.references}
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
                f"{nested.file}:{nested.column}", Kind.VALUE_LIST, table, plan.table(table).columns[-1].name,
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


def reference_values(record: RecordSource, column: str, col, rows: list[int]) -> list:
    """What the lossless proof compares a column's cells with: the decoded values, and a delimited cell's text."""
    nested = next((n for n in record.nested if n.column == column), None)
    if nested is not None and nested.separator and col.format == Format.DELIMITED:
        return delimited_texts(col, rows, nested.separator)
    return [col.values[i] for i in rows]


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
