"""What a build counts per input file (rows and elements read, loaded, set aside, quarantined) and returns."""

from __future__ import annotations

from dataclasses import dataclass, field

from ..infer.types import scalar_type
from ..model.kinds import Kind
from ..model.plan import NestedColumn


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
    inputs: object = None  # model.digests.InputDigests of the loaded cells
    trace_reasons: dict = field(default_factory=dict)  # why values were kept in value_traces, and how many
    rejoined: dict = field(default_factory=dict)  # "file:column" -> values whose name suffix was rejoined
    column_updates: dict = field(default_factory=dict)  # (table, column) -> [(value, row sk)] to set at the end
    references: list = field(default_factory=list)  # per reference to a record table: values, matched, unmatched
    # what later records held that the plan, made from the first ones, did not foresee (``Audit.contradictions``)
    contradictions: list = field(default_factory=list)
    # a partitioned build (``build_partitions``' runner): who built the partitions, how many were merged as built
    # apart, how many were built again in order, and why (``reduce.conflict``); empty when one process built all
    partitions: dict = field(default_factory=dict)


class Audit:
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
        # (file, column, type, the value's own kind) -> [first line, example]: one record per kind of value that
        # does not fit, so a plan made again with those records in its sample holds them all (``contradictions``)
        self.kinds: dict[tuple, list] = {}
        self.dependencies: list[dict] = []  # entity attributes every record shows are not the identity's

    def known(self, nested: NestedColumn, entities: dict) -> frozenset:
        found = self._known.get(id(nested))
        if found is None:
            keys = {f.path[0] for f in nested.row_fields if f.path} | {c.path.split(".")[0] for c in nested.children}
            if nested.identity:
                keys.add(nested.identity)
            if nested.kind == Kind.ENTITY_LIST:
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

    def note_type(self, path: str, column: str, type_: str, value, line: int, widen: bool = False) -> None:
        """A value the column's type cannot hold; ``widen``: a text among texts, which a plan made again with it
        holds exactly (``note_kind``)."""
        entry = self.mismatched.setdefault((path, column, type_), [line, 0, value])
        if line < entry[0]:  # the first line in the file and its value, whatever order the columns are read in
            entry[0], entry[2] = line, value
        entry[1] += 1
        if widen:
            self.note_kind(path, column, type_, value, line)

    def note_kind(self, path: str, column: str, type_: str, value: str, line: int) -> None:
        """The first line of each kind of text (``infer.types.scalar_type``) a column of texts typed ``type_``
        cannot hold: a plan made with those records in its sample gives the column a type that holds them all.

        Only texts among texts: the type of a column of texts comes from their patterns (``scalar_type``) and
        text holds every one exactly. Decoded values of several types (an integer and a text, a list among
        scalars) have no such type: a plan made with them would trace every value, or hold the field in no
        column at all, where tracing the few that do not fit loses nothing.
        """
        kind = scalar_type([value])
        first = self.kinds.setdefault((path, column, type_, kind), [line, value])
        if line < first[0]:
            first[:] = [line, value]

    def note_dependency(self, path: str, table: str, column: str, group, figures: list) -> None:
        """An entity attribute the identity does not determine over every record (``Builder.finish``): ``figures``
        is ``[occurrences of repeated identities, violations, whether presence varies, first line of a variant]``."""
        occurrences, violations, varies, line = figures
        self.dependencies.append({"file": path, "line": line, "column": f"{table}.{column}",
                                  "dependency": f"{group.identity} -> {column}", "members": list(group.members),
                                  "field": column, "occurrences": occurrences, "violations": violations,
                                  "presence_varies": varies})

    def contradictions(self) -> list[dict]:
        """What later records held that the plan did not foresee, each with the first line that shows it: a key
        the model does not hold, or a value its column's type cannot hold (one line per kind of value)."""
        found = [{"file": path, "line": line, "column": column, "key": key}
                 for (path, column, key), (line, _) in self.unplanned.items()]
        found += [{"file": path, "line": line, "column": column, "type": str(type_), "value": repr(value)[:80],
                   "text": value}
                  for (path, column, type_, _), (line, value) in self.kinds.items()]
        found += self.dependencies
        return sorted(found, key=lambda c: (c["file"], c["line"], c["column"]))

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
