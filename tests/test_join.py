"""Tests of the join pass: a further export attached to the main one by key.

The references, named beside each check:

* the CSV files themselves, read with the standard ``csv`` module: every key
  set, orphan count, duplicate and line number expected here is computed in
  the test from the files, never taken from the tool's read or join passes;
* ``planted.json`` of the demo generator (the truth the demo was made from);
* common practice of relational joins (as SQL defines LEFT, INNER and FULL
  OUTER JOIN): a left join keeps every left row, an inner join keeps only
  rows with a match on both sides, a full join keeps the rows of both sides.

The database is read back with ``sqlite3`` only, guided by the manifest.
"""

from __future__ import annotations

import ast
import csv
import json
import os
import sqlite3

import pytest

from demo.generate import generate
from normalise import JoinOptions
from normalise.cli import main
from normalise.join import CardinalityViolation
from normalise.model.errors import UsageError
from normalise.pipeline import build_database

TITLES, CONTRIBUTIONS = "titles.csv", "contributions.csv"


# --- the inputs, read independently --------------------------------------------------

def read_csv(path) -> tuple[list[str], list[tuple[int, dict]]]:
    """Header and (line, row) pairs with the csv module; the demo's cells hold no newlines, so
    ``reader.line_num`` after a row is the line it starts on (the header is line 1)."""
    with open(path, newline="", encoding="utf-8") as f:
        reader = csv.reader(f)
        header = next(reader)
        return header, [(reader.line_num, dict(zip(header, row))) for row in reader]


def first_lines(rows, key="title_key") -> dict[str, int]:
    """{key: line of its first row}; the join's and the build's default policy keeps the first."""
    out: dict = {}
    for line, row in rows:
        if row[key] != "":
            out.setdefault(row[key], line)
    return out


def repeats(rows, key="title_key") -> list[tuple[int, str, int]]:
    """(line, key, line kept) of every row repeating an earlier row's key."""
    first = first_lines(rows, key)
    return [(line, row[key], first[row[key]]) for line, row in rows
            if row[key] != "" and first[row[key]] != line]


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    planted = generate(out, size=200, seed=7)
    _, titles = read_csv(out / TITLES)
    _, contributions = read_csv(out / CONTRIBUTIONS)
    return out, planted, titles, contributions


_BUILDS: dict = {}


@pytest.fixture(scope="module")
def build(demo, tmp_path_factory):
    """build(how) -> (database path, manifest), each join built once per module."""
    out = demo[0]
    where = tmp_path_factory.mktemp("builds")

    def run(how: str):
        if how not in _BUILDS:
            db = str(where / f"{how}.db")
            m = build_database([str(out / TITLES), str(out / CONTRIBUTIONS)], db,
                               join_options=JoinOptions(how=how))
            _BUILDS[how] = (db, m)
        return _BUILDS[how]

    yield run
    _BUILDS.clear()


def connect(path) -> sqlite3.Connection:
    return sqlite3.connect(f"file:{path}?mode=ro", uri=True)


def inputs(m: dict) -> dict:
    return {os.path.basename(i["path"]): i for i in m["inputs"]}


def record_keys(db: str) -> list[str]:
    with connect(db) as con:
        return [k for (k,) in con.execute("SELECT title_key FROM titles")]


# --- left join (the default) ------------------------------------------------------------

def test_left_join_keeps_every_main_record(demo, build):
    _, planted, titles, _ = demo
    db, m = build("left")
    keys = first_lines(titles)
    # common practice: a left join never drops a left row (each distinct main key is one record)
    assert sorted(record_keys(db)) == sorted(keys)
    assert inputs(m)[TITLES]["records_loaded"] == len(keys) == planted["size"]
    assert m["joins"][0]["how"] == "left"


def test_orphan_and_duplicate_counts(demo, build):
    _, planted, titles, contributions = demo
    _, m = build("left")
    (j,) = m["joins"]
    left, right = set(first_lines(titles)), set(first_lines(contributions))
    left_only, right_only = sorted(left - right), sorted(right - left)
    assert j["on"] == [["title_key", "title_key"]]
    assert (j["left_only"], j["right_only"]) == (len(left_only), len(right_only))
    assert j["left_only_examples"] == left_only[:5] and j["right_only_examples"] == right_only[:5]
    assert j["right_duplicates_set_aside"] == len(repeats(contributions))
    # the planted truth agrees (planted.json: only_in_titles, only_in_contributions, duplicate_keys)
    assert left_only == planted["only_in_titles"] and right_only == planted["only_in_contributions"]
    assert j["right_duplicates_set_aside"] == sum(len(d["lines"]) - 1
                                                  for d in planted["duplicate_keys"][CONTRIBUTIONS])


def test_unmatched_rows_keep_line_and_cells(demo, build):
    _, _, titles, contributions = demo
    db, _ = build("left")
    left = set(first_lines(titles))
    first = first_lines(contributions)
    by_line = dict(contributions)
    expected = sorted((line, key) for key, line in first.items() if key not in left)
    with connect(db) as con:
        got = con.execute("SELECT file, line, join_key, reason, cells FROM unmatched_rows ORDER BY line").fetchall()
    assert [(line, key) for _, line, key, _, _ in got] == expected
    for file, line, key, reason, cells in got:
        assert os.path.basename(file) == CONTRIBUTIONS
        assert key in reason
        assert json.loads(cells) == by_line[line]  # the whole row, as the csv module reads it


def test_set_aside_duplicates_keep_lines(demo, build):
    _, _, titles, contributions = demo
    db, _ = build("left")
    with connect(db) as con:
        rows = con.execute("SELECT file, line, natural_key, kept_line, cells FROM set_aside_rows").fetchall()
    by_file: dict = {}
    for file, line, key, kept, cells in rows:
        by_file.setdefault(os.path.basename(file), []).append((line, key, kept))
    assert sorted(by_file[CONTRIBUTIONS]) == repeats(contributions)
    assert sorted(by_file[TITLES]) == repeats(titles)
    contribution_lines = dict(contributions)
    for file, line, _, _, cells in rows:
        if os.path.basename(file) == CONTRIBUTIONS:
            assert json.loads(cells) == contribution_lines[line]


# --- inner and full joins ---------------------------------------------------------------

def test_inner_join_sets_aside_main_records_without_match(demo, build):
    _, _, titles, contributions = demo
    db, m = build("inner")
    left, right = first_lines(titles), set(first_lines(contributions))
    # common practice: an inner join keeps only keys found on both sides
    assert sorted(record_keys(db)) == sorted(set(left) & right)
    assert inputs(m)[TITLES]["records_loaded"] == len(set(left) & right)
    with connect(db) as con:
        aside = con.execute("SELECT line, natural_key, reason FROM set_aside_rows "
                            "WHERE reason LIKE '%inner join%' ORDER BY line").fetchall()
    assert [(line, key) for line, key, _ in aside] == sorted((left[k], k) for k in set(left) - right)
    # the joined file's unmatched rows stay in unmatched_rows, as in a left join
    with connect(db) as con:
        assert con.execute("SELECT count(*) FROM unmatched_rows").fetchone()[0] == len(right - set(left))


def test_full_join_loads_joined_only_rows_as_records(demo, build):
    out, _, titles, contributions = demo
    db, m = build("full")
    left, right = set(first_lines(titles)), first_lines(contributions)
    # common practice: a full outer join keeps the keys of both sides
    assert sorted(record_keys(db)) == sorted(left | set(right))
    only_right = sorted(set(right) - left)
    by_line = dict(contributions)
    with connect(db) as con:
        assert con.execute("SELECT count(*) FROM unmatched_rows").fetchone()[0] == 0
        for key in only_right:
            (title, sk), = con.execute("SELECT title, title_sk FROM titles WHERE title_key = ?", (key,))
            assert title is None  # nothing of the main file is known for it
            people = [pid for (pid,) in con.execute(
                "SELECT p.person_id FROM title_contributors b JOIN person p ON p.person_sk = b.person_sk "
                "WHERE b.title_sk = ? ORDER BY b.list_position", (sk,))]
            # the repr() of a list of dicts, read with ast.literal_eval (demo/generate.py docstring)
            original = ast.literal_eval(by_line[right[key]]["contributors"])
            assert people == [c["person_id"] for c in original]
    assert inputs(m)[CONTRIBUTIONS]["records_loaded"] == len(set(right))
    assert inputs(m)[CONTRIBUTIONS]["rows_unmatched"] == 0


@pytest.mark.parametrize("how", ["left", "inner", "full"])
def test_reconciliation_both_files(demo, build, how):
    _, _, titles, contributions = demo
    _, m = build(how)
    t, c = inputs(m)[TITLES], inputs(m)[CONTRIBUTIONS]
    left, right = set(first_lines(titles)), set(first_lines(contributions))
    assert t["rows_read"] == len(titles) and c["rows_read"] == len(contributions)  # csv module's count
    assert t["rows_read"] == t["records_loaded"] + t["rows_set_aside"] + t["rows_rejected"]
    assert c["rows_read"] == c["records_loaded"] + c["rows_set_aside"] + c["rows_rejected"] + c["rows_unmatched"]
    assert c["joined_into"] == TITLES or os.path.basename(c["joined_into"]) == TITLES
    assert c["rows_set_aside"] == len(repeats(contributions))
    expected_joined = len(left & right) + (len(right - left) if how == "full" else 0)
    assert c["records_loaded"] == expected_joined
    assert c["rows_unmatched"] == (0 if how == "full" else len(right - left))
    assert m["integrity"]["reconciled"] is True


def test_unmatched_row_without_key(tmp_path):
    """A joined row with a blank key matches nothing: kept in unmatched_rows, counted as unmatched."""
    main_csv, extra_csv = tmp_path / "people.csv", tmp_path / "extra.csv"
    main_csv.write_text("id,name\na1,Ann\na2,Bob\na3,Cy\n", encoding="utf-8")
    extra_csv.write_text('id,tags\na1,"[""x"", ""y""]"\n,"[""z""]"\na9,"[""w""]"\na2,"[""x""]"\n',
                         encoding="utf-8")
    db = tmp_path / "out.db"
    m = build_database([str(main_csv), str(extra_csv)], str(db))
    extra = inputs(m)["extra.csv"]
    assert (extra["rows_read"], extra["records_loaded"], extra["rows_unmatched"]) == (4, 2, 2)
    with connect(db) as con:
        rows = con.execute("SELECT line, join_key, reason FROM unmatched_rows ORDER BY line").fetchall()
        assert [(line, key) for line, key, _ in rows] == [(3, None), (4, "a9")]
        assert "no join key" in rows[0][2]
        tags = con.execute("SELECT p.id, t.tag FROM people p JOIN person_tags b ON b.person_sk = p.person_sk "
                           "JOIN tag t ON t.tag_sk = b.tag_sk ORDER BY p.id, b.list_position").fetchall()
    assert tags == [("a1", "x"), ("a1", "y"), ("a2", "x")]


# --- what the user states -----------------------------------------------------------------

def table_contents(db: str) -> dict:
    with connect(db) as con:
        names = [n for (n,) in con.execute("SELECT name FROM sqlite_master WHERE type IN ('table', 'view') "
                                           "ORDER BY name")]
        return {n: sorted(con.execute(f'SELECT * FROM "{n}"').fetchall(), key=repr) for n in names}


@pytest.mark.parametrize("spec", ["contributions.title_key", "contributions.csv.title_key",
                                  "contributions.title_key=titles.title_key"])
def test_join_stated_by_user(demo, build, tmp_path, spec, capsys):
    out = demo[0]
    db = tmp_path / "stated.db"
    manifest = tmp_path / "m.json"
    rc = main(["build", str(out / TITLES), str(out / CONTRIBUTIONS), "--db", str(db), "--join", spec,
               "--manifest", str(manifest), "--quiet"])
    assert rc == 0, capsys.readouterr().err
    m = json.loads(manifest.read_text())
    assert m["joins"][0]["on"] == [["title_key", "title_key"]]
    # the same column the detection found: the same database
    detected_db, detected = build("left")
    assert m["joins"][0]["left_only"] == detected["joins"][0]["left_only"]
    assert table_contents(str(db)) == table_contents(detected_db)


@pytest.mark.parametrize("spec, words", [
    ("title_key", ["expected FILE.COLUMN"]),
    ("contributions.nope", ["has no column 'nope'", "title_key, contributors"]),
    ("contributionz.title_key", ["no further input file is called 'contributionz'", "contributions"]),
    ("titles.title_key", ["no further input file is called 'titles'"]),
    ("contributions.subjects", ["nested values"]),
    ("contributions.title_key=titles.title", ["natural key is 'title_key'"]),
])
def test_bad_join_is_a_clear_error(demo, tmp_path, capsys, spec, words):
    out = demo[0]
    db = tmp_path / "bad.db"
    rc = main(["build", str(out / TITLES), str(out / CONTRIBUTIONS), "--db", str(db), "--join", spec])
    err = capsys.readouterr().err
    assert rc == 2
    assert err.startswith("normalise: --join")
    for w in words:
        assert w in err
    assert not db.exists()


def test_join_without_a_main_key_is_a_clear_error(tmp_path):
    """The user states a join, but the main file has no natural key: said, not silently ignored."""
    main_csv, extra_csv = tmp_path / "visits.csv", tmp_path / "extra.csv"
    main_csv.write_text("name,day\nAnn,mon\nAnn,tue\nBob,mon\n", encoding="utf-8")
    extra_csv.write_text("name,score\nAnn,1\nBob,2\n", encoding="utf-8")
    with pytest.raises(UsageError, match=r"no natural key to join on.*options\.natural_keys=\{'visits': 'COLUMN'\}"):
        build_database([str(main_csv), str(extra_csv)], str(tmp_path / "out.db"),
                       join_options=JoinOptions(on={"extra": ("name", None)}))
    assert not (tmp_path / "out.db").exists()


def test_separate_keeps_files_apart(demo, tmp_path):
    out, _, titles, contributions = demo
    db = tmp_path / "separate.db"
    m = build_database([str(out / TITLES), str(out / CONTRIBUTIONS)], str(db),
                       join_options=JoinOptions(separate=True))
    assert m["joins"] == []
    tables = {t["name"]: t for t in m["tables"]}
    assert tables["titles"]["role"] == tables["contributions"]["role"] == "record"
    # each file loads its own distinct keys, orphans included (nothing is joined, nothing unmatched)
    assert inputs(m)[TITLES]["records_loaded"] == len(first_lines(titles))
    assert inputs(m)[CONTRIBUTIONS]["records_loaded"] == len(first_lines(contributions))
    assert tables["unmatched_rows"]["rows"] == 0
    owners = {t["name"]: t["foreign_keys"][0]["references"] for t in m["tables"] if t["role"] == "bridge"}
    assert owners and set(owners.values()) == {"contributions"}


def test_duplicates_refuse_on_one_to_one_join(demo, tmp_path, capsys):
    """Declared one-to-one, but the joined file repeats keys: a clear error and nothing written."""
    out, _, titles, contributions = demo
    header, _ = read_csv(out / TITLES)
    unique_titles = tmp_path / TITLES  # the main file without its own duplicates
    seen = set()
    with open(unique_titles, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(header)
        for _, row in titles:
            if row["title_key"] not in seen:
                seen.add(row["title_key"])
                w.writerow([row[h] for h in header])
    db = tmp_path / "refused.db"
    rc = main(["build", str(unique_titles), str(out / CONTRIBUTIONS), "--db", str(db), "--duplicates", "refuse"])
    err = capsys.readouterr().err
    assert rc == 1  # the data break the declared cardinality: exit 1
    assert "one-to-one" in err and "contributions.csv" in err
    for line, _, _ in repeats(contributions):
        assert f"line {line}" in err
    assert list(tmp_path.glob("refused.db*")) == []
    with pytest.raises(CardinalityViolation):
        build_database([str(unique_titles), str(out / CONTRIBUTIONS)], str(db),
                       join_options=JoinOptions(duplicates="refuse"))
    assert list(tmp_path.glob("refused.db*")) == []


def test_joined_columns_belong_to_the_main_records(demo, build):
    out, _, titles, contributions = demo
    db, m = build("left")
    tables = {t["name"]: t for t in m["tables"]}
    assert "contributions" not in tables  # no record table of its own
    bridges = [t for t in m["tables"] if t["role"] == "bridge"]
    assert {s["column"] for t in bridges for s in t["sources"]} == {"contributors", "production_team",
                                                                      "subjects", "formats"}
    for t in bridges:
        assert t["foreign_keys"][0]["references"] == "titles"  # owned by the titles record table
        assert t["sources"][0]["file"] == "contributions"
    (person,) = [e for e in m["entities"] if e["table"] == "person"]
    assert sorted(person["members"]) == ["contributions:contributors", "contributions:production_team"]
    # every kept title's contributors, in list order, from the first contributions row of its key
    by_line = dict(contributions)
    first = first_lines(contributions)
    with connect(db) as con:
        got: dict = {}
        for key, pid in con.execute(
                "SELECT t.title_key, p.person_id FROM title_contributors b JOIN titles t ON t.title_sk = b.title_sk "
                "JOIN person p ON p.person_sk = b.person_sk ORDER BY t.title_key, b.list_position"):
            got.setdefault(key, []).append(pid)
    expected = {}
    for key in first_lines(titles):
        cell = by_line[first[key]]["contributors"] if key in first else ""
        try:
            people = ast.literal_eval(cell) if cell.strip() else []  # Python repr() (demo/generate.py)
        except (ValueError, SyntaxError):
            people = []  # a malformed cell is quarantined: no list
        if people:
            expected[key] = [p["person_id"] for p in people]
    assert got == expected
