"""SQLite, the embedded default: written to a temporary file beside the destination and moved into place only when
complete, so a failed run leaves the destination as it was.

Every connection the engine opens has ``PRAGMA foreign_keys=ON`` except the loading one: every foreign key is
checked at once with ``PRAGMA foreign_key_check`` before the file is moved into place (the same proof, without a
lookup per inserted row).
"""

from __future__ import annotations

import os
from pathlib import Path

import sqlalchemy as sa
from sqlalchemy import event

from ..model.escapes import printable
from ..model.names import quote_name as _quote
from ..model.plan import META_ROLES, Plan
from ..model.views import view_sql
from ..progress import QUIET
from .ddl import metadata_for
from .destinations import DestinationExists, DestinationLocked


def remove_stale_partials(destination: str) -> list[str]:
    """Remove temporary files that killed runs left beside the destination (their process is gone)."""
    import glob

    removed = []
    for path in glob.glob(glob.escape(destination) + ".partial-*"):
        pid = path.rsplit("-", 1)[-1]
        if not pid.isdigit():
            continue
        try:
            os.kill(int(pid), 0)  # signal 0: is that process still there?
            continue
        except ProcessLookupError:
            pass
        except PermissionError:  # alive, another user's
            continue
        try:
            os.remove(path)
            removed.append(path)
        except OSError:
            pass
    return removed


def refuse_if_locked(destination: str, shown: str | None = None) -> None:
    """Refuse to replace a SQLite database another connection is writing to (it holds a write lock).

    A program still writing to the old file would otherwise keep writing to a file no longer at that path.
    """
    import sqlite3

    if not os.path.exists(destination):
        return
    try:
        con = sqlite3.connect(destination, timeout=0)
    except sqlite3.Error:
        return
    try:
        con.execute("BEGIN IMMEDIATE")  # takes the write lock, or fails at once if another holds it
        con.rollback()
    except sqlite3.OperationalError as exc:
        if "locked" in str(exc) or "busy" in str(exc):
            raise DestinationLocked(f"{shown or destination} is locked by another program writing to it; "
                                    "nothing was replaced: try again when it is done") from None
    except sqlite3.DatabaseError:
        pass  # not a SQLite database: nothing can be writing to it through SQLite
    finally:
        con.close()


def _foreign_keys_on(dbapi_connection, _record) -> None:
    cursor = dbapi_connection.cursor()
    cursor.execute("PRAGMA foreign_keys=ON")
    cursor.close()


def _loading_pragmas(dbapi_connection, _record) -> None:
    cursor = dbapi_connection.cursor()
    # foreign_keys=OFF: a per-row parent lookup costs a third of the inserts; SqliteWriter.finish
    # runs foreign_key_check over the whole file instead, and a violation never reaches the destination.
    for pragma in ("journal_mode=OFF", "synchronous=OFF", "cache_size=-65536", "foreign_keys=OFF"):
        cursor.execute(f"PRAGMA {pragma}")
    cursor.close()


def sqlite_engine(path: str) -> sa.Engine:
    engine = sa.create_engine(f"sqlite:///{path}")
    event.listen(engine, "connect", _foreign_keys_on)
    return engine


class SqliteWriter:
    """A SQLite database written in one transaction into a temporary file, moved into place when complete.

    ``insert`` may be called many times per table, in any order; every foreign key
    is checked once, with ``PRAGMA foreign_key_check`` before the file is moved
    into place, so a violation writes nothing. Journaling and syncing are off while loading: a
    failed load is thrown away whole, never repaired, and the finished file is
    synced once before it is moved into place.
    """

    def __init__(self, plan: Plan, order: list[str], destination: str, replace: bool = False,
                 append: bool = False, verify_level: str = "quick"):
        destination = os.fspath(destination)
        self.btree_check = BTREE_CHECKS[verify_level]
        if append and not os.path.exists(destination):
            raise DestinationExists(f"{destination} does not exist; --append adds to an existing database")
        if os.path.exists(destination) and not replace and not append:
            raise DestinationExists(f"{destination} exists; use --replace to overwrite it, or --append to add to it")
        self.append = append
        # through a symlink the file it points to is replaced, and the link stays: the temporary file goes
        # beside the target (the same filesystem, so the move is one rename)
        self.shown, destination = destination, os.path.realpath(destination)
        Path(destination).parent.mkdir(parents=True, exist_ok=True)
        self.plan, self.order, self.destination = plan, order, destination
        self.temporary = f"{destination}.partial-{os.getpid()}"
        remove_stale_partials(destination)
        if os.path.exists(self.temporary):
            os.remove(self.temporary)
        if append:  # work on a copy; the original stays as it is until the copy is complete
            import shutil

            shutil.copyfile(destination, self.temporary)
        self.engine = sqlite_engine(self.temporary)
        event.listen(self.engine, "connect", _loading_pragmas)
        self.md = metadata_for(plan)
        # The DDL is SQLAlchemy's; the transaction is driven by hand so that BEGIN,
        # the checks and COMMIT are exactly where they must be.
        self.raw = self.engine.raw_connection()
        self.dialect = self.engine.dialect
        try:
            self.db = self.raw.driver_connection
            self.db.isolation_level = None
            self.cursor = self.db.cursor()
            self.cursor.execute("BEGIN")
            self.statements = {}
            self.row_counts: dict[str, int] = {}
            for name in order:  # indexes come after the rows: building them once is faster
                table = self.md.tables[name]
                if not append:
                    self.cursor.execute(str(sa.schema.CreateTable(table).compile(dialect=self.dialect)))
                quoted = ", ".join(_quote(c.name) for c in table.columns)
                self.statements[name] = (f"INSERT INTO {_quote(name)} ({quoted}) "
                                         f"VALUES ({', '.join('?' * len(table.columns))})")
        except BaseException:
            self.abort()
            raise

    def insert(self, name: str, rows: list[tuple]) -> None:
        """Add rows to a table.

        In this thread: a writer thread was measured slower, not faster, because
        the sqlite3 module releases and retakes the GIL around every row, so a
        busy main thread starves it.
        """
        if not rows:
            return
        self.row_counts[name] = self.row_counts.get(name, 0) + len(rows)
        if self.plan.table(name).role in META_ROLES:
            # The bookkeeping tables quote raw input (excerpts, rejected rows), which may hold bytes
            # the file's encoding could not read; they are written as \xNN escapes there.
            rows = [tuple(map(printable, row)) for row in rows]
        self.cursor.executemany(self.statements[name], rows)

    def update(self, name: str, rows: list[tuple]) -> None:
        """Rewrite rows (whole, matched on their first column, the primary key)."""
        if rows:
            table = self.md.tables[name]
            key, *rest = [c.name for c in table.columns]
            sets = ", ".join(f"{_quote(c)} = ?" for c in rest)
            self.cursor.executemany(f"UPDATE {_quote(name)} SET {sets} WHERE {_quote(key)} = ?",
                                    [(*row[1:], row[0]) for row in rows])

    def set_column(self, name: str, column: str, pairs: list[tuple]) -> None:
        """Set one column of rows written before: ``pairs`` of (value, primary key)."""
        if pairs:
            key = self.plan.table(name).primary_key[0]
            self.cursor.executemany(f"UPDATE {_quote(name)} SET {_quote(column)} = ? WHERE {_quote(key)} = ?",
                                    pairs)

    def finish(self, verify=None, move: bool = True, phases=None) -> dict:
        """Indexes, views, commit into the temporary file, SQLite's own checks, and the move into place.

        ``verify(path)``, when given, runs on the committed temporary file before the move (the lossless
        proof); what it returns is in the result under ``"proof"``, and what it raises stops the move.
        With ``move=False`` the checked file stays at ``self.temporary`` until ``move_into_place`` (or
        ``abort``): the side outputs are written from it first (``outputs.StagedOutputs``).
        """
        phases = phases or QUIET
        try:
            indexes = [index for name in (self.order if not self.append else ())  # appended: they are there
                       # Table.indexes is a set: sorted, the same input gives the same file (as PostgreSQL's are)
                       for index in sorted(self.md.tables[name].indexes, key=lambda i: str(i.name))]
            views = self.plan.views if not self.append else []
            with phases.phase("indexing", total=len(indexes) + len(views) or None, unit="indexes and views") as step:
                for index in indexes:
                    self.cursor.execute(str(sa.schema.CreateIndex(index).compile(dialect=self.dialect)))
                    step.update()
                for view in views:
                    self.cursor.execute(f"CREATE VIEW {_quote(view.name)} AS {view_sql(view, self.plan, 'sqlite')}")
                    step.update()
                self.cursor.execute("COMMIT")  # into the temporary file, moved into place only if it passes
            self.raw.close()
            self.engine.dispose()
            with phases.phase("checking", total=2 if verify is not None else 1, unit="checks") as step:
                violations, integrity = _checks(self.temporary, self.btree_check)
                step.update()
                if violations:
                    from ..check import IntegrityError
                    first = ", ".join(f"{v[0]} row {v[1]} -> {v[2]}" for v in violations[:5])
                    raise IntegrityError(f"{len(violations)} foreign-key values name no row ({first}); "
                                         "nothing was written")
                checks = {"foreign_key_violations": len(violations), "integrity_check": integrity[0][0],
                          "btree_check": self.btree_check}
                if verify is not None:
                    checks["proof"] = verify(self.temporary)  # the lossless proof (prove.py)
                    step.update()
            if move:
                self.ready_to_move()
                self.move_into_place()
        except BaseException:
            self.abort()
            raise
        return checks

    def ready_to_move(self) -> None:
        """The committed file synced to disk, and no other program writing to the old one (else refused)."""
        with open(self.temporary, "rb") as f:
            os.fsync(f.fileno())
        refuse_if_locked(self.destination, self.shown)

    def move_into_place(self) -> None:
        """rename(2): the destination is the old file or the new one, never a mix (POSIX, one filesystem)."""
        try:
            os.replace(self.temporary, self.destination)
        except BaseException:
            self.abort()
            raise

    def abort(self) -> None:
        try:
            self.raw.close()
        except Exception:  # pragma: no cover - closing a broken connection
            pass
        self.engine.dispose()
        if os.path.exists(self.temporary):
            os.remove(self.temporary)


# What --verify runs on the file SQLite has just written, beside PRAGMA foreign_key_check (sqlite.org/pragma.html):
# quick_check verifies the b-trees and the records in them, as integrity_check does, but not that every index
# holds exactly the rows of its table nor UNIQUE constraints; measured on 1.5 million bridge rows, 0.4-0.5 s against
# 6-8 s (docs/performance.md). The keys it leaves out are the tool's own, proved by the build's key sets, by
# foreign_key_check and by the lossless proof reading every row back.
BTREE_CHECKS = {"quick": "quick_check", "full": "integrity_check"}


def _checks(path: str, btree_check: str = "integrity_check") -> tuple[list, list]:
    """``PRAGMA foreign_key_check`` and ``PRAGMA quick_check`` or ``integrity_check`` of a committed file, side
    by side.

    Each runs on its own connection in its own thread; SQLite releases the GIL
    while it works, so on two cores they take the time of the longer one.
    """
    import sqlite3
    from concurrent.futures import ThreadPoolExecutor

    def run(pragma: str) -> list:
        con = sqlite3.connect(path)
        try:
            con.execute("PRAGMA cache_size=-65536")
            return con.execute(f"PRAGMA {pragma}").fetchall()
        finally:
            con.close()

    with ThreadPoolExecutor(2, thread_name_prefix="normalise-check") as pool:
        found = pool.submit(run, "foreign_key_check"), pool.submit(run, btree_check)
        return found[0].result(), found[1].result()


def write_sqlite(plan: Plan, rows: dict[str, list[tuple]], order: list[str], destination: str,
                 replace: bool = False, append: bool = False, verify=None, staged=None,
                 verify_level: str = "quick") -> dict:
    """Write a complete SQLite database at ``destination``; returns SQLite's own integrity checks.

    With ``staged`` (an ``outputs.StagedOutputs``) the checked file is not moved: ``staged`` moves it last,
    after the side outputs, and until then the database is at ``staged.writer.temporary``.
    """
    writer = SqliteWriter(plan, order, destination, replace, append=append, verify_level=verify_level)
    try:
        for name in order:
            writer.insert(name, rows[name])
    except BaseException:
        writer.abort()
        raise
    checks = writer.finish(verify, move=staged is None)
    if staged is not None:
        staged.database(writer)
    return checks
