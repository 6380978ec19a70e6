"""HTML report of a written SQLite database: one self-contained file a person opens in a browser.

The report shows the schema as an entity-relationship diagram (inline SVG, laid
out with a layered graph layout), the row count of every table, the
reconciliation of rows and nested elements, SQLite's integrity checks, the
quarantined cells, rejected, set-aside and unmatched rows, the attribute
conflicts, the most frequent entities and the distribution of list lengths.

Everything is read back from the database itself (``catalog.read_database``:
the catalog, ``count(*)`` of each table and the bookkeeping tables). The run's
manifest (returned by the build, or given as a file) adds what the database
cannot say: roles, where each table and column came from in the input, and the
rows read. Every number is labelled with the table (or the manifest) it comes from.

The file has no script and loads nothing: inline CSS and inline SVG only, and a
Content-Security-Policy that forbids any other source. Every text taken from the
database is escaped, since names and values come from untrusted exports.
"""

from __future__ import annotations

import html
import json
import math
import sqlite3
from collections import defaultdict
from dataclasses import dataclass, field
from pathlib import Path

import networkx as nx

from .catalog import HEAD_ROWS, NOT_APPLICABLE, read_database
from .describe import owner_fk, source_label
from .dictionary import render_dictionary
from .errors import EXIT_USAGE, NormaliseError
from .escapes import clean
from .plan import META_ROLES, META_TABLES

_NONE = "<span class=null>\u2014</span>"
_NE, _DASH = "\u2260", "\u2014"


# --- text that is safe to show --------------------------------------------------------------------

def shorten(text: str, limit: int | None) -> str:
    if limit and len(text) > limit:
        return text[:max(limit - 1, 1)] + "\u2026"
    return text


def esc(value, limit: int | None = None) -> str:
    """HTML-escaped text (quotes too, so it is safe in attributes), cut to ``limit`` characters.

    Example:
        >>> esc('<img src=x onerror="alert(1)">')
        '&lt;img src=x onerror=&quot;alert(1)&quot;&gt;'
    """
    return html.escape(shorten(clean(value), limit), quote=True)


def _n(count: int, noun: str) -> str:
    """A count and its noun, plural when it is not one.

    Example:
        >>> _n(1, "conflict"), _n(1200, "row")
        ('1 conflict', '1,200 rows')
    """
    return f"{count:,} {noun}{'' if count == 1 else 's'}"


def _num(n) -> str:
    return f"{n:,}" if isinstance(n, int) and not isinstance(n, bool) else esc(n)


# --- the diagram's layout ---------------------------------------------------------------------------

CHAR = 6.7  # width of one character of the 11px monospace text in the boxes (0.6 em, rounded up)
NAME_CHAR = 7.9  # 13px bold monospace
ROW = 17
HEAD = 38
FOOT = 20
PAD = 9
MIN_W, MAX_W = 170, 340
HGAP = 96  # between columns: room for the lines and their end marks
VGAP = 16
BAND_PAD = 14
BAND_LABEL = 22
BAND_GAP = 26
MARGIN = 16


@dataclass
class Box:
    name: str
    role: str
    w: float
    h: float
    lines: list  # (kind, mark, text, fk index or None)
    sub: str
    footer: str
    x: float = 0.0
    y: float = 0.0
    group: str = ""

    def rect(self) -> tuple[float, float, float, float]:
        return self.x, self.y, self.x + self.w, self.y + self.h

    def row_y(self, index: int) -> float:
        return self.y + HEAD + index * ROW + ROW / 2


@dataclass
class Layout:
    boxes: dict[str, Box]
    bands: list[dict] = field(default_factory=list)  # label, x, y, w, h, kind
    edges: list[dict] = field(default_factory=list)
    columns: list[tuple[float, float]] = field(default_factory=list)  # (x, width) of the nesting columns
    width: float = 0.0
    height: float = 0.0


def _box(table: dict) -> Box:
    max_chars = int((MAX_W - 2 * PAD - 24) / CHAR)
    lines = []
    for c in table["primary_key"]:
        lines.append(("pk", "PK", c, None))
    for i, f in enumerate(table["foreign_keys"]):
        lines.append(("fk", "FK", f"{', '.join(f['columns'])} \u2192 {f['references']}", i))
    for c in table["natural_key"]:
        if c not in table["primary_key"]:
            lines.append(("nk", "NK", c, None))
    shown = set(table["primary_key"]) | set(table["natural_key"])
    shown |= {c for f in table["foreign_keys"] for c in f["columns"]}
    more = len([c for c in table["columns"] if c["name"] not in shown])
    if more:
        lines.append(("more", "", f"+ {more} more column{'s' if more != 1 else ''}", None))
    lines = [(k, m, shorten(clean(t), max_chars), i) for k, m, t, i in lines]
    role = table["role"] or "table"
    sub = f"{role} \u00b7 {table['rows']:,} row{'s' if table['rows'] != 1 else ''}"
    footer = source_label(table)
    footer = shorten(clean("from " + footer if footer else ("bookkeeping" if role in META_ROLES else "")),
                     int((MAX_W - 2 * PAD) / 6.6))
    name = shorten(clean(table["name"]), int((MAX_W - 2 * PAD) / NAME_CHAR))
    width = max([len(name) * NAME_CHAR, len(sub) * (CHAR - 0.6), len(footer) * 6.6]
                + [len(t) * CHAR + 24 for _, _, t, _ in lines]) + 2 * PAD
    width = min(max(MIN_W, math.ceil(width)), MAX_W)
    height = HEAD + max(len(lines), 1) * ROW + (FOOT if footer else 6)
    return Box(name=table["name"], role=role, w=width, h=height, lines=lines, sub=sub, footer=footer)


def schema_graph(model: dict) -> nx.DiGraph:
    """Tables (nodes) and foreign keys (edges from the referencing table to the referenced one)."""
    graph = nx.DiGraph()
    for t in model["tables"]:
        graph.add_node(t["name"], role=t["role"])
    for t in model["tables"]:
        for i, f in enumerate(t["foreign_keys"]):
            if f["references"] in graph and f["references"] != t["name"]:
                graph.add_edge(t["name"], f["references"], index=i, owner=f["owner"])
    return graph


def layout_schema(model: dict, rounds: int = 4) -> Layout:
    """A deterministic layered layout of the schema.

    Each record table starts a horizontal band holding the tables nested under
    it, one column per depth of nesting (owner foreign keys followed back to
    the record); entity tables share a column to the right, the bookkeeping
    tables a band at the bottom. Within a column the tables are ordered by the
    barycentre of the tables they link to (a few sweeps, as in Sugiyama-style
    layouts), so lines cross as little as the layering allows. No two boxes
    overlap: each column is stacked top-down.
    """
    tables = {t["name"]: t for t in model["tables"]}
    order = {n: i for i, n in enumerate(tables)}
    graph = schema_graph(model)
    boxes = {n: _box(t) for n, t in tables.items()}
    meta = [n for n, t in tables.items() if t["role"] in META_ROLES]
    entities = [n for n, t in tables.items() if t["role"] == "entity" and n not in meta]
    rest = [n for n in tables if n not in meta and n not in entities]
    rest_set = set(rest)
    owner = {}
    for n in rest:
        fk = owner_fk(tables[n])
        if fk and fk["references"] in rest_set and fk["references"] != n:
            owner[n] = fk["references"]
    home, depth = {}, {}
    for n in rest:
        cur, d, seen = n, 0, {n}
        while cur in owner and owner[cur] not in seen:
            cur = owner[cur]
            seen.add(cur)
            d += 1
        home[n], depth[n] = cur, d
    roots = [n for n in rest if home[n] == n]
    for n in rest:  # a cycle of owners: its tables hang under the first table of it met
        if home[n] not in roots:
            home[n], depth[n] = n, 0
            roots.append(n)
    max_depth = max([depth[n] for n in rest], default=-1)
    col_w = [max([boxes[n].w for n in rest if depth[n] == d], default=MIN_W) for d in range(max_depth + 1)]
    col_x = []
    x = MARGIN + BAND_PAD
    for w in col_w:
        col_x.append(x)
        x += w + HGAP
    entity_x = x
    entity_w = max([boxes[n].w for n in entities], default=0)
    columns = {r: defaultdict(list) for r in roots}
    for n in rest:
        columns[home[n]][depth[n]].append(n)
    neighbours = {n: sorted(set(graph.successors(n)) | set(graph.predecessors(n)), key=order.get) for n in tables}

    def centre(n):
        return boxes[n].y + boxes[n].h / 2

    for r in roots:  # first order: by owner, then by the column the table came from, then the plan's order
        for d in sorted(columns[r]):
            if d:
                columns[r][d].sort(key=lambda n: (columns[r][d - 1].index(owner[n]), source_label(tables[n]), order[n]))

    bands = []
    for round_ in range(rounds):
        bands = []
        y = MARGIN
        for r in roots:
            top = y + BAND_LABEL + BAND_PAD
            bottom = top
            cols = columns[r]
            for d in sorted(cols):
                if d == 0:
                    continue
                prev = top - VGAP
                for n in cols[d]:
                    b = boxes[n]
                    b.x = col_x[d]
                    want = boxes[owner[n]].y if d > 1 else top
                    b.y = max(prev + VGAP, want)
                    prev = b.y + b.h
                    bottom = max(bottom, prev)
            root = boxes[r]
            root.x = col_x[0]
            if cols.get(1):
                first, last = boxes[cols[1][0]], boxes[cols[1][-1]]
                root.y = max(top, (first.y + last.y + last.h) / 2 - root.h / 2)
            else:
                root.y = top
            bottom = max(bottom, root.y + root.h)
            right = max(col_x[d] + col_w[d] for d in cols) + BAND_PAD
            bands.append({"kind": "export", "root": r, "x": MARGIN, "y": y, "w": right - MARGIN,
                          "h": bottom + BAND_PAD - y, "members": [n for d in sorted(cols) for n in cols[d]]})
            y = bottom + BAND_PAD + BAND_GAP
        # entities: at the barycentre of the tables that refer to them, stacked without overlap
        first_top = MARGIN + BAND_LABEL + BAND_PAD
        targets = {}
        for n in entities:
            near = [centre(m) for m in neighbours[n] if m in rest_set]
            targets[n] = sum(near) / len(near) if near else math.inf
        prev = first_top - VGAP
        for n in sorted(entities, key=lambda n: (targets[n], order[n])):
            b = boxes[n]
            b.x = entity_x
            want = targets[n] - b.h / 2 if targets[n] != math.inf else prev + VGAP
            b.y = max(prev + VGAP, want, first_top)
            prev = b.y + b.h
        if round_ == rounds - 1:
            break
        # reorder each column by the barycentre of its neighbours, keeping the tables of one owner together
        for r in roots:
            for d in sorted(columns[r]):
                if not d:
                    continue

                def bary(n):
                    near = [centre(m) for m in neighbours[n] if m != owner.get(n)]
                    return sum(near) / len(near) if near else centre(n)
                columns[r][d].sort(key=lambda n: (columns[r][d - 1].index(owner[n]), bary(n), order[n]))
    bottom = max([b["y"] + b["h"] for b in bands], default=MARGIN)
    if entities:
        ent = [boxes[n] for n in entities]
        top = min(b.y for b in ent) - BAND_LABEL - BAND_PAD
        ebottom = max(b.y + b.h for b in ent) + BAND_PAD
        bands.append({"kind": "entities", "x": entity_x - BAND_PAD, "y": top, "w": entity_w + 2 * BAND_PAD,
                      "h": ebottom - top, "members": entities})
        bottom = max(bottom, ebottom)
    width = max(entity_x + entity_w + BAND_PAD if entities else (col_x[-1] + col_w[-1] + BAND_PAD if col_x else 0),
                MARGIN + 3 * (MIN_W + 40)) + MARGIN
    if meta:
        y0 = bottom + BAND_GAP
        x, y, row_h = MARGIN + BAND_PAD, y0 + BAND_LABEL + BAND_PAD, 0.0
        for n in meta:
            b = boxes[n]
            if x + b.w > width - MARGIN - BAND_PAD and x > MARGIN + BAND_PAD:
                x, y, row_h = MARGIN + BAND_PAD, y + row_h + VGAP, 0.0
            b.x, b.y = x, y
            x += b.w + 40
            row_h = max(row_h, b.h)
        right = max(boxes[n].x + boxes[n].w for n in meta) + BAND_PAD
        bands.append({"kind": "meta", "x": MARGIN, "y": y0, "w": right - MARGIN, "h": y + row_h + BAND_PAD - y0,
                      "members": meta})
        bottom = y + row_h + BAND_PAD
    for band in bands:
        for n in band["members"]:
            boxes[n].group = band["kind"]
        band["label"] = _band_label(band, tables)
    edges = []
    for t in model["tables"]:
        for i, f in enumerate(t["foreign_keys"]):
            if f["references"] in boxes:
                edges.append({"table": t["name"], "index": i, "references": f["references"],
                              "unique": f["unique"], "owner": f["owner"]})
    return Layout(boxes=boxes, bands=bands, edges=edges, columns=list(zip(col_x, col_w)), width=math.ceil(width),
                  height=math.ceil(bottom + MARGIN))


def _band_label(band: dict, tables: dict) -> str:
    if band["kind"] == "entities":
        return "entities (shared)"
    if band["kind"] == "meta":
        return "bookkeeping: what was set aside, rejected, quarantined or found in conflict"
    root = tables[band["root"]]
    files = []
    for n in band["members"]:
        for s in tables[n].get("sources") or []:
            if s.get("file") and s["file"] not in files:
                files.append(str(s["file"]))
    if not files:
        return f"export of table {root['name']}"
    if len(files) == 1:
        return f"export {files[0]}"
    return f"export {files[0]}, joined with " + ", ".join(files[1:])


def overlaps(layout: Layout) -> list[tuple[str, str]]:
    """Pairs of boxes whose rectangles intersect (none, in a layout from ``layout_schema``)."""
    found = []
    items = sorted(layout.boxes.values(), key=lambda b: b.x)
    for i, a in enumerate(items):
        ax0, ay0, ax1, ay1 = a.rect()
        for b in items[i + 1:]:
            bx0, by0, bx1, by1 = b.rect()
            if bx0 >= ax1:
                break
            if ax0 < bx1 and bx0 < ax1 and ay0 < by1 and by0 < ay1:
                found.append((a.name, b.name))
    return found


# --- SVG --------------------------------------------------------------------------------------------

def _f(v: float) -> str:
    return f"{v:.1f}".rstrip("0").rstrip(".")


def render_diagram(layout: Layout) -> str:
    """The schema as one inline SVG element: a group of class ``table-box`` per table."""
    out = [f'<svg class="er" width="{layout.width}" height="{layout.height}" '
           f'viewBox="0 0 {layout.width} {layout.height}" role="img" aria-labelledby="er-title">',
           '<title id="er-title">Tables and the foreign keys that link them</title>']
    for band in layout.bands:
        out.append(f'<g class="band band-{band["kind"]}"><rect x="{_f(band["x"])}" y="{_f(band["y"])}" '
                   f'width="{_f(band["w"])}" height="{_f(band["h"])}" rx="6"/>'
                   f'<text x="{_f(band["x"] + 10)}" y="{_f(band["y"] + 16)}">{esc(band["label"], 90)}</text></g>')
    ends: set = set()
    lanes: dict = defaultdict(int)
    for e in layout.edges:
        out.append(_edge(layout, e, ends, lanes))
    for box in layout.boxes.values():
        out.append(_box_svg(box))
    out.append("</svg>")
    return "\n".join(out)


def _waypoint(layout: Layout, column: tuple[float, float], want: float, lanes: dict) -> float:
    """A height at which a line crosses a column without crossing a box: the free gap nearest ``want``."""
    x, w = column
    stack = sorted((b.y, b.y + b.h) for b in layout.boxes.values() if b.x < x + w and x < b.x + b.w)
    gaps, top = [], -math.inf
    for y0, y1 in stack:
        if y0 > top:
            gaps.append((top, y0))
        top = max(top, y1)
    gaps.append((top, math.inf))
    best = None
    for lo, hi in gaps:
        y = min(max(want, lo + 4), hi - 4) if hi - lo > 8 else (lo + hi) / 2
        if best is None or abs(y - want) < abs(best[0] - want):
            best = (y, lo, hi)
    y, lo, hi = best
    n = lanes[(x, lo)]  # lines through one gap side by side, 3px apart, as far as the gap allows
    lanes[(x, lo)] += 1
    shift = (n + 1) // 2 * 3 * (1 if n % 2 else -1)
    return min(max(y + shift, lo + 2), hi - 2) if hi - lo > 4 else y


def _route(layout: Layout, sx: float, sy: float, ex: float, ey: float, lanes: dict) -> str:
    """A path from (sx, sy) to (ex, ey), horizontal at both ends, through the gaps of the columns between."""
    lo, hi = min(sx, ex), max(sx, ex)
    between = sorted((c for c in layout.columns if lo < c[0] and c[0] + c[1] < hi), reverse=sx > ex)
    d = 1 if ex >= sx else -1
    points = [(sx, sy)]
    for x, w in between:
        mid = x + w / 2
        want = sy + (ey - sy) * (mid - sx) / (ex - sx)
        y = _waypoint(layout, (x, w), want, lanes)
        a, b = (x - 10, x + w + 10) if d > 0 else (x + w + 10, x - 10)
        points += [(a, y), (b, y)]
    points.append((ex, ey))
    path = [f"M{_f(sx)},{_f(sy)}"]
    for i in range(0, len(points) - 1, 2):
        (x1, y1), (x2, y2) = points[i], points[i + 1]
        k = max(24.0, abs(x2 - x1) / 2)
        path.append(f"C{_f(x1 + d * k)},{_f(y1)} {_f(x2 - d * k)},{_f(y2)} {_f(x2)},{_f(y2)}")
        if i + 2 < len(points):
            path.append(f"L{_f(points[i + 2][0])},{_f(points[i + 2][1])}")
    return " ".join(path)


def _edge(layout: Layout, e: dict, ends: set, lanes: dict) -> str:
    child, parent = layout.boxes[e["table"]], layout.boxes[e["references"]]
    line = next(i for i, ln in enumerate(child.lines) if ln[3] == e["index"])
    cy, py = child.row_y(line), parent.row_y(0)
    if parent.x >= child.x + child.w:  # parent to the right
        sx, d, ex, pd = child.x + child.w, 1, parent.x, -1
    elif parent.x + parent.w <= child.x:  # parent to the left
        sx, d, ex, pd = child.x, -1, parent.x + parent.w, 1
    else:  # same column: round the right-hand side
        sx, d, ex, pd = child.x + child.w, 1, parent.x + parent.w, 1
    if d == -pd:
        route = _route(layout, sx, cy, ex, py, lanes)
    else:
        k = max(36.0, abs(ex - sx) / 2)
        route = f"M{_f(sx)},{_f(cy)} C{_f(sx + d * k)},{_f(cy)} {_f(ex + pd * k)},{_f(py)} {_f(ex)},{_f(py)}"
    label = f"{e['table']} \u2192 {e['references']}"
    parts = [f'<g class="fk-edge{" fk-owner" if e["owner"] else ""}"><title>{esc(label)}: '
             f'{"at most one" if e["unique"] else "many"} {esc(e["table"])} rows per '
             f'{esc(e["references"])} row</title>',
             f'<path class="fk-line" d="{route}"/>']
    # the child's end: a crow's foot (many) or a bar (at most one), with a circle: there may be none
    if e["unique"]:
        parts.append(f'<path class="fk-mark" d="M{_f(sx + d * 10)},{_f(cy - 6)} V{_f(cy + 6)}"/>')
    else:
        parts.append(f'<path class="fk-mark" d="M{_f(sx + d * 12)},{_f(cy)} L{_f(sx)},{_f(cy - 6)} '
                     f'M{_f(sx + d * 12)},{_f(cy)} L{_f(sx)},{_f(cy + 6)}"/>')
    parts.append(f'<circle class="fk-ring" cx="{_f(sx + d * 17)}" cy="{_f(cy)}" r="3.5"/>')
    parts.append(f'<text class="fk-n" x="{_f(sx + d * 9)}" y="{_f(cy - 8)}" text-anchor="middle">'
                 f'{"0..1" if e["unique"] else "N"}</text>')
    if (e["references"], ex) not in ends:  # the parent's end, once per side: exactly one
        ends.add((e["references"], ex))
        parts.append(f'<path class="fk-mark" d="M{_f(ex + pd * 7)},{_f(py - 6)} V{_f(py + 6)} '
                     f'M{_f(ex + pd * 11)},{_f(py - 6)} V{_f(py + 6)}"/>')
        parts.append(f'<text class="fk-n" x="{_f(ex + pd * 9)}" y="{_f(py - 8)}" text-anchor="middle">1</text>')
    parts.append("</g>")
    return "".join(parts)


def _box_svg(b: Box) -> str:
    x, y = b.x, b.y
    out = [f'<g class="table-box role-{esc(b.role)}" data-table="{esc(b.name)}">',
           f'<title>{esc(b.name)} ({esc(b.sub)})</title>',
           f'<rect class="box" x="{_f(x)}" y="{_f(y)}" width="{_f(b.w)}" height="{_f(b.h)}" rx="4"/>',
           f'<path class="box-head" d="M{_f(x)},{_f(y + HEAD)} V{_f(y + 4)} Q{_f(x)},{_f(y)} {_f(x + 4)},{_f(y)} '
           f'H{_f(x + b.w - 4)} Q{_f(x + b.w)},{_f(y)} {_f(x + b.w)},{_f(y + 4)} V{_f(y + HEAD)} Z"/>',
           f'<text class="box-name" x="{_f(x + PAD)}" y="{_f(y + 16)}">'
           f'{esc(shorten(clean(b.name), int((MAX_W - 2 * PAD) / NAME_CHAR)))}</text>',
           f'<text class="box-sub" x="{_f(x + PAD)}" y="{_f(y + 31)}">{esc(b.sub)}</text>']
    for i, (kind, mark, text, _) in enumerate(b.lines):
        ty = b.row_y(i) + 4
        out.append(f'<text class="key key-{kind}" x="{_f(x + PAD)}" y="{_f(ty)}">'
                   + (f'<tspan class="mark">{mark}</tspan><tspan x="{_f(x + PAD + 24)}">{esc(text)}</tspan>'
                      if mark else esc(text)) + "</text>")
    if b.footer:
        fy = y + HEAD + max(len(b.lines), 1) * ROW
        out.append(f'<path class="box-rule" d="M{_f(x)},{_f(fy)} H{_f(x + b.w)}"/>')
        out.append(f'<text class="box-src" x="{_f(x + PAD)}" y="{_f(fy + 14)}">{esc(b.footer)}</text>')
    out.append("</g>")
    return "".join(out)


def hbar_chart(items: list[tuple[str, int, str]], *, label_chars: int = 30, width: int = 640) -> str:
    """Horizontal bars: (label, value, tooltip) per bar, largest first as given."""
    if not items:
        return ""
    label_w = int(label_chars * 6.9) + 12
    value_w = 64
    bar_w = width - label_w - value_w
    top = max(v for _, v, _ in items) or 1
    row = 22
    height = row * len(items) + 8
    out = [f'<svg class="chart hbar" width="{width}" height="{height}" '
           f'viewBox="0 0 {width} {height}" role="img">']
    for i, (label, value, tip) in enumerate(items):
        y = 4 + i * row
        w = max(1.0, bar_w * value / top)
        out.append(f'<g class="bar"><title>{esc(tip)}</title>'
                   f'<text class="bar-label" x="{label_w - 8}" y="{y + 15}" text-anchor="end">'
                   f'{esc(label, label_chars)}</text>'
                   f'<rect x="{label_w}" y="{y + 3}" width="{_f(w)}" height="{row - 6}" rx="2"/>'
                   f'<text class="bar-value" x="{_f(label_w + w + 6)}" y="{y + 15}">{value:,}</text></g>')
    out.append("</svg>")
    return "".join(out)


def histogram(bins: list[tuple[str, int]], *, x_title: str, y_title: str) -> str:
    """Vertical bars, one per bin (label, count), with the count above each bar."""
    if not bins:
        return ""
    gap, left, plot_h, head = 6, 16, 150, 30
    bar = max(18, min(44, 440 // len(bins) - gap))
    rotate = max(len(label) for label, _ in bins) * 6.5 > bar + gap
    bottom_room = 70 if rotate else 46
    width = max(left + len(bins) * (bar + gap) + 16, 280)
    height = head + plot_h + bottom_room
    top = max(c for _, c in bins) or 1
    base = head + plot_h
    out = [f'<svg class="chart hist" width="{width}" height="{height}" '
           f'viewBox="0 0 {width} {height}" role="img">',
           f'<text class="axis-title" x="{left - 4}" y="12">{esc(y_title)}</text>',
           f'<path class="axis" d="M{left - 4},{base} H{width - 8}"/>']
    for i, (label, count) in enumerate(bins):
        x = left + i * (bar + gap)
        h = plot_h * count / top
        cx = x + bar / 2
        where = (f'x="{_f(cx + 4)}" y="{base + 12}" text-anchor="end" transform="rotate(-45 {_f(cx + 4)} {base + 12})"'
                 if rotate else f'x="{_f(cx)}" y="{base + 14}" text-anchor="middle"')
        out.append(f'<g class="bar"><title>{esc(label)}: {count:,} {esc(y_title)}</title>'
                   f'<rect x="{x}" y="{_f(base - h)}" width="{bar}" height="{_f(h)}" rx="2"/>'
                   f'<text class="bar-value" x="{_f(cx)}" y="{_f(base - h - 4)}" text-anchor="middle">{count:,}</text>'
                   f'<text class="bar-label" {where}>{esc(label)}</text></g>')
    out.append(f'<text class="axis-title" x="{left - 4}" y="{base + bottom_room - 8}">{esc(x_title)}</text>')
    out.append("</svg>")
    return "".join(out)


def length_bins(distribution: list[tuple[int, int]], most: int = 30) -> list[tuple[str, int]]:
    """Counts per list length 0..longest (lengths nobody has included), in ranges when there are many.

    Example:
        >>> length_bins([(0, 2), (2, 5)])
        [('0', 2), ('1', 0), ('2', 5)]
        >>> length_bins([(0, 1), (99, 1)], most=4)
        [('0\u201324', 1), ('25\u201349', 0), ('50\u201374', 0), ('75\u201399', 1)]
    """
    if not distribution:
        return []
    longest = max(n for n, _ in distribution)
    step = max(1, math.ceil((longest + 1) / most))
    counts: dict[int, int] = defaultdict(int)
    for n, c in distribution:
        counts[n // step] += c
    out = []
    for i in range(longest // step + 1):
        lo, hi = i * step, min(i * step + step - 1, longest)
        out.append((str(lo) if lo == hi else f"{lo}\u2013{hi}", counts.get(i, 0)))
    return out


# --- the page ---------------------------------------------------------------------------------------

CSS = """
:root { --ink: #1d1d1f; --muted: #62626a; --line: #d5d5d9; --soft: #f2f2f4; --paper: #ffffff;
        --accent: #2f6c7a; --accent-soft: #e3eef0; }
* { box-sizing: border-box; }
body { margin: 0; background: #fafafa; color: var(--ink);
       font: 14px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif; }
main { max-width: 1500px; margin: 0 auto; padding: 24px 28px 64px; }
h1 { font-size: 22px; margin: 0 0 4px; font-weight: 600; }
h2 { font-size: 17px; margin: 36px 0 4px; font-weight: 600; padding-top: 8px; border-top: 1px solid var(--line); }
h3 { font-size: 14px; margin: 20px 0 4px; font-weight: 600; }
code, .mono { font-family: ui-monospace, "SF Mono", Menlo, Consolas, "DejaVu Sans Mono", "Liberation Mono", monospace;
              font-size: 12.5px; }
p { margin: 4px 0 10px; }
.lede { color: var(--muted); margin-bottom: 14px; }
.source { color: var(--muted); font-size: 12.5px; margin: 0 0 10px; }
.source code { color: var(--ink); }
nav.toc { margin: 14px 0 4px; font-size: 13px; color: var(--muted); }
nav.toc a { color: var(--accent); text-decoration: none; margin-right: 14px; white-space: nowrap; }
.tiles { display: flex; flex-wrap: wrap; gap: 10px; margin: 16px 0 6px; }
.tile { background: var(--paper); border: 1px solid var(--line); border-radius: 6px; padding: 8px 14px;
        min-width: 130px; }
.tile .v { font-size: 20px; font-weight: 600; font-variant-numeric: tabular-nums; }
.tile .k { color: var(--muted); font-size: 12px; }
.tile.bad { border-color: var(--accent); box-shadow: inset 4px 0 0 var(--accent); }
table.data { border-collapse: collapse; background: var(--paper); border: 1px solid var(--line); margin: 6px 0 14px;
             font-size: 13px; }
table.data th, table.data td { padding: 4px 10px; border-bottom: 1px solid var(--line); text-align: left;
                               vertical-align: top; }
table.data th { background: var(--soft); font-weight: 600; font-size: 12px; color: #3c3c43; }
table.data td.num, table.data th.num { text-align: right; font-variant-numeric: tabular-nums; }
table.data td.wrap { max-width: 520px; overflow-wrap: anywhere; }
.null { color: #9a9aa0; font-style: italic; }
p.ok { color: var(--muted); }
.bad { font-weight: 600; }
td.bad, span.bad { color: var(--accent); }
.note { color: var(--muted); font-size: 12.5px; }
.diagram { overflow: auto; border: 1px solid var(--line); background: var(--paper); border-radius: 6px;
           max-height: 1400px; }
.legend { color: var(--muted); font-size: 12.5px; margin: 6px 0 0; }
.charts { display: flex; flex-wrap: wrap; gap: 12px 28px; }
.chart-card { background: var(--paper); border: 1px solid var(--line); border-radius: 6px; padding: 10px 14px;
              margin: 6px 0; max-width: 700px; }
.chart-card h3 { margin-top: 0; }
svg text { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif; }
svg.er text { font-family: ui-monospace, "SF Mono", Menlo, Consolas, "DejaVu Sans Mono", "Liberation Mono", monospace;
              font-size: 11px; fill: var(--ink); }
svg.er .band rect { fill: #f6f6f7; stroke: #e0e0e4; }
svg.er .band text { font-family: system-ui, -apple-system, "Segoe UI", Roboto, Arial, sans-serif; font-size: 12px;
                    fill: var(--muted); }
svg.er .band-meta rect { fill: #fbfbfb; stroke-dasharray: 4 3; }
svg.er .box { fill: var(--paper); stroke: #9c9ca3; }
svg.er .box-head { fill: #ececef; stroke: none; }
svg.er .role-record .box, svg.er .role-record_part .box { stroke: var(--accent); stroke-width: 1.5; }
svg.er .role-record .box-head, svg.er .role-record_part .box-head { fill: var(--accent-soft); }
svg.er .box-name { font-size: 13px; font-weight: 700; }
svg.er .box-sub, svg.er .box-src { fill: var(--muted); font-size: 10.5px; }
svg.er .box-rule { stroke: #e3e3e6; }
svg.er .mark { fill: var(--muted); font-weight: 700; font-size: 10px; }
svg.er .key-pk .mark { fill: var(--accent); }
svg.er .key-more { fill: var(--muted); }
svg.er .fk-line, svg.er .fk-mark { fill: none; stroke: #8d8d95; stroke-width: 1.2; }
svg.er .fk-owner .fk-line { stroke: #6e6e76; }
svg.er .fk-ring { fill: var(--paper); stroke: #8d8d95; stroke-width: 1.1; }
svg.er .fk-n { font-size: 9.5px; fill: var(--muted); }
svg.chart rect { fill: var(--accent); }
svg.chart .bar-label { font-size: 12px; fill: var(--ink); }
svg.chart .bar-value { font-size: 11px; fill: var(--muted); font-variant-numeric: tabular-nums; }
svg.chart .axis { stroke: #b9b9bf; }
svg.chart .axis-title { font-size: 11.5px; fill: var(--muted); }
footer { margin-top: 40px; color: var(--muted); font-size: 12px; }
"""

_CSP = "default-src 'none'; style-src 'unsafe-inline'; img-src data:; base-uri 'none'; form-action 'none'"


def _cell(value, limit: int = 200, cls: str = "") -> str:
    if value is None:
        return '<td class="null">NULL</td>'
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return f'<td class="num">{_num(value)}</td>'
    return f'<td class="wrap{" " + cls if cls else ""}">{esc(value, limit)}</td>'


def _table_html(headers: list[str], rows: list[list[str]], cls: str = "data", attrs: str = "") -> str:
    head = "".join(f'<th{" class=num" if h.startswith("#") else ""}>{esc(h.lstrip("#"))}</th>' for h in headers)
    body = "".join(f"<tr>{''.join(r)}</tr>" if isinstance(r, list) else r for r in rows)
    return f'<table class="{cls}"{attrs}><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>'


def _src(*parts: str) -> str:
    return '<p class="source">from ' + " ".join(parts) + "</p>"


def _code(name) -> str:
    return f"<code>{esc(name)}</code>"


def _section(ident: str, title: str, body: str) -> str:
    return f'<section id="{ident}"><h2>{esc(title)}</h2>\n{body}\n</section>'


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
    lede = (f"Read from the database file {_code(model['database'])}"
            + (f" and the run's manifest ({esc(origin)})." if origin else
               "; no manifest was given, so roles are inferred from the keys and the input's row counts are unknown."))
    notes = "".join(f'<p class="note">{esc(n)}</p>' for n in model.get("notes", []))
    body = "\n".join(_section(i, t, b) for i, t, b in sections)
    return (f'<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
            f'<meta http-equiv="Content-Security-Policy" content="{_CSP}">\n'
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
        (esc(integ["integrity_check"], 40), "integrity_check", integ["integrity_check"] not in ("ok", NOT_APPLICABLE)),
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
    return (_src(f"the database catalog: {_code('sqlite_master')}, {_code('PRAGMA table_info')}, "
                 f"{_code('PRAGMA foreign_key_list')}, {_code('PRAGMA index_list')}"
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
            note = f' <span class="bad">(the manifest says {_num(t["manifest_rows"])})</span>'
        rows.append(f'<tr data-table="{esc(t["name"])}"><td>{_code(t["name"])}</td><td>{esc(t["role"])}</td>'
                    f'<td class="num" data-rows="{t["rows"]}">{_num(t["rows"])}{note}</td>'
                    f'<td class="wrap">{esc(source_label(t)) or _NONE}</td></tr>')
    return (_src(f"{_code('SELECT count(*)')} on each table") +
            _table_html(["table", "role", "#rows", "from the input (export \u00b7 column)"], rows,
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


def _reconciliation_section(model: dict) -> str:
    m = model.get("manifest") or {}
    by_file = model["data"]["by_file"]
    records = [t for t in model["tables"] if t["role"] == "record"]
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
                db.append(f'<td class="num{"" if got == n else " bad"}">{_num(got)}</td>')
            loaded = esc(f"joined into {_stem(i['joined_into'])}") if "joined_into" in i else ""
            rows.append([f"<td>{_code(i['path'])}</td>", _cell(i["rows_read"]), _cell(i["records_loaded"]),
                         _cell(i["rows_set_aside"]), _cell(i["rows_rejected"]), _cell(unmatched),
                         f'<td class="{"ok" if ok else "bad"}">{"=" if ok else _NE} {_num(out)}</td>',
                         *db, f'<td class="note">{loaded}</td>'])
        parts.append("<h3>Rows</h3>" + _src(
            "the run's manifest (rows read, loaded, set aside, rejected, unmatched: counted while reading), "
            f"checked against {_code('set_aside_rows')}, {_code('rejected_rows')} and {_code('unmatched_rows')} "
            f"(rows whose {_code('file')} is the input)")
            + _table_html(["input", "#read", "#loaded", "#set aside", "#rejected", "#unmatched", "read = sum",
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
            rows.append([f"<td>{_code(i['path'])}</td>", _cell(i["elements_decoded"]), _cell(i["elements_written"]),
                         _cell(i["elements_quarantined"]),
                         f'<td class="{"ok" if ok else "bad"}">{"=" if ok else _NE} '
                         f'{_num(i["elements_written"] + i["elements_quarantined"])}</td>',
                         f'<td class="num{"" if written == i["elements_written"] else " bad"}">{_num(written)}</td>',
                         f'<td class="wrap">{", ".join(_code(n) for n in nested) or _DASH}</td>'])
        parts.append("<h3>Nested elements</h3>" + _src(
            "the run's manifest (elements decoded, written, quarantined), checked against the rows of the nested "
            "tables under each record table")
            + _table_html(["input", "#decoded", "#written", "#quarantined", "decoded = sum",
                           "#rows in nested tables", "nested tables"], rows))
        files = {i.get("path") for i in inputs}
        q = [[f"<td>{_code(i['path'])}</td>", _cell(i.get("cells_quarantined", 0)),
              _cell(by_file.get(i.get("path"), {}).get("quarantine", 0))] for i in inputs]
        parts.append("<h3>Quarantined cells and elements</h3>" + _src(
            f"the manifest and {_code('quarantined_cells')} (rows per file; a quarantined element is a row too)")
            + _table_html(["input", "#cells quarantined (manifest)", "#rows in quarantined_cells"], q))
        extra = sorted(str(f) for f in by_file if f not in files)
        if extra:
            parts.append('<p class="note">Bookkeeping rows name files the manifest does not: '
                         f'{esc(", ".join(extra))}</p>')
        joins = [j for j in m.get("joins", []) if isinstance(j, dict)]
        if joins:
            rows = []
            for j in joins:
                on = ", ".join(f"{a} = {b}" for a, b in j.get("on", []))
                rows.append([f"<td>{_code(j.get('left'))}</td>", f"<td>{_code(j.get('right'))}</td>",
                             f"<td>{esc(on)}</td>", f"<td>{esc(j.get('how'))}, {esc(j.get('cardinality'))}</td>",
                             _cell(j.get("left_only")), _cell(j.get("right_only")),
                             _cell(j.get("right_duplicates_set_aside")),
                             _cell(", ".join(map(str, (j.get("left_only_examples") or [])
                                                 + (j.get("right_only_examples") or []))), 120)])
            parts.append("<h3>Joins</h3>" + _src("the run's manifest (keys compared while joining)")
                         + _table_html(["main file", "joined file", "on", "how", "#keys only in main",
                                        "#keys only in joined", "#duplicates set aside", "examples"], rows))
    else:
        parts.append('<p class="note">The database does not record how many rows were read (no manifest was given); '
                     "below is what the database holds per input file.</p>")
        rows = []
        for file in sorted(by_file, key=str):
            f = by_file[file]
            rows.append([f"<td>{_code(file)}</td>"] + [_cell(f.get(r, 0)) for r in
                                                       ("set_aside", "rejected", "unmatched", "quarantine")])
        if rows:
            parts.append(_src(f"{_code('set_aside_rows')}, {_code('rejected_rows')}, {_code('unmatched_rows')}, "
                              f"{_code('quarantined_cells')} (rows per {_code('file')})")
                         + _table_html(["input", "#set aside", "#rejected", "#unmatched", "#quarantined cells"], rows))
        rows = []
        for r in records:
            nested = _band_tables(model, r["name"])
            rows.append([f"<td>{_code(r['name'])}</td>", _cell(r["rows"]),
                         _cell(sum(t["rows"] for t in model["tables"] if t["name"] in nested)),
                         f'<td class="wrap">{", ".join(_code(n) for n in nested) or _DASH}</td>'])
        if rows:
            parts.append(_src("each record table and the nested tables under it (count(*))")
                         + _table_html(["record table", "#records", "#nested elements", "nested tables"], rows))
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
    rows = [[f"<td>{_code('PRAGMA foreign_key_check')}" + (" of the rows written (PostgreSQL checked each foreign "
                                                           "key as it was added)" if postgresql else "") + "</td>",
             f'<td class="{"ok" if not integ["foreign_key_violations"] else "bad"}">'
             f'{_num(integ["foreign_key_violations"])} violations</td>',
             _cell(f"{m['foreign_key_violations']} violations" if "foreign_key_violations" in m else _DASH)],
            [f"<td>{_code('PRAGMA integrity_check')}</td>",
             f'<td class="{"ok" if integ["integrity_check"] in ("ok", NOT_APPLICABLE) else "bad"}">'
             f'{esc(integ["integrity_check"], 300)}</td>',
             _cell(m.get("integrity_check", _DASH))],
            ["<td>rows and elements reconciled</td>",
             _cell({True: "yes", False: "NO", None: "unknown (no manifest)"}[_reconciled(model)]),
             _cell({True: "yes", False: "NO"}.get(m.get("reconciled"), _DASH))]]
    if "cells_checked" in m:
        lossy = m["cells_differing"]
        rows.append(["<td>lossless proof: cells rebuilt from the tables equal the export</td>", _cell(_DASH),
                     f'<td class="{"bad" if lossy else "ok"}">{_num(m["cells_rebuilt_exactly"])} of '
                     f'{_num(m["cells_checked"])} exactly' + (f"; {_num(lossy)} DIFFER (kept with --allow-lossy)"
                                                               if lossy else "") + "</td>"])
        rows.append([f"<td>values kept as given in {_code('value_traces')}</td>", _cell(_DASH),
                     _cell(", ".join(f"{n:,} {r}" for r, n in m.get("traced_by_reason", {}).items()) or "none")])
    rejoined = (model.get("manifest") or {}).get("values_rejoined") or {}
    if rejoined:
        rows.append(["<td>delimited values kept whole with their name suffix (\"Dole, Jr.\")</td>", _cell(_DASH),
                     _cell(", ".join(f"{n:,} in {where}" for where, n in rejoined.items()))])
    out = (_src("SQLite's own checks, run on the database as this report was made; the last column is what the "
                "build recorded in its manifest, the lossless proof included")
           + _table_html(["check", "now", "at build"], rows))
    for d in m.get("differences", [])[:5]:
        out += f'<p class="note bad">differs: {esc(str(d), 300)}</p>'
    if integ["violations"]:
        out += "<h3>Foreign-key violations (first ones)</h3>" + _table_html(
            ["table", "#rowid", "parent", "#foreign key"], [[_cell(v) for v in row] for row in integ["violations"]])
    return out


_META_LABEL = {meta.role: name for name, meta in META_TABLES.items()}  # a role's table
_META_LIMITS = {"raw": 160, "cells": 160, "excerpt": 80, "message": 240}


def _meta_section(model: dict, role: str) -> str:
    meta = model["data"]["meta"].get(role)
    if meta is None:
        return f'<p class="note">The database has no {_code(_META_LABEL[role])} table.</p>'
    name, total, rows = meta["table"], meta["total"], meta["rows"]
    shown = len(rows)
    src = _src(f"{_code(name)} \u00b7 {total:,} row{'s' if total != 1 else ''}"
               + (f", the first {shown:,} by file and line" if total > shown else ""))
    if not rows:
        return src + '<p class="ok">None.</p>'
    keep = [i for i, c in enumerate(meta["columns"]) if not c.endswith("_sk")]
    headers = [("#" if rows and isinstance(rows[0][i], int) else "") + meta["columns"][i] for i in keep]
    body = [[_cell(r[i], _META_LIMITS.get(meta["columns"][i], 200)) for i in keep] for r in rows]
    return src + _table_html(headers, body)


def _conflicts_section(model: dict) -> str:
    meta = model["data"]["meta"].get("variants")
    if meta is None:
        return f'<p class="note">The database has no {_code("attribute_variants")} table.</p>'
    cols = meta["columns"]
    src = _src(f"{_code(meta['table'])} \u00b7 {_n(meta.get('conflicts', 0), 'conflict')}, "
               f"{_n(meta['total'], 'variant')}: "
               "an entity whose attribute was written with different values keeps the most frequent (chosen)")
    if not meta["rows"]:
        return src + '<p class="ok">None.</p>'
    if not {"entity_table", "natural_key", "attribute", "value"} <= set(cols):
        return src + _table_html(cols, [[_cell(v) for v in r] for r in meta["rows"]])
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
        rows.append([_cell(table), _cell(key), _cell(attribute), f'<td class="wrap">{"<br>".join(shown)}</td>'])
    return src + _table_html(["entity table", "natural key", "attribute", "variants (\u00d7 occurrences)"], rows)


def _entities_section(model: dict, tables: dict) -> str:
    found = model["data"]["entities"]
    if not found:
        return '<p class="note">No entity table is referred to by a list.</p>'
    cards = []
    for e in found:
        refs = ", ".join(_code(t) for t, _ in e["refs"])
        items = []
        for row in e["top"]:
            label = row["label"] if row["label"] is not None else row["natural"]
            tip = f"{clean(label)} ({e['natural']} {clean(row['natural'])}): {row['count']:,} rows"
            if row["by"]:
                tip += " \u2014 " + ", ".join(f"{clean(t)} {n:,}" for t, n in sorted(row["by"].items()))
            items.append((clean(label), row["count"], tip))
        cards.append(
            f'<div class="chart-card"><h3>{_code(e["table"])}: top {len(items)} of {e["entities"]:,}</h3>'
            + _src(f"{refs} (rows referring to each {_code(e['table'])} row), names from "
                   f"{_code(e['table'] + '.' + e['display'])} \u00b7 {e['references']:,} references to "
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
            f'<div class="chart-card"><h3>{_code(d["table"])}'
            + (f' <span class="note">({esc(source)})</span>' if source else "") + "</h3>"
            + _src(f"{_code(d['table'])} rows per {_code(d['owner'])} row (joined on {_code(d['column'])}), "
                   f"every {_code(d['owner'])} row counted, those with none too \u00b7 {d['owners']:,} owners, "
                   f"{d['empty']:,} with none, {d['elements']:,} elements, mean {mean:.2f}, longest {d['longest']:,}")
            + histogram(length_bins(d["distribution"]), x_title=f"elements in the list of one {d['owner']} row",
                        y_title=f"number of {d['owner']} rows")
            + "</div>")
    return '<div class="charts">' + "".join(cards) + "</div>"


def _views_section(model: dict) -> str:
    if not model["views"]:
        return _src(_code("sqlite_master")) + '<p class="note">The database has no views.</p>'
    rows = [[f"<td>{_code(v['name'])}</td>", _cell((v["kind"] or "view").replace("_", " ")),
             f"<td>{_code(v['table']) if v['table'] else _NONE}</td>",
             _cell(len(v["columns"])),
             f'<td class="wrap mono">{esc(", ".join(c["name"] for c in v["columns"]), 300)}</td>']
            for v in model["views"]]
    return (_src(f"{_code('sqlite_master')} and {_code('PRAGMA table_info')} of each view; the data dictionary "
                 "describes every column") + _table_html(["view", "kind", "of table", "#columns", "columns"], rows))


# --- writing ----------------------------------------------------------------------------------------

def write_report(database, path, manifest: dict | None = None, *, model: dict | None = None) -> str:
    """Write the HTML report of a SQLite database to ``path``; returns the path."""
    from .outputs import staged_outputs

    model = model or read_database(database, manifest)
    with staged_outputs() as staged:  # whole or not at all: a temporary file, renamed when complete
        Path(staged.file(path)).write_text(render_report(model), encoding="utf-8")
        staged.commit()
    return str(path)


def write_outputs(database, manifest: dict | None = None, *, report_path=None, dictionary_path=None,
                  manifest_origin: str | None = None, shown_as=None, postgresql: dict | None = None) -> dict:
    """Write the HTML report and/or the data dictionary from one reading of the database (``postgresql``:
    see ``catalog.read_database``)."""
    model = read_database(database, manifest, manifest_origin=manifest_origin, shown_as=shown_as,
                          postgresql=postgresql)
    written = {}
    if report_path:
        written["report"] = write_report(database, report_path, model=model)
    if dictionary_path:
        from .outputs import staged_outputs

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
        normalise.report_html.UnreadableManifest: --manifest ...m.json: not a normalise manifest: "tables" is a number, not a list
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
    from .errors import UsageError
    from .outputs import check_paths, staged_outputs, writing

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
