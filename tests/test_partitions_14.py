"""One build path (issue 14): any partition size gives the same database, the same manifest, the same refusal.

A build takes its records ``--chunk-rows`` at a time, and reading the input whole (``--chunk-rows 0``, or no
``chunk_rows``) is the case of one partition (``partition.py``, DEVELOPERS.md "One build path"). The reference
is that one-partition build of the same input: every other partition size must give

* the same database, table by table and row by row: SQLite's own dump (``sqlite3.Connection.iterdump``, the
  Python Library Reference: the schema and every row as SQL text) and ``SELECT *`` of every table and view
  ordered by every column;
* the same manifest (counts, quarantine, references, the lossless proof's figures), but for the database's
  path;
* or, when the build is refused, the same exit code and the same message.

Every case of the corpus of broken and hostile exports (``tests/corpus``, driven as ``tests/test_corpus.py``
drives it) is built with partitions of 1, 2 and 7 records and as one partition; then the settings a partition
could get wrong: a plan file's ``duplicates = "last"`` (bug 3 of issue 11: the database depended on the chunk
size), ``first`` and ``refuse``, joins of several files, JSON Lines, ``--append``.
"""

from __future__ import annotations

import json
import shutil
import sqlite3
from pathlib import Path

import pandas as pd
import pytest

from demo.generate import generate
from normalise import JoinOptions, pipeline
from normalise.build import DuplicateNaturalKey
from normalise.infer import Options
from normalise.pipeline import build_database, make_plan
from tests import test_corpus
from tests.test_corpus import CASES, CORPUS, inputs_for, run_commands
from tests.test_postgresql import _drop, _new_schema, pg, pg_snapshot, pg_url, relation_names  # noqa: F401 (fixtures)

PARTITIONS = [1, 2, 7, 0]  # records per partition; 0: the input read whole, one partition (the reference)
# The model is made from the first pipeline.SAMPLE_ROWS records (5,000); from the first three, every case has
# records after them, read as the first ones decided (formats, plan), in every partition size
SAMPLES = [5000, 3]


def database(path) -> dict:
    """A database as SQLite gives it: its dump (``iterdump``) and each table's and view's rows in order."""
    con = sqlite3.connect(path)
    try:
        names = [n for (n,) in con.execute("SELECT name FROM sqlite_master WHERE type IN ('table', 'view') "
                                           "ORDER BY name")]
        try:
            dump = list(con.iterdump())  # Python Library Reference, sqlite3: the schema and rows as SQL text
        except sqlite3.OperationalError:  # a table of thousands of columns is too wide for iterdump's query
            dump = [sql for (sql,) in con.execute("SELECT sql FROM sqlite_master ORDER BY type, name")]
            dump += [row for n in names for row in con.execute(f'SELECT * FROM "{n}"')]  # in stored order
        rows = {}
        for name in names:
            width = len(con.execute(f'SELECT * FROM "{name}" LIMIT 0').description)
            order = ", ".join(str(i) for i in range(1, width + 1))
            rows[name] = con.execute(f'SELECT * FROM "{name}" ORDER BY {order}').fetchall()
        return {"dump": dump, "rows": rows}
    finally:
        con.close()


def same_databases(reference: dict, other: dict, what: str) -> None:
    """Table by table, then row by row, so a difference names its table and its first differing row."""
    assert sorted(reference["rows"]) == sorted(other["rows"]), f"{what}: other tables"
    for name, rows in reference["rows"].items():
        theirs = other["rows"][name]
        assert len(theirs) == len(rows), f"{what}: {name} has {len(theirs)} rows, not {len(rows)}"
        for mine, got in zip(rows, theirs):
            assert mine == got, f"{what}: {name}: {got!r}, not {mine!r}"
    assert reference["dump"] == other["dump"], f"{what}: SQLite's dumps differ"


def without_path(manifest: dict) -> dict:
    return {k: v for k, v in manifest.items() if k != "database"}


@pytest.mark.parametrize("sample", SAMPLES)
@pytest.mark.parametrize("case", CASES)
def test_every_corpus_case_gives_one_database_for_any_partition_size(case, sample, tmp_path, monkeypatch):
    # the child that runs the builds (tests/test_corpus.py's, with its limits) infers from ``sample`` records
    monkeypatch.setattr(test_corpus, "DRIVER", f"import normalise.pipeline\nnormalise.pipeline.SAMPLE_ROWS = {sample}\n"
                        + test_corpus.DRIVER)
    case_dir = CORPUS / case
    expect = json.loads((case_dir / "expect.json").read_text("utf-8"))
    work = tmp_path / "work"
    work.mkdir()
    inputs = inputs_for(case_dir, expect, work)
    runs = []
    for n in PARTITIONS:
        (work / f"p{n}").mkdir()
        runs.append([f"p{n}", ["build", *inputs, "--db", f"p{n}/out.db", "--manifest", f"p{n}/manifest.json",
                               "--quiet", "--chunk-rows", str(n), *expect.get("args", []),
                               *expect.get("build_args", [])]])
    results, _, _ = run_commands(runs, work, 4 * expect.get("time_limit", 60))
    reference = results["p0"]
    assert "Traceback" not in reference["stderr"], reference["stderr"][-3000:]
    built = reference["code"] == 0 and (work / "p0" / "out.db").exists()
    if built:
        want_db = database(work / "p0" / "out.db")
        want_manifest = without_path(json.loads((work / "p0" / "manifest.json").read_text("utf-8")))
    for n in PARTITIONS[:-1]:
        got = results[f"p{n}"]
        assert got["code"] == reference["code"], f"{n} a partition: exit {got['code']}: {got['stderr'][-2000:]}"
        assert got["stderr"].replace(f"p{n}/", "p0/") == reference["stderr"], f"{n} a partition"
        if built:
            same_databases(want_db, database(work / f"p{n}" / "out.db"), f"{n} a partition")
            manifest = json.loads((work / f"p{n}" / "manifest.json").read_text("utf-8"))
            assert without_path(manifest) == want_manifest, f"{n} a partition: the manifests differ"


# --- the settings a partition could get wrong ----------------------------------------------------------


KEYED = {"items": "key"}  # --key items=key: the natural key, with its repeats and one record without it


def items(path: Path, n: int = 60) -> Path:
    """Records keyed k0, k1, ...; some keys repeat near (the next line) and far (55 lines on), one record has
    none; lists of values and of objects with an identity, so the kept records decide the other tables."""
    keys = [f"k{i}" for i in range(n)]
    for at, key in ((11, "k10"), (20, "k3"), (41, "k3"), (n, "k5"), (n + 1, "")):
        keys.insert(at, key)
    lines = ["key,team,tags,people"]
    for i, key in enumerate(keys):
        people = json.dumps([{"id": i % 4, "name": f"P{i % 4}", "role": "author" if i % 3 else "editor"}])
        lines.append(f'{key},t{i},"[""x{i % 3}""]","{people.replace(chr(34), chr(34) * 2)}"')
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def reference(path: Path, keep) -> list[int]:
    """The lines of the records with a key that pandas keeps (``DataFrame.drop_duplicates(keep=...)``)."""
    frame = pd.read_csv(path, dtype=str, keep_default_na=False)
    frame["line"] = range(2, len(frame) + 2)  # the header is line 1
    keyed = frame[frame["key"] != ""]
    return sorted(keyed.drop_duplicates("key", keep=keep)["line"]) if keep else sorted(
        keyed[keyed.duplicated("key", keep="first")]["line"])


def plan_with(tmp_path: Path, export: Path, duplicates: str) -> Path:
    text = make_plan([str(export)], str(tmp_path / "inferred.toml"), options=Options(natural_keys=KEYED))
    assert 'natural_key = "key"' in text and 'duplicates = "first"' in text
    plan = tmp_path / f"{duplicates}.toml"
    plan.write_text(text.replace('duplicates = "first"', f'duplicates = "{duplicates}"'), encoding="utf-8")
    return plan


def builds(tmp_path: Path, paths: list, **kwargs) -> list[tuple]:
    """(database, manifest) of a build of ``paths`` for each partition size, the one-partition build first."""
    out = []
    for n in reversed(PARTITIONS):
        db = tmp_path / f"p{n}" / "out.db"
        db.parent.mkdir(parents=True, exist_ok=True)
        m = build_database([str(p) for p in paths], str(db), chunk_rows=n or None, **kwargs)
        out.append((database(db), without_path(m)))
    return out


def assert_all_the_same(found: list[tuple]) -> None:
    (want_db, want_manifest), *others = found
    for n, (db, m) in zip(reversed(PARTITIONS[:-1]), others):
        same_databases(want_db, db, f"{n} a partition")
        assert m == want_manifest, f"{n} a partition: the manifests differ"


@pytest.mark.parametrize("sample", SAMPLES)
def test_plan_duplicates_last_gives_one_database_for_any_chunk_size(tmp_path, monkeypatch, sample):
    """Bug 3 of issue 11 again: a plan saying duplicates = "last" keeps the last record of each key with
    every chunk size, the records after the sample too. Reference for which records are kept: pandas
    ``DataFrame.drop_duplicates(keep="last")`` over the records with a key."""
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", sample)
    export = items(tmp_path / "items.csv")
    plan = plan_with(tmp_path, export, "last")
    found = builds(tmp_path, [export], plan_path=str(plan))
    assert_all_the_same(found)
    records = found[0][0]["rows"]["items"]
    assert sorted(r[0] for r in records) == reference(export, "last")
    lines = {}  # key -> its lines in the file
    for line, key in enumerate((row.split(",")[0] for row in export.read_text("utf-8").splitlines()[1:]), 2):
        lines.setdefault(key, []).append(line)
    assert (lines["k5"][-1], "k5") in [r[:2] for r in records] and lines["k5"][-1] - lines["k5"][0] > 50  # far
    assert lines["k10"][1] - lines["k10"][0] == 1  # and near
    set_aside = {r[2]: (r[3], r[5]) for r in found[0][0]["rows"]["set_aside_rows"]}  # line -> (key, kept line)
    assert set_aside == {line: (key or None, lines[key][-1] if key else None)
                         for key, found_at in lines.items() for line in (found_at[:-1] if key else found_at)}


@pytest.mark.parametrize("sample", SAMPLES)
def test_duplicates_first_from_options_and_plan_agree_for_any_chunk_size(tmp_path, monkeypatch, sample):
    """duplicates = "first" by a plan and by default: one database for every chunk size; pandas
    ``drop_duplicates(keep="first")`` is the reference for which records are kept."""
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", sample)
    export = items(tmp_path / "items.csv")
    found = builds(tmp_path / "default", [export], options=Options(natural_keys=KEYED))
    assert_all_the_same(found)
    by_plan = builds(tmp_path / "plan", [export], plan_path=str(plan_with(tmp_path, export, "first")))
    assert_all_the_same(by_plan)
    same_databases(found[0][0], by_plan[0][0], "the plan's first and the default")
    assert sorted(r[0] for r in found[0][0]["rows"]["items"]) == reference(export, "first")


@pytest.mark.parametrize("sample", SAMPLES)
def test_duplicates_refuse_gives_one_message_for_any_chunk_size(tmp_path, monkeypatch, sample):
    """Refused records are counted over the whole file, so every chunk size refuses with the same line."""
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", sample)
    export = items(tmp_path / "items.csv")
    plan = plan_with(tmp_path, export, "refuse")
    messages = set()
    for n in PARTITIONS:
        with pytest.raises(DuplicateNaturalKey) as refused:
            build_database([str(export)], str(tmp_path / f"r{n}.db"), plan_path=str(plan), chunk_rows=n or None)
        messages.add(str(refused.value))
    (message,) = messages
    repeats = reference(export, None)  # pandas DataFrame.duplicated(keep="first"): the repeats, in file order
    lines = ", ".join(f"line {line}" for line in repeats[:5])
    assert f"{len(repeats)} record(s) repeat a natural key (key): {lines};" in message
    assert sorted(p.name for p in tmp_path.glob("r*.db*")) == []  # nothing written, no temporary file left


@pytest.mark.parametrize("duplicates", ["first", "last"])
@pytest.mark.parametrize("how", ["left", "inner", "full"])
@pytest.mark.parametrize("sample", SAMPLES)
def test_joined_files_give_one_database_for_any_chunk_size(tmp_path, duplicates, how, monkeypatch, sample):
    """Several files joined one-to-one: read whole (the join needs whole files), built in partitions."""
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", sample)
    export = items(tmp_path / "items.csv")
    extra = tmp_path / "extra.csv"
    extra.write_text("key,score\n" + "".join(f"k{i},{i}\n" for i in range(0, 70, 3)) + "k3,33\n",
                     encoding="utf-8")
    found = builds(tmp_path, [export, extra], options=Options(duplicates=duplicates, natural_keys=KEYED),
                   join_options=JoinOptions(how=how, duplicates=duplicates))
    assert_all_the_same(found)
    assert found[0][1]["joins"] and found[0][1]["joins"][0]["how"] == how


@pytest.mark.parametrize("sample", SAMPLES)
def test_one_to_many_and_demo_files_give_one_database_for_any_chunk_size(tmp_path, monkeypatch, sample):
    """The demo's two files (titles and their contributions), joined one-to-many."""
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", sample)
    generate(tmp_path / "demo", size=60, seed=14)
    paths = [tmp_path / "demo" / "titles.csv", tmp_path / "demo" / "contributions.csv"]
    assert_all_the_same(builds(tmp_path / "out", paths))
    assert_all_the_same(builds(tmp_path / "many", paths, join_options=JoinOptions(cardinality="one-to-many")))


@pytest.mark.parametrize("sample", SAMPLES)
def test_json_lines_give_one_database_for_any_chunk_size(tmp_path, monkeypatch, sample):
    """JSON Lines (read whole: a column can first appear on any line), objects, lists inside objects."""
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", sample)
    path = tmp_path / "events.jsonl"
    records = []
    for i in range(40):
        record = {"id": i % 31, "actor": {"id": i % 5, "login": f"u{i % 5}"},
                  "labels": [{"name": f"l{i % 3}", "colors": ["red", "blue"][: i % 3]}], "n": i}
        if i > 30:
            record["late"] = {"x": i}
        records.append(record)
    path.write_text("".join(json.dumps(r) + "\n" for r in records), encoding="utf-8")
    assert_all_the_same(builds(tmp_path, [path]))


@pytest.mark.parametrize("duplicates", ["first", "last"])
@pytest.mark.parametrize("sample", SAMPLES)
def test_append_gives_one_database_for_any_chunk_size(tmp_path, duplicates, monkeypatch, sample):
    """--append: the same database appended to, in partitions of every size, gives the same result."""
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", sample)
    first = items(tmp_path / "items.csv", 30)
    second = tmp_path / "more" / "items.csv"
    second.parent.mkdir()
    items(second, 45)
    plan = plan_with(tmp_path, first, duplicates)
    base = tmp_path / "base.db"
    build_database([str(first)], str(base), plan_path=str(plan))
    found = []
    for n in reversed(PARTITIONS):
        db = tmp_path / f"a{n}.db"
        shutil.copyfile(base, db)
        m = build_database([str(second)], str(db), plan_path=str(plan), append=True, chunk_rows=n or None,
                           options=Options(duplicates=duplicates))
        found.append((database(db), without_path(m)))
    assert_all_the_same(found)
    assert found[0][1]["appended"] is True


@pytest.mark.parametrize("sample", SAMPLES)
def test_an_entity_shared_by_two_columns_gives_one_database_for_any_chunk_size(tmp_path, monkeypatch, sample):
    """People in two lists of each record, merged into one entity table: person 3 is first seen in the
    second list (line 2) and first listed by the first one four lines on, spelled otherwise the first time.
    Which occurrence is the entity's first decides what value_traces keeps; it is the first in the file
    (its row, then the order the columns are read in) for every chunk size."""
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", sample)
    path = tmp_path / "books.csv"
    lines = ["key,authors,editors"]
    for i in range(60):
        authors = [{"pid": 1, "name": "Ann"}, {"pid": 2 + i % 3, "name": f"P{i % 3}"}]
        editors = [{"pid": 3, "name": "P one" if i == 0 else "P1"}, {"pid": 1, "name": "Ann X" if i == 7 else "Ann"}]
        lines.append(",".join([f"b{i}"] + ['"' + json.dumps(v).replace('"', '""') + '"' for v in (authors, editors)]))
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    found = builds(tmp_path, [path], options=Options(merge=[["books:authors", "books:editors"]]))
    assert_all_the_same(found)
    if sample < 60:  # three records: too few to make name an attribute of the person
        return
    (entity,) = found[0][1]["entities"]
    assert entity["attributes"] == ["name"] and len(entity["members"]) == 2
    kept = sorted(r[8] for r in found[0][0]["rows"]["value_traces"])
    assert kept == ["'Ann X'", "'P one'"]  # the odd spellings, each on its own occurrence


def test_a_non_object_in_an_entity_list_is_quarantined_for_any_chunk_size(tmp_path):
    """The columnar path of the old second row engine skipped the identity check of an entity list holding a
    non-object and then failed (TypeError); the one engine quarantines the element and keeps the others."""
    path = tmp_path / "books.csv"
    path.write_text('key,people\nb1,"[{""id"": 1, ""name"": ""A""}, 5]"\nb2,"[{""id"": 2, ""name"": ""B""}]"\n'
                    'b3,"[{""id"": 1, ""name"": ""A""}]"\n', encoding="utf-8")
    found = builds(tmp_path, [path])
    assert_all_the_same(found)
    rows = found[0][0]["rows"]
    assert [r[3:] for r in rows["quarantined_cells"]] == [("people", 2, "element 2", "expected an object in a list of objects")]
    assert len(rows["book_people"]) == 3 and found[0][1]["integrity"]["proof"] == "exact"


def test_postgresql_gets_one_database_for_any_chunk_size(tmp_path, pg, pg_url):  # noqa: F811 (fixtures)
    """PostgreSQL takes the rows whole (write_postgresql), built in partitions all the same: every partition size
    gives the same relations (read back with psycopg), and the same as SQLite's reference build."""
    generate(tmp_path / "demo", size=60, seed=14)
    paths = [str(tmp_path / "demo" / "titles.csv"), str(tmp_path / "demo" / "contributions.csv")]
    found = []
    for n in reversed(PARTITIONS):
        schema = _new_schema()
        try:
            m = build_database(paths, pg_url, schema=schema, chunk_rows=n or None)
            found.append((pg_snapshot(pg, schema, relation_names(m)), without_path(m)))
        finally:
            _drop(pg, schema)
    (want, want_manifest), *others = found
    for n, (got, m) in zip(reversed(PARTITIONS[:-1]), others):
        assert got == want, f"{n} a partition"
        assert {k: v for k, v in m.items() if k != "schema"} == {k: v for k, v in want_manifest.items()
                                                                 if k != "schema"}, f"{n} a partition"
    sqlite = build_database(paths, str(tmp_path / "sqlite.db"), chunk_rows=1)
    assert [t["rows"] for t in sqlite["tables"]] == [t["rows"] for t in want_manifest["tables"]]
