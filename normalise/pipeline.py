"""The passes in order: read -> decode -> infer -> plan -> build -> check -> write -> report."""

from __future__ import annotations

import json
import os
from pathlib import Path

from .build import build
from .check import check_plan, check_rows
from .decode import decode
from .infer import Options, infer_plan
from .join import JoinOptions, join
from .literal import Limits
from .planfile import join_settings, plan_from_doc, plan_to_toml, read_plan
from .read import read
from .report import manifest
from .views import add_pick
from .write import write_parquet, write_sqlite


def prepare(paths: list[str], *, options: Options | None = None, limits: Limits = Limits(),
            formats: dict | None = None, encoding: str | None = None, delimiter: str | None = None,
            join_options: JoinOptions | None = None, picks: list[str] | None = None,
            plan_path: str | None = None):
    """Read, decode, join and plan; with ``plan_path`` the plan comes from that file, checked against the data."""
    exports = [read(p, encoding=encoding, delimiter=delimiter) for p in paths]
    decoded = {e.path: decode(e, limits, formats) for e in exports}
    options = options or Options()
    doc = text = None
    if plan_path:
        doc, text = read_plan(plan_path)
        settings = join_settings(doc)
        join_options = JoinOptions(how=settings["how"], cardinality=settings["cardinality"], on=settings["on"],
                                   separate=settings["separate"], duplicates=options.duplicates)
        options.natural_keys = {r["file"]: r["natural_key"] for r in doc.get("record", []) if r.get("natural_key")}
    joined = join(exports, decoded, join_options or JoinOptions(duplicates=options.duplicates),
                  options.natural_keys)
    exports, decoded = joined.exports, joined.decoded
    if doc is not None:
        plan = plan_from_doc(doc, text, exports, decoded)
    else:
        plan = infer_plan(exports, decoded, options)
    for spec in picks or ():
        add_pick(plan, spec)
    joined.settings = join_options or JoinOptions(duplicates=options.duplicates)
    return plan, exports, decoded, joined


def make_plan(paths: list[str], output: str | None = None, **kwargs) -> str:
    """Infer the plan of the exports and return it (and write it to ``output``) as TOML."""
    plan, _, _, joined = prepare(paths, **kwargs)
    s = joined.settings
    on = {Path(j["right"]).stem: (j["on"][0][1], None) for j in joined.joins}
    text = plan_to_toml(plan, {"how": s.how, "cardinality": s.cardinality, "separate": s.separate, "on": on})
    if output:
        Path(output).write_text(text, encoding="utf-8")
    return text


def build_database(paths: list[str], database: str, *, options: Options | None = None,
                   limits: Limits = Limits(), formats: dict | None = None, encoding: str | None = None,
                   delimiter: str | None = None, replace: bool = False, join_options: JoinOptions | None = None,
                   manifest_path: str | None = None, picks: list[str] | None = None,
                   parquet_dir: str | None = None, plan_path: str | None = None) -> dict:
    """Run every pass on the exports and write a SQLite database; returns the manifest.

    Example:
        >>> import tempfile, os
        >>> d = tempfile.mkdtemp(); p = os.path.join(d, "books.csv")
        >>> _ = open(p, "w").write('key,people\\nb1,"[{\\'id\\': 7, \\'name\\': \\'Ann\\'}]"\\n')
        >>> m = build_database([p], os.path.join(d, "out.db"))
        >>> [(t["name"], t["role"], t["rows"]) for t in m["tables"] if t["rows"]]
        [('person', 'entity', 1), ('books', 'record', 1), ('book_people', 'bridge', 1)]
    """
    plan, exports, decoded, joined = prepare(paths, options=options, limits=limits, formats=formats,
                                             encoding=encoding, delimiter=delimiter, join_options=join_options,
                                             picks=picks, plan_path=plan_path)
    order = check_plan(plan)
    built = build(plan, exports, decoded,
                  extra={"set_aside_rows": joined.set_aside, "unmatched_rows": joined.unmatched})
    missing = check_rows(plan, built.rows)
    if missing:
        from .check import IntegrityError
        raise IntegrityError(f"{missing} foreign-key values name no row; nothing was written")
    integrity = write_sqlite(plan, built.rows, order, database, replace=replace)
    result = manifest(plan, built, os.fspath(database), integrity, joined)
    if parquet_dir:
        result["parquet"] = write_parquet(database, plan, parquet_dir)
    if manifest_path:
        with open(manifest_path, "w", encoding="utf-8") as f:
            json.dump(result, f, indent=2, ensure_ascii=False)
    return result
