"""Issue 13: one run per destination, outputs that never overwrite inputs or each other, all outputs or none.

Invented data only: parts catalogues of a made-up workshop (codes, labels, part lists with an identity).

* Two ``build --append`` runs at once on one database (real processes): the second waits for the first
  (``--wait``) and then reads the database the first left, or is refused in one line (exit 1); the database
  holds exactly the records of the runs that succeeded, counted here from the input files.
* Every clash (an output that is an input or another output) is refused in one line (exit 2) before anything
  runs: nothing written, every file in the folder byte for byte as it was (SHA-256).
* ``--replace`` through a symlink replaces the target and keeps the link.
* A side output that cannot be written (up front, or late: a full disk) leaves an existing database, manifest,
  report and Parquet files as they were (bytes and mtime), with no temporary file behind.
* ``normalise report`` on a malformed manifest, an unreadable one, a database that is not one and an output
  that cannot be written: one line each, saying whether reading or writing failed.

Sources: rename(2) replaces its target atomically within one filesystem (POSIX, from memory); flock(2) locks
are released when the last descriptor closes, also when the process is killed (Linux man page, from memory).
"""

from __future__ import annotations

import csv
import errno
import hashlib
import json
import os
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

from normalise.cli import main
from normalise.outputs import HOLD_LOCK_ENV

ROOT = Path(__file__).resolve().parent.parent
WORDS = ["brass", "cog", "pin", "lever", "spring", "gasket", "valve", "rivet", "flange", "bolt", "washer", "hinge"]


def _env(**extra) -> dict:
    return dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]), **extra)


def write_catalogue(path: Path, first: int, count: int) -> Path:
    """A CSV of invented parts kits: a code, a label and a JSON list of parts with an identity."""
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["kit_code", "label", "parts"])
        for n in range(first, first + count):
            parts = [{"part_id": (n * 7 + k) % 97, "part_name": f"{WORDS[(n * 7 + k) % 97 % len(WORDS)]}-"
                      f"{(n * 7 + k) % 97}", "qty": k + 1} for k in range(n % 3 + 1)]
            w.writerow([f"K{n:06d}", f"kit {WORDS[n % len(WORDS)]} {n}", json.dumps(parts)])
    return path


def kit_codes(*paths: Path) -> set[str]:
    """The natural keys of the input files, read with the csv module (independently of normalise)."""
    out = set()
    for p in paths:
        with open(p, newline="", encoding="utf-8") as f:
            out |= {row["kit_code"] for row in csv.DictReader(f)}
    return out


def db_codes(db: Path) -> list[str]:
    with sqlite3.connect(f"file:{db}?mode=ro", uri=True) as con:
        table = con.execute("SELECT name FROM sqlite_master WHERE type = 'table' AND sql LIKE '%kit_code%'"
                            ).fetchone()[0]
        return [r[0] for r in con.execute(f'SELECT kit_code FROM "{table}"')]


def command(*args: str) -> list[str]:
    return [sys.executable, "-m", "normalise", *args]


def run(*args: str, **env) -> subprocess.CompletedProcess:
    return subprocess.run(command(*args), env=_env(**env), capture_output=True, text=True, timeout=300)


def folder_state(folder: Path) -> dict:
    """Every file under the folder: its SHA-256 (symlinks as their target text)."""
    out = {}
    for p in sorted(folder.rglob("*")):
        if p.is_symlink():
            out[str(p)] = "link:" + os.readlink(p)
        elif p.is_file():
            out[str(p)] = hashlib.sha256(p.read_bytes()).hexdigest()
        else:
            out[str(p)] = "dir"
    return out


def leftovers(folder: Path) -> list[Path]:
    return sorted(p for p in folder.rglob("*") if ".partial-" in p.name or p.name.endswith(".lock"))


@pytest.fixture(scope="module")
def kits(tmp_path_factory):
    """A base catalogue built into a database with its plan, and two further catalogues to append."""
    d = tmp_path_factory.mktemp("kits")
    for part in "abc":  # an appended export has the name of the first (the plan's [[record]] file)
        (d / part).mkdir()
    base = write_catalogue(d / "a" / "kits.csv", 0, 1500)
    more = write_catalogue(d / "b" / "kits.csv", 1500, 3000)
    other = write_catalogue(d / "c" / "kits.csv", 4500, 3000)
    assert run("plan", str(base), "-o", str(d / "plan.toml")).returncode == 0
    db = d / "base.db"
    result = run("build", str(base), "--plan", str(d / "plan.toml"), "--db", str(db), "--quiet")
    assert result.returncode == 0, result.stderr
    return {"dir": d, "base": base, "more": more, "other": other, "plan": d / "plan.toml", "db": db}


def _copy_db(kits, tmp_path) -> Path:
    db = tmp_path / "kits.db"
    db.write_bytes(kits["db"].read_bytes())
    return db


def _append(kits, db: Path, export: Path, *extra: str, **env) -> subprocess.Popen:
    args = command("build", str(export), "--plan", str(kits["plan"]), "--db", str(db), "--append", "--quiet",
                   "--chunk-rows", "0", *extra)
    return subprocess.Popen(args, env=_env(**env), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def _wait_for_holder(db: Path, proc: subprocess.Popen) -> None:
    """Until the first run holds the lock: the lock file names its process (written once locked)."""
    lock = Path(str(db) + ".lock")
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        if lock.exists() and lock.read_text().strip() == str(proc.pid):
            return
        assert proc.poll() is None, proc.communicate()
        time.sleep(0.02)
    raise AssertionError("the first run never took the lock")


# --- one run per destination ---------------------------------------------------------------------------------

def test_second_append_at_once_is_refused_and_the_first_ones_rows_are_all_there(kits, tmp_path):
    db = _copy_db(kits, tmp_path)
    release = tmp_path / "release"  # the first run holds the lock until this file exists, however slow the machine
    first = _append(kits, db, kits["more"], **{HOLD_LOCK_ENV: str(release)})
    _wait_for_holder(db, first)
    second = _append(kits, db, kits["other"])  # --wait 0, the default: refused at once
    out2, err2 = second.communicate(timeout=120)
    release.touch()
    out1, err1 = first.communicate(timeout=300)
    assert first.returncode == 0, err1
    lines = err2.strip().splitlines()
    assert second.returncode == 3 and len(lines) == 1, err2  # the destination is busy: exit 3 (README)
    assert "being written by another normalise run" in lines[0] and "--wait" in lines[0], lines
    assert f"process {first.pid}" in lines[0]
    codes = db_codes(db)
    assert len(codes) == len(set(codes)) == len(kit_codes(kits["base"], kits["more"]))
    assert set(codes) == kit_codes(kits["base"], kits["more"])
    assert leftovers(tmp_path) == []


def test_second_append_at_once_waits_and_reads_what_the_first_wrote(kits, tmp_path):
    """The 200,000 lost rows of the issue: the second run must read the database after the first's move."""
    db = _copy_db(kits, tmp_path)
    release = tmp_path / "release"
    first = _append(kits, db, kits["more"], **{HOLD_LOCK_ENV: str(release)})
    _wait_for_holder(db, first)
    second = _append(kits, db, kits["other"], "--wait", "240")
    time.sleep(1)  # the second run is started and waiting (or still starting: it waits all the same)
    release.touch()
    _, err1 = first.communicate(timeout=300)
    _, err2 = second.communicate(timeout=300)
    assert first.returncode == 0, err1
    assert second.returncode == 0, err2
    expected = kit_codes(kits["base"], kits["more"], kits["other"])
    codes = db_codes(db)
    assert len(codes) == len(expected) and set(codes) == expected
    with sqlite3.connect(db) as con:
        assert con.execute("PRAGMA foreign_key_check").fetchall() == []
    assert leftovers(tmp_path) == []


def test_two_appends_started_together_lose_nothing(kits, tmp_path):
    """No hook: whichever runs first, the database holds the records of every run that exited 0."""
    db = _copy_db(kits, tmp_path)
    runs = [(export, _append(kits, db, export, "--wait", "240")) for export in (kits["more"], kits["other"])]
    done = [(export, proc, *proc.communicate(timeout=300)) for export, proc in runs]
    succeeded = [export for export, proc, _, err in done if proc.returncode == 0]
    assert len(succeeded) == 2, [err for *_, err in done]
    expected = kit_codes(kits["base"], *succeeded)
    codes = db_codes(db)
    assert len(codes) == len(expected) and set(codes) == expected


def test_a_lock_file_left_by_a_killed_run_does_not_block(kits, tmp_path):
    """flock(2) locks go with the process: a lock file a killed run left behind locks nothing."""
    db = _copy_db(kits, tmp_path)
    Path(str(db) + ".lock").write_text("999999\n")
    result = run("build", str(kits["more"]), "--plan", str(kits["plan"]), "--db", str(db), "--append", "--quiet")
    assert result.returncode == 0, result.stderr
    assert not Path(str(db) + ".lock").exists()


# --- outputs never overwrite inputs or each other --------------------------------------------------------------

CLASHES = {
    "report is db": lambda d: ["build", "kits.csv", "--db", "out.db", "--replace", "--report", "out.db"],
    "manifest is input": lambda d: ["build", "kits.csv", "--db", "new.db", "--manifest", "kits.csv"],
    "db is input, replace": lambda d: ["build", "kits.csv", "--db", "kits.csv", "--replace"],
    "db is input, append": lambda d: ["build", "kits.csv", "--db", "kits.csv", "--append"],
    "dictionary is manifest": lambda d: ["build", "kits.csv", "--db", "new.db", "--manifest", "run.json",
                                         "--dictionary", "run.json"],
    "report is dictionary": lambda d: ["build", "kits.csv", "--db", "new.db", "--report", "r.html",
                                       "--dictionary", "./r.html"],
    "db through a link to the input": lambda d: ["build", "kits.csv", "--db", "link.db", "--replace"],
    "manifest through a link to the input": lambda d: ["build", "kits.csv", "--db", "new.db",
                                                      "--manifest", "link.json"],
    "manifest is the plan": lambda d: ["build", "kits.csv", "--plan", "plan.toml", "--db", "new.db",
                                       "--manifest", "plan.toml"],
    "parquet is an input": lambda d: ["build", "kits.csv", "--db", "new.db", "--parquet", "kits.csv"],
    "db inside the parquet folder": lambda d: ["build", "kits.csv", "--db", "pq/kits.parquet",
                                               "--parquet", "pq"],
    "manifest is the lock file": lambda d: ["build", "kits.csv", "--db", "new.db", "--manifest", "new.db.lock"],
    "input named like the lock file": lambda d: ["build", "out.db.lock", "--db", "out.db", "--replace"],
    "plan output is the input": lambda d: ["plan", "kits.csv", "-o", "kits.csv"],
    "report output is the database": lambda d: ["report", "out.db", "-o", "out.db"],
    "report output is its manifest": lambda d: ["report", "out.db", "--manifest", "run.json",
                                                "--dictionary", "run.json"],
}


@pytest.mark.parametrize("case", sorted(CLASHES))
def test_clashing_outputs_are_refused_before_anything_runs(kits, tmp_path, case, monkeypatch, capsys):
    write_catalogue(tmp_path / "kits.csv", 0, 50)
    (tmp_path / "out.db").write_bytes(kits["db"].read_bytes())
    (tmp_path / "out.db.lock").write_bytes((tmp_path / "kits.csv").read_bytes())
    (tmp_path / "run.json").write_text('{"tables": []}')
    (tmp_path / "plan.toml").write_bytes(kits["plan"].read_bytes())
    (tmp_path / "pq").mkdir()
    os.symlink("kits.csv", tmp_path / "link.db")
    os.symlink("kits.csv", tmp_path / "link.json")
    before = folder_state(tmp_path)
    monkeypatch.chdir(tmp_path)
    code = main(CLASHES[case](tmp_path) + (["--quiet"] if CLASHES[case](tmp_path)[0] == "build" else []))
    err = capsys.readouterr().err
    lines = err.strip().splitlines()
    assert code == 2 and len(lines) == 1, err
    assert "overwrite" in lines[0] or "hold table files" in lines[0], lines
    assert folder_state(tmp_path) == before  # inputs byte for byte; nothing new, not even a lock file


def test_a_file_given_twice_as_input_is_not_a_clash(tmp_path, monkeypatch, capsys):
    write_catalogue(tmp_path / "kits.csv", 0, 20)
    monkeypatch.chdir(tmp_path)
    main(["survey", "kits.csv"])  # the reader decides about repeated inputs; only outputs are compared
    capsys.readouterr()
    from normalise.outputs import check_paths
    check_paths([("input", "kits.csv"), ("input", "./kits.csv")], [("--db", "out.db")])


def test_replace_through_a_symlink_replaces_the_target_and_keeps_the_link(kits, tmp_path):
    real = tmp_path / "store"
    real.mkdir()
    target = real / "kits.db"
    target.write_bytes(kits["db"].read_bytes())
    link = tmp_path / "current.db"
    os.symlink(target, link)
    manifest_target = real / "run.json"
    manifest_target.write_text("{}")
    manifest_link = tmp_path / "run.json"
    os.symlink(manifest_target, manifest_link)
    small = write_catalogue(tmp_path / "small.csv", 0, 10)
    result = run("build", str(small), "--db", str(link), "--replace", "--manifest", str(manifest_link), "--quiet")
    assert result.returncode == 0, result.stderr
    assert link.is_symlink() and os.readlink(link) == str(target)
    assert manifest_link.is_symlink() and os.readlink(manifest_link) == str(manifest_target)
    assert sorted(db_codes(target)) == sorted(kit_codes(small))
    assert json.loads(manifest_target.read_text())["database"] == str(link)
    assert leftovers(tmp_path) == []


# --- all outputs or none ---------------------------------------------------------------------------------------

@pytest.fixture
def built(kits, tmp_path):
    """A folder with a database, its manifest, report, dictionary and Parquet files from an earlier build."""
    small = write_catalogue(tmp_path / "small.csv", 0, 30)
    out = {"db": tmp_path / "out.db", "manifest": tmp_path / "run.json", "report": tmp_path / "run.html",
           "dictionary": tmp_path / "dict.md", "parquet": tmp_path / "pq", "input": small}
    result = run("build", str(small), "--db", str(out["db"]), "--manifest", str(out["manifest"]),
                 "--report", str(out["report"]), "--dictionary", str(out["dictionary"]),
                 "--parquet", str(out["parquet"]), "--quiet")
    assert result.returncode == 0, result.stderr
    for p in [out["db"], out["manifest"], out["report"], out["dictionary"], *out["parquet"].iterdir()]:
        os.utime(p, (1_000_000_000, 1_000_000_000))
    out["again"] = ["build", str(small), "--db", str(out["db"]), "--replace", "--manifest", str(out["manifest"]),
                    "--report", str(out["report"]), "--dictionary", str(out["dictionary"]),
                    "--parquet", str(out["parquet"]), "--quiet"]
    return out


def _stamps(folder: Path) -> dict:
    return {str(p): (p.stat().st_mtime, hashlib.sha256(p.read_bytes()).hexdigest())
            for p in sorted(folder.rglob("*")) if p.is_file()}


def test_parquet_path_under_a_file_is_refused_up_front(built, tmp_path, capsys):
    before = _stamps(tmp_path)
    args = [a if a != str(built["parquet"]) else str(built["input"] / "pq") for a in built["again"]]
    code = main(args)
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and "--parquet" in err[0] and "cannot be written" in err[0], err
    assert _stamps(tmp_path) == before


def test_report_in_a_read_only_folder_is_refused_up_front(built, tmp_path, capsys):
    if os.geteuid() == 0:
        pytest.skip("root writes in any folder; access(2) cannot refuse")
    locked = tmp_path / "ro"
    locked.mkdir()
    locked.chmod(0o500)
    try:
        before = _stamps(tmp_path)
        args = [a if a != str(built["report"]) else str(locked / "r.html") for a in built["again"]]
        code = main(args)
        err = capsys.readouterr().err.strip().splitlines()
        assert code == 2 and len(err) == 1 and "--report" in err[0] and "permission" in err[0], err
        assert _stamps(tmp_path) == before
    finally:
        locked.chmod(0o700)


@pytest.mark.parametrize("failing", ["parquet", "report", "manifest"])
def test_a_side_output_failing_late_leaves_every_old_output(built, tmp_path, monkeypatch, capsys, failing):
    """A full disk while a side output is written, after the database is complete: nothing moves."""
    import normalise.pipeline as pipeline
    import normalise.report.html as report_html

    def full(*_a, **_k):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), "somewhere")

    if failing == "parquet":
        real = pipeline.write_parquet

        def half(database, plan, directory):  # one file written, then the disk is full
            real(database, plan, directory)
            full()
        monkeypatch.setattr(pipeline, "write_parquet", half)
    elif failing == "report":
        monkeypatch.setattr(report_html, "render_report", lambda model: full())
    else:
        monkeypatch.setattr(pipeline.json, "dump", full)
    before = _stamps(tmp_path)
    code = main(built["again"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code != 0 and len(err) == 1 and "No space left" in err[0], err
    assert _stamps(tmp_path) == before
    assert leftovers(tmp_path) == []


def test_a_real_full_disk_for_the_report_leaves_every_old_output(built, tmp_path):
    """A 256 KiB tmpfs holding the old report, filled to the last byte (root only; skipped otherwise)."""
    mount = tmp_path / "full"
    mount.mkdir()
    mounted = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=256k", "tmpfs", str(mount)], capture_output=True)
    if mounted.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here: {mounted.stderr.decode(errors='replace').strip()}")
    try:
        report = mount / "run.html"
        report.write_bytes(built["report"].read_bytes())
        with open(mount / "filler", "wb", buffering=0) as f:
            try:
                while True:
                    f.write(b"\0" * 512)
            except OSError:
                pass
        before = _stamps(tmp_path)
        args = [a if a != str(built["report"]) else str(report) for a in built["again"]]
        result = run(*args)
        lines = result.stderr.strip().splitlines()
        assert result.returncode != 0 and len(lines) == 1 and "Traceback" not in result.stderr, result.stderr
        assert _stamps(tmp_path) == before
        assert leftovers(tmp_path) == []
    finally:
        subprocess.run(["umount", "-l", str(mount)], capture_output=True)


def test_a_complete_run_moves_every_output(built, tmp_path):
    result = run(*built["again"])
    assert result.returncode == 0, result.stderr
    for name in ("db", "manifest", "report", "dictionary"):
        assert built[name].stat().st_mtime > 1_000_000_000
    parquet = json.loads(built["manifest"].read_text())["parquet"]
    assert parquet and all(Path(p).parent == built["parquet"] and Path(p).stat().st_mtime > 1_000_000_000
                           for p in parquet)
    assert str(built["db"].name) in built["report"].read_text()
    assert ".partial-" not in built["report"].read_text() + built["dictionary"].read_text()
    assert leftovers(tmp_path) == []


# --- normalise report's errors --------------------------------------------------------------------------------

MANIFESTS = {
    "invalid JSON": ('{"tables": [', "not JSON"),
    "a list": ("[]", "not a normalise manifest"),
    "no tables": ("{}", 'no "tables"'),
    "tables a number": ('{"tables": 3}', '"tables" is a number'),
    "table without a name": ('{"tables": [{"rows": 1}]}', 'entry 1 of "tables" has no "name"'),
    "integrity a list": ('{"tables": [], "integrity": []}', '"integrity" is a list'),
    "input without a path": ('{"tables": [], "inputs": [{"rows_read": 2}]}', 'entry 1 of "inputs" has no "path"'),
}


@pytest.mark.parametrize("case", sorted(MANIFESTS))
def test_report_with_a_malformed_manifest_is_one_line(built, tmp_path, case):
    text, expected = MANIFESTS[case]
    bad = tmp_path / "bad.json"
    bad.write_text(text)
    result = run("report", str(built["db"]), "--manifest", str(bad), "-o", str(tmp_path / "new.html"))
    lines = result.stderr.strip().splitlines()
    assert result.returncode == 2 and len(lines) == 1 and expected in lines[0], result.stderr
    assert "could not be written" not in lines[0]
    assert not (tmp_path / "new.html").exists()


def test_report_read_and_write_failures_say_which(built, tmp_path):
    (tmp_path / "latin.json").write_bytes(b'{"tables": [], "note": "\xe9"}')
    (tmp_path / "not.db").write_text("kit_code\nK1\n")
    cases = [
        (["--manifest", str(tmp_path / "missing.json"), "-o", str(tmp_path / "a.html")], "could not be read"),
        (["--manifest", str(tmp_path / "latin.json"), "-o", str(tmp_path / "a.html")], "could not be read"),
        (["-o", str(built["input"] / "a.html")], "cannot be written"),
    ]
    for extra, expected in cases:
        result = run("report", str(built["db"]), *extra)
        lines = result.stderr.strip().splitlines()
        assert result.returncode == 2 and len(lines) == 1 and expected in lines[0], (extra, result.stderr)
    result = run("report", str(tmp_path / "not.db"), "-o", str(tmp_path / "a.html"))
    lines = result.stderr.strip().splitlines()
    assert result.returncode == 2 and len(lines) == 1 and "could not be read" in lines[0], result.stderr
    assert not (tmp_path / "a.html").exists()


def test_report_write_failing_late_is_one_line_and_keeps_the_old_report(built, monkeypatch, capsys):
    import normalise.report.html as report_html

    def full(_model):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
    before = built["report"].read_bytes()
    monkeypatch.setattr(report_html, "render_report", full)
    code = main(["report", str(built["db"]), "-o", str(built["report"])])
    err = capsys.readouterr().err.strip().splitlines()
    # a full disk stops the run on the destination, not on the call nor the data: exit 3 (README's exit codes)
    assert code == 3 and len(err) == 1 and "could not be written" in err[0] and "No space" in err[0], err
    assert built["report"].read_bytes() == before
    assert leftovers(built["report"].parent) == []
