"""Pieces of the HTML report and their safety: escaped text (names and values come from untrusted exports), counts,
table cells, sections, the page's style and Content-Security-Policy, and the charts (inline SVG).
"""

from __future__ import annotations

import html
import math
from collections import defaultdict

from ..model.escapes import clean

NONE = "<span class=null>\u2014</span>"
NOT_EQUAL = "\u2260"
DASH = "\u2014"


def svg_number(v: float) -> str:
    return f"{v:.1f}".rstrip("0").rstrip(".")



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


def counted(count: int, noun: str) -> str:
    """A count and its noun, plural when it is not one.

    Example:
        >>> counted(1, "conflict"), counted(1200, "row")
        ('1 conflict', '1,200 rows')
    """
    return f"{count:,} {noun}{'' if count == 1 else 's'}"


def number(n) -> str:
    return f"{n:,}" if isinstance(n, int) and not isinstance(n, bool) else esc(n)


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
                   f'<rect x="{label_w}" y="{y + 3}" width="{svg_number(w)}" height="{row - 6}" rx="2"/>'
                   f'<text class="bar-value" x="{svg_number(label_w + w + 6)}" y="{y + 15}">{value:,}</text></g>')
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
        where = (f'x="{svg_number(cx + 4)}" y="{base + 12}" text-anchor="end" transform="rotate(-45 {svg_number(cx + 4)} {base + 12})"'
                 if rotate else f'x="{svg_number(cx)}" y="{base + 14}" text-anchor="middle"')
        out.append(f'<g class="bar"><title>{esc(label)}: {count:,} {esc(y_title)}</title>'
                   f'<rect x="{x}" y="{svg_number(base - h)}" width="{bar}" height="{svg_number(h)}" rx="2"/>'
                   f'<text class="bar-value" x="{svg_number(cx)}" y="{svg_number(base - h - 4)}" text-anchor="middle">{count:,}</text>'
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


CSP = "default-src 'none'; style-src 'unsafe-inline'; img-src data:; base-uri 'none'; form-action 'none'"


def cell(value, limit: int = 200, cls: str = "") -> str:
    if value is None:
        return '<td class="null">NULL</td>'
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return f'<td class="num">{number(value)}</td>'
    return f'<td class="wrap{" " + cls if cls else ""}">{esc(value, limit)}</td>'


def table_html(headers: list[str], rows: list[list[str]], cls: str = "data", attrs: str = "") -> str:
    head = "".join(f'<th{" class=num" if h.startswith("#") else ""}>{esc(h.lstrip("#"))}</th>' for h in headers)
    body = "".join(f"<tr>{''.join(r)}</tr>" if isinstance(r, list) else r for r in rows)
    return f'<table class="{cls}"{attrs}><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>'


def source_note(*parts: str) -> str:
    return '<p class="source">from ' + " ".join(parts) + "</p>"


def code(name) -> str:
    return f"<code>{esc(name)}</code>"


def section(ident: str, title: str, body: str) -> str:
    return f'<section id="{ident}"><h2>{esc(title)}</h2>\n{body}\n</section>'
