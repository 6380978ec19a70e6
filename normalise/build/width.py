"""A table wider than the database allows is refused before anything is written (it would fail half-way)."""

from __future__ import annotations

from ..model.errors import NormaliseError
from ..model.plan import Plan


class TooManyColumns(NormaliseError):
    """A planned table has more columns than the database allows in one table."""


def _max_columns() -> int:
    import sqlite3
    try:
        return sqlite3.connect(":memory:").getlimit(sqlite3.SQLITE_LIMIT_COLUMN)
    except (AttributeError, sqlite3.Error):  # pragma: no cover - before Python 3.11
        return 2000  # SQLITE_MAX_COLUMN's default (sqlite.org/limits.html)


def check_width(plan: Plan, limit: int | None = None, backend: str = "SQLite") -> None:
    """Refuse, before anything is written, a table wider than the database allows (it would fail half-way).

    Record tables are split in the plan (``schema.split_wide_records``); what can still be too wide is a nested
    table (a single object with thousands of keys) or a record with as many foreign keys. ``limit``: the
    backend's columns per table (default: this SQLite's).
    """
    if limit is None and max((len(t.columns) for t in plan.tables), default=0) <= 999:  # below any SQLite build's
        return
    limit = _max_columns() if limit is None else limit
    for t in plan.tables:
        if len(t.columns) > limit:
            where = ", ".join(f"{s['file']}" + (f" column {s['column']}" if s.get("column") else "")
                              for s in t.sources) or t.name
            raise TooManyColumns(
                f"{where}: table {t.name!r} ({t.role}) would have {len(t.columns):,} columns, more than the "
                f"{limit:,} {backend} allows in one table; nothing was written. Record tables are split into 1:1 "
                f"tables, nested ones are not: keep the wide nested column as text (--decode COLUMN=text), or "
                f"split the export's columns into files that share the key column (they are joined by key)")
