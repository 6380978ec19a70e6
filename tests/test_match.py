"""Objects without an identity field, matched on a normalised natural key when asked (--match).

References: Unicode NFKC normalisation and case folding as Python's ``unicodedata.normalize`` and
``str.casefold`` implement them (Unicode Standard Annex #15; Unicode case folding), and white space collapsed by
``str.split`` — the normalised key is computed independently in the test with those functions.
"""

from __future__ import annotations

import csv
import json
import sqlite3
import unicodedata

from normalise.cli import main

ROWS = [
    ("a", [{"name": "Ann  Orrel", "role": "x"}, {"name": "Bo", "role": "y"}]),
    ("b", [{"name": "ann orrel", "role": "z"}]),
    ("c", [{"name": "ANN ORREL", "role": "x"}, {"name": "ｂｏ", "role": "q"}]),  # full-width letters
    ("d", [{"name": "Ann Orrel", "role": "x"}, {"name": "Ceph", "role": "x"}]),
]


def normalised(text: str) -> str:
    return " ".join(unicodedata.normalize("NFKC", text).casefold().split())


def test_match_merges_spellings_and_reports_them(tmp_path):
    path = tmp_path / "contributors.csv"
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["key", "people"])
        for key, people in ROWS:
            w.writerow([key, repr(people)])
    db, manifest = tmp_path / "m.db", tmp_path / "m.json"
    assert main(["build", str(path), "--db", str(db), "--manifest", str(manifest), "--match", "people=name",
                 "--quiet"]) == 0
    m = json.loads(manifest.read_text())
    con = sqlite3.connect(db)
    spellings: dict[str, list[str]] = {}
    for _, people in ROWS:
        for p in people:
            spellings.setdefault(normalised(p["name"]), []).append(p["name"])
    entity = next(t for t in m["tables"] if t["role"] == "entity")
    rows = dict(con.execute(f'SELECT {entity["natural_key"][0]}, name FROM "{entity["name"]}"'))
    assert set(rows) == set(spellings)  # one entity per normalised key
    for key, names in spellings.items():  # the most frequent spelling, ties to the first seen
        assert rows[key] == max(names, key=lambda n: (names.count(n), -names.index(n)))
    merged = {x["key"]: set(x["spellings"]) for x in m["matched"]}
    assert merged == {k: set(v) for k, v in spellings.items() if len(set(v)) > 1}
    variants = con.execute("SELECT natural_key, value, occurrences FROM attribute_variants "
                           "WHERE attribute = 'name'").fetchall()
    assert {(k, v) for k, v, _ in variants} == {(k, n) for k, v in spellings.items() if len(set(v)) > 1 for n in v}
    bridge = next(t for t in m["tables"] if t["role"] == "bridge")
    assert bridge["rows"] == sum(len(p) for _, p in ROWS)  # every object is linked
