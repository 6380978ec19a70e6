"""Issue 15: SQLite's b-tree check of the file a build wrote is ``PRAGMA quick_check`` by default and ``PRAGMA
integrity_check`` with ``--verify full``; the manifest, the summary and the report name the one that ran.

What each PRAGMA covers is SQLite's own documentation (https://sqlite.org/pragma.html#pragma_quick_check:
quick_check "does not verify UNIQUE constraints and does not verify that index content matches table content").
Each outcome here is checked against the same PRAGMA run on the written file with Python's ``sqlite3``. Data:
``zone1970.tab`` of the IANA tz database (PyPI ``tzdata``; public domain) as a TSV with a delimited list.
"""

from __future__ import annotations

import json
import sqlite3
import subprocess
import sys

import pytest

from normalise.model.errors import UsageError
from normalise.pipeline import build_database
from tests.test_report_from_plan_14 import _zone_tsv


def _pragma(db, name: str) -> list:
    with sqlite3.connect(db) as con:
        return [r[0] for r in con.execute(f"PRAGMA {name}")]


@pytest.mark.parametrize("verify, pragma", [("quick", "quick_check"), ("full", "integrity_check")])
def test_the_manifest_names_the_pragma_that_ran(tmp_path, verify, pragma):
    db = tmp_path / "zones.db"
    built = build_database(_zone_tsv(tmp_path), db, verify=verify, report_path=str(tmp_path / "r.html"))
    integrity = built["integrity"]
    assert integrity["btree_check"] == pragma
    assert [integrity["integrity_check"]] == _pragma(db, pragma) == ["ok"]  # SQLite's own answer, read again
    assert integrity["foreign_key_violations"] == len(_pragma(db, "foreign_key_check")) == 0
    html = (tmp_path / "r.html").read_text(encoding="utf-8")
    assert f"PRAGMA {pragma}" in html  # the report runs and names the same check as the build
    assert f"PRAGMA {'integrity_check' if pragma == 'quick_check' else 'quick_check'}" not in html


def test_quick_is_the_default(tmp_path):
    built = build_database(_zone_tsv(tmp_path), tmp_path / "zones.db")
    assert built["integrity"]["btree_check"] == "quick_check"


def test_the_command_takes_verify_and_says_which_check_ran(tmp_path):
    tsv = _zone_tsv(tmp_path)
    for level, pragma in (("full", "integrity_check"), ("quick", "quick_check")):
        db, manifest = tmp_path / f"{level}.db", tmp_path / f"{level}.json"
        done = subprocess.run([sys.executable, "-m", "normalise", "build", tsv, "--db", str(db),
                               "--verify", level, "--manifest", str(manifest)], capture_output=True, text=True)
        assert done.returncode == 0, done.stderr
        assert f"{pragma} ok" in done.stdout
        assert json.loads(manifest.read_text())["integrity"]["btree_check"] == pragma
    wrong = subprocess.run([sys.executable, "-m", "normalise", "build", tsv, "--db", str(tmp_path / "x.db"),
                            "--verify", "some"], capture_output=True, text=True)
    assert wrong.returncode == 2 and "--verify" in wrong.stderr and "quick" in wrong.stderr
    assert not (tmp_path / "x.db").exists()


def test_a_wrong_level_is_refused_before_anything_is_written(tmp_path):
    with pytest.raises(UsageError, match="verify 'thorough': expected one of quick, full"):
        build_database(_zone_tsv(tmp_path), tmp_path / "x.db", verify="thorough")
    with pytest.raises(UsageError, match="PostgreSQL"):
        build_database(_zone_tsv(tmp_path), "postgresql+psycopg://u@127.0.0.1:1/none", verify="full")
    assert not (tmp_path / "x.db").exists()
