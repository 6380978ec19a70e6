"""Issue 15: partitions built apart — by a pool of processes (``--workers``) or as tasks of a Dask cluster
(``--dask``, a ``distributed.LocalCluster`` of 2 worker processes here) — and merged in input order give the
database one process gives, table by table and view by view.

Reference: a build of the same file in this process (``workers=1``), compared row for row in every table and view,
and SQLite's own pragmas (``foreign_key_check``, ``integrity_check``; sqlite.org/pragma.html). Keys are
deterministic (DEVELOPERS.md, "Keys"), so this is equality, not similarity.

Data:
- ``countryinfo`` (PyPI, MIT) as CSV, as ``tests/test_report_from_plan_14.py`` writes it (one CSV file: read in
  chunks, decoded where each partition is built);
- the Unicode CLDR supplemental data shipped in ``babel`` (PyPI, BSD-3-Clause; CLDR under the Unicode licence) as
  JSON Lines, as ``tests/test_open_cldr_territories.py`` writes it (read whole: partitions go out decoded);
- every case of ``tests/corpus/`` whose inputs are in its folder and that builds with no option of its own.
"""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import pytest

from normalise import cli, pipeline
from normalise.model.errors import UsageError
from normalise.pipeline import build_database
from tests.test_open_cldr_territories import territories
from tests.test_report_from_plan_14 import _countries_csv

CORPUS = Path(__file__).parent / "corpus"


def dump(db) -> dict:
    con = sqlite3.connect(db)
    names = [n for (n,) in con.execute("SELECT name FROM sqlite_master WHERE type IN ('table', 'view') ORDER BY name")]
    return {n: sorted(con.execute(f'SELECT * FROM "{n}"').fetchall(), key=repr) for n in names}


def _pragmas_clean(db) -> None:
    con = sqlite3.connect(db)
    assert con.execute("PRAGMA foreign_key_check").fetchall() == []  # SQLite pragma
    assert con.execute("PRAGMA integrity_check").fetchall() == [("ok",)]  # SQLite pragma


@pytest.fixture(scope="module")
def countries(tmp_path_factory):
    return _countries_csv(tmp_path_factory.mktemp("countries"))


@pytest.fixture(scope="module")
def cldr(tmp_path_factory):
    path = tmp_path_factory.mktemp("cldr") / "territories.jsonl"
    path.write_text("".join(json.dumps(r, ensure_ascii=False) + "\n" for r in territories()), "utf-8")
    return str(path)


@pytest.mark.parametrize("chunk_rows", [7, 40])
def test_a_pool_of_processes_gives_the_one_process_database(countries, tmp_path, chunk_rows):
    one = build_database(countries, tmp_path / "one.db", chunk_rows=chunk_rows)
    apart = build_database(countries, tmp_path / "apart.db", chunk_rows=chunk_rows, workers=2)
    assert dump(tmp_path / "one.db") == dump(tmp_path / "apart.db")
    _pragmas_clean(tmp_path / "apart.db")
    p = apart["partitions"]
    assert p["built_by"] == "2 processes"
    n = one["inputs"][0]["rows_read"]
    assert p["merged"] + p["built_again"] == -(-n // chunk_rows)  # every partition, once
    assert p["merged"] > 0
    assert "partitions" not in one
    assert apart["integrity"]["proof"] == "exact"


def test_records_read_whole_go_out_decoded(cldr, tmp_path):
    build_database(cldr, tmp_path / "one.db", chunk_rows=13)
    apart = build_database(cldr, tmp_path / "apart.db", chunk_rows=13, workers=2)
    assert dump(tmp_path / "one.db") == dump(tmp_path / "apart.db")
    assert apart["partitions"]["merged"] > 0


def test_a_key_kept_in_an_earlier_partition_sets_the_record_aside_as_one_process_does(tmp_path, monkeypatch):
    # A natural key an earlier partition kept: the later record is set aside, which that partition alone cannot
    # know. CLDR's territories (babel), the first 30 written again at the end; the model is made from the first
    # 100 records, where each code is unique (as a big file's first 5,000 records are).
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", 100)
    rows = territories()
    path = tmp_path / "repeated.jsonl"
    path.write_text("".join(json.dumps(r, ensure_ascii=False) + "\n" for r in rows + rows[:30]), "utf-8")
    one = build_database(str(path), tmp_path / "one.db", chunk_rows=50)
    apart = build_database(str(path), tmp_path / "apart.db", chunk_rows=50, workers=2)
    assert one["inputs"][0]["rows_set_aside"] == 30
    assert dump(tmp_path / "one.db") == dump(tmp_path / "apart.db")
    p = apart["partitions"]
    assert p["built_again"] >= 1 and any("an earlier partition kept" in why for why in p["why_again"])


def test_an_entity_first_seen_earlier_with_another_value_is_built_again_in_order(tmp_path):
    # Each occurrence of an entity is compared with the entity's first value in the file: a partition whose
    # first English (language "en") is spelt otherwise cannot know which comes first. CLDR's territories
    # (babel), one occurrence of English respelt at the start of the fourth partition.
    rows = territories()
    at = next(i for i in range(150, 200) if any(lang["code"] == "en" for lang in rows[i]["languages"]))
    rows[at] = dict(rows[at], languages=[dict(lang, name="English (as spelt here)") if lang["code"] == "en" else lang
                                         for lang in rows[at]["languages"]])
    path = tmp_path / "respelt.jsonl"
    path.write_text("".join(json.dumps(r, ensure_ascii=False) + "\n" for r in rows), "utf-8")
    build_database(str(path), tmp_path / "one.db", chunk_rows=50)
    apart = build_database(str(path), tmp_path / "apart.db", chunk_rows=50, workers=2)
    assert dump(tmp_path / "one.db") == dump(tmp_path / "apart.db")
    with sqlite3.connect(tmp_path / "apart.db") as con:  # the respelt occurrence is kept as given
        assert con.execute("SELECT count(*) FROM value_traces WHERE original LIKE '%as spelt here%'").fetchone()[0] == 1
    p = apart["partitions"]
    assert any("first value is in an earlier partition" in why for why in p["why_again"])


def test_a_dask_local_cluster_gives_the_one_process_database(countries, cldr, tmp_path):
    pytest.importorskip("distributed")
    for name, path in (("countries", countries), ("cldr", cldr)):
        build_database(path, tmp_path / f"{name}_one.db", chunk_rows=25)
        on_dask = build_database(path, tmp_path / f"{name}_dask.db", chunk_rows=25, dask="local:2")
        assert dump(tmp_path / f"{name}_one.db") == dump(tmp_path / f"{name}_dask.db")
        assert on_dask["partitions"]["built_by"] == "Dask at local:2"
        _pragmas_clean(tmp_path / f"{name}_dask.db")


def _plain_cases():
    for expect_path in sorted(CORPUS.glob("*/expect.json")):
        expect = json.loads(expect_path.read_text("utf-8"))
        if any(k in expect for k in ("generate", "aside", "rename", "args", "build_args", "known_bug")):
            continue
        if expect.get("exit", 0):
            continue
        yield pytest.param(expect_path.parent, id=expect_path.parent.name)


@pytest.mark.parametrize("case", list(_plain_cases()))
def test_every_plain_corpus_case_built_apart_is_the_same(case, tmp_path):
    expect = json.loads((case / "expect.json").read_text("utf-8"))
    files = [str(case / f) for f in expect.get("files", sorted(p.name for p in case.iterdir()
                                                             if p.name != "expect.json"))]
    for name, extra in (("one", []), ("apart", ["--workers", "2"])):
        rc = cli.main(["build", *files, "--db", str(tmp_path / f"{name}.db"), "--chunk-rows", "2", "--quiet",
                       *extra])
        assert rc == 0
    assert dump(tmp_path / "one.db") == dump(tmp_path / "apart.db")


@pytest.mark.parametrize("kwargs, says", [
    (dict(workers=-1), "workers -1"), (dict(workers=True), "workers True"), (dict(dask="nowhere"), "dask"),
    (dict(dask="local:x"), "local:N"), (dict(workers=2, append=True), "append"),
])
def test_bad_settings_are_refused(countries, tmp_path, kwargs, says):
    with pytest.raises(UsageError, match=says):
        build_database(countries, tmp_path / "x.db", **kwargs)
