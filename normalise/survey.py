"""Survey: read, decode and profile exports, and say what each column holds.

The survey is the read, decode and infer passes run for information only;
``normalise survey`` prints it and ``survey()`` returns it as plain data.
"""

from __future__ import annotations

import os

from .decode import DecodedColumn, decode
from .infer import (REFERENCE_MIN_SHARE, REFERENCE_MIN_VALUES, detect_natural_key, identity_candidates, is_reference,
                    objects_of, reference_evidence, reference_texts, scalar_column_type, scalar_type)
from .infer.profile import profile_values
from .model.errors import speaks_to_callers
from .model.export import Export
from .model.kinds import Format
from .model.settings import Limits
from .option_values import check_values
from .read import read

SHOWN_MESSAGES = 5


def survey_column(export: Export, column: DecodedColumn) -> dict:
    """The survey entry of one decoded column (plain data, ready for JSON)."""
    values = column.values
    rows = len(values)
    filled = sum(v is not None for v in values)
    entry: dict = {"name": column.name, "format": column.format,
                   "fill_rate": round(filled / rows, 4) if rows else 0.0,
                   "format_counts": column.format_counts,
                   "quarantined": len(column.quarantined)}
    if column.name != export.header_names.get(column.name, column.name):
        entry["name_in_file"] = export.header_names[column.name]
    if column.format in (Format.TEXT, Format.EMPTY):
        entry["shape"] = "scalar"
        entry["type"] = scalar_type([v for v in values if v is not None])
    else:
        profile = profile_values(values, column.name)
        entry["shape"] = profile.shape
        entry.update({k: v for k, v in profile.to_json().items() if k not in ("path", "shape")})
        if profile.shape in ("object-list", "object"):
            objects, owners = objects_of(values)
            entry["identity_candidates"] = [c.to_json() for c in identity_candidates(objects, owners)]
    if column.separator is not None:
        entry["separator"] = column.separator
    if column.format == Format.DELIMITED:
        entry["rejoined"] = column.rejoined  # values that kept a name suffix ("Carl Dole, Jr.")
    if column.ambiguity:
        entry["ambiguous"] = True
        entry["ambiguity"] = column.ambiguity
    if column.quarantined:
        entry["quarantine"] = [{"line": q.line, "position": q.position, "message": q.message,
                                "excerpt": q.excerpt} for q in column.quarantined[:SHOWN_MESSAGES]]
    return entry


@speaks_to_callers
def survey(paths, *, limits: Limits = Limits(), formats: dict | None = None,
           encoding: str | None = None, delimiter: str | None = None, header: bool = True) -> dict:
    """Survey exports; returns ``{"files": [{"path", "rows", "columns": [...]}, ...]}``.

    Example:
        >>> import tempfile, os
        >>> d = tempfile.mkdtemp(); p = os.path.join(d, "t.csv")
        >>> _ = open(p, "w").write("id,people\\n1,\\"[{'id': 7, 'name': 'Ann'}]\\"\\n")
        >>> col = survey([p])["files"][0]["columns"][1]
        >>> col["format"], col["shape"], col["identity_candidates"][0]["field"]
        ('python-literal', 'object-list', 'id')
    """
    if isinstance(paths, (str, os.PathLike)):  # one path (never its characters) or many
        paths = [paths]
    paths = [os.fspath(p) for p in paths]
    delimiter = check_values(encoding_name=encoding, delimiter_char=delimiter, limits=limits)
    files = []
    surveyed = []
    for path in paths:
        export = read(path, encoding=encoding, delimiter=delimiter, header=header)
        columns = decode(export, limits, formats)
        surveyed.append((export, columns))
        files.append({
            "path": os.fspath(path),
            "format": export.kind,
            "delimiter": export.delimiter,
            "rows": export.rows_read,
            "records": export.number_of_records,
            "rejected_rows": len(export.rejected),
            "rejected": [{"line": r.line, "reason": r.reason, "raw": r.raw[:200]}
                         for r in export.rejected[:SHOWN_MESSAGES]],
            "warnings": export.warnings,
            "quarantined": sum(len(c.quarantined) for c in columns.values()),
            "columns": [survey_column(export, c) for c in columns.values()],
        })
    _reference_evidence(surveyed, files)
    return {"files": files}


def _reference_evidence(surveyed: list, files: list[dict]) -> None:
    """For each column of scalars or of lists of scalars: the share of its distinct values that are natural keys
    of a file (``references`` in the entry), the evidence a build goes by to make it a foreign key."""
    keys, key_columns, key_of = {}, {}, {}
    for export, columns in surveyed:
        types = {n: scalar_column_type(c.values)
                 for n, c in columns.items() if c.format in (Format.TEXT, Format.EMPTY)}
        key = detect_natural_key(list(types), {n: columns[n].values for n in types}, types)
        if key:
            keys[export.name] = reference_texts(columns[key].values, False)
            key_columns[export.name], key_of[export.name] = key, key
    if not keys:
        return
    for (export, columns), found in zip(surveyed, files):
        for entry in found["columns"]:
            name = entry["name"]
            if name == key_of.get(export.name) or entry["shape"] not in ("scalar", "scalar-list"):
                continue
            texts = reference_texts(columns[name].values, entry["shape"] == "scalar-list")
            evidence = reference_evidence(texts, keys)
            if evidence is None:
                continue
            table, distinct, matched = evidence
            entry["references"] = {"file": table, "key": key_columns[table], "distinct_values": distinct,
                                   "matched": matched, "share": round(matched / distinct, 4),
                                   "foreign_key": is_reference(evidence, name, texts, key_columns)}


def render(result: dict) -> str:
    """The survey as a readable terminal report."""
    out = []
    for f in result["files"]:
        out.append(f"{f['path']}  ({f['format']}, {f['rows']} rows: {f['records']} records, "
                   f"{f['rejected_rows']} rejected; {f['quarantined']} cells quarantined)")
        for w in f["warnings"]:
            out.append(f"  warning: {w}")
        for r in f["rejected"]:
            out.append(f"  rejected line {r['line']}: {r['reason']}")
        if f["rejected_rows"] > len(f["rejected"]):
            out.append(f"  ... and {f['rejected_rows'] - len(f['rejected'])} more rejected rows")
        for c in f["columns"]:
            if c["format"] in (Format.TEXT, Format.EMPTY):
                head = f"  {c['name']}: {c['type']}"
            else:
                head = f"  {c['name']}: {c['format']} {c['shape']}"
            head += f", filled {c['fill_rate']:.0%}"
            if "list_length" in c:
                ll = c["list_length"]
                head += f", list length {ll['min']}/{ll['median']:g}/{ll['max']} (min/median/max)"
            if c.get("separator"):
                head += f", separator {c['separator']!r}"
            out.append(head)
            if c["format"] == "mixed":
                counts = ", ".join(f"{k} {v}" for k, v in c["format_counts"].items())
                out.append(f"      mixed formats: {counts}")
            for k in c.get("keys", []):
                types = "/".join(k["types"])
                line = f"      {k['path']}: {types}, filled {k['fill_rate']:.0%}"
                if "nested" in k:
                    line += f", holds {k['nested']['shape']}"
                out.append(line)
            cands = c.get("identity_candidates")
            if cands:
                best = cands[0]
                extra = f" (determines {', '.join(best['determines'])})" if best["determines"] else ""
                others = [x["field"] for x in cands[1:]]
                out.append(f"      identity: {best['field']}{extra}"
                           + (f"; also possible: {', '.join(others)}" if others else ""))
            elif c["shape"] in ("object-list", "object"):
                out.append("      identity: none found (objects become child rows)")
            ref = c.get("references")
            if ref:
                out.append(f"      values are natural keys of {ref['file']}.{ref['key']}: {ref['matched']:,} of "
                           f"{ref['distinct_values']:,} distinct values ({ref['share']:.0%})"
                           + ("; a build makes it a foreign key" if ref["foreign_key"] else
                              f"; a foreign key needs {REFERENCE_MIN_SHARE:.0%} and {REFERENCE_MIN_VALUES} values "
                              f"(or references in a plan)"))
            if c.get("rejoined"):
                out.append(f"      {c['rejoined']} values kept a name suffix after a comma "
                           f"(\"Carl Dole, Jr.\") as part of the value before it")
            for a in c.get("ambiguity", []):
                out.append(f"      ambiguous separator: {a}")
            for q in c.get("quarantine", []):
                pos = f", char {q['position']}" if q["position"] else ""
                out.append(f"      quarantined line {q['line']}{pos}: {q['message']} (got {q['excerpt']!r})")
            if c["quarantined"] > len(c.get("quarantine", [])):
                out.append(f"      ... and {c['quarantined'] - len(c['quarantine'])} more quarantined")
    return "\n".join(out)
