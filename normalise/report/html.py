"""HTML report of a written SQLite database: one self-contained file a person opens in a browser.

The report shows the schema as an entity-relationship diagram (inline SVG, laid
out with a layered graph layout), the row count of every table, the
reconciliation of rows and nested elements, SQLite's integrity checks, the
quarantined cells, rejected, set-aside and unmatched rows, the attribute
conflicts, the most frequent entities and the distribution of list lengths.

After a build the model shown is the plan's and the row counts are the build's
(``catalog.planned``); the database is read only for what it alone can say: its
own checks, the bookkeeping tables' rows and the most frequent entities. Given a
database without its plan (``normalise report``), the catalog is read back from
SQLite instead (``catalog.read_database``). The run's manifest (returned by the
build, or given as a file) adds roles, where each table and column came from in
the input, and the rows read. Every number is labelled with the table (or the
manifest) it comes from.

The file has no script and loads nothing: inline CSS and inline SVG only, and a
Content-Security-Policy that forbids any other source. Every text taken from the
database is escaped, since names and values come from untrusted exports.
"""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

from ..model.describe import owner_fk, source_label
from ..model.errors import EXIT_USAGE, NormaliseError
from ..model.escapes import clean
from ..model.kinds import Role
from ..model.plan import META_ROLES, META_TABLES
from .catalog import HEAD_ROWS, NOT_APPLICABLE, read_database
from .diagram import Layout, layout_schema, render_diagram
from .dictionary import render_dictionary
from .markup import (CSP, CSS, DASH, NONE, NOT_EQUAL, cell, code, counted, esc, hbar_chart, histogram, length_bins,
                     number, section, source_note, table_html)


def render_report(model: dict) -> str:
    """The report of a database read by ``read_database``, as one HTML document."""
    tables = {t["name"]: t for t in model["tables"]}
    layout = layout_schema(model)
    name = Path(model["database"]).name
    sections = [
        ("schema", "Schema", _schema_section(model, layout)),
        ("tables", "Tables and row counts", _tables_section(model)),
        ("reconciliation", "Reconciliation: rows and nested elements in = out", _reconciliation_section(model)),
        ("integrity", "Integrity", _integrity_section(model)),
        ("quarantine", "Quarantined cells", _meta_section(model, "quarantine")),
        ("rejected", "Rejected rows", _meta_section(model, "rejected")),
        ("set-aside", "Set-aside rows (duplicates)", _meta_section(model, "set_aside")),
        ("unmatched", "Unmatched rows", _meta_section(model, "unmatched")),
        ("conflicts", "Conflicts and their variants", _conflicts_section(model)),
        ("entities", "Most frequent entities", _entities_section(model, tables)),
        ("lists", "List lengths", _lists_section(model)),
        ("views", "Views", _views_section(model)),
    ]
    toc = "".join(f'<a href="#{i}">{esc(t.split(":")[0])}</a>' for i, t, _ in sections)
    origin = model.get("manifest_origin")
    lede = (f"Read from the database file {code(model['database'])}"
            + (f" and the run's manifest ({esc(origin)})." if origin else
               "; no manifest was given, so roles are inferred from the keys and the input's row counts are unknown."))
    notes = "".join(f'<p class="note">{esc(n)}</p>' for n in model.get("notes", []))
    body = "\n".join(section(i, t, b) for i, t, b in sections)
    return (f'<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
            f'<meta http-equiv="Content-Security-Policy" content="{CSP}">\n'
            f'<meta name="viewport" content="width=device-width, initial-scale=1">\n'
            f"<title>normalise report: {esc(name)}</title>\n<style>{CSS}</style>\n</head>\n<body>\n<main>\n"
            f"<h1>Database report: {esc(name)}</h1>\n<p class=\"lede\">{lede}</p>\n{notes}"
            f"{_tiles(model)}\n<nav class=\"toc\">{toc}</nav>\n{body}\n"
            f"<footer>Made by normalise. Each section names the table (or the manifest) its numbers come from; "
            f"the file loads nothing and runs no script.</footer>\n</main>\n</body>\n</html>\n")


def _tiles(model: dict) -> str:
    data, integ = model["data"], model["integrity"]
    meta = data["meta"]
    reconciled = _reconciled(model)
    tiles = [
        (f"{len(model['tables']):,}", "tables", False),
        (f"{sum(t['rows'] for t in model['tables'] if t['role'] not in META_ROLES):,}", "rows in data tables", False),
        (f"{integ['foreign_key_violations']:,}", "foreign-key violations", integ["foreign_key_violations"] > 0),
        (esc(integ["integrity_check"], 40), integ.get("btree_check", "integrity_check"), integ["integrity_check"] not in ("ok", NOT_APPLICABLE)),
        ({True: "yes", False: "NO", None: "unknown"}[reconciled], "rows and elements reconciled", reconciled is False),
        _proof_tile(model),
        (f"{meta.get('quarantine', {}).get('total', 0):,}", "quarantined cells", False),
        (f"{meta.get('rejected', {}).get('total', 0):,}", "rejected rows", False),
        (f"{meta.get('set_aside', {}).get('total', 0):,}", "set-aside rows", False),
        (f"{meta.get('variants', {}).get('conflicts', 0):,}", "conflicts", False),
    ]
    return '<div class="tiles">' + "".join(
        f'<div class="tile{" bad" if bad else ""}"><div class="v">{v}</div><div class="k">{esc(k)}</div></div>'
        for v, k, bad in tiles) + "</div>"


def _schema_section(model: dict, layout: Layout) -> str:
    n_fk = len(layout.edges)
    return (source_note(f"the database catalog: {code('sqlite_master')}, {code('PRAGMA table_info')}, "
                 f"{code('PRAGMA foreign_key_list')}, {code('PRAGMA index_list')}"
                 + (" and the manifest (roles and sources)" if model.get("manifest") else "")
                 + f" \u00b7 {len(layout.boxes):,} tables, {n_fk:,} foreign keys")
            + f'<div class="diagram">{render_diagram(layout)}</div>'
            + '<p class="legend">Each box is a table: <b>PK</b> primary key, <b>FK</b> foreign key (column \u2192 '
              "table it refers to), <b>NK</b> natural key from the export; the last line says which export and "
              "column the table came from. Each line is a foreign key: the bar pair marks the one referenced row, "
              "the crow's foot (N) the many rows that refer to it, a single bar (0..1) at most one, and the ring "
              "that there may be none. Tables are grouped by the export they came from; entity tables, shared "
              "between lists, stand on the right.</p>")


def _tables_section(model: dict) -> str:
    rows = []
    for t in model["tables"]:
        note = ""
        if t["manifest_rows"] is not None and t["manifest_rows"] != t["rows"]:
            note = f' <span class="bad">(the manifest says {number(t["manifest_rows"])})</span>'
        rows.append(f'<tr data-table="{esc(t["name"])}"><td>{code(t["name"])}</td><td>{esc(t["role"])}</td>'
                    f'<td class="num" data-rows="{t["rows"]}">{number(t["rows"])}{note}</td>'
                    f'<td class="wrap">{esc(source_label(t)) or NONE}</td></tr>')
    return (source_note(f"{code('SELECT count(*)')} on each table") +
            table_html(["table", "role", "#rows", "from the input (export \u00b7 column)"], rows,
                        attrs=' id="row-counts"'))


def _reconciled(model: dict) -> bool | None:
    m = model.get("manifest")
    if not m or "integrity" not in m:
        return None
    return bool(m["integrity"].get("reconciled"))


def _band_tables(model: dict, record: str) -> list[str]:
    """The nested tables under a record table (owner keys followed back to it)."""
    tables = {t["name"]: t for t in model["tables"]}
    out = []
    for t in model["tables"]:
        cur, seen = t["name"], set()
        while True:
            fk = owner_fk(tables[cur])
            if not fk or fk["references"] in seen or fk["references"] not in tables:
                break
            seen.add(cur)
            cur = fk["references"]
            if cur == record:
                out.append(t["name"])
                break
    return out


def _stem(path: str) -> str:
    return Path(str(path)).stem


# Long (about 95 lines): the reconciliation table of every input, then of every nested column, each row's
# figures and their sources side by side; a table of the report is one function.
def _reconciliation_section(model: dict) -> str:
    m = model.get("manifest") or {}
    by_file = model["data"]["by_file"]
    records = [t for t in model["tables"] if t["role"] == Role.RECORD]
    parts = []
    inputs = [i for i in m.get("inputs", []) if isinstance(i, dict)]
    if inputs:
        rows = []
        for i in inputs:
            f = by_file.get(i.get("path"), {})
            unmatched = i.get("rows_unmatched", 0) if "joined_into" in i else 0
            out = i["records_loaded"] + i["rows_set_aside"] + i["rows_rejected"] + unmatched
            ok = out == i["rows_read"]
            check = [("set_aside", i["rows_set_aside"]), ("rejected", i["rows_rejected"]), ("unmatched", unmatched)]
            db = []
            for role, n in check:
                got = f.get(role, 0)
                db.append(f'<td class="num{"" if got == n else " bad"}">{number(got)}</td>')
            loaded = esc(f"joined into {_stem(i['joined_into'])}") if "joined_into" in i else ""
            rows.append([f"<td>{code(i['path'])}</td>", cell(i["rows_read"]), cell(i["records_loaded"]),
                         cell(i["rows_set_aside"]), cell(i["rows_rejected"]), cell(unmatched),
                         f'<td class="{"ok" if ok else "bad"}">{"=" if ok else NOT_EQUAL} {number(out)}</td>',
                         *db, f'<td class="note">{loaded}</td>'])
        parts.append("<h3>Rows</h3>" + source_note(
            "the run's manifest (rows read, loaded, set aside, rejected, unmatched: counted while reading), "
            f"checked against {code('set_aside_rows')}, {code('rejected_rows')} and {code('unmatched_rows')} "
            f"(rows whose {code('file')} is the input)")
            + table_html(["input", "#read", "#loaded", "#set aside", "#rejected", "#unmatched", "read = sum",
                           "#in set_aside_rows", "#in rejected_rows", "#in unmatched_rows", ""], rows))
        rows = []
        for i in inputs:
            if "elements_decoded" not in i:
                continue
            record = next((t for t in records if any(_stem(s.get("file", "")) == _stem(i["path"])
                                                     or s.get("file") == _stem(i["path"]) for s in t["sources"])), None)
            nested = _band_tables(model, record["name"]) if record else []
            written = sum(next(t["rows"] for t in model["tables"] if t["name"] == n) for n in nested)
            ok = i["elements_decoded"] == i["elements_written"] + i["elements_quarantined"]
            rows.append([f"<td>{code(i['path'])}</td>", cell(i["elements_decoded"]), cell(i["elements_written"]),
                         cell(i["elements_quarantined"]),
                         f'<td class="{"ok" if ok else "bad"}">{"=" if ok else NOT_EQUAL} '
                         f'{number(i["elements_written"] + i["elements_quarantined"])}</td>',
                         f'<td class="num{"" if written == i["elements_written"] else " bad"}">{number(written)}</td>',
                         f'<td class="wrap">{", ".join(code(n) for n in nested) or DASH}</td>'])
        parts.append("<h3>Nested elements</h3>" + source_note(
            "the run's manifest (elements decoded, written, quarantined), checked against the rows of the nested "
            "tables under each record table")
            + table_html(["input", "#decoded", "#written", "#quarantined", "decoded = sum",
                           "#rows in nested tables", "nested tables"], rows))
        files = {i.get("path") for i in inputs}
        q = [[f"<td>{code(i['path'])}</td>", cell(i.get("cells_quarantined", 0)),
              cell(by_file.get(i.get("path"), {}).get("quarantine", 0))] for i in inputs]
        parts.append("<h3>Quarantined cells and elements</h3>" + source_note(
            f"the manifest and {code('quarantined_cells')} (rows per file; a quarantined element is a row too)")
            + table_html(["input", "#cells quarantined (manifest)", "#rows in quarantined_cells"], q))
        extra = sorted(str(f) for f in by_file if f not in files)
        if extra:
            parts.append('<p class="note">Bookkeeping rows name files the manifest does not: '
                         f'{esc(", ".join(extra))}</p>')
        joins = [j for j in m.get("joins", []) if isinstance(j, dict)]
        if joins:
            rows = []
            for j in joins:
                on = ", ".join(f"{a} = {b}" for a, b in j.get("on", []))
                rows.append([f"<td>{code(j.get('left'))}</td>", f"<td>{code(j.get('right'))}</td>",
                             f"<td>{esc(on)}</td>", f"<td>{esc(j.get('how'))}, {esc(j.get('cardinality'))}</td>",
                             cell(j.get("left_only")), cell(j.get("right_only")),
                             cell(j.get("right_duplicates_set_aside")),
                             cell(", ".join(map(str, (j.get("left_only_examples") or [])
                                                 + (j.get("right_only_examples") or []))), 120)])
            parts.append("<h3>Joins</h3>" + source_note("the run's manifest (keys compared while joining)")
                         + table_html(["main file", "joined file", "on", "how", "#keys only in main",
                                        "#keys only in joined", "#duplicates set aside", "examples"], rows))
    else:
        parts.append('<p class="note">The database does not record how many rows were read (no manifest was given); '
                     "below is what the database holds per input file.</p>")
        rows = []
        for file in sorted(by_file, key=str):
            f = by_file[file]
            rows.append([f"<td>{code(file)}</td>"] + [cell(f.get(r, 0)) for r in
                                                       ("set_aside", "rejected", "unmatched", "quarantine")])
        if rows:
            parts.append(source_note(f"{code('set_aside_rows')}, {code('rejected_rows')}, {code('unmatched_rows')}, "
                              f"{code('quarantined_cells')} (rows per {code('file')})")
                         + table_html(["input", "#set aside", "#rejected", "#unmatched", "#quarantined cells"], rows))
        rows = []
        for r in records:
            nested = _band_tables(model, r["name"])
            rows.append([f"<td>{code(r['name'])}</td>", cell(r["rows"]),
                         cell(sum(t["rows"] for t in model["tables"] if t["name"] in nested)),
                         f'<td class="wrap">{", ".join(code(n) for n in nested) or DASH}</td>'])
        if rows:
            parts.append(source_note("each record table and the nested tables under it (count(*))")
                         + table_html(["record table", "#records", "#nested elements", "nested tables"], rows))
    return "\n".join(parts)


def _proof_tile(model: dict) -> tuple:
    """The lossless proof's figure: cells rebuilt exactly from the database, of the cells checked."""
    m = (model.get("manifest") or {}).get("integrity") or {}
    if "cells_checked" not in m:
        return ("unknown", "cells rebuilt exactly (no manifest)", False)
    return (f"{m['cells_rebuilt_exactly']:,} / {m['cells_checked']:,}", "cells rebuilt exactly",
            m["cells_rebuilt_exactly"] != m["cells_checked"])


def _integrity_section(model: dict) -> str:
    integ = model["integrity"]
    m = (model.get("manifest") or {}).get("integrity") or {}
    postgresql = model.get("destination") == "postgresql"  # read through a copy of the rows it was given
    rows = [[f"<td>{code('PRAGMA foreign_key_check')}" + (" of the rows written (PostgreSQL checked each foreign "
                                                           "key as it was added)" if postgresql else "") + "</td>",
             f'<td class="{"ok" if not integ["foreign_key_violations"] else "bad"}">'
             f'{number(integ["foreign_key_violations"])} violations</td>',
             cell(f"{m['foreign_key_violations']} violations" if "foreign_key_violations" in m else DASH)],
            [f"<td>{code('PRAGMA ' + integ.get('btree_check', 'integrity_check'))}</td>",
             f'<td class="{"ok" if integ["integrity_check"] in ("ok", NOT_APPLICABLE) else "bad"}">'
             f'{esc(integ["integrity_check"], 300)}</td>',
             cell(m.get("integrity_check", DASH))],
            ["<td>rows and elements reconciled</td>",
             cell({True: "yes", False: "NO", None: "unknown (no manifest)"}[_reconciled(model)]),
             cell({True: "yes", False: "NO"}.get(m.get("reconciled"), DASH))]]
    if "cells_checked" in m:
        lossy = m["cells_differing"]
        rows.append(["<td>lossless proof: cells rebuilt from the tables equal the export</td>", cell(DASH),
                     f'<td class="{"bad" if lossy else "ok"}">{number(m["cells_rebuilt_exactly"])} of '
                     f'{number(m["cells_checked"])} exactly' + (f"; {number(lossy)} DIFFER (kept with --allow-lossy)"
                                                               if lossy else "") + "</td>"])
        rows.append([f"<td>values kept as given in {code('value_traces')}</td>", cell(DASH),
                     cell(", ".join(f"{n:,} {r}" for r, n in m.get("traced_by_reason", {}).items()) or "none")])
    rejoined = (model.get("manifest") or {}).get("values_rejoined") or {}
    if rejoined:
        rows.append(["<td>delimited values kept whole with their name suffix (\"Dole, Jr.\")</td>", cell(DASH),
                     cell(", ".join(f"{n:,} in {where}" for where, n in rejoined.items()))])
    out = (source_note("SQLite's own checks, run on the database as this report was made; the last column is what the "
                "build recorded in its manifest, the lossless proof included")
           + table_html(["check", "now", "at build"], rows))
    for d in m.get("differences", [])[:5]:
        out += f'<p class="note bad">differs: {esc(str(d), 300)}</p>'
    if integ["violations"]:
        out += "<h3>Foreign-key violations (first ones)</h3>" + table_html(
            ["table", "#rowid", "parent", "#foreign key"], [[cell(v) for v in row] for row in integ["violations"]])
    return out


_META_LABEL = {meta.role: name for name, meta in META_TABLES.items()}  # a role's table
_META_LIMITS = {"raw": 160, "cells": 160, "excerpt": 80, "message": 240}


def _meta_section(model: dict, role: str) -> str:
    meta = model["data"]["meta"].get(role)
    if meta is None:
        return f'<p class="note">The database has no {code(_META_LABEL[role])} table.</p>'
    name, total, rows = meta["table"], meta["total"], meta["rows"]
    shown = len(rows)
    src = source_note(f"{code(name)} \u00b7 {total:,} row{'s' if total != 1 else ''}"
               + (f", the first {shown:,} by file and line" if total > shown else ""))
    if not rows:
        return src + '<p class="ok">None.</p>'
    keep = [i for i, c in enumerate(meta["columns"]) if not c.endswith("_sk")]
    headers = [("#" if rows and isinstance(rows[0][i], int) else "") + meta["columns"][i] for i in keep]
    body = [[cell(r[i], _META_LIMITS.get(meta["columns"][i], 200)) for i in keep] for r in rows]
    return src + table_html(headers, body)


def _conflicts_section(model: dict) -> str:
    meta = model["data"]["meta"].get("variants")
    if meta is None:
        return f'<p class="note">The database has no {code("attribute_variants")} table.</p>'
    cols = meta["columns"]
    src = source_note(f"{code(meta['table'])} \u00b7 {counted(meta.get('conflicts', 0), 'conflict')}, "
               f"{counted(meta['total'], 'variant')}: "
               "an entity whose attribute was written with different values keeps the most frequent (chosen)")
    if not meta["rows"]:
        return src + '<p class="ok">None.</p>'
    if not {"entity_table", "natural_key", "attribute", "value"} <= set(cols):
        return src + table_html(cols, [[cell(v) for v in r] for r in meta["rows"]])
    ix = {c: i for i, c in enumerate(cols)}
    groups: dict[tuple, list] = {}
    for r in meta["rows"]:
        groups.setdefault((r[ix["entity_table"]], r[ix["natural_key"]], r[ix["attribute"]]), []).append(r)
    rows = []
    for (table, key, attribute), variants in list(groups.items())[:HEAD_ROWS]:
        shown = []
        for v in variants:
            n = v[ix["occurrences"]] if "occurrences" in ix else None
            chosen = bool(v[ix["chosen"]]) if "chosen" in ix else False
            text = ("NULL" if v[ix["value"]] is None else esc(v[ix["value"]], 120)) + (f" \u00d7{n:,}" if n else "")
            shown.append(f"<b>{text}</b> (chosen)" if chosen else text)
        rows.append([cell(table), cell(key), cell(attribute), f'<td class="wrap">{"<br>".join(shown)}</td>'])
    return src + table_html(["entity table", "natural key", "attribute", "variants (\u00d7 occurrences)"], rows)


def _entities_section(model: dict, tables: dict) -> str:
    found = model["data"]["entities"]
    if not found:
        return '<p class="note">No entity table is referred to by a list.</p>'
    cards = []
    for e in found:
        refs = ", ".join(code(t) for t, _ in e["refs"])
        items = []
        for row in e["top"]:
            label = row["label"] if row["label"] is not None else row["natural"]
            tip = f"{clean(label)} ({e['natural']} {clean(row['natural'])}): {row['count']:,} rows"
            if row["by"]:
                tip += " \u2014 " + ", ".join(f"{clean(t)} {n:,}" for t, n in sorted(row["by"].items()))
            items.append((clean(label), row["count"], tip))
        cards.append(
            f'<div class="chart-card"><h3>{code(e["table"])}: top {len(items)} of {e["entities"]:,}</h3>'
            + source_note(f"{refs} (rows referring to each {code(e['table'])} row), names from "
                   f"{code(e['table'] + '.' + e['display'])} \u00b7 {e['references']:,} references to "
                   f"{e['referenced']:,} distinct entities"
                   + (f"; {e['entities'] - e['referenced']:,} referred to by none"
                      if e["entities"] > e["referenced"] else ""))
            + hbar_chart(items) + "</div>")
    return '<div class="charts">' + "".join(cards) + "</div>"


def _lists_section(model: dict) -> str:
    found = model["data"]["lists"]
    if not found:
        return '<p class="note">No table is nested under another.</p>'
    cards = []
    for d in found:
        source = source_label({"sources": d["sources"]})
        mean = d["elements"] / d["owners"] if d["owners"] else 0
        cards.append(
            f'<div class="chart-card"><h3>{code(d["table"])}'
            + (f' <span class="note">({esc(source)})</span>' if source else "") + "</h3>"
            + source_note(f"{code(d['table'])} rows per {code(d['owner'])} row (joined on {code(d['column'])}), "
                   f"every {code(d['owner'])} row counted, those with none too \u00b7 {d['owners']:,} owners, "
                   f"{d['empty']:,} with none, {d['elements']:,} elements, mean {mean:.2f}, longest {d['longest']:,}")
            + histogram(length_bins(d["distribution"]), x_title=f"elements in the list of one {d['owner']} row",
                        y_title=f"number of {d['owner']} rows")
            + "</div>")
    return '<div class="charts">' + "".join(cards) + "</div>"


def _views_section(model: dict) -> str:
    if not model["views"]:
        return source_note(code("sqlite_master")) + '<p class="note">The database has no views.</p>'
    rows = [[f"<td>{code(v['name'])}</td>", cell((v["kind"] or "view").replace("_", " ")),
             f"<td>{code(v['table']) if v['table'] else NONE}</td>",
             cell(len(v["columns"])),
             f'<td class="wrap mono">{esc(", ".join(c["name"] for c in v["columns"]), 300)}</td>']
            for v in model["views"]]
    return (source_note(f"{code('sqlite_master')} and {code('PRAGMA table_info')} of each view; the data dictionary "
                 "describes every column") + table_html(["view", "kind", "of table", "#columns", "columns"], rows))


def write_report(database, path, manifest: dict | None = None, *, model: dict | None = None) -> str:
    """Write the HTML report of a SQLite database to ``path``; returns the path."""
    from ..outputs import staged_outputs

    model = model or read_database(database, manifest)
    with staged_outputs() as staged:  # whole or not at all: a temporary file, renamed when complete
        Path(staged.file(path)).write_text(render_report(model), encoding="utf-8")
        staged.commit()
    return str(path)


def write_outputs(database, manifest: dict | None = None, *, report_path=None, dictionary_path=None,
                  manifest_origin: str | None = None, shown_as=None, postgresql: dict | None = None,
                  plan=None) -> dict:
    """Write the HTML report and/or the data dictionary from one reading of the database (``postgresql``
    and ``plan``, the build's own: see ``catalog.read_database``)."""
    model = read_database(database, manifest, manifest_origin=manifest_origin, shown_as=shown_as,
                          postgresql=postgresql, plan=plan)
    written = {}
    if report_path:
        written["report"] = write_report(database, report_path, model=model)
    if dictionary_path:
        from ..outputs import staged_outputs

        with staged_outputs() as staged:
            Path(staged.file(dictionary_path)).write_text(render_dictionary(model), encoding="utf-8")
            staged.commit()
        written["dictionary"] = str(dictionary_path)
    return written


class UnreadableManifest(NormaliseError):
    """A manifest that cannot be read, is not JSON or lacks what a normalise manifest holds (the wrong file
    given: a usage error)."""

    exit_code = EXIT_USAGE


# What the report reads of a manifest, and the JSON type each must have (the rest is optional).
_MANIFEST_SHAPE = {"tables": list, "views": list, "inputs": list, "joins": list, "integrity": dict}


def read_manifest(path) -> dict:
    """A build's manifest (``build --manifest``), checked for what the report reads; one-line errors.

    Example:
        >>> import tempfile, os
        >>> p = os.path.join(tempfile.mkdtemp(), "m.json"); _ = open(p, "w").write('{"tables": 3}')
        >>> read_manifest(p)  # doctest: +ELLIPSIS
        Traceback (most recent call last):
        ...
        normalise.report.html.UnreadableManifest: --manifest ...m.json: not a normalise manifest: "tables" is a number, not a list
    """
    try:
        with open(path, encoding="utf-8") as f:
            text = f.read()
    except (OSError, UnicodeDecodeError) as exc:
        reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)
        raise UnreadableManifest(f"--manifest {path} could not be read: {reason}") from None
    try:
        doc = json.loads(text)
    except ValueError as exc:
        raise UnreadableManifest(f"--manifest {path}: not JSON ({exc})") from None
    problem = _manifest_problem(doc)
    if problem:
        raise UnreadableManifest(f"--manifest {path}: not a normalise manifest: {problem}")
    return doc


def _manifest_problem(doc) -> str | None:
    names = {dict: "an object", list: "a list", str: "a text", int: "a number", float: "a number",
             bool: "true or false", type(None): "null"}
    if not isinstance(doc, dict):
        return f"the document is {names.get(type(doc), type(doc).__name__)}, not an object"
    if "tables" not in doc:
        return 'it has no "tables"'
    for key, kind in _MANIFEST_SHAPE.items():
        if key in doc and not isinstance(doc[key], kind):
            return f'"{key}" is {names.get(type(doc[key]), type(doc[key]).__name__)}, not {names[kind]}'
    for key in ("tables", "views", "inputs"):
        for n, item in enumerate(doc.get(key, []), 1):
            field = "path" if key == "inputs" else "name"
            if not isinstance(item, dict) or not isinstance(item.get(field), str):
                return f'entry {n} of "{key}" has no "{field}" text'
    return None


def report_existing(database, manifest_path=None, report_path=None, dictionary_path=None) -> dict:
    """``normalise report``: the report and/or dictionary of an existing database, written whole or not at all.

    Reading (the database, the manifest) and writing fail with different one-line messages; an output
    path that is the database, the manifest or the other output is refused before anything is read.
    """
    from ..model.errors import UsageError
    from ..outputs import check_paths, staged_outputs, writing

    if not report_path and not dictionary_path:
        raise UsageError("report: give -o PATH.html, --dictionary PATH.md or both")
    check_paths([("input", database), ("input", manifest_path)], [("-o", report_path),
                                                                  ("--dictionary", dictionary_path)])
    manifest = read_manifest(manifest_path) if manifest_path else None
    with staged_outputs() as staged:
        try:
            model = read_database(database, manifest,
                                  manifest_origin=f"file {manifest_path}" if manifest_path else None)
        except sqlite3.Error as exc:
            raise UsageError(f"{database} could not be read as a SQLite database: {exc}") from None
        written = {}
        for what, path, render in (("report", report_path, render_report),
                                   ("dictionary", dictionary_path, render_dictionary)):
            if path:
                with writing("-o" if what == "report" else "--dictionary", path):
                    Path(staged.file(path)).write_text(render(model), encoding="utf-8")
                written[what] = str(path)
        staged.commit()
    return written
