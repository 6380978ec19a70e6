"""The build over every partition of the input (``build_partitions``), in memory (``InMemory``, ``build``) or into
a writer, and the bookkeeping made from the plan (the name map, entity members, occurrence columns).
"""

from __future__ import annotations

from collections import Counter

from ..model.plan import Plan
from .bookkeeping import occurrence_columns
from .counts import Built
from .parallel import decode_partition
from .reduce import conflict, merge
from .references import set_column
from .rows import Builder


def build_partitions(plan: Plan, partitions, rows, extra: dict | None = None, state: dict | None = None,
                     progress=None, runner=None, decoding: tuple | None = None) -> Built:
    """Rows for every table of the plan, made a partition at a time and handed to ``rows`` as they are made.

    The one build path: the records come in partitions of any size (``partitions(columns)`` iterates every
    record, in order, as ``(export, decoded)``; with ``columns`` only those need decoding), and the rows are
    the same for any partition size. ``rows`` takes them (``insert``), gives back the occurrences of
    entities (``occurrences``, see ``Builder.finish``) and applies the rewrites ``finish`` asks for
    (``complete``): ``InMemory`` holds them, ``pipeline`` writes them to SQLite as they come. ``extra`` holds
    rows made by earlier passes (the join's set-aside and unmatched rows); ``state`` what an existing database
    holds (``--append``); ``progress(records and rows rejected so far, characters read)``.

    ``runner`` (``parallel.ProcessRunner``, ``parallel.DaskRunner``; not with ``state``): the partitions are
    built apart, each by a ``Builder`` of its own, and merged here in input order (``reduce``); a partition
    that cannot be merged (``reduce.conflict``) is built again here, so the rows are those of one
    ``Builder``. ``partitions(None, raw=True)`` may then give partitions not yet decoded (decoded None),
    which ``decoding`` decodes (``parallel.decode_partition``), where they are built.
    """
    builder = Builder(plan, extra, state)
    needed = builder.key_columns()
    if needed:  # duplicates = "last": the record that keeps each key is known before any is kept
        for export, columns in partitions(needed):
            builder.learn_last(export, columns)
    done = 0
    if runner is None:
        made = ((export, columns, None) for export, columns in partitions(None))
    else:
        made = runner.map(plan, builder.last, partitions(None, raw=True), decoding)
    apart, again = 0, Counter()  # partitions merged as built apart; built again here, and why
    for export, columns, alone in made:
        why = None if alone is None else conflict(builder, alone[1])
        if alone is not None and why is None:
            rows.insert(merge(builder, alone[1], alone[0]))
            apart += 1
        else:
            if why:
                again[why] += 1
            builder.add(export, columns if columns is not None else decode_partition(export, decoding))
            rows.insert(builder.take_rows())
        done += export.number_of_records + len(export.rejected)
        if progress:
            progress(done, export.chars_read)
    built = builder.finish(rows.occurrences)
    if runner is not None:
        built.partitions = {"built_by": runner.describe(), "merged": apart, "built_again": sum(again.values()),
                            "why_again": dict(sorted(again.items()))}
    rows.complete(built)
    return built


class InMemory:
    """The rows of a build held in memory (``build_partitions``'s ``rows``), whole once complete."""

    def __init__(self, plan: Plan):
        self.plan = plan
        self.rows: dict[str, list[tuple]] = {}

    def insert(self, made: dict[str, list[tuple]]) -> None:
        for name, rows in made.items():
            self.rows.setdefault(name, []).extend(rows)

    def occurrences(self, table: str, fk_column: str, sks: set) -> list[tuple]:
        at = occurrence_columns(self.plan, table, fk_column)
        return [tuple(None if j is None else r[j] for j in at) for r in self.rows.get(table, ()) if r[at[3]] in sks]

    def complete(self, built: Built) -> None:
        """``built.rows`` made whole: every row of the build, rewritten as ``finish`` asked."""
        self.insert(built.rows)
        built.rows = self.rows
        for table, changed in built.updates.items():
            chosen = {row[0]: row for row in changed}
            built.rows[table] = [chosen.get(row[0], row) for row in built.rows[table]]
        built.updates = {}
        for (table, column), pairs in built.column_updates.items():
            set_column(self.plan, built.rows, table, column, pairs)
        built.column_updates = {}


def build(plan: Plan, exports: list, decoded: dict, extra: dict | None = None, state: dict | None = None) -> Built:
    """Rows for every table of the plan, and the counts that reconcile them, all in memory (each export one
    partition).

    ``extra`` holds rows made by earlier passes (the join's set-aside and unmatched rows).
    """
    def partitions(columns=None, raw=False):
        for export in exports:
            yield export, decoded[export.path]

    return build_partitions(plan, partitions, InMemory(plan), extra, state)
