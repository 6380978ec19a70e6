"""Data dictionary: every table and view of a written database, for the people who query it.

Markdown, one section per table and view: what a row is, its keys, and per
column the type, whether it may be empty, its key role, where it came from in
the input (the export, the nested column and the field inside its objects) and
what it means. It is made from the same reading of the database as the HTML
report (``catalog.read_database``): the catalog, plus the run's manifest for
roles and sources when there is one.
"""

from __future__ import annotations

import re

from ..model.describe import VIEW_WHAT, code, column_meaning, source_label, sources, table_meaning, view_column_meaning
from ..model.escapes import clean
from ..model.kinds import Role
from ..model.plan import META_ROLES

TYPE_WORDS = {
    "integer": "integer",
    "real": "decimal number",
    "decimal": "exact decimal (its text as written: SQLite has no exact decimal type; NUMERIC on PostgreSQL)",
    "text": "text",
    "boolean": "boolean (0 or 1)",
    "date": "date (ISO 8601 text, YYYY-MM-DD: SQLite has no date type)",
    "timestamp": "timestamp (ISO 8601 text: SQLite has no timestamp type)",
}

PLAIN_TYPE_WORDS = {"integer": "integer", "real": "decimal number", "decimal": "exact decimal", "text": "text",
                    "boolean": "boolean", "date": "date", "timestamp": "timestamp"}

ROLE_WORDS = {
    "record": "record table",
    "record_part": "record table (continued)",
    "entity": "entity table",
    "bridge": "bridge table",
    "child": "child table",
    "set_aside": "bookkeeping",
    "rejected": "bookkeeping",
    "unmatched": "bookkeeping",
    "quarantine": "bookkeeping",
    "variants": "bookkeeping",
    "names": "bookkeeping",
    "traces": "bookkeeping",
    "descriptions": "bookkeeping",
}





def plain(text) -> str:
    """Text taken from data, safe in a Markdown table cell: no markup, no HTML, no line breaks.

    Example:
        >>> plain("<b>*x*</b> | y")
        '&lt;b&gt;\\\\*x\\\\*&lt;/b&gt; \\\\| y'
    """
    text = clean(text).replace("\n", " ").replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    return re.sub(r"([\\`*_\[\]|#!~])", r"\\\1", text)










def _column_source(table: dict, column: dict) -> str:
    """Where the values of a column came from in the input, as far as the manifest says."""
    source = column.get("source")
    srcs = sources(table)
    value_list = table["role"] == Role.ENTITY and column["name"] in table["natural_key"] and srcs
    if not srcs or (source is None and not value_list):
        if column["name"] in table["primary_key"]:
            return "assigned by normalise"
        if column["name"] == table.get("position_column"):
            return "position in the list"
        if any(column["name"] in f["columns"] for f in table["foreign_keys"]):
            return "key of the referenced row"
        return "\u2014"
    if table["role"] in (Role.RECORD, Role.RECORD_PART):
        return "; ".join(f"{code(f)} column {code(source)}" for f, _ in srcs)
    places = "; ".join(f"{code(f)} column {code(c)}" if c else code(f) for f, c in srcs)
    if source is None:
        return f"each value of the lists in {places}"
    return f"field {code(source)} of the objects in {places}"


def _dates(model: dict) -> list[str]:
    """How the database keeps dates and timestamps: the paragraph's first sentences."""
    if model.get("destination") == "postgresql":
        return ["Each column's type is PostgreSQL's (in brackets). Dates and timestamps are DATE, TIMESTAMP or "
                "TIMESTAMP WITH TIME ZONE where every value of the column comes back as written, and TEXT (ISO 8601) "
                "otherwise, as each column's comment says. "]
    return ["Dates and timestamps are ISO 8601 text, as SQLite keeps them (it has no date type; the text sorts and "
            "compares correctly). A PostgreSQL build of the same exports holds them as DATE, TIMESTAMP or TIMESTAMP "
            "WITH TIME ZONE where every value of the column comes back as written, and says so in each column's "
            "comment. "]


def _type(column: dict, destination: str | None = None) -> str:
    if destination == "postgresql":  # PostgreSQL's own type beside the plan's
        words = PLAIN_TYPE_WORDS.get(column["type"], column["type"] or "")
        return plain(f"{words} ({column['sql_type']})" if column.get("sql_type") else words)
    words = TYPE_WORDS.get(column["type"], column["type"] or column.get("sql_type") or "")
    return plain(words)




def render_dictionary(model: dict) -> str:
    """The data dictionary of a database read by ``catalog.read_database``, as Markdown."""
    tables = {t["name"]: t for t in model["tables"]}
    data_tables = [t for t in model["tables"] if t["role"] not in META_ROLES]
    meta_tables = [t for t in model["tables"] if t["role"] in META_ROLES]
    origin = model.get("manifest_origin")
    out = [f"# Data dictionary: {plain(model['database'])}", "",
           f"{len(model['tables'])} tables and {len(model['views'])} views. Made by normalise from the database's "
           "catalog" + (f" and the run's manifest ({plain(origin)})." if origin else
                        "; no manifest was given, so roles are inferred from the keys and input sources are unknown."),
           "",
           "Keys: **PK** primary key (a surrogate key made by normalise), **FK** foreign key (the table and column it "
           "refers to), **NK** natural key (the identifier from the input). Join a table to another through its FK "
           "columns. Every surrogate key is at most 2^53 - 1, so a client that reads JSON numbers as doubles "
           "(JavaScript, spreadsheets) gets it exactly. Row counts are those of the database when this file was "
           "made.", "",
           *_dates(model), "What this file says of each table, view and column is also in the database: the "
           f"{code('descriptions')} table (and PostgreSQL's comments).", "",
           "## Contents", "", "| table | kind | rows | from the input |", "| --- | --- | ---: | --- |"]
    for t in model["tables"]:
        kind = plain(ROLE_WORDS.get(t["role"], t["role"] or ""))
        out.append(f"| [{code(t['name'])}](#{_anchor(t['name'])}) | {kind} "
                   f"| {t['rows']:,} | {plain(source_label(t)) or chr(0x2014)} |")
    for v in model["views"]:
        out.append(f"| [{code(v['name'])}](#{_anchor(v['name'])}) | view | | "
                   f"{'of ' + code(v['table']) if v.get('table') else chr(0x2014)} |")
    out.append("")
    if data_tables:
        out += ["## Tables", ""]
        for t in data_tables:
            out += _table_section(t, tables, model.get("destination"))
    if model["views"]:
        out += ["## Views", "", "Views are stored queries over the tables; BI tools read them like tables.", ""]
        for v in model["views"]:
            out += _view_section(v, tables)
    if meta_tables:
        out += ["## Bookkeeping tables", "",
                "What the run did not load as data, kept so that every input row and nested element is accounted for.",
                ""]
        for t in meta_tables:
            out += _table_section(t, tables, model.get("destination"))
    links = [(t, f) for t in model["tables"] for f in t["foreign_keys"]]
    if links:
        out += ["## Relationships", "", "| from | to | kind |", "| --- | --- | --- |"]
        for t, f in links:
            kind = "at most one per referenced row" if f["unique"] else "many per referenced row"
            out.append(f"| {code(t['name'] + '.' + ', '.join(f['columns']))} | "
                       f"{code(f['references'] + '.' + ', '.join(str(c) for c in f['ref_columns']))} | {kind} |")
        out.append("")
    return "\n".join(out).rstrip() + "\n"


def _anchor(name: str) -> str:
    """The heading anchor GitHub makes for "`name` ...", approximately: lower case, spaces to dashes."""
    text = clean(name).lower()
    return re.sub(r"[^a-z0-9_\- ]", "", text).replace(" ", "-")


def _table_section(t: dict, tables: dict, destination: str | None = None) -> list[str]:
    role = ROLE_WORDS.get(t["role"], t["role"] or "table")
    out = [f"### {code(t['name'])}", "",
           f"*{plain(role)}, {t['rows']:,} row{'s' if t['rows'] != 1 else ''}.* {table_meaning(t, tables)}", ""]
    facts = []
    if t["primary_key"]:
        facts.append("Primary key: " + ", ".join(code(c) for c in t["primary_key"]) + ".")
    if t["natural_key"]:
        facts.append("Natural key: " + ", ".join(code(c) for c in t["natural_key"]) + ".")
    srcs = source_label(t)
    if srcs:
        facts.append(f"From the input: {plain(srcs)}.")
    for u in t["unique"]:
        if u != t["natural_key"] and len(u) > 1:
            facts.append("Unique together: " + ", ".join(code(c) for c in u) + ".")
    if facts:
        out += [" ".join(facts), ""]
    out += ["| column | type | empty? | key | from the input | meaning |", "| --- | --- | --- | --- | --- | --- |"]
    for c in t["columns"]:
        keys, meaning = column_meaning(t, c, tables)
        out.append(f"| {code(c['name'])} | {_type(c, destination)} | {'may be NULL' if c['nullable'] else 'never NULL'} | "
                   f"{keys} | {_column_source(t, c)} | {meaning} |")
    out.append("")
    return out




def _view_section(v: dict, tables: dict) -> list[str]:
    kind = (v.get("kind") or "view").replace("_", " ")
    of = f" of {code(v['table'])}" if v.get("table") else ""
    what = VIEW_WHAT.get(v.get("kind"), "")
    out = [f"### {code(v['name'])}", "", f"*{plain(kind)}{of}.*" + (f" {what.capitalize()}." if what else ""), "",
           "| column | meaning |", "| --- | --- |"]
    for c in v["columns"]:
        out.append(f"| {code(c['name'])} | {view_column_meaning(v, c['name'], tables)} |")
    out.append("")
    if v.get("sql"):
        sql = clean(v["sql"])
        run = max((len(m) for m in re.findall(r"`+", sql)), default=0)
        fence = "`" * max(3, run + 1)
        out += ["<details><summary>definition</summary>", "", f"{fence}sql", sql, fence, "", "</details>", ""]
    return out


# --- the same descriptions, from the plan, for the database itself ------------------------------------





