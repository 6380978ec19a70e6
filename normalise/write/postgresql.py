"""PostgreSQL: every table in one transaction, loaded with COPY; DATE, TIMESTAMP and NUMERIC where every value
comes back as its text (else TEXT, said in the manifest and the column's comment); COMMENT ON every table, view
and column; a register of what a run made, so that ``--replace`` drops that and nothing else.
"""

from __future__ import annotations

from contextlib import contextmanager

import sqlalchemy as sa

from ..model.describe import descriptions
from ..model.errors import NormaliseError
from ..model.escapes import SURROGATE as _SURROGATE, printable
from ..model.names import quote_name as _quote
from ..model.plan import META_ROLES, Plan
from ..model.views import view_sql
from ..progress import QUIET
from .ddl import metadata_for
from .destinations import DestinationError, DestinationExists, DestinationFailed, display_url, postgresql_url


def native_forms(plan: Plan, rows: dict[str, list[tuple]]) -> tuple[dict, dict]:
    """The date, timestamp and decimal columns PostgreSQL can hold in its own types and give back exactly.

    Returns ``(forms, kept)``: (table, column) -> the ``datetimes.TextForm`` all its values are written in
    (a ``decimals.DecimalForm`` for a decimal),
    and (table, column) -> why a column keeps TEXT (its values take several forms or offsets, or one is
    not a date PostgreSQL holds: the types were inferred from a sample). Decided on every value written.
    """
    from ..model.datetimes import text_form
    from ..model.decimals import decimal_form

    forms, kept = {}, {}
    for t in plan.tables:
        for j, c in enumerate(t.columns):
            if c.type in ("date", "timestamp", "decimal"):
                values = (row[j] for row in rows.get(t.name, ()))
                form, why = decimal_form(values) if c.type == "decimal" else text_form(c.type, values)
                if form is None:
                    kept[(t.name, c.name)] = why
                else:
                    forms[(t.name, c.name)] = form
    return forms, kept


def proof_queries(plan: Plan, forms: dict) -> dict[str, str]:
    """The lossless proof's whole-table queries (``prove.table_query``) of the tables with native date and
    timestamp columns, each with a query giving those columns as the text they came in (``TextForm.text_sql``)."""
    from ..prove import table_query

    out = {}
    for t in plan.tables:
        if any((t.name, c.name) in forms for c in t.columns):
            columns = ", ".join(f"{forms[(t.name, c.name)].text_sql(_quote(c.name))} AS {_quote(c.name)}"
                                if (t.name, c.name) in forms else _quote(c.name) for c in t.columns)
            out[table_query(t.name)] = f"SELECT {columns} FROM {_quote(t.name)}"
    return out


DEFAULT_SCHEMA = "normalise"
PG_MAX_IDENTIFIER = 63  # bytes: NAMEDATALEN - 1; PostgreSQL truncates longer names with only a notice


# The register of a schema: one row per table and view a run made there (and the register itself), so that
# --replace drops those and nothing else.
PG_REGISTER = "normalise_register"
_PG_DROP = {"v": "VIEW", "m": "MATERIALIZED VIEW", "f": "FOREIGN TABLE", "r": "TABLE", "p": "TABLE"}


class UnstorableValue(NormaliseError):
    """A value PostgreSQL cannot store (text with a NUL character)."""


def _pg_names(md: sa.MetaData, reserved: set[str]) -> None:
    """Constraint and index names that fit PostgreSQL's 63 bytes and do not clash.

    Index names (and the indexes behind PRIMARY KEY and UNIQUE constraints)
    share one namespace with the tables and views of their schema; foreign-key
    names need only be unique per table. A name too long or already taken gets
    a hash of its full form as suffix (SQLAlchemy would refuse it; PostgreSQL
    would truncate it silently).
    """
    from hashlib import blake2b

    taken = set(reserved)

    def fit(name: str, scope: set) -> str:
        out = name
        if len(out.encode()) > PG_MAX_IDENTIFIER or out in scope:
            digest = blake2b(name.encode(), digest_size=4).hexdigest()
            out = name.encode()[:PG_MAX_IDENTIFIER - 9].decode("utf-8", "ignore") + "_" + digest
            n = 2
            while out in scope:
                out = f"{out[:PG_MAX_IDENTIFIER - 9 - len(str(n))]}_{digest}{n}"
                n += 1
        scope.add(out)
        return out

    for table in md.tables.values():
        fk_names: set[str] = set()
        for constraint in sorted(table.constraints, key=lambda c: str(c.name or "")):
            if constraint.name is None:  # column-level UNIQUE: PostgreSQL chooses a free name
                continue
            if isinstance(constraint, sa.ForeignKeyConstraint):
                constraint.name = fit(str(constraint.name), fk_names)
            else:
                constraint.name = fit(str(constraint.name), taken)
        for index in table.indexes:
            index.name = fit(str(index.name), taken)


def _pg_check_names(plan: Plan, schema: str) -> None:
    """Refuse names PostgreSQL would truncate (they would no longer be the planned names)."""
    long = [f"schema {schema!r}"] if len(schema.encode()) > PG_MAX_IDENTIFIER else []
    for t in plan.tables:
        long += [f"table {t.name!r}"] if len(t.name.encode()) > PG_MAX_IDENTIFIER else []
        long += [f"column {t.name}.{c.name}" for c in t.columns if len(c.name.encode()) > PG_MAX_IDENTIFIER]
    long += [f"view {v.name!r}" for v in plan.views if len(v.name.encode()) > PG_MAX_IDENTIFIER]
    if long:
        raise DestinationError(f"PostgreSQL names are at most {PG_MAX_IDENTIFIER} bytes; too long: "
                               + ", ".join(long))
    if not schema or "\x00" in schema:
        raise DestinationError("--schema: give a non-empty schema name")
    if PG_REGISTER in {t.name for t in plan.tables} | {v.name for v in plan.views}:
        raise DestinationError(f"the name {PG_REGISTER!r} is kept for the register of what normalise made in a "
                               "schema; rename that table (normalise plan -o plan.toml, then build --plan plan.toml)")


def _pg_relations(cursor, schema: str) -> list[tuple[str, str]]:
    """(name, relkind) of the tables, views and foreign tables in a schema (PostgreSQL's pg_class)."""
    cursor.execute("SELECT c.relname, c.relkind FROM pg_catalog.pg_class c "
                   "JOIN pg_catalog.pg_namespace n ON n.oid = c.relnamespace "
                   "WHERE n.nspname = %s AND c.relkind IN ('r', 'p', 'v', 'm', 'f') AND NOT c.relispartition "
                   "ORDER BY c.relname", (schema,))
    return cursor.fetchall()


def _without_nul(value):
    """Text with each NUL character written as ``\\x00`` (PostgreSQL text cannot hold NUL); other values as they are."""
    return value.replace("\x00", "\\x00") if isinstance(value, str) else value


def _copy_rows(cursor, schema: str, table: sa.Table, data: list[tuple], role: str = "") -> None:
    """Load rows into a table with COPY FROM STDIN (text format, every identifier quoted).

    As in SQLite, the bookkeeping tables (which quote raw input) get undecodable
    bytes as \\xNN escapes, and NUL, which PostgreSQL text cannot hold at all, as
    \\x00; elsewhere such text stops the run with the table, column and key named.
    """
    from psycopg import sql

    if role in META_ROLES:  # these quote raw input: a NUL is written as \x00, as undecodable bytes are
        data = (tuple(_without_nul(printable(v)) for v in row) for row in data)
    statement = sql.SQL("COPY {}.{} ({}) FROM STDIN").format(
        sql.Identifier(schema), sql.Identifier(table.name),
        sql.SQL(", ").join(sql.Identifier(c.name) for c in table.columns))
    with cursor.copy(statement) as copy:
        for number, row in enumerate(data, 1):
            try:
                copy.write_row(row)
            except Exception as exc:
                names = [c.name for c in table.columns]
                key = ", ".join(f"{k.name}={row[names.index(k.name)]!r}" for k in table.primary_key.columns)
                for column, value in zip(names, row):
                    if isinstance(value, str) and "\x00" in value:
                        problem = "a NUL character, which PostgreSQL text cannot store"
                    elif isinstance(value, str) and _SURROGATE.search(value):
                        problem = "bytes its file's encoding could not decode"
                    else:
                        continue
                    raise UnstorableValue(f"{table.name}.{column} (row {number} of the table, {key}) holds "
                                          f"{problem}; nothing was written") from exc
                raise


def _pg_try_lock(cursor, key: int, wait: float, shown: str, function: str = "pg_try_advisory_xact_lock") -> None:
    """Take an advisory lock within ``wait`` seconds, or refuse: another run writes there."""
    import time

    from ..outputs import DestinationBusy

    deadline = time.monotonic() + wait
    while True:
        cursor.execute(f"SELECT pg_catalog.{function}(%s)", (key,))
        if cursor.fetchone()[0]:
            return
        if time.monotonic() >= deadline:
            waited = f" after waiting {wait:g} s" if wait > 0 else ""
            raise DestinationBusy(f"{shown} is being written by another normalise run{waited}; nothing was done: "
                                  "try again when it is done, or give --wait SECONDS")
        time.sleep(min(0.25, max(0.0, deadline - time.monotonic())))


def server_message(exc: BaseException) -> str:
    """A PostgreSQL or driver error on one line: its message, its detail when it adds to it."""
    error = getattr(exc, "orig", None) or exc
    detail = getattr(getattr(error, "diag", None), "message_detail", None)
    text = str(error).strip() + (f" ({detail})" if detail and detail not in str(error) else "")
    return " ".join(text.split())


def _pg_registered(cursor, schema: str, existing: dict[str, str]) -> list[str]:
    """The tables and views of the schema an earlier run made, by its register (with the register itself)."""
    if existing.get(PG_REGISTER) not in ("r", "p"):
        return []
    from psycopg import sql

    cursor.execute(sql.SQL("SELECT relation FROM {}").format(sql.Identifier(schema, PG_REGISTER)))
    return sorted({name for (name,) in cursor.fetchall() if name in existing} | {PG_REGISTER})


def _pg_refuse_occupied(existing: dict[str, str], ours: list[str], plan: Plan, replace: bool,
                        share_schema: bool, where: str) -> None:
    """Refuse a schema holding what no run made (unless shared, names apart), or one made before without replace."""
    theirs = sorted(set(existing) - set(ours))
    if theirs and not share_schema:
        raise DestinationExists(
            f"{where} holds {len(theirs)} tables or views normalise did not make ({_some(theirs)}); they are "
            "never dropped: give another --schema, or --share-schema to write beside them")
    clash = sorted(set(theirs) & ({t.name for t in plan.tables} | {v.name for v in plan.views}))
    if clash:
        raise DestinationExists(f"{where} already holds tables or views normalise did not make with the names of "
                                f"planned ones ({_some(clash)}); give another --schema")
    if ours and not replace:
        made = [name for name in ours if name != PG_REGISTER]
        raise DestinationExists(f"{where} already holds {len(made)} tables or views an earlier run made "
                                f"({_some(made)}); use --replace to drop them and write it again")


def _some(names: list[str], shown: int = 5) -> str:
    return ", ".join(names[:shown]) + (", ..." if len(names) > shown else "")


def column_notes(forms: dict, kept: dict, plan: Plan) -> dict[tuple[str, str], str]:
    """What a PostgreSQL comment adds to the description of a date, timestamp or decimal column: its type, and
    how its text comes back (``TextForm.text_sql``), or why it kept TEXT (``native_forms``)."""
    notes = {(t, c): f"Stored as {form.sql_type}; {form.text_sql(_quote(c))} gives each value as it came in."
             for (t, c), form in forms.items()}
    notes.update({(t, c): f"Kept as TEXT, {'' if plan.table(t).column(c).type == 'decimal' else 'ISO 8601 '}"
                          f"as written: {why}." for (t, c), why in kept.items()})
    return notes


def _pg_comment(cursor, schema: str, plan: Plan, forms: dict, kept: dict) -> None:
    """COMMENT ON every table, view and column: what the data dictionary says of it (``describe.descriptions``,
    made from the plan, as the ``descriptions`` table holds it), with a note on each date and timestamp column."""
    from psycopg import sql

    views = {v.name for v in plan.views}
    notes = column_notes(forms, kept, plan)
    by_relation: dict[str, list] = {}
    for relation, column, text in descriptions(plan):
        if (relation, column) in notes:
            text = f"{text} {notes[(relation, column)]}"
        what = sql.Literal(_without_nul(printable(text)))
        if column is None:
            kind = sql.SQL("VIEW" if relation in views else "TABLE")
            statement = sql.SQL("COMMENT ON {} {} IS {}").format(kind, sql.Identifier(schema, relation), what)
        else:
            statement = sql.SQL("COMMENT ON COLUMN {} IS {}").format(sql.Identifier(schema, relation, column), what)
        by_relation.setdefault(relation, []).append(statement)
    for statements in by_relation.values():  # one round trip per table (no parameters: several statements run)
        cursor.execute(sql.SQL("; ").join(statements))


def _pg_register(cursor, schema: str, order: list[str], plan: Plan) -> None:
    """Write the schema's register: every table and view this run made, and the register itself."""
    from psycopg import sql

    table = sql.Identifier(schema, PG_REGISTER)
    cursor.execute(sql.SQL("CREATE TABLE {} (relation text PRIMARY KEY, kind text NOT NULL)").format(table))
    made = [(name, "table") for name in order] + [(v.name, "view") for v in plan.views] + [(PG_REGISTER, "table")]
    with cursor.copy(sql.SQL("COPY {} (relation, kind) FROM STDIN").format(table)) as copy:
        for row in made:
            copy.write_row(row)
    cursor.execute(sql.SQL("COMMENT ON TABLE {} IS {}").format(
        table, sql.Literal("what normalise made in this schema: --replace drops these and nothing else")))
    for column, text in (("relation", "The name of a table or view a run made in this schema."),
                         ("kind", "table or view.")):
        cursor.execute(sql.SQL("COMMENT ON COLUMN {} IS {}").format(sql.Identifier(schema, PG_REGISTER, column),
                                                                   sql.Literal(text)))


@contextmanager
def postgresql_run_lock(database: str, schema: str, wait: float | None):
    """Hold a session advisory lock of the schema for a whole run (its key a hash of the schema name).

    A second run on the same schema waits up to ``wait`` seconds (None: as long as it takes), then is
    refused with ``DestinationBusy`` before it reads anything; the lock goes with the connection when the
    run ends, however it ends.
    """
    try:
        import psycopg
    except ImportError:
        raise DestinationError("writing PostgreSQL needs psycopg 3: pip install 'normalise-exports[postgresql]'") from None
    url = postgresql_url(database)
    shown = display_url(database)
    key = _pg_lock_key(b"normalise run ", schema)
    try:
        connection = psycopg.connect(url.set(drivername="postgresql").render_as_string(hide_password=False),
                                     autocommit=True)
    except psycopg.Error as exc:
        raise DestinationFailed(f"PostgreSQL at {shown}: {server_message(exc)}; nothing was done") from exc
    try:
        with connection.cursor() as cursor:
            if wait is None:
                cursor.execute("SELECT pg_catalog.pg_advisory_lock(%s)", (key,))
            else:
                _pg_try_lock(cursor, key, wait, f"schema {schema!r} of {shown}", "pg_try_advisory_lock")
        yield
    finally:
        connection.close()  # and with it the lock


def _pg_lock_key(prefix: bytes, schema: str) -> int:
    from hashlib import blake2b

    return int.from_bytes(blake2b(prefix + schema.encode(), digest_size=8).digest(), "big", signed=True)


def write_postgresql(plan: Plan, rows: dict[str, list[tuple]], order: list[str], database: str,
                     schema: str = DEFAULT_SCHEMA, replace: bool = False, verify=None, wait: float | None = None,
                     share_schema: bool = False, phases=QUIET) -> dict:
    """Write the tables, rows, indexes and views into one schema of a PostgreSQL database.

    Everything happens in one transaction: the schema is created when missing,
    emptied first with ``replace`` of the tables and views an earlier run made
    there (listed in its register, ``normalise_register``; refused without
    ``replace``), the tables created, the rows loaded with COPY, then the
    foreign keys added (PostgreSQL checks every row as it adds them), the
    foreign-key indexes built, the views created and the tables analysed. A
    failure anywhere rolls everything back: the schema stays as it was, or
    absent. Concurrent runs on one schema are kept apart by an advisory lock of
    the transaction (its key a hash of the schema name), taken before the schema
    is read: with ``wait`` (seconds), a run that cannot have it by then is
    refused (``DestinationBusy``); without, it waits as long as it takes. A
    schema holding tables or views no run made is refused (they are never
    dropped) unless ``share_schema``: the run then writes beside them, names
    apart. The register is written last, listing what this run made.

    Columns are BIGINT, DOUBLE PRECISION, BOOLEAN and TEXT by their plan types; a date or timestamp
    column is DATE, TIMESTAMP or TIMESTAMP WITH TIME ZONE when every value it holds comes back as the
    text it came in (``native_forms``; the proof reads it so), and TEXT otherwise.
    Returns the counterpart of SQLite's integrity checks, and under ``"kept_as_text"`` the date and
    timestamp columns kept as TEXT ("table.column": why).
    """
    try:
        from psycopg import errors as pg_errors, sql
    except ImportError:
        raise DestinationError("writing PostgreSQL needs psycopg 3: pip install 'normalise-exports[postgresql]'") from None

    url = postgresql_url(database)
    shown = display_url(database)
    _pg_check_names(plan, schema)
    forms, kept = native_forms(plan, rows)
    md = metadata_for(plan, forms)
    _pg_names(md, {t.name for t in plan.tables} | {v.name for v in plan.views})
    engine = sa.create_engine(url, poolclass=sa.pool.NullPool)
    lock = _pg_lock_key(b"normalise schema ", schema)
    ident = sql.Identifier(schema)
    try:
        with engine.begin() as conn:
            conn = conn.execution_options(schema_translate_map={None: schema})
            raw = conn.connection.driver_connection
            truncated: list[str] = []  # PostgreSQL cuts names over 63 bytes, saying so only in a notice
            raw.add_notice_handler(lambda d: truncated.append(d.message_primary or "")
                                   if d.sqlstate == pg_errors.NameTooLong.sqlstate else None)
            cursor = raw.cursor()
            _pg_make_room(cursor, schema, lock, wait, plan, replace, share_schema, shown)
            cursor.execute(sql.SQL("SET LOCAL search_path TO {}, pg_temp").format(ident))
            _pg_load(conn, cursor, schema, md, plan, rows, order, phases)
            _pg_keys_indexes_views(conn, cursor, schema, md, plan, order, forms, phases)
            _pg_comment(cursor, schema, plan, forms, kept)
            _pg_register(cursor, schema, order, plan)
            if truncated:
                raise DestinationError(
                    f"PostgreSQL names are at most {PG_MAX_IDENTIFIER} bytes and would be cut: "
                    + "; ".join(dict.fromkeys(truncated)) + ". Shorten the table names they come from "
                    "(normalise plan -o plan.toml, rename, then build --plan plan.toml); nothing was written")
            proof = None
            if verify is not None:  # the lossless proof, on the rows as PostgreSQL holds them, before the commit
                queries = proof_queries(plan, forms)

                def fetch(query: str) -> list:
                    cursor.execute(queries.get(query, query))
                    return cursor.fetchall()
                with phases.phase("checking", total=1, unit="checks") as step:
                    proof = verify(fetch)
                    step.update()
            for name in order:
                cursor.execute(sql.SQL("ANALYZE {}").format(sql.Identifier(schema, name)))
            sql_types, view_sql_there = _pg_as_held(cursor, schema)
    except pg_errors.DependentObjectsStillExist as exc:
        raise DestinationError(f"--replace cannot drop the tables of schema {schema!r} of {shown}: "
                               f"{server_message(exc)}; nothing was changed") from exc
    except (pg_errors.Error, sa.exc.DBAPIError) as exc:  # refused, unreachable, out of space...
        raise DestinationFailed(f"PostgreSQL at {shown} (schema {schema!r}): {server_message(exc)}"
                                "; nothing was written") from exc
    finally:
        engine.dispose()
    # Every foreign key was added, and so checked by PostgreSQL against every row, before
    # the commit; PostgreSQL has no counterpart of SQLite's PRAGMA integrity_check.
    result = {"foreign_key_violations": 0, "integrity_check": None, "schema": schema,
              "kept_as_text": {f"{t}.{c}": why for (t, c), why in kept.items()}, "sql_types": sql_types,
              "view_sql": view_sql_there}
    if verify is not None:
        result["proof"] = proof
    return result


def _pg_make_room(cursor, schema: str, lock: int, wait: float | None, plan: Plan, replace: bool,
                  share_schema: bool, shown: str) -> None:
    """The schema's lock taken, what it holds checked, the schema made when missing and, with ``replace``, the
    tables and views an earlier run made there dropped (views first: they depend on the tables)."""
    from psycopg import sql

    if wait is None:
        cursor.execute("SELECT pg_catalog.pg_advisory_xact_lock(%s)", (lock,))
    else:
        _pg_try_lock(cursor, lock, wait, f"schema {schema!r} of {shown}")
    existing = dict(_pg_relations(cursor, schema))
    ours = _pg_registered(cursor, schema, existing)
    _pg_refuse_occupied(existing, ours, plan, replace, share_schema, f"schema {schema!r} of {shown}")
    cursor.execute("SELECT count(*) FROM pg_catalog.pg_namespace WHERE nspname = %s", (schema,))
    if not cursor.fetchone()[0]:  # (IF NOT EXISTS would still need CREATE on the database)
        cursor.execute(sql.SQL("CREATE SCHEMA {}").format(sql.Identifier(schema)))
    for kind in dict.fromkeys(_PG_DROP.values()):
        names = [name for name in ours if _PG_DROP[existing[name]] == kind]
        if names:  # no CASCADE: objects built on these tables stop the run
            cursor.execute(sql.SQL(f"DROP {kind} ") + sql.SQL(", ").join(sql.Identifier(schema, n) for n in names))


def _pg_load(conn, cursor, schema: str, md: sa.MetaData, plan: Plan, rows: dict, order: list[str], phases) -> None:
    """Every table created without its foreign keys, then its rows loaded with COPY."""
    with phases.phase("writing", total=sum(len(rows[n]) for n in order) or None, unit="rows", scale=True) as step:
        for name in order:  # foreign keys after the rows: PostgreSQL then checks them in one pass
            conn.execute(sa.schema.CreateTable(md.tables[name], include_foreign_key_constraints=[]))
        for name in order:
            if rows[name]:
                _copy_rows(cursor, schema, md.tables[name], rows[name], plan.table(name).role)
                step.update(len(rows[name]))


def _pg_keys_indexes_views(conn, cursor, schema: str, md: sa.MetaData, plan: Plan, order: list[str], forms: dict,
                           phases) -> None:
    """The foreign keys added (PostgreSQL checks every row as it adds one), the indexes built, the views made."""
    from psycopg import sql

    constraints = [fk for name in order
                   for fk in sorted(md.tables[name].foreign_key_constraints, key=lambda c: str(c.name))]
    indexes = [index for name in order for index in sorted(md.tables[name].indexes, key=lambda i: str(i.name))]
    with phases.phase("indexing", total=len(constraints) + len(indexes) + len(plan.views) or None,
                      unit="keys, indexes and views") as step:
        for fk in constraints:
            conn.execute(sa.schema.AddConstraint(fk))
            step.update()
        for index in indexes:
            conn.execute(sa.schema.CreateIndex(index))
            step.update()
        for view in plan.views:
            cursor.execute(sql.SQL("CREATE VIEW {} AS ").format(sql.Identifier(schema, view.name))
                           + sql.SQL(view_sql(view, plan, "postgresql", forms)))
            step.update()


def _pg_as_held(cursor, schema: str) -> tuple[dict, dict]:
    """Each column's type and each view's definition as PostgreSQL holds them, for the report and the data
    dictionary: ("table.column" -> type, view -> its CREATE VIEW)."""
    cursor.execute("SELECT table_name, column_name, upper(data_type) FROM information_schema.columns "
                   "WHERE table_schema = %s", (schema,))
    sql_types = {f"{t}.{c}": type_ for t, c, type_ in cursor.fetchall()}
    cursor.execute("SELECT viewname, definition FROM pg_catalog.pg_views WHERE schemaname = %s", (schema,))
    views = {name: f"CREATE VIEW {_quote(name)} AS {definition.strip()}" for name, definition in cursor.fetchall()}
    return sql_types, views
