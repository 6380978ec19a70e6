"""The report's entity-relationship diagram: the tables as boxes in layers (a networkx graph of their foreign keys),
record bands, routed lines with their end marks, drawn as inline SVG.
"""

from __future__ import annotations

import math
from collections import defaultdict
from dataclasses import dataclass, field

import networkx as nx

from ..model.describe import owner_fk, source_label
from ..model.escapes import clean
from ..model.kinds import Role
from ..model.plan import META_ROLES
from .markup import esc, shorten, svg_number

CHAR = 6.7  # width of one character of the 11px monospace text in the boxes (0.6 em, rounded up)
NAME_CHAR = 7.9  # 13px bold monospace
ROW = 17
HEAD = 38
FOOT = 20
PAD = 9
MIN_W = 170
MAX_W = 340
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
    """Tables (nodes) and foreign keys (edges from the referencing table to the referenced one).

    The graph of the report's model, not of a plan (``check.table_graph``): ``normalise report DB`` draws a
    database that comes with no plan, read back from its catalog; a build's model is its plan's
    (``catalog.planned``), so both graphs then have the same nodes and edges."""
    graph = nx.DiGraph()
    for t in model["tables"]:
        graph.add_node(t["name"], role=t["role"])
    for t in model["tables"]:
        for i, f in enumerate(t["foreign_keys"]):
            if f["references"] in graph and f["references"] != t["name"]:
                graph.add_edge(t["name"], f["references"], index=i, owner=f["owner"])
    return graph


# Long (about 150 lines): the layered layout's steps (bands, columns by depth, barycentre sweeps, stacking) share
# the maps of each table's band, column and order.
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
    entities = [n for n, t in tables.items() if t["role"] == Role.ENTITY and n not in meta]
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



def render_diagram(layout: Layout) -> str:
    """The schema as one inline SVG element: a group of class ``table-box`` per table."""
    out = [f'<svg class="er" width="{layout.width}" height="{layout.height}" '
           f'viewBox="0 0 {layout.width} {layout.height}" role="img" aria-labelledby="er-title">',
           '<title id="er-title">Tables and the foreign keys that link them</title>']
    for band in layout.bands:
        out.append(f'<g class="band band-{band["kind"]}"><rect x="{svg_number(band["x"])}" y="{svg_number(band["y"])}" '
                   f'width="{svg_number(band["w"])}" height="{svg_number(band["h"])}" rx="6"/>'
                   f'<text x="{svg_number(band["x"] + 10)}" y="{svg_number(band["y"] + 16)}">{esc(band["label"], 90)}</text></g>')
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
    path = [f"M{svg_number(sx)},{svg_number(sy)}"]
    for i in range(0, len(points) - 1, 2):
        (x1, y1), (x2, y2) = points[i], points[i + 1]
        k = max(24.0, abs(x2 - x1) / 2)
        path.append(f"C{svg_number(x1 + d * k)},{svg_number(y1)} {svg_number(x2 - d * k)},{svg_number(y2)} {svg_number(x2)},{svg_number(y2)}")
        if i + 2 < len(points):
            path.append(f"L{svg_number(points[i + 2][0])},{svg_number(points[i + 2][1])}")
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
        route = f"M{svg_number(sx)},{svg_number(cy)} C{svg_number(sx + d * k)},{svg_number(cy)} {svg_number(ex + pd * k)},{svg_number(py)} {svg_number(ex)},{svg_number(py)}"
    label = f"{e['table']} \u2192 {e['references']}"
    parts = [f'<g class="fk-edge{" fk-owner" if e["owner"] else ""}"><title>{esc(label)}: '
             f'{"at most one" if e["unique"] else "many"} {esc(e["table"])} rows per '
             f'{esc(e["references"])} row</title>',
             f'<path class="fk-line" d="{route}"/>']
    # the child's end: a crow's foot (many) or a bar (at most one), with a circle: there may be none
    if e["unique"]:
        parts.append(f'<path class="fk-mark" d="M{svg_number(sx + d * 10)},{svg_number(cy - 6)} V{svg_number(cy + 6)}"/>')
    else:
        parts.append(f'<path class="fk-mark" d="M{svg_number(sx + d * 12)},{svg_number(cy)} L{svg_number(sx)},{svg_number(cy - 6)} '
                     f'M{svg_number(sx + d * 12)},{svg_number(cy)} L{svg_number(sx)},{svg_number(cy + 6)}"/>')
    parts.append(f'<circle class="fk-ring" cx="{svg_number(sx + d * 17)}" cy="{svg_number(cy)}" r="3.5"/>')
    parts.append(f'<text class="fk-n" x="{svg_number(sx + d * 9)}" y="{svg_number(cy - 8)}" text-anchor="middle">'
                 f'{"0..1" if e["unique"] else "N"}</text>')
    if (e["references"], ex) not in ends:  # the parent's end, once per side: exactly one
        ends.add((e["references"], ex))
        parts.append(f'<path class="fk-mark" d="M{svg_number(ex + pd * 7)},{svg_number(py - 6)} V{svg_number(py + 6)} '
                     f'M{svg_number(ex + pd * 11)},{svg_number(py - 6)} V{svg_number(py + 6)}"/>')
        parts.append(f'<text class="fk-n" x="{svg_number(ex + pd * 9)}" y="{svg_number(py - 8)}" text-anchor="middle">1</text>')
    parts.append("</g>")
    return "".join(parts)


def _box_svg(b: Box) -> str:
    x, y = b.x, b.y
    out = [f'<g class="table-box role-{esc(b.role)}" data-table="{esc(b.name)}">',
           f'<title>{esc(b.name)} ({esc(b.sub)})</title>',
           f'<rect class="box" x="{svg_number(x)}" y="{svg_number(y)}" width="{svg_number(b.w)}" height="{svg_number(b.h)}" rx="4"/>',
           f'<path class="box-head" d="M{svg_number(x)},{svg_number(y + HEAD)} V{svg_number(y + 4)} Q{svg_number(x)},{svg_number(y)} {svg_number(x + 4)},{svg_number(y)} '
           f'H{svg_number(x + b.w - 4)} Q{svg_number(x + b.w)},{svg_number(y)} {svg_number(x + b.w)},{svg_number(y + 4)} V{svg_number(y + HEAD)} Z"/>',
           f'<text class="box-name" x="{svg_number(x + PAD)}" y="{svg_number(y + 16)}">'
           f'{esc(shorten(clean(b.name), int((MAX_W - 2 * PAD) / NAME_CHAR)))}</text>',
           f'<text class="box-sub" x="{svg_number(x + PAD)}" y="{svg_number(y + 31)}">{esc(b.sub)}</text>']
    for i, (kind, mark, text, _) in enumerate(b.lines):
        ty = b.row_y(i) + 4
        out.append(f'<text class="key key-{kind}" x="{svg_number(x + PAD)}" y="{svg_number(ty)}">'
                   + (f'<tspan class="mark">{mark}</tspan><tspan x="{svg_number(x + PAD + 24)}">{esc(text)}</tspan>'
                      if mark else esc(text)) + "</text>")
    if b.footer:
        fy = y + HEAD + max(len(b.lines), 1) * ROW
        out.append(f'<path class="box-rule" d="M{svg_number(x)},{svg_number(fy)} H{svg_number(x + b.w)}"/>')
        out.append(f'<text class="box-src" x="{svg_number(x + PAD)}" y="{svg_number(fy + 14)}">{esc(b.footer)}</text>')
    out.append("</g>")
    return "".join(out)
