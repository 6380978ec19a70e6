"""The model the HTML report and the data dictionary show, and the rows of the database they show.

After a build the model is the run's own: its plan (tables, keys, roles, columns, views) and its counts
(``planned``). For a database on its own (``normalise report DB``) it is read from the database: the catalog
(``sqlite_master``, ``PRAGMA table_info``, ``PRAGMA foreign_key_list``, ``PRAGMA index_list``), ``count(*)`` of
each table; a manifest, when there is one, adds roles and where each table and column came from in the input,
and without one the roles are inferred from the keys. Either way the database is read for SQLite's own checks
and for the rows shown: the head of each bookkeeping table, the most referenced entities, list lengths.
The model is a plain dict; ``report.html`` and ``report.dictionary`` render it.
"""

from __future__ import annotations

import sqlite3
from collections import defaultdict
from pathlib import Path

from sqlalchemy.dialects import sqlite as sqlite_dialect

from ..infer.sharing import widened_sentence
from ..model.describe import display_column, owner_fk, plan_model
from ..model.errors import UsageError
from ..model.escapes import clean
from ..model.kinds import Role
from ..model.names import quote_name as _q
from ..model.plan import META_ROLES, META_TABLES
from ..model.views import view_sql
from ..write.ddl import metadata_for

_SQLITE = sqlite_dialect.dialect()

HEAD_ROWS = 50  # rows of each bookkeeping table shown
NOT_APPLICABLE = "not applicable (PostgreSQL)"  # SQLite's integrity_check, of a PostgreSQL build
TOP_ENTITIES = 15
_SQL_TYPES = {"BIGINT": "integer", "INTEGER": "integer", "INT": "integer", "FLOAT": "real", "REAL": "real",
              "DOUBLE": "real", "TEXT": "text", "VARCHAR": "text", "BOOLEAN": "boolean", "DATE": "date",
              "NUMERIC": "decimal",
              "TIMESTAMP": "timestamp", "DATETIME": "timestamp"}


# --- reading the database -------------------------------------------------------------------------

def connect(database) -> sqlite3.Connection:
    """A read-only connection to an existing SQLite file; text that is not UTF-8 is kept as escapes."""
    path = Path(database)
    if not path.is_file():
        raise UsageError(f"{database}: no such SQLite database file")
    conn = sqlite3.connect(path.resolve().as_uri() + "?mode=ro", uri=True)
    conn.text_factory = lambda b: b.decode("utf-8", "surrogateescape")
    return conn


def read_database(database, manifest: dict | None = None, *, manifest_origin: str | None = None,
                  head_rows: int = HEAD_ROWS, shown_as=None, postgresql: dict | None = None, plan=None) -> dict:
    """Everything the report and the data dictionary show, read from a SQLite database.

    ``manifest`` (the build's) adds roles, sources and the rows read; without it the roles are inferred
    from the keys. Returns a plain dict (the *model*). ``shown_as`` is the database's name in the report
    when it is read from elsewhere (a build's temporary file, before it is moved into place).

    ``postgresql`` (``{"types": {"table.column": SQL type}, "views": {view: CREATE VIEW}}``) says the database is a PostgreSQL build's,
    read through a SQLite copy of the rows the run wrote there (``pipeline._outputs``): each column's type is
    PostgreSQL's, and SQLite's ``integrity_check`` of the copy is not shown as the database's.

    ``plan`` (with the build's ``manifest``): the run's own, whose model, counts and views are shown as the
    run made them (``planned``); the database is then read only for its checks and the rows the report shows.
    Without it (``normalise report`` of a database on its own) the model is read from SQLite's catalog.
    """
    conn = connect(database)
    try:
        origin = manifest_origin or ("the build" if manifest is not None else None)
        model = planned(plan, manifest) if plan is not None and manifest is not None else _catalog(conn, manifest)
        model["database"] = str(shown_as or database)
        model["manifest"] = manifest
        model["manifest_origin"] = origin
        # the b-tree check the build ran (--verify: quick_check by default), the full one for a database alone
        model["integrity"] = _integrity(conn, ((manifest or {}).get("integrity") or {}).get("btree_check")
                                        or "integrity_check")
        model["destination"] = "postgresql" if postgresql is not None else "sqlite"
        if postgresql is not None:
            types, views = postgresql.get("types", {}), postgresql.get("views", {})
            for t in model["tables"] + model["views"]:
                for c in t["columns"]:
                    c["sql_type"] = types.get(f"{t['name']}.{c['name']}", c.get("sql_type", ""))
            for v in model["views"]:  # the view as PostgreSQL holds it (its SQL differs from SQLite's)
                v["sql"] = views.get(v["name"], v["sql"])
            # PostgreSQL checked every foreign key as the run added it; it has no b-tree check to show
            model["integrity"]["integrity_check"] = NOT_APPLICABLE
        model["data"] = _collect(conn, model, head_rows)
    finally:
        conn.close()
    return model


def planned(plan, manifest: dict) -> dict:
    """The model the report and the data dictionary show, from the run's plan and its manifest's counts: what
    ``_catalog`` reads back from a database, made without reading it (``describe.plan_model``).

    Each column's SQL type is the one its table was declared with on SQLite (``write.metadata_for``), each view's
    SQL the SELECT it was made from (``views.view_sql``); rows are the build's counts."""
    model = plan_model(plan)
    counts = {t.get("name"): t.get("rows") for t in manifest.get("tables", []) if isinstance(t, dict)}
    declared = {t.name: {c.name: c.type.compile(dialect=_SQLITE) for c in t.columns}
                for t in metadata_for(plan).tables.values()}
    for t in model["tables"]:
        t["rows"] = t["manifest_rows"] = counts.get(t["name"], 0)
        for c in t["columns"]:
            c["sql_type"] = declared.get(t["name"], {}).get(c["name"], "")
    views = {v.name: v for v in plan.views}
    for v in model["views"]:
        v["sql"] = f"CREATE VIEW {_q(v['name'])} AS {view_sql(views[v['name']], plan, 'sqlite')}"
        for c in v["columns"]:
            c.setdefault("sql_type", "")
    model["notes"] = [clean(widened_sentence(w)) for w in manifest.get("widened", []) if isinstance(w, dict)]
    return model


# The catalog is read with sqlite_master and SQLite's PRAGMAs, not sqlalchemy.inspect, which gives another model of
# the same database: it lists tables by name, where sqlite_master's order is the order they were made (the load
# order, which the report keeps without a manifest); it matches foreign keys and UNIQUE constraints against regular
# expressions over the CREATE TABLE text, which miss a name holding a double quote (those foreign keys then come
# in another order, with a warning) and an inline UNIQUE after a type with arguments (``varchar(80) UNIQUE``); it
# sorts indexes by name; and it gives declared types by affinity (``INT`` as ``INTEGER``, an unknown type as
# ``NUMERIC``), where the model keeps them as declared. Untrusted exports name the tables and columns, so the
# report reads what SQLite itself says.
def _catalog(conn: sqlite3.Connection, manifest: dict | None) -> dict:
    known = {t.get("name"): t for t in (manifest or {}).get("tables", []) if isinstance(t, dict)}
    known_views = {v.get("name"): v for v in (manifest or {}).get("views", []) if isinstance(v, dict)}
    objects = conn.execute("SELECT type, name, sql FROM sqlite_master WHERE type IN ('table', 'view') "
                           "AND name NOT LIKE 'sqlite\\_%' ESCAPE '\\' ORDER BY rowid").fetchall()
    tables, views, notes = [], [], []
    for kind, name, sql in objects:
        if kind == "table":
            tables.append(_table(conn, name, known.get(name)))
        elif kind == "view":
            cols = [{"name": r[1], "type": r[2] or ""} for r in conn.execute(f"PRAGMA table_info({_q(name)})")]
            v = known_views.get(name, {})
            views.append({"name": name, "kind": v.get("kind"), "table": v.get("table"), "columns": cols, "sql": sql})
    if manifest is not None:
        missing = [n for n in known if n not in {t["name"] for t in tables}]
        if missing:
            notes.append("the manifest names tables the database does not have: " + ", ".join(map(clean, missing)))
    for w in (manifest or {}).get("widened", []):
        if isinstance(w, dict):
            notes.append(clean(widened_sentence(w)))
    if known:  # keep the manifest's order (the plan's), tables it does not know at the end
        order = {n: i for i, n in enumerate(known)}
        tables.sort(key=lambda t: order.get(t["name"], len(order)))
    _infer_roles(tables)
    if not known:  # the catalog's order is the load order: data tables first, the bookkeeping after them
        tables.sort(key=lambda t: t["role"] in META_ROLES)
    by_name = {t["name"]: t for t in tables}
    for v in views:  # a view's table, when the manifest does not say: the name before "_summary"
        if not v["table"] and v["name"].endswith("_summary") and v["name"][:-8] in by_name:
            v["table"] = v["name"][:-8]
            role = by_name[v["table"]]["role"]
            v["kind"] = {"record": "record_summary", "entity": "entity_summary"}.get(role)
    return {"tables": tables, "views": views, "notes": notes}


def _table(conn: sqlite3.Connection, name: str, known: dict | None) -> dict:
    info = conn.execute(f"PRAGMA table_info({_q(name)})").fetchall()
    pk = [r[1] for r in sorted((r for r in info if r[5]), key=lambda r: r[5])]
    fks: dict[int, dict] = {}
    for fid, seq, parent, src, dst, *_ in conn.execute(f"PRAGMA foreign_key_list({_q(name)})"):
        fk = fks.setdefault(fid, {"columns": [], "references": parent, "ref_columns": []})
        fk["columns"].append(src)
        fk["ref_columns"].append(dst)
    uniques = []
    for row in conn.execute(f"PRAGMA index_list({_q(name)})"):
        if row[2] and row[3] != "pk":
            cols = [r[2] for r in conn.execute(f"PRAGMA index_info({_q(row[1])})")]
            if None not in cols:
                uniques.append(cols)
    foreign_keys = [fks[i] for i in sorted(fks, reverse=True)]  # SQLite lists them last declared first
    for fk in foreign_keys:
        if None in fk["ref_columns"]:  # REFERENCES parent without columns: the parent's primary key
            parent_pk = [r[1] for r in sorted((r for r in conn.execute(f"PRAGMA table_info({_q(fk['references'])})")
                                               if r[5]), key=lambda r: r[5])]
            fk["ref_columns"] = parent_pk or fk["ref_columns"]
        fk["unique"] = any(set(u) == set(fk["columns"]) for u in uniques) or set(pk) == set(fk["columns"])
        fk["owner"] = False
    rows = conn.execute(f"SELECT count(*) FROM {_q(name)}").fetchone()[0]
    known_cols = {c.get("name"): c for c in (known or {}).get("columns", []) if isinstance(c, dict)}
    columns = []
    for _cid, cname, ctype, notnull, _default, in_pk in info:
        k = known_cols.get(cname, {})
        base = (ctype or "").split("(")[0].strip().upper()
        columns.append({"name": cname, "sql_type": ctype or "",
                        "type": k.get("type") or _SQL_TYPES.get(base, base.lower()),
                        "nullable": not notnull and not in_pk, "source": k.get("source"),
                        "unique": [cname] in uniques})
    table = {"name": name, "rows": rows, "columns": columns, "primary_key": pk, "foreign_keys": foreign_keys,
             "unique": uniques, "role": None, "sources": [], "natural_key": [], "position_column": None,
             "manifest_rows": None, "inferred": known is None}
    if known:
        table["role"] = known.get("role")
        table["sources"] = [s for s in known.get("sources") or [] if isinstance(s, dict)]
        table["natural_key"] = [c for c in known.get("natural_key") or [] if c in {x["name"] for x in columns}]
        table["position_column"] = known.get("position_column")
        table["manifest_rows"] = known.get("rows")
        order = [(f.get("references"), list(f.get("columns") or [])) for f in known.get("foreign_keys") or []]
        foreign_keys.sort(key=lambda f: order.index((f["references"], f["columns"]))
                          if (f["references"], f["columns"]) in order else len(order))
        if table["role"] in (Role.BRIDGE, Role.CHILD, Role.RECORD_PART) and foreign_keys:
            foreign_keys[0]["owner"] = True
    return table


def _owning_keys(table: dict) -> list[dict]:
    """The foreign keys that may own a row or link it to an entity: NOT NULL ones. A nullable foreign key names
    the record a value refers to (a region's parent), which makes its table neither a child nor a bridge."""
    nullable = {c["name"] for c in table["columns"] if c["nullable"]}
    return [f for f in table["foreign_keys"] if not set(f["columns"]) <= nullable]


def _infer_roles(tables: list[dict]) -> None:
    """Roles, owners and natural keys of the tables the manifest does not describe, from their keys.

    The owner of a nested table is the foreign key that leads a UNIQUE
    constraint (owner, list_position) or is the only one; a table another table
    refers to through a non-owner key is an entity; a table with no foreign key
    that no one refers to that way is a record table.
    """
    for t in tables:
        if not t["inferred"] or not t["foreign_keys"] or any(f["owner"] for f in t["foreign_keys"]):
            continue
        owning = _owning_keys(t)
        if not owning:
            continue
        leading = [f for f in owning
                   if any(u[:len(f["columns"])] == f["columns"] and u != f["columns"] for u in t["unique"])
                   or f["unique"]]
        owner = leading[0] if leading else owning[0]
        owner["owner"] = True
        t["foreign_keys"].sort(key=lambda f: not f["owner"])
    referenced = {f["references"] for t in tables for f in _owning_keys(t) if not f["owner"]}
    for t in tables:
        if not t["inferred"] or t["role"]:
            continue
        cols = {c["name"] for c in t["columns"]}
        if t["name"] in META_TABLES and not t["foreign_keys"]:
            t["role"] = META_TABLES[t["name"]].role
        elif [f["columns"] for f in t["foreign_keys"]] == [t["primary_key"]]:  # keyed by its record's key: 1:1
            t["role"] = "record_part"
        elif _owning_keys(t):
            t["role"] = "bridge" if len(_owning_keys(t)) > 1 else "child"
        else:
            t["role"] = "entity" if t["name"] in referenced else "record"
        if t["role"] in (Role.RECORD, Role.ENTITY):
            single = [u for u in t["unique"] if len(u) == 1 and u != t["primary_key"]]
            t["natural_key"] = single[0] if single else []
        if "list_position" in cols and t["role"] in (Role.BRIDGE, Role.CHILD):
            t["position_column"] = "list_position"


def _integrity(conn: sqlite3.Connection, btree_check: str = "integrity_check") -> dict:
    """SQLite's own checks of the file: ``foreign_key_check`` and ``btree_check`` (``quick_check`` or
    ``integrity_check``, as ``write.sqlite.BTREE_CHECKS`` names them); its outcome is kept as ``integrity_check``."""
    if btree_check not in ("quick_check", "integrity_check"):  # a manifest's text, never run as given
        btree_check = "integrity_check"
    violations = conn.execute("PRAGMA foreign_key_check").fetchall()
    check = [r[0] for r in conn.execute(f"PRAGMA {btree_check}")]
    return {"foreign_key_violations": len(violations), "violations": violations[:HEAD_ROWS],
            "integrity_check": "ok" if check == ["ok"] else "; ".join(map(clean, check)), "btree_check": btree_check}


# --- the numbers shown, each from one query ---------------------------------------------------------





def _collect(conn: sqlite3.Connection, model: dict, head_rows: int) -> dict:
    tables = {t["name"]: t for t in model["tables"]}
    data: dict = {"meta": {}, "entities": [], "lists": [], "by_file": {}}
    for name, table in tables.items():
        if table["role"] not in META_ROLES:
            continue
        cols = [c["name"] for c in table["columns"]]
        order = ", ".join(_q(c) for c in ("file", "line") if c in cols) or "rowid"
        if table["role"] == Role.VARIANTS and {"entity_table", "natural_key", "attribute"} <= set(cols):
            order = "entity_table, natural_key, attribute" + (", chosen DESC" if "chosen" in cols else "") \
                    + (", occurrences DESC" if "occurrences" in cols else "")
        limit = head_rows * 10 if table["role"] == Role.VARIANTS else head_rows
        cur = conn.execute(f"SELECT * FROM {_q(name)} ORDER BY {order} LIMIT ?", (limit,))
        shown = [d[0] for d in cur.description]
        data["meta"][table["role"]] = {"table": name, "columns": shown, "rows": cur.fetchall(), "total": table["rows"]}
        if "file" in cols:
            for file, n in conn.execute(f"SELECT file, count(*) FROM {_q(name)} GROUP BY file ORDER BY file"):
                data["by_file"].setdefault(file, {})[table["role"]] = n
        if table["role"] == Role.VARIANTS and {"entity_table", "entity_sk", "attribute"} <= set(cols):
            data["meta"]["variants"]["conflicts"] = conn.execute(
                f"SELECT count(*) FROM (SELECT DISTINCT entity_table, entity_sk, attribute FROM {_q(name)})"
            ).fetchone()[0]
    for entity in (t for t in model["tables"] if t["role"] == Role.ENTITY and len(t["primary_key"]) == 1):
        refs = [(t["name"], f["columns"][0]) for t in model["tables"] for f in t["foreign_keys"]
                if f["references"] == entity["name"] and not f["owner"] and len(f["columns"]) == 1
                and f["ref_columns"] == entity["primary_key"]]
        if refs:
            data["entities"].append(_entity_frequency(conn, entity, refs))
    for table in model["tables"]:
        fk = owner_fk(table)
        if fk and len(fk["columns"]) == 1 and fk["references"] in tables and len(fk["ref_columns"]) == 1:
            data["lists"].append(_list_lengths(conn, table, fk))
    return data


def _entity_frequency(conn, entity: dict, refs: list[tuple[str, str]]) -> dict:
    key = entity["primary_key"][0]
    shown = display_column(entity)
    natural = entity["natural_key"][0] if entity["natural_key"] else key
    union = " UNION ALL ".join(f"SELECT {_q(col)} AS k FROM {_q(t)}" for t, col in refs)
    top = conn.execute(
        f"SELECT e.{_q(key)}, e.{_q(shown)}, e.{_q(natural)}, c.n FROM (SELECT k, count(*) AS n FROM ({union}) "
        f"GROUP BY k) c JOIN {_q(entity['name'])} e ON e.{_q(key)} = c.k "
        f"ORDER BY c.n DESC, CAST(e.{_q(shown)} AS TEXT), e.{_q(key)} LIMIT ?", (TOP_ENTITIES,)).fetchall()
    referenced = conn.execute(f"SELECT count(DISTINCT k), count(*) FROM ({union})").fetchone()
    per_ref = defaultdict(dict)
    keys = [r[0] for r in top]
    if keys and len(refs) > 1:
        marks = ", ".join("?" * len(keys))
        for t, col in refs:
            for k, n in conn.execute(f"SELECT {_q(col)}, count(*) FROM {_q(t)} WHERE {_q(col)} IN ({marks}) "
                                     f"GROUP BY {_q(col)}", keys):
                per_ref[k][t] = n
    return {"table": entity["name"], "display": shown, "natural": natural, "refs": refs,
            "top": [{"key": k, "label": label, "natural": nat, "count": n, "by": per_ref.get(k, {})}
                    for k, label, nat, n in top],
            "entities": entity["rows"], "referenced": referenced[0], "references": referenced[1]}


def _list_lengths(conn, table: dict, fk: dict) -> dict:
    owner = fk["references"]
    col, ref = fk["columns"][0], fk["ref_columns"][0]
    rows = conn.execute(
        f"SELECT n, count(*) FROM (SELECT count(b.{_q(col)}) AS n FROM {_q(owner)} o "
        f"LEFT JOIN {_q(table['name'])} b ON b.{_q(col)} = o.{_q(ref)} GROUP BY o.{_q(ref)}) "
        f"GROUP BY n ORDER BY n").fetchall()
    owners = sum(c for _, c in rows)
    elements = sum(n * c for n, c in rows)
    return {"table": table["name"], "owner": owner, "column": col, "distribution": rows, "owners": owners,
            "elements": elements, "empty": dict(rows).get(0, 0), "longest": rows[-1][0] if rows else 0,
            "sources": table["sources"]}


