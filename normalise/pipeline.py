"""The passes in order: read -> decode -> infer -> plan -> build -> check -> write -> report.

There is one build path (``_build``): the inputs are read (``partition.open_inputs``), the plan is made from
their first ``SAMPLE_ROWS`` records, and the records go to the build a partition of ``chunk_rows`` at a time
(``build.build_partitions``), whose rows are written as they are made (SQLite) or held until the end
(PostgreSQL, written in one COPY per table). A build without ``chunk_rows`` is the case of one partition; any
partition size gives the same database.
"""

from __future__ import annotations

import dataclasses
import json
import os
import tempfile
from contextlib import nullcontext
from dataclasses import dataclass
from pathlib import Path
from typing import NamedTuple

from .build import InMemory, build_partitions, check_width, occurrence_columns, reference_values
from .check import check_plan, check_rows
from .decode import paused_gc
from .infer import infer_plan
from .infer.planfile import plan_from_doc, read_plan, settings_from_doc
from .infer.plantext import plan_to_toml
from .infer.sharing import widened
from .join import Joined
from .model.errors import NormaliseError, NotClean, speaks_to_callers
from .model.names import quote_name
from .model.plan import Plan, seal
from .model.schema import POSTGRESQL_MAX_COLUMNS
from .model.settings import JoinOptions, Limits, Options, Settings, settings_of
from .model.views import add_pick
from .option_values import check_values
from .outputs import check_paths, destination_lock, lock_path, staged_outputs, writing
from .partition import open_inputs
from .progress import QUIET, Phases
from .prove import LossDetected, loss_message, prove, sqlite_fetch
from .report.manifest import manifest
from .result import Built
from .write import (BTREE_CHECKS, DEFAULT_SCHEMA, SqliteWriter, destination, display_url, is_postgresql,
                    postgresql_run_lock, write_parquet, write_postgresql)

# The model is inferred from the first SAMPLE_ROWS records of each export, in
# memory and in chunks alike, so the database never depends on the chunk size.
SAMPLE_ROWS = 5000
# records per partition when partitions are built apart (--workers, --dask) and no chunk_rows is given
PARTITION_ROWS = 5000


def _open(paths: list[str], *, settings: Settings, formats: dict | None, encoding: str | None,
          delimiter: str | None, picks: list[str] | None, plan_path: str | None,
          header: bool, chunk_rows: int | None = None, streamed: bool = False, phases=QUIET,
          contradicted: list | None = None):
    """The inputs (``partition.Inputs``) and the plan made from their first records, or read from ``plan_path``
    and checked against them.

    ``contradicted``: what an earlier build of the same inputs found that the plan made from their first records
    could not hold (``build.counts.Audit.contradictions``); the records that show it join the sample, and the
    plan says so (``Plan.widened``).
    """
    also, links, texts = {}, set(settings.link_fields), {}
    for c in contradicted or ():
        if "dependency" in c:  # the identity does not determine the field: it stays on the link
            links.update((m, c["field"]) for m in c["members"])
        elif "text" in c:  # a text its column's type cannot hold: the type is decided with it
            texts.setdefault((c["file"], c["column"]), []).append(c["text"])
        else:  # a key the objects did not have: its record joins the sample
            also.setdefault(c["file"], set()).add(c["line"])
    if contradicted:
        settings = dataclasses.replace(settings, link_fields=tuple(sorted(links)), column_texts=tuple(
            (*where, tuple(found)) for where, found in sorted(texts.items())))
    doc = text = None
    named = settings  # what the options name is checked against the inputs; a plan file's own names, by planfile
    if plan_path:  # the plan's own settings (its join, natural keys, duplicates) decide, as they do for the build
        doc, text = read_plan(plan_path)
        settings = settings_from_doc(doc, settings)
    inputs = open_inputs(paths, sample=SAMPLE_ROWS, formats=formats, encoding=encoding,
                         delimiter=delimiter, header=header, settings=settings, named=named, chunk_rows=chunk_rows,
                         streamed=streamed, phases=phases, also=also)
    with phases.phase("planning"):
        plan = (plan_from_doc(doc, text, *inputs.sample, settings) if doc is not None
                else infer_plan(*inputs.sample, settings))
    if doc is None:
        # sharing between columns decided over every record, not only the sample (sharing.py)
        read_again = phases.counting("sharing", lambda columns: inputs.partitions(chunk_rows, columns))
        wider, found = widened(plan, settings, inputs.sample, read_again)
        if found:
            plan = infer_plan(*inputs.sample, wider)
        # columns whose values start late (partition.py), sharing, then what later records contradicted
        plan.widened = inputs.late + found + [
            {"contradicted": "dependency" if "dependency" in c else "key" if "key" in c else "type", **c}
            for c in contradicted or ()]
    for spec in picks or ():
        add_pick(plan, spec)
    return seal(plan), inputs  # made: every later pass reads it and none can set a field of it


class Prepared(NamedTuple):
    """What ``prepare`` hands back: the plan and the inputs it was made from, read whole."""

    plan: Plan
    exports: list  # model.export.Export of each input, after the join
    decoded: dict  # export's path -> {column: decode.DecodedColumn}
    joined: Joined  # the join's set-aside and unmatched rows and its counts


@speaks_to_callers
def prepare(paths: list[str], *, options: Options | None = None, limits: Limits | None = None,
            formats: dict | None = None, encoding: str | None = None, delimiter: str | None = None,
            join_options: JoinOptions | None = None, picks: list[str] | None = None,
            plan_path: str | None = None, header: bool = True) -> Prepared:
    """Read, decode, join and plan, all in memory: a ``Prepared`` (the plan, the exports, their decoded columns
    and the join's outcome).

    With ``plan_path`` the plan comes from that file, checked against the data.
    """
    settings = settings_of(options, join_options, limits)
    delimiter = check_values(encoding_name=encoding, delimiter_char=delimiter, limits=settings.limits,
                             settings=settings)
    contradicted: list[dict] = []
    while True:  # the plan a build would use: widened as a build widens it (``_build``), here in memory
        plan, inputs = _open(paths, settings=settings, formats=formats, encoding=encoding,
                             delimiter=delimiter, picks=picks, plan_path=plan_path,
                             header=header, contradicted=contradicted)
        joined = inputs.joined
        rounds = len({c["round"] for c in contradicted})
        if plan_path is not None or rounds >= MAX_WIDENINGS:
            break
        try:
            check_plan(plan)
        except NormaliseError:  # refused as the build refuses it, when it is built
            break
        extra = {"set_aside_rows": joined.set_aside, "unmatched_rows": joined.unmatched}
        built = build_partitions(plan, lambda columns=None: inputs.partitions(None, columns), InMemory(plan), extra)
        found = _new_contradictions(built.contradictions, _lines_of(inputs.sample), contradicted)
        if not found:
            break
        contradicted = contradicted + [{**c, "round": rounds + 1} for c in found]
    return Prepared(plan, joined.exports, joined.decoded, joined)


def _lines_of(sample) -> dict[str, set]:
    """The line numbers of the records a plan was made from (``partition.Inputs.sample``), per input path."""
    return {e.path: set(e.lines) for e in sample[0]}


def _new_contradictions(found: list[dict], sampled: dict[str, set], known: list[dict]) -> list[dict]:
    """Of what a build found the plan could not hold, what widening can mend and has not tried (``known``): a
    field the identity does not determine, a text its column's type cannot hold, and a key in records whose lines
    are not yet among those ``sampled``, the records the plan was made from."""
    def what(c: dict) -> tuple:
        return c["file"], c["column"], c.get("field"), c.get("text"), c.get("key")

    tried = set(map(what, known))
    return [c for c in found if what(c) not in tried
            and ("dependency" in c or "text" in c or c["line"] not in sampled.get(c["file"], ()))]


@speaks_to_callers
def make_plan(paths: str | os.PathLike | list[str], output: str | None = None, **kwargs) -> str:
    """Infer the plan of the exports and return it (and write it to ``output``) as TOML."""
    paths = path_list(paths)
    if output:
        check_paths([("input", p) for p in paths] + [("--plan", kwargs.get("plan_path"))], [("-o", output)])
    prepared = prepare(paths, **kwargs)
    plan, joined = prepared.plan, prepared.joined
    s = plan.settings
    on = {Path(j["right"]).stem: (j["on"][0][1], None) for j in joined.joins}
    text = plan_to_toml(plan, {"how": s.how, "cardinality": s.cardinality, "separate": s.separate, "on": on})
    if output:
        with staged_outputs() as staged:
            Path(staged.file(output)).write_text(text, encoding="utf-8")
            staged.commit()
    return text


def path_list(paths) -> list[str]:
    """One path (text or ``os.PathLike``) or many, as a list of texts (a single text is never its characters)."""
    if isinstance(paths, (str, os.PathLike)):
        return [os.fspath(paths)]
    return [os.fspath(p) for p in paths]


@speaks_to_callers
@paused_gc()
def build_database(paths: str | os.PathLike | list[str], database: str | os.PathLike, *, options: Options | None = None,
                   limits: Limits | None = None, formats: dict | None = None, encoding: str | None = None,
                   delimiter: str | None = None, replace: bool = False, join_options: JoinOptions | None = None,
                   manifest_path: str | None = None, picks: list[str] | None = None,
                   parquet_dir: str | None = None, plan_path: str | None = None,
                   schema: str | None = None, chunk_rows: int | None = None, progress=None,
                   report_path: str | None = None, dictionary_path: str | None = None,
                   append: bool = False, allow_lossy: bool = False, wait: float = 0.0, header: bool = True,
                   share_schema: bool = False, strict: bool = False, verify: str = "quick", workers: int = 1,
                   dask: str | None = None) -> Built:
    """Run every pass on the exports and write a SQLite database; returns the manifest as a ``Built``
    (a dict, its fields also attributes, with ``frame(name)`` giving any table or view as a DataFrame).

    ``database`` may instead be a ``postgresql+psycopg://`` URL: the tables then go into
    ``schema`` (default ``normalise``) of that database, in one transaction; a schema holding tables
    normalise did not make is refused unless ``share_schema`` (they are never dropped).

    Before a SQLite database is moved into place every loaded cell is rebuilt from its tables and
    compared with the input (``prove.py``); a difference raises ``LossDetected`` unless ``allow_lossy``.
    SQLite's own check of the file beside ``PRAGMA foreign_key_check`` is ``quick_check`` by default and
    ``integrity_check`` with ``verify="full"`` (``write.sqlite.BTREE_CHECKS`` says what each covers).

    No output may be an input or another output (``outputs.check_paths``, before anything runs). The run
    holds its destination's lock throughout (``outputs.destination_lock``: a second run on the same
    database waits up to ``wait`` seconds, then ``DestinationBusy``), and every output is written under a
    temporary name, moved into place only when all are complete, the database last.

    With ``strict``, a build that rejected a row or quarantined a cell raises ``errors.NotClean`` once
    everything is written (its ``result`` is the ``Built``).

    ``workers``: partitions (``chunk_rows`` records each) built by that many processes at once, merged in
    order (``build.reduce``); ``dask``: built as tasks of a Dask cluster instead (a scheduler's address, or
    ``local:N``). Either gives the database one process gives.

    Example:
        >>> import tempfile, os
        >>> d = tempfile.mkdtemp(); p = os.path.join(d, "books.csv")
        >>> _ = open(p, "w").write('key,people\\nb1,"[{\\'id\\': 7, \\'name\\': \\'Ann\\'}]"\\n')
        >>> m = build_database([p], os.path.join(d, "out.db"))
        >>> [(t["name"], t["role"], t["rows"]) for t in m["tables"] if t["rows"] and t["role"] != "descriptions"]
        [('person', 'entity', 1), ('books', 'record', 1), ('book_people', 'bridge', 1), ('name_map', 'names', 5)]
    """
    paths = path_list(paths)
    settings = settings_of(options, join_options, limits)
    delimiter = check_values(encoding_name=encoding, delimiter_char=delimiter, limits=settings.limits,
                             chunk_rows=chunk_rows, settings=settings)
    progress = Phases.of(progress, paths)
    kind, database = destination(database)
    postgresql = kind == "postgresql"
    if (schema is not None or share_schema) and not postgresql:
        from .model.errors import UsageError
        option = "--schema" if schema is not None else "--share-schema"
        raise UsageError(f"{option} applies to a PostgreSQL --db (postgresql+psycopg://...), not to a SQLite file")
    if append and (postgresql or replace):
        from .model.errors import UsageError
        raise UsageError("--append adds to an existing SQLite database; it goes with neither --replace nor a "
                         "PostgreSQL --db")
    if verify not in BTREE_CHECKS:
        from .model.errors import UsageError
        raise UsageError(f"--verify {verify!r}: expected one of {', '.join(BTREE_CHECKS)} (quick: PRAGMA "
                         "quick_check, the default; full: PRAGMA integrity_check)")
    if verify == "full" and postgresql:
        from .model.errors import UsageError
        raise UsageError("--verify full runs SQLite's PRAGMA integrity_check; a PostgreSQL --db has no such check "
                         "(the server checks every key and constraint as the rows go in)")
    if not isinstance(wait, (int, float)) or not 0 <= wait < float("inf"):
        from .model.errors import UsageError
        raise UsageError(f"--wait {wait!r}: expected a number of seconds, 0 or more")
    runner = _runner(workers, dask, append)
    if runner is not None and chunk_rows is None:  # partitions to share out: the command line's default size
        chunk_rows = PARTITION_ROWS
    sqlite_db = None if postgresql else database
    check_paths([("input", p) for p in paths] + [("--plan", plan_path)],
                [("--db", sqlite_db), ("the lock file of --db", sqlite_db and lock_path(sqlite_db)),
                 ("--manifest", manifest_path), ("--report", report_path), ("--dictionary", dictionary_path)],
                [("--parquet", parquet_dir)])
    kwargs = dict(settings=settings, formats=formats, encoding=encoding, delimiter=delimiter,
                  replace=replace, manifest_path=manifest_path, picks=picks,
                  parquet_dir=parquet_dir, plan_path=plan_path, schema=schema, chunk_rows=chunk_rows,
                  progress=progress, report_path=report_path, dictionary_path=dictionary_path, append=append,
                  allow_lossy=allow_lossy, wait=wait, header=header, share_schema=share_schema, verify=verify,
                  runner=runner)
    if postgresql:  # a session lock of the schema for the whole run, as the lock file beside a SQLite database
        with postgresql_run_lock(database, schema or DEFAULT_SCHEMA, wait), staged_outputs() as staged:
            result = _build(paths, database, staged=staged, **kwargs)
            staged.commit()
        built = Built(result, database, schema or DEFAULT_SCHEMA)
    else:
        # the lock is taken before anything of the destination is read (--append's state, whether it exists)
        with destination_lock(database, wait), staged_outputs() as staged:
            result = _build(paths, database, staged=staged, **kwargs)
            staged.commit()
        built = Built(result, database)
    if strict:
        NotClean.check(built)
    return built


def _build(paths: list[str], database: str, *, settings, formats, encoding, delimiter, replace,
           manifest_path, picks, parquet_dir, plan_path, schema, chunk_rows, progress,
           report_path, dictionary_path, append, allow_lossy, wait, staged, header=True, verify="quick",
           share_schema=False, runner=None) -> dict:
    """``build_database`` once its paths are checked and its destination locked; outputs go to ``staged``.

    Widening: the plan is made from the first records, and a later record may hold what it cannot (a key its
    objects do not have, a value its column's type cannot hold). When the plan was inferred (not read from a
    file, not appended to a database of its own), the build stops before anything is in place, those records
    join the sample, the plan is made again and the build runs again (at most ``MAX_WIDENINGS`` times); the
    manifest's ``widened`` says which records did it. Otherwise such values are kept as given in
    ``value_traces``, with a quarantine row naming the first line.
    """
    contradicted: list[dict] = []
    while True:
        try:
            return _build_once(paths, database, settings=settings, formats=formats, encoding=encoding,
                               delimiter=delimiter, replace=replace, manifest_path=manifest_path, picks=picks,
                               parquet_dir=parquet_dir, plan_path=plan_path, schema=schema, chunk_rows=chunk_rows,
                               progress=progress, report_path=report_path, dictionary_path=dictionary_path,
                               append=append, allow_lossy=allow_lossy, wait=wait, staged=staged, header=header,
                               verify=verify, share_schema=share_schema, contradicted=contradicted, runner=runner,
                               widen=plan_path is None and not append
                               and len({c["round"] for c in contradicted}) < MAX_WIDENINGS)
        except _Contradicted as c:
            round_ = len({x["round"] for x in contradicted}) + 1
            contradicted = contradicted + [{**x, "round": round_} for x in c.found]
            first = min(c.found, key=lambda x: (x["file"], x["line"]))
            progress.say(f"widening: {len(c.found)} finding(s) past the first records contradict the plan (first: "
                         f"{first['column']}, line {first['line']:,} of {os.path.basename(first['file'])}); the plan "
                         f"is made again and the build runs again (round {round_} of at most {MAX_WIDENINGS})")


def _runner(workers, dask: str | None, append: bool):
    """Who builds the partitions: None (this process), a pool of ``workers`` processes, or a Dask cluster."""
    from .model.errors import UsageError

    if isinstance(workers, bool) or not isinstance(workers, int) or workers < 0:
        raise UsageError(f"--workers {workers!r}: expected a whole number of processes (0: one per core)")
    if dask is not None and (not isinstance(dask, str) or not (dask.startswith("local:") or "://" in dask)):
        raise UsageError(f"--dask {dask!r}: expected a scheduler's address (tcp://host:8786) or local:N")
    if dask is not None and dask.startswith("local:") and not dask[6:].isdigit():
        raise UsageError(f"--dask {dask!r}: local:N takes a number of worker processes")
    if append and (dask is not None or workers != 1):
        raise UsageError("--append builds in one process (it reads the database's keys as it goes); leave out "
                         "--workers and --dask")
    from .build.parallel import DaskRunner, ProcessRunner

    if dask is not None:
        try:
            import distributed
            del distributed
        except ImportError:
            raise UsageError("--dask needs Dask's distributed scheduler: pip install 'normalise-exports[dask]'")
        return DaskRunner(dask)
    if workers == 1:
        return None
    return ProcessRunner(workers or None)


# builds made again when later records contradict the plan (``_build``); past them, such values are traced
MAX_WIDENINGS = 3


class _Contradicted(NormaliseError):
    """A build found records past the sample that the plan cannot hold (``_Run.build``); ``found`` says which."""

    def __init__(self, found: list[dict]):
        super().__init__(f"{len(found)} records past the first ones contradict the plan")
        self.found = found


def _build_once(paths: list[str], database: str, *, settings, formats, encoding, delimiter, replace,
                manifest_path, picks, parquet_dir, plan_path, schema, chunk_rows, progress,
                report_path, dictionary_path, append, allow_lossy, wait, staged, header=True, verify="quick",
                share_schema=False, contradicted=(), widen=False, runner=None) -> dict:
    """One build of ``_build``'s: raises ``_Contradicted`` (``widen``) when records past the sample contradict the
    plan, before anything is in place."""
    postgresql = is_postgresql(database)
    plan, inputs = _open(paths, settings=settings, formats=formats, encoding=encoding,
                         delimiter=delimiter, picks=picks, plan_path=plan_path, header=header, chunk_rows=chunk_rows,
                         streamed=True, phases=progress, contradicted=contradicted)
    sampled = _lines_of(inputs.sample)
    inputs.sample = None  # the model is made: its records need not stay in memory
    order = check_plan(plan)
    # a table wider than the database allows is refused before anything is written (it would fail half-way)
    if postgresql:
        check_width(plan, POSTGRESQL_MAX_COLUMNS, "PostgreSQL")
    else:
        check_width(plan)
    state = None
    if append:
        from .build.append import read_state

        if not os.path.exists(database):
            from .model.errors import UsageError
            raise UsageError(f"--append: {database} does not exist; build it first")
        state = read_state(os.fspath(database), plan)
    joined = inputs.joined

    def partitions(columns=None, raw=False):
        """Every record in partitions of ``chunk_rows``; appended records keyed after those already there."""
        for export, decoded in inputs.partitions(chunk_rows, columns, raw):
            if state:
                from .build.append import offset_record_keys
                offset_record_keys(plan, [export], state)
            yield export, decoded

    extra = {"set_aside_rows": joined.set_aside, "unmatched_rows": joined.unmatched}
    def widening(found: list[dict]) -> list[dict]:
        """What a build found that records not yet in the sample show: the plan made with them may hold it."""
        return _new_contradictions(found, sampled, contradicted) if widen else []

    run = _Run(plan, order, inputs, partitions, extra, state, _locator(plan, partitions), allow_lossy, progress,
               widening, runner)
    outputs = dict(parquet_dir=parquet_dir, manifest_path=manifest_path, report_path=report_path,
                   dictionary_path=dictionary_path)
    if postgresql:
        return _into_postgresql(run, database, staged, outputs, schema=schema or DEFAULT_SCHEMA, replace=replace,
                                wait=wait, share_schema=share_schema)
    return _into_sqlite(run, database, staged, outputs, replace=replace, append=append, verify=verify)


@dataclass
class _Run:
    """What both destinations' builds take: the plan and its load order, the inputs and their partitions, the
    join's bookkeeping rows, ``--append``'s state and the lossless proof's settings."""

    plan: Plan
    order: list[str]
    inputs: object  # partition.Inputs
    partitions: object  # (columns=None) -> every (export, decoded) partition
    extra: dict  # the join's set-aside and unmatched rows
    state: dict | None  # --append: what the database holds
    locate: object  # where a loaded cell came from, for the proof's messages
    allow_lossy: bool
    progress: object  # progress.Phases
    widening: object = lambda found: []  # (contradictions) -> those the plan is made again for (``_build``)
    runner: object = None  # build.parallel's ProcessRunner or DaskRunner; None: this process builds

    def build(self, sink):
        with self.progress.building(self.inputs.records) as step:
            built = build_partitions(self.plan, self.partitions, sink, self.extra, self.state, step.to,
                                     self.runner, self.inputs.decoding)
        found = self.widening(built.contradictions)
        if found:
            raise _Contradicted(found)
        return built

    def verify(self, built):
        """The lossless proof of what ``build`` gave, for the writer to run before the database is in place."""
        return verifier(self.plan, built, self.allow_lossy, self.locate(built))


def _into_postgresql(run: _Run, database: str, staged, outputs: dict, *, schema: str, replace: bool, wait: float,
                     share_schema: bool) -> dict:
    """Every row built in memory, then written in one transaction (one COPY per table), proved, reported."""
    plan, progress = run.plan, run.progress
    built = run.build(InMemory(plan))
    missing = check_rows(plan, built.rows)
    if missing:
        from .check import IntegrityError
        raise IntegrityError(f"{missing} foreign-key values name no row; nothing was written")
    integrity = write_postgresql(plan, built.rows, run.order, database, schema=schema, replace=replace,
                                 verify=run.verify(built), wait=wait,
                                 share_schema=share_schema, phases=progress)
    result = manifest(plan, built, display_url(database), integrity, run.inputs.joined)
    result["schema"] = integrity["schema"]
    # date, timestamp and decimal columns PostgreSQL holds as TEXT, each with why (write.native_forms)
    result["kept_as_text"] = integrity["kept_as_text"]
    if not (outputs["parquet_dir"] or outputs["report_path"] or outputs["dictionary_path"]):
        return _outputs(staged, database, plan, result, None, outputs["manifest_path"], None, None, progress)
    # Parquet, the report and the dictionary are read from a SQLite copy of the rows PostgreSQL was given
    # (the same rows; PostgreSQL's own column types shown), made in a temporary directory
    with tempfile.TemporaryDirectory(prefix="normalise-") as where:
        copy = os.path.join(where, "rows.db")
        writer = SqliteWriter(plan, run.order, copy)
        for name in run.order:
            if built.rows.get(name):
                writer.insert(name, built.rows[name])
        writer.finish()
        return _outputs(staged, f"{display_url(database)} (schema {integrity['schema']})", plan, result,
                        **outputs, phases=progress, source=copy,
                        postgresql={"types": integrity["sql_types"], "views": integrity["view_sql"]})


def _into_sqlite(run: _Run, database: str, staged, outputs: dict, *, replace: bool, append: bool,
                 verify: str = "quick") -> dict:
    """Rows written partition by partition into a temporary file, checked and proved before it is moved."""
    plan, progress = run.plan, run.progress
    writer = SqliteWriter(plan, run.order, database, replace, append=append, verify_level=verify)
    try:
        built = run.build(_Written(writer, plan, append))
    except BaseException:
        writer.abort()
        raise
    # rows are loaded without per-row foreign-key lookups: PRAGMA foreign_key_check runs before the move
    # (appended rows may name rows already in the database, which it checks too)
    integrity = writer.finish(run.verify(built), move=False, phases=progress)
    staged.database(writer)
    result = manifest(plan, built, os.fspath(database), integrity, run.inputs.joined, row_counts=writer.row_counts)
    if append:  # the manifest counts what the database now holds
        import sqlite3

        with sqlite3.connect(staged.writer.temporary) as con:
            for t in result["tables"]:
                t["rows"] = con.execute(f'SELECT count(*) FROM "{t["name"]}"').fetchone()[0]
        result["appended"] = True
    return _outputs(staged, database, plan, result, **outputs, phases=progress)


class _Written:
    """The rows of a build written to SQLite as they are made (``build_partitions``'s ``rows``)."""

    def __init__(self, writer: SqliteWriter, plan, append: bool):
        self.writer, self.plan = writer, plan
        # appended: the database holds rows of earlier builds, whose occurrences are not this build's
        self.written = {} if append else None

    def insert(self, rows: dict) -> None:
        for name in self.writer.order:  # the load order: referenced tables first
            made = rows.get(name)
            if made:
                self.writer.insert(name, made)
                if self.written is not None:
                    self.written.setdefault(name, set()).update(r[0] for r in made)

    def occurrences(self, table: str, fk_column: str, sks: set) -> list[tuple]:
        names = [c.name for c in self.plan.table(table).columns]
        picked = ", ".join("NULL" if j is None else quote_name(names[j])
                           for j in occurrence_columns(self.plan, table, fk_column))
        mine = self.written.get(table, set()) if self.written is not None else None
        return [r for r in self.writer.cursor.execute(f"SELECT {picked} FROM {quote_name(table)}")
                if r[3] in sks and (mine is None or r[0] in mine)]

    def complete(self, built) -> None:
        """The rows ``finish`` made, and the rewrites it asks for, applied to the rows written before."""
        self.insert(built.rows)
        for table, rows in built.updates.items():
            self.writer.update(table, rows)
        for (table, column), pairs in built.column_updates.items():
            self.writer.set_column(table, column, pairs)


def _locator(plan, partitions):
    """``locate`` for the lossless proof: the input cells of a column, read again only when a column differs."""
    def locate_in(built):
        def locate(table: str, column: str):
            loaded = built.inputs.records.get(table, set())
            paths = {r.path: r for r in plan.records if r.table == table}
            for export, decoded in partitions({column}):
                record = paths.get(export.path)
                if record is None or column not in decoded:
                    continue
                keys = export.record_keys or export.lines
                rows = [i for i, k in enumerate(keys) if k in loaded]
                for i, value in zip(rows, reference_values(record, column, decoded[column], rows)):
                    yield keys[i], value, export.path, export.lines[i]
        return locate
    return locate_in


def verifier(plan, built, allow_lossy: bool, locate=None):
    """The lossless proof run on the committed temporary file, before it is moved into place."""
    def verify(where) -> dict:  # a SQLite file's path, or a fetch on PostgreSQL's open transaction
        fetch, close = sqlite_fetch(where) if isinstance(where, str) else (where, lambda: None)
        try:
            figures = prove(plan, built.inputs, fetch, locate, where if isinstance(where, str) else None)
        finally:
            close()
        figures["values_traced"] = sum(built.trace_reasons.values())
        figures["traced_by_reason"] = dict(sorted(built.trace_reasons.items()))
        figures["lossy_kept"] = bool(figures["cells_differing"]) and allow_lossy
        if figures["cells_differing"] and not allow_lossy:
            raise LossDetected(loss_message(figures))
        return figures
    return verify


def _outputs(staged, database, plan, result: dict, parquet_dir, manifest_path, report_path,
             dictionary_path, phases=QUIET, source=None, postgresql: dict | None = None) -> dict:
    """What a build writes beside the database: Parquet files, the manifest, the report and the dictionary.

    Each goes to its temporary name in ``staged``, read from the database's committed temporary file
    (SQLite), or from ``source``, a SQLite copy of the rows a PostgreSQL build wrote (``postgresql``: their
    types there, see ``catalog.read_database``); ``staged.commit`` moves them into place, and the database
    after them.
    """
    if source is None:
        source = staged.writer.temporary if staged.writer is not None else database
    wanted = sum(map(bool, (parquet_dir, manifest_path, report_path or dictionary_path)))
    with phases.phase("outputs", total=wanted, unit="outputs") if wanted else nullcontext() as step:
        if parquet_dir:
            with writing("--parquet", parquet_dir):
                written = write_parquet(source, plan, staged.directory(parquet_dir))
            result["parquet"] = [os.path.join(parquet_dir, os.path.basename(p)) for p in written]
            step.update()
        if manifest_path:
            with writing("--manifest", manifest_path), open(staged.file(manifest_path), "w", encoding="utf-8") as f:
                json.dump(result, f, indent=2, ensure_ascii=False)
            step.update()
        if report_path or dictionary_path:  # report/html.py, report/dictionary.py
            from .report.html import write_outputs
            with writing("--report" if report_path else "--dictionary", report_path or dictionary_path):
                write_outputs(source, result, report_path=report_path and staged.file(report_path),
                              dictionary_path=dictionary_path and staged.file(dictionary_path), shown_as=database,
                              postgresql=postgresql, plan=plan)
            step.update()
    return result
