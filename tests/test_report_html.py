"""Tests of the HTML report and the data dictionary (normalise/report/html.py, normalise/report/dictionary.py), and of
the reading of the database both render (normalise/report/catalog.py).

The references, named beside each check:

* the database itself, read with the ``sqlite3`` module: ``count(*)`` of each
  table, ``sqlite_master`` for the tables and views, ``PRAGMA table_info`` for
  the columns, and plain SQL written here for the entity frequencies and list
  lengths (never the report's own queries);
* the build's manifest (the JSON contract) for the rows read;
* Python's ``html.parser`` for what a browser would parse (tags, attributes);
* a real browser: Debian's headless Chromium (``--dump-dom`` for the DOM it
  built, its console log for script errors and blocked loads, ``--screenshot``
  for a picture kept under ``tests/artifacts/``). Without chromium the browser
  tests are skipped, except on CI (``CI=true``), where they fail.

Synthetic databases of 5 and 50 tables are written with the project's own
write pass from hand-made plans, so the diagram is checked at both sizes.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import sqlite3
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import pytest

from demo.generate import generate
from normalise.check import check_plan
from normalise.cli import main
from normalise.model.plan import Column, ForeignKey, Plan, Table
from normalise.report.catalog import read_database
from normalise.report.diagram import layout_schema, overlaps
from normalise.report.dictionary import render_dictionary
from normalise.report.html import render_report, write_outputs
from normalise.model.schema import add_tables
from normalise.write import write_sqlite

TITLES, CONTRIBUTIONS = "titles.csv", "contributions.csv"
ARTIFACTS = Path(__file__).parent / "artifacts"
BOX = re.compile(r'<g class="table-box[ "]')


# --- fixtures ---------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The demo export built with --report and --dictionary through the command line."""
    out = tmp_path_factory.mktemp("report")
    generate(out, size=120, seed=11)
    db, report, dictionary, manifest = (out / "demo.db", out / "demo.html", out / "demo.md", out / "demo.json")
    code = main(["build", str(out / TITLES), str(out / CONTRIBUTIONS), "--db", str(db), "--manifest", str(manifest),
                 "--report", str(report), "--dictionary", str(dictionary), "--quiet"])
    assert code == 0
    return {"db": db, "html": report.read_text(encoding="utf-8"), "md": dictionary.read_text(encoding="utf-8"),
            "manifest": json.loads(manifest.read_text(encoding="utf-8")), "dir": out}


def tables_of(db) -> list[str]:
    with sqlite3.connect(db) as con:
        return [r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type = 'table' "
                                          "AND name NOT LIKE 'sqlite_%'")]


def views_of(db) -> list[str]:
    with sqlite3.connect(db) as con:
        return [r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type = 'view'")]


def count(db, table: str) -> int:
    with sqlite3.connect(db) as con:
        return con.execute(f'SELECT count(*) FROM "{table}"').fetchone()[0]


def synthetic_database(path, *, records: int, entities: int, lists: int, nested: bool = True, meta: bool = True,
                       names: dict | None = None) -> tuple[Plan, dict]:
    """A database of record, entity, bridge, child and nested bridge tables, written by the write pass.

    Returns the plan and a manifest-like dict (tables with roles and sources). ``names`` renames
    tables, columns or values (for hostile names).
    """
    names = names or {}

    def n(x: str) -> str:
        return names.get(x, x)

    plan = Plan()
    if meta:
        add_tables(plan)  # with no records or entities: just the bookkeeping tables
    tables: list[Table] = []
    rows: dict[str, list[tuple]] = {t.name: [] for t in plan.tables}
    for e in range(entities):
        name = n(f"entity_{e}")
        tables.append(Table(name, "entity", [Column(f"entity_{e}_sk", "integer", False),
                                             Column("code", "text", False, unique=True, source="code"),
                                             Column("name", "text", source="name")],
                            [f"entity_{e}_sk"], natural_key=["code"],
                            sources=[{"file": "export_0", "column": f"list_{e}"}]))
        rows[name] = [(i + 1, f"E{e}-{i}", n(f"entity {e} #{i}")) for i in range(4)]
    serial = 1000
    for r in range(records):
        rec, rk = n(f"record_{r}"), f"record_{r}_sk"
        tables.append(Table(rec, "record", [Column(rk, "integer", False),
                                            Column("key", "text", False, unique=True, source="key"),
                                            Column(n("label"), "text", source="label")],
                            [rk], natural_key=["key"], sources=[{"file": f"export_{r}", "column": None}]))
        rows[rec] = [(k + 1, f"R{r}-{k}", f"record {k}") for k in range(5)]
        for j in range(lists):
            ent = (r + j) % entities
            ek, name = f"entity_{ent}_sk", f"record_{r}_list_{j}"
            tables.append(Table(name, "bridge",
                                [Column(f"{name}_sk", "integer", False), Column(rk, "integer", False),
                                 Column(ek, "integer", False), Column("list_position", "integer", False),
                                 Column("role", "text", source="role")],
                                [f"{name}_sk"], position_column="list_position",
                                foreign_keys=[ForeignKey([rk], rec, [rk]), ForeignKey([ek], n(f"entity_{ent}"), [ek])],
                                unique=[[rk, "list_position"]],
                                sources=[{"file": f"export_{r}", "column": f"list_{j}"}]))
            rows[name] = []
            for k in range(5):  # record k has k elements (0 to 4)
                for p in range(k):
                    serial += 1
                    rows[name].append((serial, k + 1, (k + p) % 4 + 1, p + 1, "author"))
        if nested:
            child, ck = f"record_{r}_items", f"record_{r}_items_sk"
            tables.append(Table(child, "child", [Column(ck, "integer", False), Column(rk, "integer", False),
                                                 Column("list_position", "integer", False),
                                                 Column("note", "text", source="note")],
                                [ck], position_column="list_position", foreign_keys=[ForeignKey([rk], rec, [rk])],
                                unique=[[rk, "list_position"]], sources=[{"file": f"export_{r}", "column": "items"}]))
            rows[child] = [(k * 10 + p, k + 1, p + 1, "x") for k in range(5) for p in range(2)]
            inner, ek = f"record_{r}_items_tags", f"entity_{r % entities}_sk"
            tables.append(Table(inner, "bridge",
                                [Column(f"{inner}_sk", "integer", False), Column(ck, "integer", False),
                                 Column(ek, "integer", False), Column("list_position", "integer", False)],
                                [f"{inner}_sk"], position_column="list_position",
                                foreign_keys=[ForeignKey([ck], child, [ck]),
                                              ForeignKey([ek], n(f"entity_{r % entities}"), [ek])],
                                unique=[[ck, "list_position"]],
                                sources=[{"file": f"export_{r}", "column": "items.tags"}]))
            rows[inner] = [(i + 1, ck_, 1, 1) for i, (ck_, *_) in enumerate(rows[child])]
    plan.tables = tables + plan.tables
    for t in plan.tables:
        rows.setdefault(t.name, [])
    rows.update({k: v for k, v in (names.get("_meta_rows") or {}).items()})
    write_sqlite(plan, rows, check_plan(plan), str(path), replace=True)
    manifest = {"tables": [{"name": t.name, "role": t.role, "rows": len(rows[t.name]), "sources": t.sources,
                            "primary_key": t.primary_key, "natural_key": t.natural_key,
                            "position_column": t.position_column,
                            "foreign_keys": [{"columns": f.columns, "references": f.references,
                                              "ref_columns": f.ref_columns} for f in t.foreign_keys],
                            "columns": [{"name": c.name, "type": c.type, "nullable": c.nullable, "source": c.source}
                                        for c in t.columns]} for t in plan.tables],
                "views": [], "inputs": [], "joins": []}
    return plan, manifest


class Tags(HTMLParser):
    """Every start tag with its attributes, as a browser's parser sees them."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    handle_startendtag = handle_starttag


def parse(page: str) -> list[tuple[str, dict]]:
    p = Tags()
    p.feed(page)
    return p.tags


# --- the page: self-contained, one box per table, numbers from the database -------------------------

def test_self_contained(demo):
    page = demo["html"]
    tags = parse(page)
    for tag, attrs in tags:
        for key in ("src", "href", "xlink:href", "action", "data", "poster"):
            value = attrs.get(key)
            if value is not None:
                assert value.startswith("#"), (tag, key, value)  # in-page anchors only
    assert not [t for t, _ in tags if t in ("script", "link", "iframe", "object", "embed", "img", "base")]
    assert "url(" not in page and "@import" not in page and "@font-face" not in page
    assert "http:" not in page and "https:" not in page  # the demo data names no address either
    assert not re.search(r"(?:src|href)\s*=\s*[\"']?(?:https?:)?//", page)
    csp = [a["content"] for t, a in tags if t == "meta" and a.get("http-equiv") == "Content-Security-Policy"]
    assert csp and "default-src 'none'" in csp[0]


def test_one_box_per_table_and_one_line_per_foreign_key(demo):
    db, page = demo["db"], demo["html"]
    names = tables_of(db)
    assert len(BOX.findall(page)) == len(names) == 16  # 8 data tables, 8 bookkeeping tables
    boxed = [a["data-table"] for t, a in parse(page) if t == "g" and "table-box" in a.get("class", "").split()]
    assert sorted(boxed) == sorted(names)
    with sqlite3.connect(db) as con:
        fks = sum(len({r[0] for r in con.execute(f'PRAGMA foreign_key_list("{n}")')}) for n in names)
    assert len(re.findall(r'<g class="fk-edge', page)) == fks == 8


def test_row_counts_come_from_the_tables(demo):
    db, page = demo["db"], demo["html"]
    shown = dict(re.findall(r'<tr data-table="([^"]+)">.*?data-rows="(\d+)"', page))
    assert shown == {n: str(count(db, n)) for n in tables_of(db)}


@pytest.mark.parametrize("section, table", [("quarantine", "quarantined_cells"), ("rejected", "rejected_rows"),
                                            ("set-aside", "set_aside_rows"), ("unmatched", "unmatched_rows"),
                                            ("conflicts", "attribute_variants")])
def test_each_problem_section_names_its_table(demo, section, table):
    db, page = demo["db"], demo["html"]
    body = re.search(rf'<section id="{section}">(.*?)</section>', page, re.S).group(1)
    source = re.search(r'<p class="source">from <code>([^<]+)</code> \u00b7 ([\d,]+) ', body)
    assert source.group(1) == table
    if section != "conflicts":
        assert int(source.group(2).replace(",", "")) == count(db, table)
        shown = max(len(re.findall(r"<tr>", body)) - 1, 0)  # minus the header row
        assert shown == min(count(db, table), 50)


def test_quarantined_cells_listed_with_line_and_message(demo):
    page = demo["html"]
    with sqlite3.connect(demo["db"]) as con:
        cells = con.execute("SELECT line, column_name, message FROM quarantined_cells").fetchall()
    assert cells
    body = re.search(r'<section id="quarantine">(.*?)</section>', page, re.S).group(1)
    for line, column, message in cells:
        assert re.search(rf'<td class="num">{line}</td><td class="wrap">{re.escape(column)}</td>', body)
        assert message[:60].replace("'", "&#x27;").replace('"', "&quot;") in body


def test_reconciliation_shows_the_manifest_counts(demo):
    page, manifest = demo["html"], demo["manifest"]
    body = re.search(r'<section id="reconciliation">(.*?)</section>', page, re.S).group(1)
    for i in manifest["inputs"]:
        row = re.search(rf"<tr><td><code>{re.escape(i['path'])}</code></td>(.*?)</tr>", body).group(1)
        numbers = [int(x.replace(",", "")) for x in re.findall(r'<td class="num">([\d,]+)</td>', row)]
        assert numbers[:4] == [i["rows_read"], i["records_loaded"], i["rows_set_aside"], i["rows_rejected"]]
        assert "= " in row and "\u2260" not in row
    assert 'class="num bad"' not in body  # every cross-check against the tables agrees
    integrity = re.search(r'<section id="integrity">(.*?)</section>', page, re.S).group(1)
    # the b-tree check the build ran (quick_check by default, --verify) and no other
    assert manifest["integrity"]["btree_check"] == "quick_check"
    assert "PRAGMA foreign_key_check" in integrity and "PRAGMA quick_check" in integrity


def test_entity_frequencies_and_list_lengths_match_sql(demo):
    db = demo["db"]
    model = read_database(db, demo["manifest"])
    person = next(e for e in model["data"]["entities"] if e["table"] == "person")
    with sqlite3.connect(db) as con:
        expected = con.execute(
            "SELECT p.name, count(*) AS n FROM (SELECT person_sk FROM title_contributors UNION ALL "
            "SELECT person_sk FROM title_production_team) b JOIN person p USING (person_sk) "
            "GROUP BY p.person_sk ORDER BY n DESC, p.name LIMIT 15").fetchall()
        titles = con.execute("SELECT count(*) FROM titles").fetchone()[0]
        lengths = dict(con.execute(
            "SELECT n, count(*) FROM (SELECT t.title_sk, (SELECT count(*) FROM title_subjects s "
            "WHERE s.title_sk = t.title_sk) AS n FROM titles t) GROUP BY n").fetchall())
    assert [(r["label"], r["count"]) for r in person["top"]] == expected
    subjects = next(d for d in model["data"]["lists"] if d["table"] == "title_subjects")
    assert dict(subjects["distribution"]) == lengths
    assert subjects["owners"] == titles and subjects["elements"] == count(db, "title_subjects")
    assert {d["table"] for d in model["data"]["lists"]} == {"title_contributors", "title_production_team",
                                                             "title_subjects", "title_formats"}
    page = demo["html"]
    assert f">{expected[0][1]:,}</text>" in page  # the top bar's value is printed


def test_report_of_an_existing_database_reads_the_catalog(demo, tmp_path):
    """Without a manifest the roles, owners and keys are inferred from the catalog, and agree with the build's."""
    db = demo["db"]
    bare = read_database(db)
    full = read_database(db, demo["manifest"])
    assert bare["manifest"] is None
    assert {t["name"]: t["role"] for t in bare["tables"]} == {t["name"]: t["role"] for t in full["tables"]}
    assert {t["name"]: t["natural_key"] for t in bare["tables"]} == \
           {t["name"]: t["natural_key"] for t in full["tables"]}
    for a in bare["tables"]:
        b = next(t for t in full["tables"] if t["name"] == a["name"])
        assert [(f["references"], f["owner"]) for f in a["foreign_keys"]] == \
               [(f["references"], f["owner"]) for f in b["foreign_keys"]]
    out = tmp_path / "again.html"
    assert main(["report", str(db), "-o", str(out), "--dictionary", str(tmp_path / "again.md")]) == 0
    page = out.read_text(encoding="utf-8")
    assert len(BOX.findall(page)) == len(tables_of(db))
    assert "rows were read" in page or "does not record how many rows were read" in page
    assert main(["report", str(db), "-o", str(tmp_path / "m.html"), "--manifest",
                 str(demo["dir"] / "demo.json")]) == 0
    assert main(["report", str(db)]) == 2  # neither -o nor --dictionary
    assert main(["report", str(tmp_path / "missing.db"), "-o", str(tmp_path / "x.html")]) == 2


def test_report_is_deterministic(demo):
    model = read_database(demo["db"], demo["manifest"])
    assert render_report(model) == render_report(read_database(demo["db"], demo["manifest"]))
    assert render_report(model).replace("(the build)", "") == demo["html"].replace("(the build)", "")


# --- the diagram at 5 and at 52 tables (44 data tables and the 8 bookkeeping tables) --------------------------------------------------------------

@pytest.mark.parametrize("size, shape", [(5, dict(records=1, entities=1, lists=1, meta=False)),
                                         (52, dict(records=6, entities=8, lists=3))])
@pytest.mark.parametrize("with_manifest", [True, False])
def test_layout_has_one_box_per_table_and_no_overlap(tmp_path, size, shape, with_manifest):
    db = tmp_path / f"s{size}.db"
    plan, manifest = synthetic_database(db, **shape)
    assert len(plan.tables) == size
    model = read_database(db, manifest if with_manifest else None)
    layout = layout_schema(model)
    assert len(layout.boxes) == size
    assert overlaps(layout) == []
    for b in layout.boxes.values():  # inside the drawing
        assert 0 <= b.x and b.x + b.w <= layout.width and 0 <= b.y and b.y + b.h <= layout.height
    bands = [(b["x"], b["y"], b["x"] + b["w"], b["y"] + b["h"]) for b in layout.bands]
    for i, a in enumerate(bands):  # groups do not overlap either
        for c in bands[i + 1:]:
            assert not (a[0] < c[2] and c[0] < a[2] and a[1] < c[3] and c[1] < a[3]), (a, c)
    for b in layout.boxes.values():  # every box inside its group
        band = next(x for x in layout.bands if b.name in x["members"])
        assert band["x"] <= b.x and b.x + b.w <= band["x"] + band["w"]
        assert band["y"] <= b.y and b.y + b.h <= band["y"] + band["h"]
    # a real layout: several columns and rows, not one line of boxes
    assert len({b.x for b in layout.boxes.values()}) >= (3 if size > 5 else 2)
    assert len({b.y for b in layout.boxes.values()}) >= 3
    # nested tables stand right of their owner, entities right of everything that names them
    for t in model["tables"]:
        for f in t["foreign_keys"]:
            child, parent = layout.boxes[t["name"]], layout.boxes[f["references"]]
            if f["owner"]:
                assert parent.x + parent.w < child.x
            else:
                assert child.x + child.w < parent.x
    page = render_report(model)
    assert len(BOX.findall(page)) == size
    assert layout_schema(model).boxes.keys() == layout.boxes.keys()
    assert [(b.x, b.y) for b in layout_schema(model).boxes.values()] == [(b.x, b.y) for b in layout.boxes.values()]


def test_fifty_tables_grouped_by_export(tmp_path):
    db = tmp_path / "s50.db"
    _, manifest = synthetic_database(db, records=6, entities=8, lists=3)
    layout = layout_schema(read_database(db, manifest))
    exports = [b for b in layout.bands if b["kind"] == "export"]
    assert [b["label"] for b in exports] == [f"export export_{r}" for r in range(6)]
    for r, band in enumerate(exports):
        assert all(m.startswith(f"record_{r}") for m in band["members"])
    assert {b["kind"] for b in layout.bands} == {"export", "entities", "meta"}


# --- hostile names ----------------------------------------------------------------------------------

HOSTILE = {
    "record_0": '<script>alert("r")</script>',
    "entity_0": "</text></svg><img src=x onerror=alert(1)>",
    "label": '"><b onmouseover=alert(2)>label|x</b>',
    "entity 0 #0": "<script>alert(3)</script>",
    "entity 0 #1": 'Ann & "Bob" | *x* `y`',
}


def test_hostile_names_are_escaped(tmp_path):
    db = tmp_path / "hostile.db"
    names = dict(HOSTILE)
    names["_meta_rows"] = {
        "quarantined_cells": [(1, "javascript:alert(4)", 3, "<i>col</i>", 1, "<iframe src=//evil>",
                               '<iframe src="https://evil.example/"></iframe>')],
        "rejected_rows": [(1, "f.csv", 7, "bad <svg onload=alert(5)>", "raw\x00 <script>")],
    }
    plan, manifest = synthetic_database(db, records=2, entities=2, lists=2, names=names)
    with sqlite3.connect(db) as con:  # text that is not UTF-8, as a foreign database may hold
        con.execute("UPDATE rejected_rows SET file = CAST(X'66e92e637376' AS TEXT)")
    for with_manifest in (True, False):
        model = read_database(db, manifest if with_manifest else None)
        page = render_report(model)
        tags = parse(page)
        assert {t for t, _ in tags} <= {"html", "head", "meta", "title", "style", "body", "main", "h1", "h2", "h3",
                                        "p", "div", "nav", "a", "section", "table", "thead", "tbody", "tr", "th",
                                        "td", "code", "span", "b", "br", "footer", "svg", "g", "rect", "path",
                                        "text", "tspan", "circle"}
        for tag, attrs in tags:
            assert not [k for k in attrs if k.startswith("on")], (tag, attrs)
            for key in ("src", "href"):
                assert attrs.get(key) is None or attrs[key].startswith("#")
        assert "&lt;script&gt;alert(&quot;r&quot;)&lt;/script&gt;" in page
        assert "&lt;/text&gt;&lt;/svg&gt;&lt;img src=x onerror=alert(1)&gt;" in page
        assert "\\x00" in page and "\\udce9" in page  # control characters and lone surrogates as escapes
        assert len(BOX.findall(page)) == len(plan.tables)
        assert overlaps(layout_schema(model)) == []
        text = render_dictionary(model)
        assert "<script" not in re.sub(r"`[^`]*`", "", text)  # raw markup only inside code spans
        for line in text.splitlines():
            if line.startswith("| `") and "label" in line:  # the hostile column's row keeps its cells
                assert len(re.findall(r"(?<!\\)\|", line)) == 7, line


# --- the data dictionary ----------------------------------------------------------------------------

def test_dictionary_lists_every_table_view_and_column(demo):
    db, text = demo["db"], demo["md"]
    for name in tables_of(db) + views_of(db):
        assert f"### `{name}`" in text
    with sqlite3.connect(db) as con:
        for name in tables_of(db) + views_of(db):
            section = text.split(f"### `{name}`", 1)[1].split("\n### ", 1)[0]
            for column in [r[1] for r in con.execute(f'PRAGMA table_info("{name}")')]:
                assert f"| `{column}` |" in section, (name, column)
    bridge = text.split("### `title_contributors`", 1)[1].split("\n### ", 1)[0]
    assert "`contributions` column `contributors`" in bridge
    assert "FK \u2192 `titles`.`title_sk`" in bridge and "FK \u2192 `person`.`person_sk`" in bridge
    assert "| `role` | text | may be NULL |  | field `role` of the objects in `contributions` column `contributors` |" \
        in bridge
    titles = text.split("### `titles`", 1)[1].split("\n### ", 1)[0]
    assert "| `release_date` | date" in titles and "| `title_key` | text | never NULL | NK | `titles` column" in titles


def test_dictionary_from_the_command_line(demo, tmp_path):
    out = tmp_path / "dict.md"
    assert main(["report", str(demo["db"]), "--dictionary", str(out), "--manifest",
                 str(demo["dir"] / "demo.json")]) == 0
    assert out.read_text(encoding="utf-8") == demo["md"].replace("(the build)",
                                                                 f"(file {demo['dir'] / 'demo.json'})")


# --- in a real browser ------------------------------------------------------------------------------

def chromium() -> str:
    found = shutil.which("chromium") or shutil.which("chromium-browser")
    if not found:
        if os.environ.get("CI") == "true":
            pytest.fail("chromium is not installed (.ci/run installs Debian's chromium)")
        pytest.skip("chromium is not installed")
    return found


def run_chromium(page: Path, profile: Path, *args: str) -> subprocess.CompletedProcess:
    command = [chromium(), "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
               "--disable-background-networking", "--disable-component-update", "--disable-sync",
               "--disable-dev-shm-usage", f"--user-data-dir={profile}", "--enable-logging=stderr", "--v=0",
               *args, page.resolve().as_uri()]
    return subprocess.run(command, capture_output=True, text=True, timeout=240)


def console_messages(stderr: str) -> list[str]:
    """What the page said on the console: script errors, refused loads, CSP violations."""
    return [line for line in stderr.splitlines() if ":CONSOLE" in line or "Uncaught" in line]


def test_report_renders_in_chromium(demo, tmp_path):
    page = demo["dir"] / "demo.html"
    dumped = run_chromium(page, tmp_path / "profile", "--dump-dom")
    assert dumped.returncode == 0, dumped.stderr[-2000:]
    assert console_messages(dumped.stderr) == []
    dom = dumped.stdout
    assert len(BOX.findall(dom)) == len(tables_of(demo["db"])) == 16  # 8 data tables, 8 bookkeeping tables
    assert len(re.findall(r'<svg class="chart', dom)) >= 7  # 3 entity charts and 4 list-length charts
    shot = tmp_path / "report.png"
    taken = run_chromium(page, tmp_path / "profile", f"--screenshot={shot}", "--window-size=1600,2400",
                         "--hide-scrollbars")
    assert taken.returncode == 0 and shot.is_file(), taken.stderr[-2000:]
    assert shot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and shot.stat().st_size > 50_000
    ARTIFACTS.mkdir(exist_ok=True)
    (ARTIFACTS / ".gitignore").write_text("*\n")
    shutil.copy(shot, ARTIFACTS / "report.png")
    shutil.copy(page, ARTIFACTS / "report.html")
    print(f"screenshot: {ARTIFACTS / 'report.png'}")


def test_fifty_table_report_renders_in_chromium(tmp_path):
    db = tmp_path / "s50.db"
    _, manifest = synthetic_database(db, records=6, entities=8, lists=3)
    page = tmp_path / "s50.html"
    write_outputs(db, manifest, report_path=page)
    dumped = run_chromium(page, tmp_path / "profile", "--dump-dom")
    assert dumped.returncode == 0, dumped.stderr[-2000:]
    assert console_messages(dumped.stderr) == []
    assert len(BOX.findall(dumped.stdout)) == 52  # 44 data tables and the 8 bookkeeping tables
    shot = tmp_path / "s50.png"
    run_chromium(page, tmp_path / "profile", f"--screenshot={shot}", "--window-size=1600,2400", "--hide-scrollbars")
    assert shot.is_file()
    ARTIFACTS.mkdir(exist_ok=True)
    (ARTIFACTS / ".gitignore").write_text("*\n")
    shutil.copy(shot, ARTIFACTS / "report-50-tables.png")
