"""Join pass (between decode and infer): attach further exports to the main one by key.

The main export is the first file. Another export relates to it when one of
its scalar columns holds the main export's natural-key values (or the user
says which column, ``--join FILE.COLUMN``). For a one-to-one join the joined
file's repeated keys are set aside first (kept, with their lines); then its
columns are modelled as if they belonged to the main export. Keys found on one
side only are counted both ways; the joined file's unmatched rows are kept in
``unmatched_rows``. ``left`` (default) keeps every main record, ``inner`` sets
aside main records without a match, ``full`` also loads unmatched joined rows
as records of their own.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

from .decode import DecodedColumn
from .infer import detect_natural_key, scalar_column_type
from .model.errors import NormaliseError, UsageError
from .model.export import Export
from .model.kinds import Format
from .model.settings import HOWS, Settings

MIN_OVERLAP = 0.5  # share of a column's distinct values found among the main keys
EXAMPLES = 5
FULL_JOIN_KEY_BASE = 10**9  # records that only the n-th file has get key n * 10**9 + line


class CardinalityViolation(NormaliseError):
    """A join declared one-to-one or one-to-many that the data does not keep."""


@dataclass
class JoinedExport(Export):
    """The main export with the columns of the exports joined to it (``record_keys``, ``main_rows``,
    ``main_rows_read`` and ``origin`` set; the fields are ``model.export.Export``'s)."""

    inner_unmatched: dict = field(default_factory=dict)  # row -> why an inner join sets it aside
    origin_lines: dict = field(default_factory=dict)  # joined column -> line in its own file, per row


@dataclass
class Joined:
    exports: list[Export]
    decoded: dict
    joins: list[dict] = field(default_factory=list)
    set_aside: list[tuple] = field(default_factory=list)  # rows of set_aside_rows
    unmatched: list[tuple] = field(default_factory=list)  # rows of unmatched_rows
    inputs: list[dict] = field(default_factory=list)  # counts of the joined files
    inner_unmatched: dict = field(default_factory=dict)  # main row -> why an inner one-to-many join sets it aside


def _key_values(export: Export, decoded: dict, column: str) -> list:
    return [None if v is None else str(v) for v in decoded[export.path][column].values]


def find_relation(main: Export, main_key: str, other: Export, decoded: dict) -> str | None:
    """The column of ``other`` whose values are the main export's natural keys, if any."""
    keys = set(_key_values(main, decoded, main_key))
    best = None
    for name, col in decoded[other.path].items():
        if col.format != Format.TEXT:
            continue
        values = {v for v in _key_values(other, decoded, name) if v is not None}
        if not values:
            continue
        overlap = len(values & keys) / len(values)
        if overlap >= MIN_OVERLAP and (best is None or (overlap, name == main_key) > best[0]):
            best = ((overlap, name == main_key), name)
    return None if best is None else best[1]


def join(exports: list[Export], decoded: dict, options: Settings) -> Joined:
    """Join every export that relates to the first one; the others stay separate record tables."""
    natural_keys = options.natural_keys
    result = Joined(list(exports), dict(decoded))
    others = {name for e in exports[1:] for name in (e.name, Path(e.path).name)}
    for file in options.on:
        if file not in others:
            raise UsageError(f"--join {file}.{options.on[file][0]}: no further input file is called {file!r} "
                             f"(joined files: {', '.join(e.name for e in exports[1:]) or 'none'})")
    if len(exports) < 2 or options.separate:
        return result
    if options.how not in HOWS:
        raise UsageError(f"--how {options.how!r}: use one of {', '.join(HOWS)}")
    main = exports[0]
    main_cols = decoded[main.path]
    main_key = natural_keys.get(main.name)
    if main_key is None:
        types = {n: scalar_column_type(c.values)
                 for n, c in main_cols.items() if c.format in (Format.TEXT, Format.EMPTY)}
        main_key = detect_natural_key(list(types), {n: main_cols[n].values for n in types}, types)
    if main_key is None:
        if options.on:
            raise UsageError(f"--join: {main.path} has no natural key to join on (a column filled in every row, "
                             f"with unique values); name it with --key {main.name}=COLUMN")
        return result
    combined = JoinedExport(main.path, main.kind, list(main.columns), dict(main.cells), list(main.lines),
                            list(main.rejected), list(main.warnings), dict(main.header_names),
                            main.delimiter, main.encoding, record_keys=list(main.lines),
                            main_rows=main.number_of_records, main_rows_read=main.rows_read)
    combined_cols = dict(main_cols)
    joined_any = False
    for other in exports[1:]:
        stated = options.on.get(other.name) or options.on.get(Path(other.path).name)
        if stated:
            right_col, left_col = stated
            if left_col and left_col != main_key:
                raise UsageError(f"--join {other.name}.{right_col}={main.name}.{left_col}: the main file's "
                                 f"natural key is {main_key!r}; name it, or choose the key with --key")
            if right_col not in decoded[other.path]:
                raise UsageError(f"--join {other.name}.{right_col}: {other.path} has no column {right_col!r} "
                                 f"(columns: {', '.join(other.columns)})")
            if decoded[other.path][right_col].format not in (Format.TEXT, Format.EMPTY):
                raise UsageError(f"--join {other.name}.{right_col}: that column holds nested values, not keys; "
                                 "name the column of plain values that holds the main file's keys")
        else:
            right_col = find_relation(main, main_key, other, decoded)
        if right_col is None:
            continue
        if options.cardinality == "one-to-many":
            _link_many(result, main, main_key, other, right_col, decoded, options)
            continue
        joined_any = True
        _join_one(result, combined, combined_cols, main, main_key, other, right_col, decoded, options)
        result.exports.remove(other)
        del result.decoded[other.path]
    if joined_any:
        result.exports[0] = combined
        result.decoded[main.path] = combined_cols
    if result.inner_unmatched:  # main records an inner one-to-many join sets aside
        target = result.exports[0]
        if target.inner_unmatched is None:
            target.inner_unmatched = {}
        for i, reason in result.inner_unmatched.items():
            target.inner_unmatched.setdefault(i, reason)
    return result


# Long (about 90 lines): one join's duplicates, matches and unmatched rows on both sides, counted in one pass so
# that every row of either file is accounted for exactly once.
def _join_one(result: Joined, combined: JoinedExport, combined_cols: dict, main: Export, main_key: str,
              other: Export, right_col: str, decoded: dict, options: Settings) -> None:
    right_keys = _key_values(other, decoded, right_col)
    left_keys = _key_values(main, decoded, main_key)
    first: dict[str, int] = {}
    duplicates = []
    order = range(len(right_keys)) if options.duplicates != "last" else range(len(right_keys) - 1, -1, -1)
    for j in order:
        k = right_keys[j]
        if k is None:
            continue
        if k in first:
            duplicates.append((j, first[k]))
        else:
            first[k] = j
    if duplicates and options.duplicates == "refuse":
        lines = ", ".join(f"line {other.lines[j]}" for j, _ in sorted(duplicates)[:5])
        raise CardinalityViolation(f"{other.path}: the join on {right_col} is declared one-to-one but "
                                   f"{len(duplicates)} row(s) repeat a key ({lines}); use --duplicates first "
                                   f"or last to keep one and set the others aside", file=other.path,
                                   line=other.lines[min(duplicates)[0]], column=right_col)
    for j, kept in sorted(duplicates):
        result.set_aside.append((other.path, other.lines[j], right_keys[j],
                                 f"duplicate join key {right_keys[j]!r} in {other.name}; kept line "
                                 f"{other.lines[kept]}", other.lines[kept], _cells_json(other, j)))
    left_set = {k for k in left_keys if k is not None}
    left_only = sorted(left_set - set(first))
    right_only = sorted(set(first) - left_set)
    no_key = [j for j, k in enumerate(right_keys) if k is None]
    for j in sorted([first[k] for k in right_only] + no_key):
        reason = "no join key" if right_keys[j] is None else f"key {right_keys[j]!r} not in {main.name}"
        if options.how == "full" and right_keys[j] is not None:
            continue
        result.unmatched.append((other.path, other.lines[j], right_keys[j], reason, _cells_json(other, j)))
    # the joined file's columns, aligned on the main file's rows
    index = [first.get(k) for k in left_keys]
    extra_rows = [first[k] for k in right_only] if options.how == "full" else []
    names = {}
    for name in other.columns:
        if name == right_col:
            continue
        new = name if name not in combined.cells else f"{other.name}_{name}"
        names[name] = new
        source = decoded[other.path][name]
        padding = len(combined.lines) - len(index)
        values = [None if j is None else source.values[j] for j in index] + [None] * padding
        values += [source.values[j] for j in extra_rows]
        raw = other.cells[name]
        cells = [None if j is None else raw[j] for j in index] + [None] * padding + [raw[j] for j in extra_rows]
        combined.columns.append(new)
        combined.cells[new] = cells
        combined.header_names[new] = other.header_names.get(name, name)
        combined.origin[new] = (other.path, name)
        combined.origin_lines[new] = ([None if j is None else other.lines[j] for j in index] + [None] * padding
                                      + [other.lines[j] for j in extra_rows])
        layout = None
        if source.layout is not None:
            layout = ([None if j is None else source.layout[j] for j in index] + [None] * padding
                      + [source.layout[j] for j in extra_rows])
        combined_cols[new] = DecodedColumn(new, source.format, values, source.quarantined,
                                           source.format_counts, source.separator, source.ambiguity,
                                           source.forced, source.rejoined, source.join_separator, layout)
    if extra_rows:
        position = len(result.joins) + 2
        for name in list(combined.cells):
            if name in names.values():
                continue
            combined.cells[name] = combined.cells[name] + [None] * len(extra_rows)
            col = combined_cols[name]
            if name == main_key:
                keyed = [other.cells[right_col][j] for j in extra_rows]
                combined.cells[name][-len(extra_rows):] = keyed
                col.values = col.values + [decoded[other.path][right_col].values[j] for j in extra_rows]
            else:
                col.values = col.values + [None] * len(extra_rows)
        combined.lines += [other.lines[j] for j in extra_rows]
        combined.record_keys += [position * FULL_JOIN_KEY_BASE + other.lines[j] for j in extra_rows]
    matched = len({j for j in index if j is not None})
    result.inputs.append({"path": other.path, "rows_read": other.rows_read,
                          "records_loaded": matched + len(extra_rows),
                          "rows_set_aside": len(duplicates), "rows_rejected": len(other.rejected),
                          "rows_unmatched": other.number_of_records - matched - len(extra_rows) - len(duplicates),
                          "joined_into": main.path})
    result.joins.append({"left": main.path, "right": other.path, "on": [[main_key, right_col]],
                         "how": options.how, "cardinality": options.cardinality,
                         "left_only": len(left_only), "right_only": len(right_only),
                         "right_duplicates_set_aside": len(duplicates),
                         "left_only_examples": left_only[:EXAMPLES], "right_only_examples": right_only[:EXAMPLES],
                         "columns": names})
    if options.how == "inner":
        for i, j in enumerate(index):
            if j is None and i < combined.main_rows:
                combined.inner_unmatched.setdefault(i, f"no match in {other.name} (inner join)")


@dataclass
class LinkedExport(Export):
    """A further export whose rows each belong to one record of the main export (one-to-many): ``parent_path``,
    ``parent_column``, ``main_rows_read`` and ``rows_unmatched`` set (``model.export.Export``'s fields)."""


def _link_many(result: Joined, main: Export, main_key: str, other: Export, right_col: str, decoded: dict,
               options: Settings) -> None:
    """One-to-many: the further file stays a record table of its own, each row keyed to its main record.

    Its rows whose key names no main record are kept in ``unmatched_rows`` (a full
    join loads them with no main record instead); main records without rows are
    counted, and set aside by an inner join.
    """
    from .model.names import singular, sql_name

    left_keys = _key_values(main, decoded, main_key)
    right_keys = _key_values(other, decoded, right_col)
    owner: dict[str, int] = {}
    order = range(len(left_keys)) if options.duplicates != "last" else range(len(left_keys) - 1, -1, -1)
    for i in order:  # the main record that keeps each key (its duplicates are set aside by the build)
        if left_keys[i] is not None:
            owner.setdefault(left_keys[i], main.lines[i])
    keep, unmatched = [], []
    for j, k in enumerate(right_keys):
        (keep if k in owner or (options.how == "full" and k is not None) else unmatched).append(j)
    for j in unmatched:
        reason = "no join key" if right_keys[j] is None else f"key {right_keys[j]!r} not in {main.name}"
        result.unmatched.append((other.path, other.lines[j], right_keys[j], reason, _cells_json(other, j)))
    column = sql_name(f"{singular(sql_name(main.name))}_sk")
    while column in other.columns:
        column += "_"
    cells = {c: [other.cells[c][j] for j in keep] for c in other.columns}
    cells[column] = [owner.get(right_keys[j]) for j in keep]
    linked = LinkedExport(other.path, other.kind, list(other.columns) + [column], cells,
                          [other.lines[j] for j in keep], list(other.rejected), list(other.warnings),
                          {**other.header_names, column: column}, other.delimiter, other.encoding,
                          parent_path=main.path, parent_column=column, main_rows_read=other.rows_read,
                          rows_unmatched=len(unmatched))
    columns = {}
    for name, col in decoded[other.path].items():
        columns[name] = DecodedColumn(name, col.format, [col.values[j] for j in keep], col.quarantined,
                                      col.format_counts, col.separator, col.ambiguity, col.forced, col.rejoined,
                                      col.join_separator,
                                      None if col.layout is None else [col.layout[j] for j in keep])
    columns[column] = DecodedColumn(column, Format.TEXT, cells[column])
    result.exports[result.exports.index(other)] = linked
    result.decoded[other.path] = columns
    right_set = {k for k in right_keys if k is not None}
    left_only = sorted(set(owner) - right_set)
    right_only = sorted(right_set - set(owner))
    if options.how == "inner":
        main_index = {line: i for i, line in enumerate(main.lines)}
        result.inner_unmatched.update({main_index[owner[k]]: f"no row in {other.name} (inner join)"
                                       for k in left_only})
    result.joins.append({"left": main.path, "right": other.path, "on": [[main_key, right_col]],
                         "how": options.how, "cardinality": options.cardinality,
                         "left_only": len(left_only), "right_only": len(right_only),
                         "right_duplicates_set_aside": 0,
                         "left_only_examples": left_only[:EXAMPLES], "right_only_examples": right_only[:EXAMPLES],
                         "columns": {column: column}})


def _cells_json(export: Export, j: int) -> str:
    cells = {}
    for c in export.columns:
        v = export.cells[c][j]
        cells[c] = v if v is None or isinstance(v, str) else json.dumps(v, ensure_ascii=False)
    return json.dumps(cells, ensure_ascii=False)
