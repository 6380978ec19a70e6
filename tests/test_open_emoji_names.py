"""Build an open dataset of emoji names in fourteen languages, exported as JSON Lines.

Dataset: the emoji data of the PyPI package ``emoji`` (licence BSD, its
classifiers and LICENSE.txt), written against emoji 2.16.0; the ``test`` extra
of pyproject.toml installs it. ``unicode_codes/emoji.json`` maps each emoji to
its English short code (``en``), its Unicode status, the Emoji version it came
with (``E``: ``0.6``, ``3``, ``13.1``: integers and decimals), aliases on some
emoji only (a list of scalars shared by a few) and ``variant: true`` on some
emoji only (never ``false``); ``unicode_codes/emoji_<lang>.json`` maps each
emoji to its short code in another language.

The test writes one JSON Lines record per emoji, as an API export would:
``{"emoji", "en", "status", "E", "alias"?, "variant"?, "names": {"de": ...}}``.
Every expected fact is computed here with plain Python from the package files,
never hard-coded.
"""

from __future__ import annotations

import importlib.metadata
import importlib.resources
import json

import pytest

from tests.open_data import (build_jsonl, check_lossless, check_pragmas, element_tables, lists, nest, record_table, records)

STEM = "emoji_names"


def codes_dir():
    return importlib.resources.files("emoji") / "unicode_codes"


def emoji_records() -> list[dict]:
    main = json.loads((codes_dir() / "emoji.json").read_text(encoding="utf-8"))
    languages = sorted(p.name[len("emoji_"):-len(".json")] for p in codes_dir().iterdir()
                       if p.name.startswith("emoji_") and p.name.endswith(".json"))
    names = {lang: json.loads((codes_dir() / f"emoji_{lang}.json").read_text(encoding="utf-8"))
             for lang in languages}
    return [{"emoji": e, **data, "names": {lang: names[lang][e] for lang in languages if e in names[lang]}}
            for e, data in main.items()]


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    rows = emoji_records()
    return build_jsonl(rows, tmp_path_factory.mktemp("emoji_names"), STEM)


def test_package_and_licence():
    # emoji (PyPI), BSD: its classifiers and its LICENSE.txt
    meta = importlib.metadata.metadata("emoji")
    assert "License :: OSI Approved :: BSD License" in meta.get_all("Classifier")
    assert importlib.metadata.version("emoji")  # written against 2.16.0
    rows = emoji_records()
    assert len(rows) > 1000
    assert {type(r["E"]) for r in rows} == {int, float}
    assert any("alias" in r for r in rows) and any("alias" not in r for r in rows)
    assert {r.get("variant") for r in rows} == {True, None}


def test_records(built):
    rows, db, m = built
    (i,) = m["inputs"]
    assert i["rows_read"] == i["records_loaded"] == len(rows) == len({r["emoji"] for r in rows})
    assert i["rows_set_aside"] == i["rows_rejected"] == 0 and m["cells_quarantined"] == 0
    # nested elements: every alias, and each names object as one
    elements = sum(len(r.get("alias", [])) for r in rows) + sum(1 for r in rows if r["names"])
    assert i["elements_decoded"] == i["elements_written"] == elements
    assert m["integrity"]["reconciled"] is True
    assert record_table(m, STEM)["natural_key"] == ["emoji"]


def test_sqlite_pragmas(built):
    _, db, m = built
    check_pragmas(db, m)


def test_aliases(built):
    rows, db, m = built
    expect = {r["emoji"]: r["alias"] for r in rows if r.get("alias")}
    bridge, entity, _ = element_tables(m, STEM, "alias")
    assert entity["rows"] == len({a for v in expect.values() for a in v})  # distinct aliases
    assert bridge["rows"] == sum(len(v) for v in expect.values())
    assert lists(db, m, STEM, "alias") == expect  # each emoji's aliases, in order


def test_values_exact(built):
    rows, db, m = built
    got = {e: nest(v) for e, v in records(db, m, STEM).items()}
    expect = {r["emoji"]: {k: v for k, v in r.items() if k != "alias"} for r in rows}
    assert got.keys() == expect.keys()  # every emoji, its code points untouched
    for e, values in expect.items():
        # E is a REAL column (integers and decimals): 3 comes back as 3.0, the same number
        assert got[e] == values, e
        assert set(got[e]["names"]) == set(values["names"])  # no language filled in
        assert isinstance(got[e]["status"], int) and isinstance(got[e]["en"], str)
    # the sparse flag: set where the data set it, absent (NULL) elsewhere, never False
    assert [e for e, v in got.items() if "variant" in v] == [r["emoji"] for r in rows if "variant" in r]


def test_lossless_proof(built):
    check_lossless(built[2])
