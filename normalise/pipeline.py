"""The passes in order: read -> decode -> infer -> plan -> build -> check -> write -> report."""

from __future__ import annotations

import gc
import json
import os
from pathlib import Path

from .build import Builder, build, check_width, occurrence_columns, reference_values
from .check import check_plan, check_rows
from .decode import decode, paused_gc
from .infer import Options, infer_plan
from .join import JoinOptions, join
from .literal import Limits
from .names import quote_name
from .option_values import check_values
from .options_check import check_option_names
from .outputs import check_paths, destination_lock, lock_path, staged_outputs, writing
from .prove import LossDetected, loss_message, prove, sqlite_fetch
from .planfile import join_settings, plan_from_doc, plan_to_toml, read_plan
from .read import iter_chunks, read
from .report import manifest
from .schema import POSTGRESQL_MAX_COLUMNS
from .views import add_pick
from .write import SqliteWriter
from .write import (DEFAULT_SCHEMA, destination, display_url, is_postgresql, postgresql_run_lock, write_parquet, write_postgresql,
                    write_sqlite)


# The model is inferred from the first SAMPLE_ROWS records of each export, in
# memory and in chunks alike, so the database never depends on the chunk size.
SAMPLE_ROWS = 5000


def head(exports: list, decoded: dict, n: int) -> tuple[list, dict]:
    """The first ``n`` records of each export and of its decoded columns."""
    from dataclasses import replace as copy_with

    out_exports, out_decoded = [], {}
    for export in exports:
        if export.number_of_records <= n:
            out_exports.append(export)
            out_decoded[export.path] = decoded[export.path]
            continue
        out_exports.append(copy_with(export, cells={c: v[:n] for c, v in export.cells.items()},
                                     lines=export.lines[:n]))
        out_decoded[export.path] = {name: copy_with(col, values=col.values[:n])
                                    for name, col in decoded[export.path].items()}
    return out_exports, out_decoded


def prepare(paths: list[str], *, options: Options | None = None, limits: Limits = Limits(),
            formats: dict | None = None, encoding: str | None = None, delimiter: str | None = None,
            join_options: JoinOptions | None = None, picks: list[str] | None = None,
            plan_path: str | None = None, header: bool = True):
    """Read, decode, join and plan; with ``plan_path`` the plan comes from that file, checked against the data."""
    delimiter = check_values(encoding_name=encoding, delimiter_char=delimiter, limits=limits, options=options,
                             join_options=join_options)
    exports = [read(p, encoding=encoding, delimiter=delimiter, header=header) for p in paths]
    decoded = {e.path: decode(e, limits, formats) for e in exports}
    options = options or Options()
    check_option_names(exports, decoded, options, formats, join_options or JoinOptions())
    doc = text = None
    if plan_path:
        doc, text = read_plan(plan_path)
        settings = join_settings(doc)
        records = doc.get("record", [])
        duplicates = records[0].get("duplicates", options.duplicates) if records else options.duplicates
        join_options = JoinOptions(how=settings["how"], cardinality=settings["cardinality"], on=settings["on"],
                                   separate=settings["separate"], duplicates=duplicates)
        options.natural_keys = {r["file"]: r["natural_key"] for r in doc.get("record", []) if r.get("natural_key")}
    joined = join(exports, decoded, join_options or JoinOptions(duplicates=options.duplicates),
                  options.natural_keys)
    exports, decoded = joined.exports, joined.decoded
    if doc is not None:
        plan = plan_from_doc(doc, text, exports, decoded)
    else:
        plan = infer_plan(*head(exports, decoded, SAMPLE_ROWS), options)
    for spec in picks or ():
        add_pick(plan, spec)
    joined.settings = join_options or JoinOptions(duplicates=options.duplicates)
    return plan, exports, decoded, joined


def make_plan(paths: list[str], output: str | None = None, **kwargs) -> str:
    """Infer the plan of the exports and return it (and write it to ``output``) as TOML."""
    if output:
        check_paths([("input", p) for p in paths] + [("--plan", kwargs.get("plan_path"))], [("-o", output)])
    plan, _, _, joined = prepare(paths, **kwargs)
    s = joined.settings
    on = {Path(j["right"]).stem: (j["on"][0][1], None) for j in joined.joins}
    text = plan_to_toml(plan, {"how": s.how, "cardinality": s.cardinality, "separate": s.separate, "on": on})
    if output:
        with staged_outputs() as staged:
            Path(staged.file(output)).write_text(text, encoding="utf-8")
            staged.commit()
    return text


@paused_gc()
def build_database(paths: list[str], database: str, *, options: Options | None = None,
                   limits: Limits = Limits(), formats: dict | None = None, encoding: str | None = None,
                   delimiter: str | None = None, replace: bool = False, join_options: JoinOptions | None = None,
                   manifest_path: str | None = None, picks: list[str] | None = None,
                   parquet_dir: str | None = None, plan_path: str | None = None,
                   schema: str | None = None, chunk_rows: int | None = None, progress=None,
                   report_path: str | None = None, dictionary_path: str | None = None,
                   append: bool = False, allow_lossy: bool = False, wait: float = 0.0, header: bool = True,
                   share_schema: bool = False) -> dict:
    """Run every pass on the exports and write a SQLite database; returns the manifest.

    ``database`` may instead be a ``postgresql+psycopg://`` URL: the tables then go into
    ``schema`` (default ``normalise``) of that database, in one transaction; a schema holding tables
    normalise did not make is refused unless ``share_schema`` (they are never dropped).

    Before a SQLite database is moved into place every loaded cell is rebuilt from its tables and
    compared with the input (``prove.py``); a difference raises ``LossDetected`` unless ``allow_lossy``.

    No output may be an input or another output (``outputs.check_paths``, before anything runs). The run
    holds its destination's lock throughout (``outputs.destination_lock``: a second run on the same
    database waits up to ``wait`` seconds, then ``DestinationBusy``), and every output is written under a
    temporary name, moved into place only when all are complete, the database last.

    Example:
        >>> import tempfile, os
        >>> d = tempfile.mkdtemp(); p = os.path.join(d, "books.csv")
        >>> _ = open(p, "w").write('key,people\\nb1,"[{\\'id\\': 7, \\'name\\': \\'Ann\\'}]"\\n')
        >>> m = build_database([p], os.path.join(d, "out.db"))
        >>> [(t["name"], t["role"], t["rows"]) for t in m["tables"] if t["rows"] and t["role"] != "descriptions"]
        [('person', 'entity', 1), ('books', 'record', 1), ('book_people', 'bridge', 1), ('name_map', 'names', 5)]
    """
    delimiter = check_values(encoding_name=encoding, delimiter_char=delimiter, limits=limits, chunk_rows=chunk_rows,
                             options=options, join_options=join_options)
    kind, database = destination(database)
    postgresql = kind == "postgresql"
    if (schema is not None or share_schema) and not postgresql:
        from .errors import UsageError
        option = "--schema" if schema is not None else "--share-schema"
        raise UsageError(f"{option} applies to a PostgreSQL --db (postgresql+psycopg://...), not to a SQLite file")
    if parquet_dir and postgresql:
        from .errors import UsageError
        raise UsageError("--parquet is written from a SQLite database; it is not available with a PostgreSQL --db")
    if (report_path or dictionary_path) and postgresql:
        from .errors import UsageError
        raise UsageError("--report and --dictionary read a SQLite database; they are not available with a "
                         "PostgreSQL --db")
    if append and (postgresql or replace):
        from .errors import UsageError
        raise UsageError("--append adds to an existing SQLite database; it goes with neither --replace nor a "
                         "PostgreSQL --db")
    if not isinstance(wait, (int, float)) or not 0 <= wait < float("inf"):
        from .errors import UsageError
        raise UsageError(f"--wait {wait!r}: expected a number of seconds, 0 or more")
    sqlite_db = None if postgresql else database
    check_paths([("input", p) for p in paths] + [("--plan", plan_path)],
                [("--db", sqlite_db), ("the lock file of --db", sqlite_db and lock_path(sqlite_db)),
                 ("--manifest", manifest_path), ("--report", report_path), ("--dictionary", dictionary_path)],
                [("--parquet", parquet_dir)])
    kwargs = dict(options=options, limits=limits, formats=formats, encoding=encoding, delimiter=delimiter,
                  replace=replace, join_options=join_options, manifest_path=manifest_path, picks=picks,
                  parquet_dir=parquet_dir, plan_path=plan_path, schema=schema, chunk_rows=chunk_rows,
                  progress=progress, report_path=report_path, dictionary_path=dictionary_path, append=append,
                  allow_lossy=allow_lossy, wait=wait, header=header, share_schema=share_schema)
    if postgresql:  # a session lock of the schema for the whole run, as the lock file beside a SQLite database
        with postgresql_run_lock(database, schema or DEFAULT_SCHEMA, wait), staged_outputs() as staged:
            result = _build(paths, database, staged=staged, **kwargs)
            staged.commit()
        return result
    # the lock is taken before anything of the destination is read (--append's state, whether it exists)
    with destination_lock(database, wait), staged_outputs() as staged:
        result = _build(paths, database, staged=staged, **kwargs)
        staged.commit()
    return result


def _build(paths: list[str], database: str, *, options, limits, formats, encoding, delimiter, replace,
           join_options, manifest_path, picks, parquet_dir, plan_path, schema, chunk_rows, progress,
           report_path, dictionary_path, append, allow_lossy, wait, staged, header=True,
           share_schema=False) -> dict:
    """``build_database`` once its paths are checked and its destination locked; outputs go to ``staged``."""
    postgresql = is_postgresql(database)
    if chunk_rows and not postgresql and not append and _can_stream(paths, options, join_options, plan_path):
        plan, result = _build_streaming(paths[0], database, options=options, limits=limits, formats=formats,
                                        encoding=encoding, delimiter=delimiter, replace=replace, picks=picks,
                                        plan_path=plan_path, chunk_rows=chunk_rows, progress=progress,
                                        allow_lossy=allow_lossy, staged=staged, header=header)
        return _outputs(staged, database, plan, result, parquet_dir, manifest_path, report_path, dictionary_path)
    plan, exports, decoded, joined = prepare(paths, options=options, limits=limits, formats=formats,
                                             encoding=encoding, delimiter=delimiter, join_options=join_options,
                                             picks=picks, plan_path=plan_path, header=header)
    order = check_plan(plan)
    if postgresql:  # SQLite's limit is checked by the build, PostgreSQL's here: both before anything is written
        check_width(plan, POSTGRESQL_MAX_COLUMNS, "PostgreSQL")
    state = None
    if append:
        from .append import offset_record_keys, read_state

        if not os.path.exists(database):
            from .errors import UsageError
            raise UsageError(f"--append: {database} does not exist; build it first")
        state = read_state(os.fspath(database), plan)
        offset_record_keys(plan, exports, state)
    built = build(plan, exports, decoded,
                  extra={"set_aside_rows": joined.set_aside, "unmatched_rows": joined.unmatched}, state=state)
    # appended rows may name rows already in the database: foreign_key_check checks those before the move
    missing = check_rows(plan, built.rows) if not append else 0
    if missing:
        from .check import IntegrityError
        raise IntegrityError(f"{missing} foreign-key values name no row; nothing was written")
    by_path = {e.path: e for e in exports}

    def locate(table: str, column: str):
        for record in plan.records:
            if record.table == table and record.path in built.kept:
                export = by_path[record.path]
                keys = getattr(export, "record_keys", None) or export.lines
                rows = built.kept[record.path]
                values = reference_values(record, column, decoded[record.path][column], rows)
                for i, value in zip(rows, values):
                    yield keys[i], value, export.path, export.lines[i]

    if postgresql:
        integrity = write_postgresql(plan, built.rows, order, database, schema=schema or DEFAULT_SCHEMA,
                                     replace=replace, verify=verifier(plan, built, allow_lossy, locate),
                                     wait=wait, share_schema=share_schema)
        result = manifest(plan, built, display_url(database), integrity, joined)
        result["schema"] = integrity["schema"]
    else:
        integrity = write_sqlite(plan, built.rows, order, database, replace=replace, append=append,
                                 verify=verifier(plan, built, allow_lossy, locate), staged=staged)
        result = manifest(plan, built, os.fspath(database), integrity, joined)
        if append:  # the manifest counts what the database now holds
            import sqlite3

            with sqlite3.connect(staged.writer.temporary) as con:
                for t in result["tables"]:
                    t["rows"] = con.execute(f'SELECT count(*) FROM "{t["name"]}"').fetchone()[0]
            result["appended"] = True
    return _outputs(staged, database, plan, result, parquet_dir, manifest_path, report_path, dictionary_path)


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
             dictionary_path) -> dict:
    """What a build writes beside the database: Parquet files, the manifest, the report and the dictionary.

    Each goes to its temporary name in ``staged``, read from the database's committed temporary file
    (SQLite); ``staged.commit`` moves them into place, and the database after them.
    """
    source = staged.writer.temporary if staged.writer is not None else database
    if parquet_dir:
        with writing("--parquet", parquet_dir):
            written = write_parquet(source, plan, staged.directory(parquet_dir))
        result["parquet"] = [os.path.join(parquet_dir, os.path.basename(p)) for p in written]
    if manifest_path:
        with writing("--manifest", manifest_path), open(staged.file(manifest_path), "w", encoding="utf-8") as f:
            json.dump(result, f, indent=2, ensure_ascii=False)
    if report_path or dictionary_path:  # report_html.py, dictionary.py
        from .report_html import write_outputs
        with writing("--report" if report_path else "--dictionary", report_path or dictionary_path):
            write_outputs(source, result, report_path=report_path and staged.file(report_path),
                          dictionary_path=dictionary_path and staged.file(dictionary_path), shown_as=database)
    return result


def _can_stream(paths: list[str], options: Options | None, join_options: JoinOptions | None,
                plan_path: str | None = None) -> bool:
    """One CSV or TSV file whose duplicates keep the first (or are refused) streams in chunks.

    With a plan, its records' ``duplicates`` decide, as they do for the build (``plan_from_doc``).
    """
    if len(paths) != 1 or Path(paths[0]).suffix.lower() in (".jsonl", ".ndjson", ".json"):
        return False
    if plan_path:
        records = read_plan(plan_path)[0].get("record", [])
        return all(r.get("duplicates", "first") != "last" for r in records)
    return (options or Options()).duplicates != "last"


def _build_streaming(path: str, database: str, *, options: Options | None, limits: Limits, formats: dict | None,
                     encoding: str | None, delimiter: str | None, replace: bool, picks: list[str] | None,
                     plan_path: str | None, chunk_rows: int, progress, allow_lossy: bool = False,
                     staged=None, header: bool = True) -> tuple:
    """Build one export in chunks with bounded memory: infer on the first records, then stream."""
    options = options or Options()
    chunks = iter_chunks(path, chunk_rows, encoding=encoding, delimiter=delimiter, header=header)
    first = []
    taken = 0
    for chunk in chunks:
        first.append(chunk)
        taken += chunk.number_of_records
        if taken >= SAMPLE_ROWS:
            break
    start = concat(first)
    start_decoded = decode(start, limits, formats)
    check_option_names([start], {start.path: start_decoded}, options, formats)
    # later chunks are read in the formats found at the start, so every chunk agrees
    fixed = dict(formats or {})
    for name, col in start_decoded.items():
        if name not in fixed and col.encoding in ("json", "python-literal", "delimited", "scalar"):
            fixed[name] = (col.encoding, col.separator)
    sample_exports, sample_decoded = head([start], {start.path: start_decoded}, SAMPLE_ROWS)
    if plan_path:
        doc, text = read_plan(plan_path)
        plan = plan_from_doc(doc, text, sample_exports, sample_decoded)
    else:
        plan = infer_plan(sample_exports, sample_decoded, options)
    for spec in picks or ():
        add_pick(plan, spec)
    order = check_plan(plan)
    gc.collect()  # once, while the heap is small: format detection leaves exceptions (and the frames they hold)
    builder = Builder(plan)
    writer = SqliteWriter(plan, order, database, replace)
    try:
        builder.add(start, start_decoded)
        _flush(builder, writer)
        done = start.number_of_records + len(start.rejected)
        if progress:
            progress(done, getattr(start, "chars_read", 0))
        del start, start_decoded, sample_exports, sample_decoded, first
        for chunk in chunks:
            builder.add(chunk, decode(chunk, limits, fixed))
            _flush(builder, writer)
            done += chunk.number_of_records + len(chunk.rejected)
            if progress:
                progress(done, getattr(chunk, "chars_read", 0))
        def occurrences(table: str, fk_column: str, sks: set):
            names = [c.name for c in plan.table(table).columns]
            picked = ", ".join("NULL" if j is None else quote_name(names[j])
                               for j in occurrence_columns(plan, table, fk_column))
            return [r for r in writer.cursor.execute(f"SELECT {picked} FROM {quote_name(table)}") if r[3] in sks]

        built = builder.finish(occurrences)
        for name in order:
            writer.insert(name, built.rows.get(name, []))
        for table, rows in built.updates.items():
            writer.update(table, rows)
        for (table, column), pairs in built.column_updates.items():
            writer.set_column(table, column, pairs)
    except BaseException:
        writer.abort()
        raise
    record = plan.records[0]

    def locate(table: str, column: str):
        """Read the file again, only when the proof found a difference, to name the cells that differ."""
        loaded = built.inputs.records.get(table, set())
        for chunk in iter_chunks(path, chunk_rows, encoding=encoding, delimiter=delimiter, header=header):
            columns = decode(chunk, limits, fixed)
            rows = [i for i, line in enumerate(chunk.lines) if line in loaded]
            for i, value in zip(rows, reference_values(record, column, columns[column], rows)):
                yield chunk.lines[i], value, chunk.path, chunk.lines[i]

    integrity = writer.finish(verifier(plan, built, allow_lossy, locate), move=staged is None)
    if staged is not None:
        staged.database(writer)
    return plan, manifest(plan, built, os.fspath(database), integrity, None, row_counts=writer.row_counts)


def _flush(builder: Builder, writer: SqliteWriter) -> None:
    rows = builder.take_rows()
    for name in writer.order:  # the load order: referenced tables first
        writer.insert(name, rows.get(name, []))


def concat(chunks: list):
    """One Export from consecutive chunks of the same file."""
    from dataclasses import replace as copy_with

    if len(chunks) == 1:
        return chunks[0]
    first = chunks[0]
    return copy_with(first, cells={c: [v for ch in chunks for v in ch.cells[c]] for c in first.columns},
                     lines=[n for ch in chunks for n in ch.lines],
                     rejected=[r for ch in chunks for r in ch.rejected],
                     warnings=[w for ch in chunks for w in ch.warnings])
