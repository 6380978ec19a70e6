"""What every table, view and column a plan makes means, in words: the text of the data dictionary, of the
``descriptions`` table and of PostgreSQL's comments.

Made from a plan (``plan_model``: its tables and views as the catalog reads them back) or from a database read
back (``catalog.read_database``); the data dictionary (``report/dictionary.py``) and the HTML report render it, the
build keeps it in the database (``descriptions``).
"""

from __future__ import annotations

import re

from .escapes import clean
from .kinds import Role
from .names import singular
from .plan import META_ROLES
from .views import name_column, view_columns


def owner_fk(table: dict) -> dict | None:
    return next((f for f in table["foreign_keys"] if f["owner"]), None)

def display_column(table: dict) -> str:
    """The column that names a row for people, chosen as the views choose it (``views.name_column``)."""
    return name_column([(c["name"], c["type"]) for c in table["columns"]], table["primary_key"],
                       table["natural_key"])


def source_label(table: dict) -> str:
    """Where a table came from: "export" or "export · column, column"."""
    by_file: dict[str, list[str]] = {}
    for s in table.get("sources") or []:
        files = by_file.setdefault(str(s.get("file") or "?"), [])
        if s.get("column"):
            files.append(str(s["column"]))
    return "; ".join(f + (" \u00b7 " + ", ".join(cols) if cols else "") for f, cols in by_file.items())


META_MEANING = {
    "rejected_rows": ("One row per input line that could not be read as a row (wrong number of fields, "
                      "undecodable text); nothing of it was loaded.", {
                          "file": "The input file.", "line": "Line number in the input file (the header is line 1).",
                          "reason": "Why the line was rejected.", "raw": "The line as it was read."}),
    "set_aside_rows": ("One row per input row that was not loaded because another row had the same natural key "
                       "(a duplicate); the kept row is named by its line.", {
                           "file": "The input file.", "line": "Line number of the set-aside row.",
                           "natural_key": "The repeated natural key.", "reason": "Why the row was set aside.",
                           "kept_line": "Line number of the row that was loaded instead.",
                           "cells": "The row's cells, as a JSON object (column \u2192 text)."}),
    "unmatched_rows": ("One row per row of a joined file whose key names no record of the main file; kept here "
                       "instead of being loaded.", {
                           "file": "The joined input file.", "line": "Line number in that file.",
                           "join_key": "The key that matched no record.", "reason": "Why the row is here.",
                           "cells": "The row's cells, as a JSON object (column \u2192 text)."}),
    "quarantined_cells": ("One row per cell (or element of a list) that could not be decoded; the rest of its row "
                          "was loaded, without this value.", {
                              "file": "The input file.", "line": "Line number of the row.",
                              "column_name": "The input column of the cell.",
                              "position": "Character position of the fault in the cell, or the element's position in "
                                          "its list.",
                              "excerpt": "The text around the fault.", "message": "What is wrong."}),
    "value_traces": ("One row per value that the model's columns cannot give back exactly (a value of another "
                     "type, a key the model does not have, an absent key where NULL means null, an occurrence's "
                     "own spelling of an entity attribute): the original as Python literal text, at its row and "
                     "path (a JSON Pointer, RFC 6901).", {
                         "table_name": "The table of the row the value belongs to.",
                         "row_sk": "That row's surrogate key (a record, bridge or child row).",
                         "owner_sk": "The owning row of a list element, where the row may not exist.",
                         "position": "The element's position in its list.",
                         "column_name": "The input column.", "path": "Where inside the value (JSON Pointer; empty: the whole cell or element).",
                         "reason": "Why the columns cannot hold it.",
                         "original": "The value as given (Python literal text; NULL: the key was absent).",
                         "file": "The input file.", "line": "Line of the record in its file."}),
    "name_map": ("One row per name taken from the input (a file, a column header, an object key) and the SQL name "
                 "it was given, so that every table and column can be traced back to what the export called it.", {
                     "table_name": "The table the name became, or the table holding the column.",
                     "column_name": "The column the name became (NULL: the name became a table).",
                     "name_in_input": "The name as the input wrote it.",
                     "found_in": "Where the name was found (a file, a column of a file, a path inside a column)."}),
    # issue 16: what the data dictionary says of every table, view and column, kept in the database itself
    "descriptions": ("One row per table, view and column of this database with its description, as the data "
                     "dictionary gives it (SQLite keeps no comments; PostgreSQL also has them as COMMENT ON).", {
                         "table_name": "The table or view described.",
                         "column_name": "The column described (NULL: the table or view itself).",
                         "description": "What it holds."}),
    "attribute_variants": ("One row per value seen for an entity attribute that was written with different values "
                           "in different places (a conflict); the chosen value is the one in the entity table.", {
                               "entity_table": "The entity table.", "entity_sk": "The entity's surrogate key.",
                               "natural_key": "The entity's natural key.", "attribute": "The attribute (column).",
                               "value": "One value seen.", "occurrences": "How many times it was seen.",
                               "chosen": "1 for the value kept in the entity table, else 0."}),
}


def code(name) -> str:
    """An inline code span that holds any text, table pipes escaped (GitHub-flavoured Markdown).

    Example:
        >>> code("a|b"), code("x`y")
        ('`a\\\\|b`', '`` x`y ``')
    """
    text = clean(name).replace("\n", " ").replace("|", "\\|")
    run = max((len(m) for m in re.findall(r"`+", text)), default=0)
    fence = "`" * (run + 1)
    pad = " " if run or text.startswith("`") or text.endswith("`") else ""
    return f"{fence}{pad}{text}{pad}{fence}"


def quoted(name) -> str:
    """A name in a description kept in the database: in double quotes, as SQL quotes identifiers.

    Example:
        >>> quoted("title_key")
        '"title_key"'
    """
    return '"' + clean(name) + '"'


def sources(table: dict) -> list[tuple[str, str | None]]:
    return [(str(s.get("file") or "?"), s.get("column")) for s in table.get("sources") or []]


def _where(file: str, column: str | None, quote=code) -> str:
    return f"{quote(file)}" + (f" column {quote(column)}" if column else "")


def table_meaning(table: dict, tables: dict, quote=code) -> str:
    role, name = table["role"], table["name"]
    srcs = sources(table)
    where = ", ".join(_where(f, c, quote) for f, c in srcs)
    fk = owner_fk(table)
    if name in META_MEANING and role in META_ROLES:
        return META_MEANING[name][0]
    if role == Role.RECORD:
        key = ", ".join(quote(c) for c in table["natural_key"])
        return (f"One row per record of the export {where or quote(name)}"
                + (f", identified by its natural key {key}" if key else "") + ".")
    if role == Role.RECORD_PART and fk:
        return (f"The rest of the columns of {quote(fk['references'])}, too many for one table: one row per "
                f"{quote(fk['references'])} row, joined on its surrogate key {quote(fk['columns'][0])}.")
    if role == Role.ENTITY:
        ident = ", ".join(quote(c) for c in table["natural_key"])
        return (f"One row per distinct {quote(name)} found in {where or 'the nested lists'}"
                + (f", identified by {ident}" if ident else "") + "; each appears once however many lists name it.")
    if role in (Role.BRIDGE, Role.CHILD) and fk:
        others = [f for f in table["foreign_keys"] if not f["owner"]]
        if role == Role.BRIDGE and others:
            ent = ", ".join(quote(f["references"]) for f in others)
            return (f"Links each {quote(fk['references'])} row to the {ent} rows listed in {where or 'its list'}, "
                    f"one row per element" + (", in list order" if table["position_column"] else "")
                    + "; the columns besides the keys describe the link, not the entity.")
        if fk["unique"]:
            return (f"The fields of the object in {where or 'a nested column'}, at most one row per "
                    f"{quote(fk['references'])} row.")
        return (f"One row per element of the list in {where or 'a nested column'}, under its "
                f"{quote(fk['references'])} row" + (", in list order" if table["position_column"] else "") + ".")
    return "A table of the database (its role is not recorded)."


def column_meaning(table: dict, column: dict, tables: dict, quote=code) -> tuple[str, str]:
    """(key role, meaning) of one column."""
    name, role = column["name"], table["role"]
    keys = []
    meaning = ""
    fks = [f for f in table["foreign_keys"] if name in f["columns"]]
    if name in table["primary_key"]:
        keys.append("PK")
        how = {"record": "the line on which the record starts in its export",
               "record_part": "the line on which the record starts in its export (its record table's key)",
               "entity": "a 53-bit hash of the natural key",
               "bridge": "the owner's key times 2^24 plus the list position (a 53-bit hash of them when larger)",
               "child": "the owner's key times 2^24 plus the list position (a 53-bit hash of them when larger)"}.get(role) if not table["inferred"] else None
        meaning = ("Surrogate key made by normalise" + (f" from {how}" if how else "")
                   + ": the same for the same input on every build; use it to join, not as business data.")
    for f in fks:
        ref = f["ref_columns"][f["columns"].index(name)] if len(f["ref_columns"]) == len(f["columns"]) else "?"
        keys.append(f"FK \u2192 {quote(f['references'])}.{quote(ref)}")
        if not meaning:
            meaning = (f"The {quote(f['references'])} row this row belongs to." if f["owner"]
                       else f"The {quote(f['references'])} row this row links to.")
    if name in table["natural_key"]:
        keys.append("NK")
    if column.get("unique") and "NK" not in keys and "PK" not in keys:
        keys.append("unique")
    if meaning:
        return ", ".join(keys), meaning
    if table["name"] in META_MEANING and role in META_ROLES:
        return ", ".join(keys), META_MEANING[table["name"]][1].get(name, "")
    if name == table.get("position_column"):
        return ", ".join(keys), "Position of the element in its list in the input cell, counted from 1."
    source = column.get("source")
    if role in (Role.RECORD, Role.RECORD_PART):
        if name in table["natural_key"]:
            return ", ".join(keys), "Natural key of the record in the export (unique)."
        if source and "." in source:
            col, _, path = source.partition(".")
            return ", ".join(keys), f"Field {quote(path)} of the object in column {quote(col)}."
        return ", ".join(keys), f"Column {quote(source or name)} of the export, as typed by normalise."
    if role == Role.ENTITY:
        if name in table["natural_key"]:
            if source:
                return ", ".join(keys), (f"Identity of the entity: field {quote(source)} of the objects in the lists "
                                         "(unique).")
            return ", ".join(keys), "The distinct value itself (unique): each value of the lists once."
        return ", ".join(keys), (f"Attribute of the entity: field {quote(source or name)} of its objects. Where one "
                                 "entity was written with different values, the most frequent one is kept and every "
                                 f"variant is in {quote('attribute_variants')}.")
    if role == Role.BRIDGE:
        return ", ".join(keys), (f"Link attribute: field {quote(source or name)} of each element of the list; it "
                                 "describes this link (the same entity may have another value in another list).")
    if role == Role.CHILD:
        return ", ".join(keys), f"Field {quote(source or name)} of each element."
    return ", ".join(keys), ""


def view_column_meaning(view: dict, column: str, tables: dict, quote=code) -> str:
    table = tables.get(view.get("table") or "")
    if table and column in [c["name"] for c in table["columns"]]:
        return f"{quote(view['table'] + '.' + column)}."
    if view.get("kind") == "record_summary" and table:
        if column.startswith("number_of_"):
            return f"How many elements the record's list {quote(column[10:])} has (0 when empty)."
        bridges = [t for t in tables.values() if owner_fk(t) and owner_fk(t)["references"] == table["name"]]
        for b in bridges:
            if b["name"].endswith(column):
                ent = [f["references"] for f in b["foreign_keys"] if not f["owner"]]
                shown = display_column(tables[ent[0]]) if ent and ent[0] in tables else "name"
                return (f"The {quote(shown)} of each entity in the list, joined with \"; \" in list order "
                        f"(from {quote(b['name'])}); NULL when the list is empty.")
        return "A pick: the first entity of a list whose link attribute has a given value (NULL when none)."
    if view.get("kind") == "entity_summary" and table:
        if column == "records_in_total":
            return "In how many distinct records the entity appears, over all its lists."
        if column.startswith("records_in_"):
            return f"In how many distinct records the entity appears through {quote(column[11:])}."
        if column.startswith(("first_", "last_")):
            which, rest = column.split("_", 1)
            which = "earliest" if which == "first" else "latest"
            owners = [t for t in tables.values() if t["role"] == Role.RECORD and singular(t["name"]) == rest]
            if owners:
                key = quote(owners[0]["natural_key"][0]) if owners[0]["natural_key"] else "key"
                return (f"The {key} of the {which} {quote(owners[0]['name'])} record the entity appears in "
                        "(by the records' date).")
            dated = [t for t in tables.values() if t["role"] == Role.RECORD
                     and any(c["name"] == rest for c in t["columns"])]
            if dated:
                return f"The {which} {quote(rest)} of the records the entity appears in."
            return f"The natural key of the {which} record the entity appears in (by the records' date column)."
        if column == display_column(table):
            return f"{quote(table['name'] + '.' + column)}."
    return ""


VIEW_WHAT = {"record_summary": "one row per record, with each list counted and its names joined in list order",
              "entity_summary": "one row per entity, with the number of distinct records it appears in"}


def plan_model(plan) -> dict:
    """The tables and views of a plan as ``report.catalog.read_database`` reads them from a database the plan
    made (with the build's manifest): what the descriptions are made from, before any row is written."""
    tables = []
    for t in plan.tables:
        uniques = [list(u) for u in t.unique] + [[c.name] for c in t.columns if c.unique]
        fks = [{"columns": list(fk.columns), "references": fk.references, "ref_columns": list(fk.ref_columns),
                "unique": any(set(u) == set(fk.columns) for u in uniques) or set(t.primary_key) == set(fk.columns),
                "owner": False} for fk in t.foreign_keys]
        if t.role in (Role.BRIDGE, Role.CHILD, Role.RECORD_PART) and fks:
            fks[0]["owner"] = True
        tables.append({"name": t.name, "role": t.role, "rows": 0, "sources": list(t.sources),
                       "primary_key": list(t.primary_key), "natural_key": list(t.natural_key),
                       "position_column": t.position_column, "foreign_keys": fks, "unique": uniques,
                       "inferred": False,
                       "columns": [{"name": c.name, "type": c.type, "nullable": c.nullable and c.name not in t.primary_key,
                                    "source": c.source, "unique": [c.name] in uniques} for c in t.columns]})
    views = [{"name": v.name, "kind": v.kind, "table": v.table,
              "columns": [{"name": c.name, "type": c.type} for c in view_columns(v, plan)]} for v in plan.views]
    return {"tables": tables, "views": views}


def descriptions(plan) -> list[tuple[str, str | None, str]]:
    """(table or view, column or None for the table itself, description) of everything a plan makes: what
    the data dictionary says of it, names in double quotes (``quoted``) instead of Markdown. Kept in the
    ``descriptions`` table, and on PostgreSQL as ``COMMENT ON`` each table, view and column.

    Example:
        >>> from normalise.model.plan import Plan, Table, Column
        >>> plan = Plan(tables=[Table("books", "record", [Column("book_sk", "integer", nullable=False),
        ...                     Column("isbn", "text", source="isbn")], ["book_sk"], natural_key=["isbn"],
        ...                     sources=[{"file": "books.csv", "column": None}])])
        >>> for row in descriptions(plan):
        ...     print(row)
        ('books', None, 'One row per record of the export "books.csv", identified by its natural key "isbn".')
        ('books', 'book_sk', 'Surrogate key made by normalise from the line on which the record starts in its export: the same for the same input on every build; use it to join, not as business data.')
        ('books', 'isbn', 'Natural key of the record in the export (unique).')
    """
    model = plan_model(plan)
    tables = {t["name"]: t for t in model["tables"]}
    out = []
    for t in model["tables"]:
        out.append((t["name"], None, table_meaning(t, tables, quoted)))
        for c in t["columns"]:
            meaning = column_meaning(t, c, tables, quoted)[1]
            out.append((t["name"], c["name"], meaning or f"Column {quoted(c['name'])} of {quoted(t['name'])}."))
    for v in model["views"]:
        what = VIEW_WHAT.get(v["kind"], "")
        out.append((v["name"], None, f"A view of {quoted(v['table'])}: {what}." if what else
                    f"A view of {quoted(v['table'])}."))
        for c in v["columns"]:
            meaning = view_column_meaning(v, c["name"], tables, quoted)
            out.append((v["name"], c["name"], meaning or f"Column {quoted(c['name'])} of the view."))
    return out
