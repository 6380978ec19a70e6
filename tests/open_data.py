"""Reading a built database back for the open-dataset tests (``tests/test_open_*.py``).

Nothing here computes an expected fact: the tests compute those from the
package data with plain Python. These helpers only find tables in the
manifest and read rows back with ``sqlite3``, turning each column into the
value it holds in the input (by the column's ``source`` in the manifest).
"""

from __future__ import annotations

import sqlite3


def record_table(m: dict, stem: str) -> dict:
    (table,) = [t for t in m["tables"] if t["role"] == "record"
                and {"file": stem, "column": None} in t["sources"]]
    return table


def nested_table(m: dict, stem: str, column: str, role: str) -> dict:
    """The bridge or child table made for one nested column."""
    (table,) = [t for t in m["tables"] if t["role"] == role
                and {"file": stem, "column": column} in t["sources"]]
    return table


def element_tables(m: dict, stem: str, column: str) -> tuple[dict, dict, str]:
    """(bridge, entity or value table, the bridge's foreign-key column to it) of a list column."""
    owner = record_table(m, stem)["name"]
    bridge = nested_table(m, stem, column, "bridge")
    (fk,) = [fk for fk in bridge["foreign_keys"] if fk["references"] != owner]
    tables = {t["name"]: t for t in m["tables"]}
    return bridge, tables[fk["references"]], fk["columns"][0]


def pragmas(db) -> tuple[list, list]:
    """SQLite's own checks: ``PRAGMA foreign_key_check`` rows and ``PRAGMA integrity_check`` rows."""
    with sqlite3.connect(db) as con:
        return (con.execute("PRAGMA foreign_key_check").fetchall(),
                con.execute("PRAGMA integrity_check").fetchall())


def _value(value, column: dict):
    # SQLite has no boolean type: a BOOLEAN column gives 0 and 1 back
    if column["type"] == "boolean" and value is not None:
        return bool(value)
    return value


def _sourced(table: dict) -> list[dict]:
    return [c for c in table["columns"] if c["source"] is not None]


def records(db, m: dict, stem: str) -> dict:
    """Each record's sourced columns as ``{natural key value: {source: value}}``; NULLs left out."""
    table = record_table(m, stem)
    (key,) = table["natural_key"]
    cols = _sourced(table)
    names = ", ".join(f'"{c["name"]}"' for c in cols)
    out = {}
    with sqlite3.connect(db) as con:
        for row in con.execute(f'SELECT "{key}", {names} FROM "{table["name"]}"'):
            out[row[0]] = {c["source"]: _value(v, c) for c, v in zip(cols, row[1:]) if v is not None}
    return out


def lists(db, m: dict, stem: str, column: str) -> dict:
    """Each record's list in ``column``, joined back from bridge and entity, in list order.

    ``{natural key value: [element, ...]}``: an element is the value itself for
    a list of scalars, and ``{source field: value}`` (entity attributes and link
    attributes together, NULLs left out) for a list of objects.
    """
    record = record_table(m, stem)
    (key,) = record["natural_key"]
    (owner_pk,) = record["primary_key"]
    bridge, entity, entity_fk = element_tables(m, stem, column)
    (owner_fk,) = [fk["columns"][0] for fk in bridge["foreign_keys"] if fk["references"] == record["name"]]
    (entity_pk,) = entity["primary_key"]
    entity_cols, link_cols = _sourced(entity), _sourced(bridge)
    scalar = not entity_cols
    picked = ([f'e."{entity["natural_key"][0]}"'] if scalar else
              [f'e."{c["name"]}"' for c in entity_cols] + [f'b."{c["name"]}"' for c in link_cols])
    sql = (f'SELECT r."{key}", {", ".join(picked)} FROM "{bridge["name"]}" b '
           f'JOIN "{record["name"]}" r ON b."{owner_fk}" = r."{owner_pk}" '
           f'JOIN "{entity["name"]}" e ON b."{entity_fk}" = e."{entity_pk}" '
           f'ORDER BY r."{owner_pk}", b."{bridge["position_column"]}"')
    out: dict = {}
    with sqlite3.connect(db) as con:
        for row in con.execute(sql):
            if scalar:
                element = row[1]
            else:
                element = {c["source"]: _value(v, c)
                           for c, v in zip(entity_cols + link_cols, row[1:]) if v is not None}
            out.setdefault(row[0], []).append(element)
    return out


def children(db, m: dict, stem: str, column: str) -> dict:
    """The child rows of ``column`` as ``{natural key value: [{source: value}, ...]}``; NULLs left out."""
    record = record_table(m, stem)
    (key,) = record["natural_key"]
    (owner_pk,) = record["primary_key"]
    child = nested_table(m, stem, column, "child")
    (owner_fk,) = [fk["columns"][0] for fk in child["foreign_keys"] if fk["references"] == record["name"]]
    cols = _sourced(child)
    order = f', c."{child["position_column"]}"' if child["position_column"] else ""
    picked = ", ".join(f'c."{c["name"]}"' for c in cols)
    sql = (f'SELECT r."{key}", {picked} '
           f'FROM "{child["name"]}" c JOIN "{record["name"]}" r ON c."{owner_fk}" = r."{owner_pk}" '
           f'ORDER BY r."{owner_pk}"{order}')
    out: dict = {}
    with sqlite3.connect(db) as con:
        for row in con.execute(sql):
            out.setdefault(row[0], []).append(
                {c["source"]: _value(v, c) for c, v in zip(cols, row[1:]) if v is not None})
    return out


def nest(flat: dict) -> dict:
    """``{"ISO.alpha2": "AD"}`` -> ``{"ISO": {"alpha2": "AD"}}`` (sources name object keys with dots)."""
    out: dict = {}
    for path, value in flat.items():
        *parents, last = path.split(".")
        here = out
        for p in parents:
            here = here.setdefault(p, {})
        here[last] = value
    return out


def without_empty(value):
    """A value with the empty markers the README names (None, [], {}) taken out of objects, recursively."""
    if isinstance(value, dict):
        kept = {k: without_empty(v) for k, v in value.items()}
        return {k: v for k, v in kept.items() if v not in (None, [], {})}
    if isinstance(value, list):
        return [without_empty(v) for v in value]
    return value


def check_pragmas(db, m: dict) -> None:
    """SQLite's own checks on the file, and the manifest saying the same."""
    fk, integrity = pragmas(db)
    assert fk == []  # SQLite: PRAGMA foreign_key_check
    assert integrity == [("ok",)]  # SQLite: PRAGMA integrity_check
    assert m["integrity"]["foreign_key_violations"] == 0 and m["integrity"]["integrity_check"] == "ok"


def check_lossless(m: dict) -> None:
    """The lossless proof: every loaded cell rebuilt from the tables equals the decoded input."""
    assert m["integrity"]["proof"] == "exact"
    assert m["integrity"]["cells_checked"] > 0
    assert m["integrity"]["cells_rebuilt_exactly"] == m["integrity"]["cells_checked"]


def build_jsonl(rows: list[dict], where, stem: str) -> tuple:
    """Write the records as JSON Lines (one JSON text per line) and build them: (rows, db, manifest)."""
    import json

    from normalise.pipeline import build_database

    path = where / f"{stem}.jsonl"
    with open(path, "w", encoding="utf-8") as f:
        for row in rows:
            f.write(json.dumps(row, ensure_ascii=False) + "\n")
    db = where / f"{stem}.db"
    return rows, db, build_database([str(path)], str(db))


def npm_package(name: str, version: str, where):
    """The files of one npm package at one version (``npm pack``, then the tarball unpacked): its folder.

    Skips the test when npm or the registry is not at hand, as the PyPI downloads of the other tests do.
    """
    import shutil
    import subprocess
    import tarfile

    import pytest

    npm = shutil.which("npm")
    if npm is None:
        pytest.skip("npm is not installed here")
    done = subprocess.run([npm, "pack", f"{name}@{version}", "--pack-destination", str(where), "--silent"],
                          capture_output=True, text=True, timeout=180, cwd=str(where))
    found = sorted(where.glob("*.tgz"))
    if done.returncode != 0 or not found:
        pytest.skip(f"npm could not fetch {name}@{version} (no registry here?): {done.stderr.strip()[-300:]}")
    with tarfile.open(found[0]) as tar:
        tar.extractall(where, filter="data")
    return where / "package"


def referred_rows(db, m: dict, stem: str, column: str, own: str, shown: tuple[str, ...]) -> list[tuple]:
    """Each value of a list column that names records, in list order: (the owner's ``own`` column, the value as
    stored, then the ``shown`` columns of the record its foreign key leads to, NULL where it leads nowhere)."""
    record = record_table(m, stem)
    (pk,) = record["primary_key"]
    bridge, values, value_fk = element_tables(m, stem, column)
    (to_record,) = values["foreign_keys"]
    assert to_record["references"] == record["name"]
    (value_pk,) = values["primary_key"]
    (value_column,) = values["natural_key"]
    picked = ", ".join(f't."{c}"' for c in shown)
    sql = (f'SELECT r."{own}", v."{value_column}", {picked} FROM "{bridge["name"]}" b '
           f'JOIN "{record["name"]}" r ON r."{pk}" = b."{pk}" '
           f'JOIN "{values["name"]}" v ON v."{value_pk}" = b."{value_fk}" '
           f'LEFT JOIN "{record["name"]}" t ON t."{pk}" = v."{to_record["columns"][0]}" '
           f'ORDER BY r."{pk}", b."{bridge["position_column"]}"')
    with sqlite3.connect(db) as con:
        return con.execute(sql).fetchall()
