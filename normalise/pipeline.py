"""The passes in order: read -> decode -> infer -> plan -> build -> check -> write -> report."""

from __future__ import annotations

import json
import os

from .build import build
from .check import check_plan, check_rows
from .decode import decode
from .infer import Options, infer_plan
from .join import JoinOptions, join
from .literal import Limits
from .read import read
from .report import manifest
from .views import add_pick
from .write import write_parquet, write_sqlite


def build_database(paths: list[str], database: str, *, options: Options | None = None,
                   limits: Limits = Limits(), formats: dict | None = None, encoding: str | None = None,
                   delimiter: str | None = None, replace: bool = False, join_options: JoinOptions | None = None,
                   manifest_path: str | None = None, picks: list[str] | None = None,
                   parquet_dir: str | None = None) -> dict:
    """Run every pass on the exports and write a SQLite database; returns the manifest.

    Example:
        >>> import tempfile, os
        >>> d = tempfile.mkdtemp(); p = os.path.join(d, "books.csv")
        >>> _ = open(p, "w").write('key,people\\nb1,"[{\\'id\\': 7, \\'name\\': \\'Ann\\'}]"\\n')
        >>> m = build_database([p], os.path.join(d, "out.db"))
        >>> [(t["name"], t["role"], t["rows"]) for t in m["tables"] if t["rows"]]
        [('person', 'entity', 1), ('books', 'record', 1), ('book_people', 'bridge', 1)]
    """
    exports = [read(p, encoding=encoding, delimiter=delimiter) for p in paths]
    decoded = {e.path: decode(e, limits, formats) for e in exports}
    options = options or Options()
    joined = join(exports, decoded, join_options or JoinOptions(duplicates=options.duplicates),
                  options.natural_keys)
    exports, decoded = joined.exports, joined.decoded
    plan = infer_plan(exports, decoded, options)
    for spec in picks or ():
        add_pick(plan, spec)
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
