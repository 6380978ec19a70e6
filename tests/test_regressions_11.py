"""Regressions of issue 11, point 7: each test reproduces one bug, named in its docstring.

The references, named beside each check:

* the inputs themselves, written by the tests, with the lines and values they hold;
* ``pandas`` (computed independently of the tool's SQL) for the entity summary's counts;
* ``ast.literal_eval`` (Python language reference, "Literals") for what a Python-literal cell holds;
* a build of the same input on the other path (in memory / in chunks, inferred / replayed from a plan):
  the two databases must be equal table by table.
"""

from __future__ import annotations

import json
import sqlite3

import pytest

import normalise.pipeline as pipeline
from normalise.pipeline import build_database


def dump(db) -> dict:
    con = sqlite3.connect(db)
    names = [n for (n,) in con.execute("SELECT name FROM sqlite_master WHERE type IN ('table', 'view') ORDER BY name")]
    return {n: sorted(con.execute(f'SELECT * FROM "{n}"').fetchall(), key=repr) for n in names}


def quarantined(db) -> list[tuple]:
    with sqlite3.connect(db) as con:
        return con.execute("SELECT line, column_name, excerpt, message FROM quarantined_cells ORDER BY line, "
                           "column_name").fetchall()


# --- 1. keys that only ever hold empty lists -------------------------------------------------


@pytest.mark.parametrize("chunk_rows", [None, 2])
def test_empty_lists_under_keys_left_out_of_the_model_are_not_quarantined(tmp_path, monkeypatch, chunk_rows):
    """Bug 1: keys that only ever hold empty lists were left out of the model (infer.scalar_fields) and then
    reported in quarantined_cells as unplanned keys, rows no count of the manifest included. An empty list
    carries nothing, so it is not a lost value; a non-empty list later under such a key still is, and is
    reported from its own line."""
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", 3)  # the model sees only lines 1-3
    monkeypatch.setattr(pipeline, "MAX_WIDENINGS", 0)  # the plan of lines 1-3 kept (widening: test_widening_17)
    records = []
    for line in range(1, 8):
        people = [{"id": 1, "name": "Ann", "notes": []}, {"id": 2, "name": "Bob", "notes": ()}]
        kids = [{"age": line, "tags": [], "pets": {}}]
        if line == 6:
            people[0]["notes"] = ["late"]  # a value under a key the model left out: lost, so reported
            kids[0]["tags"] = ["x"]
        records.append({"key": f"k{line}", "people": people, "kids": kids})
    path = tmp_path / "t.jsonl"
    path.write_text("".join(json.dumps(r) + "\n" for r in records), encoding="utf-8")
    db = tmp_path / "t.db"
    m = build_database([str(path)], str(db), chunk_rows=chunk_rows)
    assert {t["name"] for t in m["tables"]} >= {"person", "t_people", "t_kids"}
    rows = quarantined(db)
    # the file's lines are its records' lines (one record a line, the first on line 1)
    assert [(line, column) for line, column, _, _ in rows] == [(6, "kids.tags"), (6, "people.notes")]
    assert all("appears in 1 object(s)" in message for _, _, _, message in rows)
    # widened, line 6's record joins the sample: both keys are in the model and nothing is quarantined
    monkeypatch.undo()
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", 3)
    m = build_database([str(path)], str(tmp_path / "widened.db"), chunk_rows=chunk_rows)
    assert quarantined(tmp_path / "widened.db") == []
    assert sorted((w["line"], w["column"], w["key"]) for w in m["widened"] if w.get("contradicted") == "key") == [
        (6, "kids", "tags"), (6, "people", "notes")]
    assert m["integrity"]["cells_rebuilt_exactly"] == m["integrity"]["cells_checked"]


# --- 2. the entity summary's records_in_total ------------------------------------------------

SUMMARY_CSV = """key,date,contributors,subjects
b1,2020-01-01,"[{'id': 1, 'name': 'Ann', 'role': 'author'}, {'id': 1, 'name': 'Ann', 'role': 'editor'}, \
{'id': 2, 'name': 'Bob', 'role': 'author'}]","[""poetry"", ""poetry"", ""art""]"
b2,2021-01-01,"[{'id': 1, 'name': 'Ann', 'role': 'author'}]","[""art""]"
b3,2022-01-01,"[{'id': 2, 'name': 'Bob', 'role': 'author'}, {'id': 2, 'name': 'Bob', 'role': 'editor'}, \
{'id': 3, 'name': 'Cy', 'role': 'author'}]","[""poetry""]"
"""


def test_entity_summary_total_counts_distinct_records(tmp_path):
    """Bug 2: the entity summary's records_in_total counted links, not records: a person twice in one
    record (as author and as editor) counted 2 when the entity has one list, whose count had no UNION
    to drop the repeats. It must be the number of distinct records, as pandas counts them."""
    import ast

    import pandas as pd

    from normalise.infer import Options

    path = tmp_path / "books.csv"
    path.write_text(SUMMARY_CSV, encoding="utf-8")
    db = tmp_path / "books.db"
    # contributors repeat an id inside one list, so it is no inferred identity: named here
    build_database([str(path)], str(db), options=Options(identities={"contributors": "id"}))
    books = pd.read_csv(path, dtype=str, keep_default_na=False)
    # the cells as the standard library reads them: contributors a Python repr, subjects JSON
    books["contributors"] = [[p["id"] for p in ast.literal_eval(c)] for c in books["contributors"]]
    books["subjects"] = [json.loads(c) for c in books["subjects"]]
    with sqlite3.connect(db) as con:
        for view, key, column in (("contributor_summary", "id", "contributors"),
                                  ("subject_summary", "subject", "subjects")):
            want = books[["key", column]].explode(column).groupby(column)["key"].nunique().to_dict()
            got = dict(con.execute(f'SELECT "{key}", records_in_total FROM "{view}"').fetchall())
            assert got == want, view
            per_list = dict(con.execute(f'SELECT "{key}", records_in_book_{column} FROM "{view}"').fetchall())
            assert per_list == want, view
    assert want == {"poetry": 2, "art": 2}  # poetry twice in b1's list, once in b3's


# --- 3. a plan's duplicates = "last" with --chunk-rows ---------------------------------------

def test_plan_duplicates_last_is_kept_with_and_without_chunks(tmp_path, monkeypatch):
    """Bug 3: a plan file saying duplicates = "last" gave another database with chunk_rows (the streaming
    path, which keeps the first) than without: pipeline._can_stream read only options.duplicates, never the
    plan. The plan's setting decides, so both builds keep the last record of a repeated key."""
    from normalise.pipeline import make_plan

    lines = ["key,team,tags"] + [f'k{i},t{i % 7},"[""x{i % 3}""]"' for i in range(60)] + ['k5,late,"[""y""]"']
    path = tmp_path / "items.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    plan = tmp_path / "items.toml"
    text = make_plan([str(path)], str(plan))
    assert 'natural_key = "key"' in text and 'duplicates = "first"' in text
    plan.write_text(text.replace('duplicates = "first"', 'duplicates = "last"'), encoding="utf-8")
    monkeypatch.setattr(pipeline, "SAMPLE_ROWS", 10)  # streamed: the chunks after the first ten records
    whole = build_database([str(path)], str(tmp_path / "whole.db"), plan_path=str(plan))
    chunked = build_database([str(path)], str(tmp_path / "chunked.db"), plan_path=str(plan), chunk_rows=7)
    assert dump(tmp_path / "whole.db") == dump(tmp_path / "chunked.db")
    assert whole["inputs"] == chunked["inputs"]
    with sqlite3.connect(tmp_path / "chunked.db") as con:
        # the file's line 7 holds k5 (header on line 1), line 62 its repeat: the last is kept
        assert con.execute("SELECT item_sk, team FROM items WHERE key = 'k5'").fetchall() == [(62, "late")]
        assert con.execute("SELECT line, kept_line FROM set_aside_rows").fetchall() == [(7, 62)]


# --- 4. two inputs of one file name in different folders, replayed from a plan -------------

def test_plan_replays_files_of_one_name_from_different_folders(tmp_path):
    """Bug 4: two inputs with the same file name in different folders (a/titles.csv, b/titles.csv) given with
    --plan loaded the second file twice and never read the first: plan_from_doc matched [[record]] blocks to
    inputs by file stem, and both are "titles". Each block now takes the next input of its name, in the order
    the plan was written (the inputs' order), so the replay gives the very database the inference gave."""
    from normalise.pipeline import make_plan

    for folder, rows in (("a", ["a1,Ann", "a2,Al"]), ("b", ["b1,Bob", "b2,Bea", "b3,Bo"])):
        (tmp_path / folder).mkdir()
        (tmp_path / folder / "titles.csv").write_text("\n".join(["key,name"] + rows) + "\n", encoding="utf-8")
    paths = [str(tmp_path / "a" / "titles.csv"), str(tmp_path / "b" / "titles.csv")]
    plan = tmp_path / "titles.toml"
    make_plan(paths, str(plan))
    inferred = build_database(paths, str(tmp_path / "inferred.db"))
    replayed = build_database(paths, str(tmp_path / "replayed.db"), plan_path=str(plan))
    assert dump(tmp_path / "replayed.db") == dump(tmp_path / "inferred.db")
    assert [(i["path"], i["rows_read"]) for i in replayed["inputs"]] == [(paths[0], 2), (paths[1], 3)]
    assert replayed["inputs"] == inferred["inputs"]
    with sqlite3.connect(tmp_path / "replayed.db") as con:  # the files' own rows, each in its own table
        assert con.execute("SELECT key FROM titles ORDER BY 1").fetchall() == [("a1",), ("a2",)]
        assert con.execute("SELECT key FROM titles_2 ORDER BY 1").fetchall() == [("b1",), ("b2",), ("b3",)]


def test_plan_with_fewer_blocks_than_inputs_of_one_name_is_refused(tmp_path):
    """Bug 4, the other side: a plan with one [[record]] "titles" given two inputs named titles must not read
    one of them twice nor drop the other quietly: the input without a block is named."""
    from normalise.pipeline import make_plan
    from normalise.infer.planfile import InvalidPlan

    for folder in ("a", "b"):
        (tmp_path / folder).mkdir()
        (tmp_path / folder / "titles.csv").write_text(f"key,name\n{folder}1,x\n{folder}2,y\n", encoding="utf-8")
    plan = tmp_path / "one.toml"
    make_plan([str(tmp_path / "a" / "titles.csv")], str(plan))
    with pytest.raises(InvalidPlan, match="have no \\[\\[record\\]\\] block"):
        build_database([str(tmp_path / "a" / "titles.csv"), str(tmp_path / "b" / "titles.csv")],
                       str(tmp_path / "x.db"), plan_path=str(plan))


# --- 5. Python literals JSON has no form for: complex, bytes, sets, Ellipsis ----------------

LITERAL_ROWS = [  # key, tags (a list column), misc (read as Python literals), people (objects), place (one object)
    ("k1", "[1j, b'x']", "{1, 2}", "[{'id': 1, 'name': 'Ann', 'extra': 1j, 'marks': [b'a', 2j]}]",
     "{'code': b'x', 'note': {(1, 2): b'x'}}"),
    ("k2", "[{2, 1}, ...]", "1j", "[{'id': 2, 'name': 'Bob', 'extra': b'y', 'marks': [{'b', 'a'}]}]",
     "{'code': 1j, 'note': 'n'}"),
    ("k3", "['a', (1+2j)]", "b'x'", "[{'id': 1, 'name': 'Ann', 'extra': ..., 'marks': [...]}]",
     "{'code': ..., 'note': 'n'}"),
    ("k4", "[{'b', 'a'}, set()]", "...", "[{'id': 3, 'name': 'Cy', 'extra': -1j, 'marks': []}]",
     "{'code': b'', 'note': 'n'}"),
    ("k5", "[frozenset()]", "frozenset()", "[{'id': 4, 'name': 'Di', 'extra': 'plain', 'marks': ['m']}]",
     "{'code': 'plain', 'note': 'n'}"),
    ("k6", "['a']", "{'b', 'a'}", "[{'id': 4, 'name': 'Di', 'extra': 'plain', 'marks': ['m']}]",
     "{'code': 'plain', 'note': 'n'}"),
]


def write_literals(path) -> None:
    import csv

    with open(path, "w", newline="", encoding="utf-8") as f:
        writer = csv.writer(f)
        writer.writerow(["key", "tags", "misc", "people", "place"])
        writer.writerows(LITERAL_ROWS)


def read_back(text: str, like):
    """A stored text as the value it stands for: strings are stored as they are, the rest as literal text."""
    import ast

    return text if isinstance(like, str) else ast.literal_eval(text)


def test_python_only_literals_are_stored_as_their_literal_text(tmp_path):
    """Bug 5: cells holding Python literals JSON has no form for (1j, b'x', {1, 2}, ...) crashed the build with
    a TypeError in build.canonical / to_sql_value (json.dumps cannot serialise them), and a column of sets
    crashed the natural-key detection (sets are unhashable). They are decoded as ast.literal_eval decodes them
    and stored as text, their Python literal text, which ast.literal_eval reads back to the very value;
    frozenset() is a call, no literal, and is quarantined as such."""
    import ast

    path = tmp_path / "lits.csv"
    write_literals(path)
    db = tmp_path / "lits.db"
    m = build_database([str(path)], str(db), formats={"misc": ("python-literal", None)})
    assert m["integrity"]["reconciled"]
    con = sqlite3.connect(db)
    # whole cells of a Python-literal column (forced, so 1j and b'x' are read too): one text each, or NULL
    misc = dict(con.execute("SELECT key, misc FROM lits").fetchall())
    for key, _, cell, _, _ in LITERAL_ROWS:
        if cell == "frozenset()":
            assert misc[key] is None
        else:
            assert ast.literal_eval(misc[key]) == ast.literal_eval(cell), key  # the reference
            assert type(ast.literal_eval(misc[key])) is type(ast.literal_eval(cell)), key
    assert misc["k3"] == "b'x'" and misc["k2"] == "1j" and misc["k4"] == "..."
    assert misc["k1"] == "{1, 2}" and misc["k6"] == "{'a', 'b'}"  # a set's elements in sorted order
    # elements of a list column: each element's text, in list order
    tags = {}
    for key, text in con.execute("SELECT r.key, v.tag FROM lit_tags b JOIN lits r ON r.lit_sk = b.lit_sk "
                                 "JOIN tag v ON v.tag_sk = b.tag_sk ORDER BY r.key, b.list_position"):
        tags.setdefault(key, []).append(text)
    for key, cell, _, _, _ in LITERAL_ROWS:
        if key == "k5":
            assert key not in tags
            continue
        want = ast.literal_eval(cell)
        got = [read_back(t, v) for t, v in zip(tags[key], want)]
        assert got == want and list(map(type, got)) == list(map(type, want)), key
    assert tags["k2"] == ["{1, 2}", "..."] and tags["k4"] == ["{'a', 'b'}", "set()"]
    # object fields: a link attribute, a list inside the objects, the columns of a single object
    people = dict(con.execute("SELECT r.key, b.extra FROM lit_people b JOIN lits r ON r.lit_sk = b.lit_sk"))
    for key, _, _, cell, _ in LITERAL_ROWS:
        want = ast.literal_eval(cell)[0]["extra"]
        assert read_back(people[key], want) == want and type(read_back(people[key], want)) is type(want), key
    assert people["k4"] == "(-0-1j)" and people["k5"] == "plain"  # repr(-1j): the sign of the zero kept
    marks = sorted(v for (v,) in con.execute("SELECT value FROM mark_value"))
    assert marks == sorted(["b'a'", "2j", "{'a', 'b'}", "...", "m"])
    place = {key: (code, note) for key, code, note in con.execute("SELECT key, place_code, place_note FROM lits")}
    for key, _, _, _, cell in LITERAL_ROWS:
        want = ast.literal_eval(cell)["code"]
        assert read_back(place[key][0], want) == want and type(read_back(place[key][0], want)) is type(want), key
    # a dict key JSON cannot hold is its literal text, as JSON makes 1 the key "1"
    assert json.loads(place["k1"][1]) == {"(1, 2)": "b'x'"}
    # frozenset() is not a literal (ast.literal_eval refuses a call): quarantined, with its line
    refused = [(line, column) for line, column, _, message in quarantined(db) if "a call" in message]
    assert refused == [(6, "misc"), (6, "tags")]


def test_python_only_literals_give_one_database_whatever_the_hash_seed(tmp_path):
    """Bug 5, the text form: a set's repr follows its hash order, which for strings changes from one process
    to the next (PYTHONHASHSEED); its elements are sorted, so the database is the same in every run."""
    import os
    import subprocess
    import sys

    reprs = {subprocess.run([sys.executable, "-c", "print(repr({'b', 'a'}))"], check=True, capture_output=True,
                            text=True, env=dict(os.environ, PYTHONHASHSEED=seed)).stdout for seed in ("1", "2")}
    assert len(reprs) == 2  # these two seeds order the set apart, so the check below can tell
    path = tmp_path / "lits.csv"
    write_literals(path)
    dumps = []
    for seed in ("1", "2"):
        db = tmp_path / f"seed{seed}.db"
        subprocess.run([sys.executable, "-m", "normalise", "build", str(path), "--db", str(db), "--decode",
                        "misc=python-literal"], check=True, capture_output=True,
                       env=dict(os.environ, PYTHONHASHSEED=seed))
        dumps.append(dump(db))
    assert dumps[0] == dumps[1]
