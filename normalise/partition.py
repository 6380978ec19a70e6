"""The records of a build's inputs, read, decoded and joined, handed to the build in partitions.

A partition is an ``Export`` and its decoded columns holding at most ``chunk_rows`` records of one input, in
file order; with no ``chunk_rows`` each input is one partition. The build takes every partition the same way
(``build.build_partitions``) and gives the same rows for any partition size (DEVELOPERS.md, "One build
path"), so reading the inputs whole is only the case of one partition.

What is decided before the build rests on the first ``sample`` records of each input, however the input is
read: each column's format (``decode``'s ``sample``: the rest of the file is read as those records decided),
the option names, and the plan inferred or read from a file (``pipeline``). A column with no value in those
records is decided on the ``sample`` records from its first value instead, wherever that comes, and those
records join the sample the plan is made from (``Inputs.late`` says so), so a column whose values start late
is modelled as one whose values start early.

One CSV or TSV file is read in chunks, so memory stays bounded whatever its size (``_Streamed``). Several files
and JSON Lines files are read whole (``_Whole``): the join matches keys across whole files (duplicates set aside
by first or last, the keys on one side only counted both ways) and a JSON Lines file's columns can first appear
on any line, so neither can be read a part at a time; their records then go to the build in partitions of the
same size all the same.
"""

from __future__ import annotations

import gc
from contextlib import nullcontext
from dataclasses import dataclass, field, fields, replace
from pathlib import Path

from .decode import decisions, decode, first_value, late_decision
from .join import Joined, join
from .model.settings import Settings
from .options_check import check_option_names
from .progress import QUIET
from .read import iter_chunks, read

JSON_LINES = (".jsonl", ".ndjson", ".json")


@dataclass
class Inputs:
    """One build's inputs: the first records of each (what the model is made from) and every record.

    ``sample``: ``(exports, decoded)`` of the first records of each export, after the join; ``joined``: the
    join's set-aside and unmatched rows and its counts (nothing joined: empty).
    """

    sample: tuple
    joined: Joined
    _blocks: object  # (columns) -> iterator of (export, decoded): every record, in order, in blocks
    late: list = field(default_factory=list)  # columns with no value in the first records (``_late``)
    records: int | None = None  # rows of every input when read whole (the building phase's total); else None
    decoding: tuple | None = None  # (limits, formats, decisions): how a partition read but not decoded is decoded

    def partitions(self, size: int | None, columns: set | None = None, raw: bool = False):
        """Every record in partitions of at most ``size`` records, in order: ``(export, decoded)``.

        ``columns``: decode only those (when the input is read again for them); default all. ``raw``: a
        partition read in chunks may come undecoded (decoded None), for whoever builds it to decode
        (``build.parallel``, with ``decoding``); one read whole comes decoded.
        """
        for export, decoded in self._blocks(columns, raw):
            yield from split(export, decoded, size)


def open_inputs(paths: list[str], *, sample: int, formats: dict | None = None,
                encoding: str | None = None, delimiter: str | None = None, header: bool = True,
                settings: Settings = Settings(), named: Settings | None = None, chunk_rows: int | None = None,
                streamed: bool = True, phases=QUIET, also: dict | None = None) -> Inputs:
    """Read and decode the inputs (and join them), and check the options' names on their first records.

    One CSV or TSV file is read ``chunk_rows`` records at a time unless ``streamed`` is false; anything else,
    or with ``streamed`` false, is read whole. ``named``: the settings whose names of files, columns and fields
    are checked against the inputs (default ``settings``; a plan file's own are checked with their lines).
    ``also`` (input path -> line numbers): records past the first ones that join the sample all the same, those
    a build found the plan made without them could not hold (``pipeline``, "widening").
    """
    also = {path: set(lines) for path, lines in (also or {}).items() if lines}
    named = settings if named is None else named
    limits = settings.limits  # the cell bounds are settings of the run like the others
    if streamed and len(paths) == 1 and Path(paths[0]).suffix.lower() not in JSON_LINES:
        return _Streamed(paths[0], sample=sample, limits=limits, formats=formats, encoding=encoding,
                         delimiter=delimiter, header=header, settings=settings,
                         named=named, chunk_rows=chunk_rows, phases=phases, also=also.get(paths[0], set())).inputs
    return _Whole(paths, sample=sample, limits=limits, formats=formats, encoding=encoding, delimiter=delimiter,
                  header=header, settings=settings, named=named, phases=phases, also=also).inputs


class _Whole:
    """Inputs read whole, decoded and joined in memory (several files, JSON Lines)."""

    def __init__(self, paths, *, sample, limits, formats, encoding, delimiter, header, settings, named,
                 phases=QUIET, also=None):
        exports = []
        with phases.phase("reading", total=len(paths), unit="files") as step:
            for p in paths:
                exports.append(read(p, encoding=encoding, delimiter=delimiter, header=header))
                step.update()
        with phases.phase("decoding", total=sum(len(e.columns) for e in exports), unit="columns") as step:
            decoded = {e.path: decode(e, limits, formats, sample=sample, done=step.update) for e in exports}
        check_option_names(*head(exports, decoded, sample), named, formats)
        with phases.phase("joining") if len(exports) > 1 else nullcontext():
            self.joined = join(exports, decoded, settings)
        exports, decoded = head(self.joined.exports, self.joined.decoded, sample)
        late = []
        for i, export in enumerate(self.joined.exports):
            windows = late_windows(export, sample)
            wanted = (also or {}).get(export.path)
            extra = [r for r, line in enumerate(export.lines) if r >= sample and line in wanted] if wanted else []
            if windows or extra:  # the records from each such column's first value join the sample, and ``also``
                rows = sorted(set(window_rows(windows, sample, export.number_of_records)) | set(extra))
                whole = self.joined.decoded[export.path]
                exports[i] = concat([exports[i], _take(export, rows)])
                decoded[export.path] = {c: replace(col, values=col.values[:sample] + [whole[c].values[r] for r in rows])
                                        for c, col in decoded[export.path].items()}
                n = export.number_of_records
                late += _late(export, whole, {c: (j, min(sample, n - j)) for c, j in windows.items()}, sample)
        self.inputs = Inputs((exports, decoded), self.joined, self.blocks, late,
                             sum(e.number_of_records + len(e.rejected) for e in self.joined.exports))

    def blocks(self, columns=None, raw=False):
        for export in self.joined.exports:
            yield export, self.joined.decoded[export.path]


class _Streamed:
    """One CSV or TSV file read in chunks: its first records decide its formats and its plan, then the rest
    is read and decoded a chunk at a time; reading it again (``columns``) reads the file again."""

    def __init__(self, path, *, sample, limits, formats, encoding, delimiter, header, settings, named,
                 chunk_rows, phases=QUIET, also=frozenset()):
        self.path, self.limits, self.formats, self.chunk_rows = path, limits, formats, chunk_rows
        self.reading = dict(encoding=encoding, delimiter=delimiter, header=header)
        self.phases = phases
        chunks = iter_chunks(path, chunk_rows, **self.reading)
        first, taken = [], 0
        with phases.phase("reading", unit="records") as step:  # the first records, which the model is made from
            for chunk in chunks:
                first.append(chunk)
                taken += chunk.number_of_records
                step.update(chunk.number_of_records)
                if taken >= sample:
                    break
        start = concat(first)
        del first
        ended = chunk_rows is None or taken < sample or _ends_file(start, chunk_rows)
        empty = [c for c in start.columns if first_value(start.cells[c][:sample]) is None]
        # a column with no value in the first records: the records from its first value decide its format
        # and join the sample; read again from the file when the first chunks may not hold them all
        windows, later = ({}, None) if not empty else self._windows(start, empty, sample, ended)
        forced = formats or {}
        late = {c: late_decision(c, later.cells[c], later.lines, j, size, path, limits, later.invalid_bytes)
                for c, (j, size) in windows.items() if not forced.get(c)}
        with phases.phase("decoding", total=len(start.columns), unit="columns") as step:
            start_decoded = decode(start, limits, formats, sample=sample, decided=late, done=step.update)
        self.decided = decisions(start_decoded)  # later chunks are read as the first records decided
        exports, decoded = head([start], {start.path: start_decoded}, sample)
        found = []
        if windows:
            later_decoded = decode(later, limits, formats, decided=self.decided)
            exports = [concat([exports[0], later])]
            decoded = {path: {c: replace(col, values=col.values + later_decoded[c].values)
                              for c, col in decoded[path].items()}}
            found = _late(later, later_decoded, windows, sample)
        wanted = set(also) - set(exports[0].lines)
        taken = self._lines(wanted) if wanted else None
        if taken is not None:  # records a build found the plan could not hold join the sample (``also``)
            taken_decoded = decode(taken, limits, formats, decided=self.decided)
            exports = [concat([exports[0], taken])]
            decoded = {path: {c: replace(col, values=col.values + taken_decoded[c].values)
                              for c, col in decoded[path].items()}}
        check_option_names(exports, decoded, named, formats)  # a --join too: there is no other file
        self.pending = (start, start_decoded, chunks)
        self.inputs = Inputs((exports, decoded), Joined([], {}), self.blocks, found,
                             decoding=(limits, formats, self.decided))
        gc.collect()  # once, while the heap is small: format detection leaves exceptions (and the frames they hold)

    def _windows(self, start, empty: list[str], sample: int, ended: bool):
        """The records of each ``empty`` column's ``sample`` records from its first value past the first
        ``sample`` (from ``start`` when it holds them all, else read again from the file), in file order, as
        ``({column: (position of its first value in them, records in its window)}, records)``."""
        inside = late_windows(start, sample, empty)
        n = start.number_of_records
        if ended or len(inside) == len(empty) and all(j + sample <= n for j in inside.values()):
            rows = window_rows(inside, sample, n)
            at = {r: k for k, r in enumerate(rows)}
            return {c: (at[j], min(j + sample, n) - j) for c, j in inside.items()}, _take(start, rows)
        pending, spans, pieces, index, offset = set(empty), {}, [], [], 0
        with self.phases.phase("late columns", unit="records") as step:  # read again for their first values
            for chunk in iter_chunks(self.path, self.chunk_rows or sample, **self.reading):
                for c in sorted(pending):
                    j = first_value(chunk.cells[c], max(0, sample - offset))
                    if j is not None:
                        pending.discard(c)
                        spans[c] = (offset + j, offset + j + sample)
                keep = [i for i in range(chunk.number_of_records)
                        if any(a <= offset + i < b for a, b in spans.values())]
                if keep:
                    pieces.append(_take(chunk, keep))
                    index += [offset + i for i in keep]
                offset += chunk.number_of_records
                step.update(chunk.number_of_records)
                if not pending and all(b <= offset for _, b in spans.values()):
                    break
        if not pieces:
            return {}, None
        at = {r: k for k, r in enumerate(index)}
        return {c: (at[a], min(b, offset) - a) for c, (a, b) in spans.items()}, concat(pieces)

    def _lines(self, wanted: set):
        """The file's records at the line numbers ``wanted``, read again from the file, in file order."""
        pieces, last = [], max(wanted)
        with self.phases.phase("widening", unit="records") as step:
            for chunk in iter_chunks(self.path, self.chunk_rows, **self.reading):
                keep = [i for i, line in enumerate(chunk.lines) if line in wanted]
                if keep:
                    pieces.append(_take(chunk, keep))
                step.update(chunk.number_of_records)
                if chunk.lines and chunk.lines[-1] >= last:
                    break
        return concat(pieces) if pieces else None

    def blocks(self, columns=None, raw=False):
        if columns is None and self.pending is not None:  # the first reading, taken up where the sample stopped
            start, start_decoded, chunks = self.pending
            self.pending = None
            yield start, start_decoded
            del start, start_decoded
        else:
            chunks = iter_chunks(self.path, self.chunk_rows, **self.reading)
        for chunk in chunks:
            if columns is not None:
                chunk = replace(chunk, columns=[c for c in chunk.columns if c in columns])
            yield chunk, None if raw else decode(chunk, self.limits, self.formats, decided=self.decided)


def split(export, decoded: dict, size: int | None):
    """``(export, decoded)`` in partitions of at most ``size`` records (one when ``size`` is None).

    Counts and lists that belong to the block as a whole (its rejected rows and warnings, the cells its
    decoding quarantined, rows read and unmatched by a join) go with its first partition; an export without
    records is one partition still, for its rejected rows and its counts. The export itself is never
    changed (``append.offset_record_keys`` sets the keys of a partition).
    """
    n = export.number_of_records
    size = size or n or 1
    for start in range(0, max(n, 1), size):
        yield _partition(export, decoded, start, min(start + size, n))


def _partition(export, decoded: dict, a: int, b: int) -> tuple:
    first, whole = a == 0, a == 0 and b == export.number_of_records

    def rows(values: list) -> list:
        return values if whole else values[a:b]

    changes = {"cells": {c: rows(v) for c, v in export.cells.items()}, "lines": rows(export.lines)}
    if not first:
        changes.update(rejected=[], warnings=[])
    declared = {f.name for f in fields(export)}
    if export.main_rows is not None:  # a join's combined export: rows from the main file come first
        changes["main_rows"] = max(0, min(export.main_rows, b) - a)
    if not first:  # counted once, with the first partition
        changes["rows_unmatched"] = 0
        if export.main_rows_read is not None:
            changes["main_rows_read"] = 0
    if "origin_lines" in declared:
        changes["origin_lines"] = {c: rows(v) for c, v in export.origin_lines.items()}
    part = replace(export, **changes)
    keys = export.record_keys  # of a joined export, set on others by --append
    if keys is not None:
        part.record_keys = rows(keys)
    inner = export.inner_unmatched
    if inner is not None:
        part.inner_unmatched = {i - a: why for i, why in inner.items() if a <= i < b}
    if decoded is None:  # read, not yet decoded (``Inputs.partitions``' raw)
        return part, None
    columns = {}
    for name, col in decoded.items():
        impure = col.impure if whole or col.impure is None else {i - a for i in col.impure if a <= i < b}
        columns[name] = replace(col, values=rows(col.values), layout=None if col.layout is None else rows(col.layout),
                                impure=impure, quarantined=col.quarantined if first else [],
                                rejoined=col.rejoined if first else 0, ambiguity=col.ambiguity if first else [])
    return part, columns


def late_windows(export, sample: int, columns=None) -> dict[str, int]:
    """Each column (of ``columns``, default every one) with no value in the first ``sample`` records of
    ``export``, and the index of its first value after them (``decode.first_value``); a column with no value
    at all is not there."""
    out = {}
    for c in columns if columns is not None else export.columns:
        cells = export.cells[c]
        if first_value(cells[:sample]) is None:
            j = first_value(cells, sample)
            if j is not None:
                out[c] = j
    return out


def window_rows(windows: dict[str, int], sample: int, n: int) -> list[int]:
    """The records of every window of ``sample`` records from ``windows``' first values, in order."""
    rows = set()
    for j in windows.values():
        rows.update(range(j, min(j + sample, n)))
    return sorted(rows)


def _ends_file(export, chunk_rows: int) -> bool:
    """Whether the chunks read so far end the file: their records are not a whole number of chunks."""
    return export.number_of_records % chunk_rows != 0


def _late(export, decoded: dict, windows: dict[str, tuple[int, int]], sample: int) -> list[dict]:
    """What the run says of columns with no value in the first records (the manifest's ``widened``):
    ``windows`` holds each one's first value's position in ``export`` and the records from it that joined the
    sample."""
    return [{"column": c, "file": export.path, "first_value_line": export.lines[j], "format": decoded[c].format,
             "records": size, "first_records": sample} for c, (j, size) in sorted(windows.items())]


def _take(export, rows: list[int]):
    """The export's records at ``rows`` (in that order), without its rejected rows and warnings."""
    return replace(export, cells={c: [v[r] for r in rows] for c, v in export.cells.items()},
                   lines=[export.lines[r] for r in rows], rejected=[], warnings=[])


def head(exports: list, decoded: dict, n: int) -> tuple[list, dict]:
    """The first ``n`` records of each export and of its decoded columns."""
    out_exports, out_decoded = [], {}
    for export in exports:
        if export.number_of_records <= n:
            out_exports.append(export)
            out_decoded[export.path] = decoded[export.path]
            continue
        out_exports.append(replace(export, cells={c: v[:n] for c, v in export.cells.items()},
                                   lines=export.lines[:n]))
        out_decoded[export.path] = {name: replace(col, values=col.values[:n])
                                    for name, col in decoded[export.path].items()}
    return out_exports, out_decoded


def concat(chunks: list):
    """One Export from consecutive chunks of the same file."""
    if len(chunks) == 1:
        return chunks[0]
    first = chunks[0]
    return replace(first, cells={c: [v for ch in chunks for v in ch.cells[c]] for c in first.columns},
                   lines=[n for ch in chunks for n in ch.lines],
                   rejected=[r for ch in chunks for r in ch.rejected],
                   warnings=[w for ch in chunks for w in ch.warnings], chars_read=chunks[-1].chars_read,
                   invalid_bytes=chunks[-1].invalid_bytes)
