"""The same model at any size: whether two columns share an entity table is decided over every record.

The demo export is the invented data the README runs (``demo/generate.py``); what it plants is written to
``planted.json`` by the generator, the truth each check compares with: ``in_both_lists`` names the people in
both ``contributors`` and ``production_team``. At 200 titles they are among the first records; at 50,000 the
first of them comes after the first 5,000 records the model is inferred from (``pipeline.SAMPLE_ROWS``), so
only a decision over every record puts them in one table (``sharing.py``).

The counts of distinct people are computed here from the CSV with ``csv`` and ``ast.literal_eval`` /
``json`` (the Python language reference's literals and RFC 8259), never from the tool's output.
"""

from __future__ import annotations

import ast
import csv
import json
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest

from normalise import pipeline
from normalise.pipeline import build_database

ROOT = Path(__file__).resolve().parent.parent
SIZES = (200, 6_000, 50_000)  # three sizes: inside the sample, just past it, ten times it


def _demo(where: Path, size: int) -> tuple[Path, dict]:
    subprocess.run([sys.executable, str(ROOT / "demo" / "generate.py"), str(where), "--size", str(size)],
                   check=True, capture_output=True)
    return where, json.loads((where / "planted.json").read_text(encoding="utf-8"))


def _people(path: Path) -> tuple[set, set]:
    """The person ids in each list column of the well-formed cells, read with the reference parsers."""
    lists = {"contributors": set(), "production_team": set()}
    with open(path, newline="", encoding="utf-8") as f:
        for row in csv.DictReader(f):
            for column, ids in lists.items():
                text = row[column]
                try:
                    value = ast.literal_eval(text) if column == "contributors" else json.loads(text)
                except (ValueError, SyntaxError):
                    continue  # a planted malformed cell: quarantined, not a person
                ids.update(p["person_id"] for p in value)
    return lists["contributors"], lists["production_team"]


@pytest.fixture(scope="module")
def builds(tmp_path_factory):
    out = {}
    for size in SIZES:
        where, planted = _demo(tmp_path_factory.mktemp(f"demo{size}"), size)
        db = where / "demo.db"
        m = build_database([str(where / "titles.csv"), str(where / "contributions.csv")], str(db))
        out[size] = (where, planted, db, m)
    return out


def _shared_in_the_sample(where: Path, planted: dict) -> bool:
    """Whether a person of both lists is in both lists within the first records the model is inferred from."""
    with open(where / "contributions.csv", newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f))[:pipeline.SAMPLE_ROWS]
    early = "".join(r["contributors"] + r["production_team"] for r in rows)
    return any(f"'person_id': {p}," in early and f'"person_id": {p},' in early for p in planted["in_both_lists"])


def test_the_first_shared_person_comes_after_the_sample_at_50000(builds):
    """The case the decision over every record is for: no person of both lists in the first records."""
    where, planted, _, _ = builds[50_000]
    assert not _shared_in_the_sample(where, planted)


def test_every_size_gives_the_same_tables(builds):
    shapes = {size: [(t["name"], t["role"]) for t in m["tables"]] for size, (_, _, _, m) in builds.items()}
    assert len({tuple(s) for s in shapes.values()}) == 1, shapes
    assert [t for t, role in shapes[SIZES[0]] if role == "entity"].count("person") == 1
    assert not any(t.startswith("person_") and role == "entity" for t, role in shapes[SIZES[-1]])


@pytest.mark.parametrize("size", SIZES)
def test_each_person_is_one_row_referred_to_from_both_lists(builds, size):
    where, planted, db, m = builds[size]
    contributors, team = _people(where / "contributions.csv")
    with sqlite3.connect(db) as con:
        people = dict(con.execute("SELECT person_id, person_sk FROM person"))
        in_contributors = {r[0] for r in con.execute(
            "SELECT p.person_id FROM title_contributors b JOIN person p USING (person_sk)")}
        in_team = {r[0] for r in con.execute(
            "SELECT p.person_id FROM title_production_team b JOIN person p USING (person_sk)")}
    assert len(people) == len(contributors | team)  # one row per distinct person id, over both lists
    assert in_contributors == contributors and in_team == team
    for person in planted["in_both_lists"]:
        assert person in in_contributors and person in in_team
    said = m["widened"]
    if not _shared_in_the_sample(where, planted):  # the run says so: the manifest names both columns, what they share
        assert [w["members"] for w in said] == [["contributions:contributors", "contributions:production_team"]]
        assert said[0]["identities_in_common"] == len(contributors & team)
    else:
        assert said == []


def test_a_plan_from_the_widened_build_replays_without_widening(builds, tmp_path):
    """The saved plan names both columns as members of one entity, so replaying it needs no second look."""
    where, _, _, m = builds[SIZES[-1]]
    inputs = [str(where / "titles.csv"), str(where / "contributions.csv")]
    plan = tmp_path / "plan.toml"
    pipeline.make_plan(inputs, str(plan))
    replayed = build_database(inputs, str(tmp_path / "again.db"), plan_path=str(plan))
    assert replayed["widened"] == []
    assert [t["name"] for t in replayed["tables"]] == [t["name"] for t in m["tables"]]


def test_no_merge_keeps_the_columns_apart_over_every_record(builds, tmp_path):
    """--no-merge is the user's decision: the pass over every record does not overrule it."""
    from normalise.infer import Options

    where, _, _, _ = builds[SIZES[-1]]
    inputs = [str(where / "titles.csv"), str(where / "contributions.csv")]
    m = build_database(inputs, str(tmp_path / "apart.db"),
                       options=Options(no_merge=["contributions:production_team"]))
    assert m["widened"] == []
    assert sum(e["table"].startswith("person") for e in m["entities"]) == 2
