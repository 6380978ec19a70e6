"""Progress of a run, phase by phase, on a terminal (tqdm); nothing when not a terminal or with ``--quiet``.

Each pass says when it starts and, where it can count, how far it is: ``reading`` (per file), ``decoding``
(per column), ``sharing`` and ``late columns`` (the passes over every record, sharing.py and partition.py),
``building`` (records, with the share of the file read), ``writing`` (per table, PostgreSQL), ``indexing``
(per index and view), ``checking`` (SQLite's checks and the lossless proof) and ``outputs`` (Parquet,
manifest, report, dictionary). A finished phase stays on its line with its time, so a long run shows where the
time went.

The Python API's ``progress`` may also be a plain callable ``progress(records done, characters read)``,
called during the building phase only (``Phases.of``).
"""

from __future__ import annotations

import os
import sys
from contextlib import contextmanager

from tqdm import tqdm

__all__ = ["Phases", "QUIET"]


class _Step:
    """One phase's counter: ``update(n)`` adds; ``to(records, characters)`` sets (the building phase, whose
    bar counts characters of the input read when ``by_characters``, else records)."""

    def __init__(self, bar=None, callback=None, by_characters: bool = False):
        self.bar, self.callback, self.by_characters = bar, callback, by_characters

    def update(self, n: int = 1) -> None:
        if self.bar is not None:
            self.bar.update(n)

    def to(self, records: int, characters: int = 0) -> None:
        if self.callback is not None:
            self.callback(records, characters)
        if self.bar is not None:
            done, total = (characters if self.by_characters else records), self.bar.total
            self.bar.n = min(done, total) if total else done
            if self.by_characters:
                self.bar.set_postfix_str(f"{records:,} records", refresh=False)
            self.bar.refresh()


class Phases:
    """The phases of one run, shown on ``stream`` (stderr) when it is a terminal or ``enabled`` is true."""

    def __init__(self, paths=(), stream=None, enabled: bool | None = None, callback=None):
        self.stream = stream or sys.stderr
        isatty = getattr(self.stream, "isatty", None)
        self.enabled = bool(isatty and isatty()) if enabled is None else enabled
        self.callback = callback
        self.size = sum(os.path.getsize(p) for p in ([paths] if isinstance(paths, str) else paths)
                        if os.path.isfile(p))

    @classmethod
    def of(cls, progress, paths=()) -> "Phases":
        """The phases of a run from the Python API's ``progress``: None or False (nothing shown), True (shown
        on stderr), a callable (called with records done and characters read while building) or ``Phases``."""
        if isinstance(progress, Phases):
            return progress
        if progress is None or progress is False:
            return QUIET
        if progress is True:
            return cls(paths, enabled=True)
        if callable(progress):
            return cls(paths, enabled=False, callback=progress)
        from .model.errors import UsageError
        raise UsageError(f"progress={progress!r}: expected True, False, None or a callable (records, characters)")

    @contextmanager
    def phase(self, name: str, total: int | None = None, unit: str = "", scale: bool = False,
              by_characters: bool = False):
        """A phase shown from start to end as one line (a bar when ``total`` is known); yields its counter."""
        if not self.enabled:
            yield _Step(None, self.callback, by_characters)
            return
        bar = tqdm(total=total, desc=f"{name:<12}", unit=unit or "it", unit_scale=scale, file=self.stream,
                   leave=True, mininterval=0.5, dynamic_ncols=True,
                   bar_format=None if total else "{desc}{n_fmt} {unit} [{elapsed}{postfix}]" if unit
                   else "{desc}[{elapsed}]")
        try:
            yield _Step(bar, self.callback, by_characters)
        finally:
            bar.close()

    def say(self, text: str) -> None:
        """One line between the phases' bars (a build made again, ``pipeline._build``), when shown at all."""
        if self.enabled:
            tqdm.write(text, file=self.stream)

    def building(self, records: int | None = None):
        """The building phase: over ``records`` when the inputs were read whole, else over the characters of
        the input file read (its share of the file)."""
        if records is not None:
            return self.phase("building", total=records, unit="records")
        return self.phase("building", total=self.size or None, unit="B", scale=True, by_characters=True)

    def counting(self, name: str, partitions):
        """``partitions`` (``columns -> (export, decoded)`` pairs) with its records counted in phase ``name``,
        shown only when something reads them."""
        def counted(columns=None):
            with self.phase(name, unit="records") as step:
                for export, decoded in partitions(columns):
                    step.update(export.number_of_records)
                    yield export, decoded
        return counted


QUIET = Phases(enabled=False)
