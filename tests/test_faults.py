"""Faults during a build: killed, out of disk space, a locked destination, run again.

* A build killed with SIGKILL at random moments (real processes, at least 20
  kills spread over the whole run, from start-up to the move into place) leaves
  the destination either as it was (absent, or an older database byte for byte)
  or complete: ``PRAGMA integrity_check`` ok, no foreign-key violation, and the
  same content as a build that was not killed.
* A full disk (the writer's inserts raising ENOSPC, and a real 1 MiB tmpfs where
  one can be mounted) leaves the destination untouched and no ``.partial-*``
  file behind.
* A destination locked by another connection leaves things as they were.
* Building again gives the same database, byte for byte.

``NORMALISE_FAULT_KILLS`` (default 24) sets the number of kills, ``NORMALISE_FAULT_SEED`` the seed.
"""

from __future__ import annotations

import errno
import hashlib
import os
import random
import shutil
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
KILLS = int(os.environ.get("NORMALISE_FAULT_KILLS", "24"))
SEED = int(os.environ.get("NORMALISE_FAULT_SEED", "20261202"))
DEMO_SIZE = 5000  # titles: a few thousand records, a build of a second or two


def _env() -> dict:
    return dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]))


def build_command(inputs: list[Path], db: Path, *extra: str) -> list[str]:
    return [sys.executable, "-m", "normalise", "build", *map(str, inputs), "--db", str(db), "--quiet", *extra]


def run_build(inputs: list[Path], db: Path, *extra: str) -> subprocess.CompletedProcess:
    return subprocess.run(build_command(inputs, db, *extra), env=_env(), capture_output=True, text=True,
                          timeout=300)


def content_digest(path: Path) -> str:
    """A digest of every table's rows (in key order) and of the schema."""
    digest = hashlib.sha256()
    with sqlite3.connect(f"file:{path}?mode=ro", uri=True) as db:
        for kind, name, sql in db.execute("SELECT type, name, sql FROM sqlite_master ORDER BY type, name"):
            digest.update(f"{kind}:{name}:{sql}\n".encode())
            if kind == "table":
                for row in db.execute(f'SELECT * FROM "{name}" ORDER BY 1'):
                    digest.update(repr(row).encode())
    return digest.hexdigest()


def check_complete(path: Path) -> None:
    with sqlite3.connect(f"file:{path}?mode=ro", uri=True) as db:
        assert db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        assert db.execute("PRAGMA foreign_key_check").fetchall() == []


def partials(folder: Path) -> list[Path]:
    return sorted(folder.glob("*.partial-*"))


def _timed_build(inputs: list[Path], db: Path, extra: list[str]) -> tuple[float, float]:
    """Build, watching the folder: when the temporary file appears (writing starts) and when the build ends."""
    started = time.monotonic()
    proc = subprocess.Popen(build_command(inputs, db, *extra), env=_env(), stdout=subprocess.DEVNULL,
                            stderr=subprocess.PIPE)
    writing = None
    while proc.poll() is None:
        if writing is None and partials(db.parent):
            writing = time.monotonic() - started
        time.sleep(0.002)
    seconds = time.monotonic() - started
    assert proc.returncode == 0, proc.stderr.read()
    proc.stderr.close()
    return (writing if writing is not None else seconds * 0.8), seconds


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The demo export, a reference build of each input set, and an older database to be replaced."""
    folder = tmp_path_factory.mktemp("faults")
    subprocess.run([sys.executable, str(ROOT / "demo" / "generate.py"), str(folder / "demo"), "--size",
                    str(DEMO_SIZE)], check=True, env=_env(), capture_output=True)
    subprocess.run([sys.executable, str(ROOT / "demo" / "generate.py"), str(folder / "small"), "--size", "10"],
                   check=True, env=_env(), capture_output=True)
    sets = {
        # one file: read, decoded and written in chunks (the streaming path)
        "chunks": ([folder / "demo" / "contributions.csv"], ["--chunk-rows", "250"]),
        # two files joined: built in memory, written in one go
        "joined": ([folder / "demo" / "titles.csv", folder / "demo" / "contributions.csv"], []),
    }
    reference = {}
    for name, (inputs, extra) in sets.items():
        db = folder / f"reference-{name}.db"
        writing, seconds = _timed_build(inputs, db, extra)
        reference[name] = {"inputs": inputs, "extra": extra, "db": db, "digest": content_digest(db),
                           "writing": writing, "seconds": seconds}
    older = folder / "older.db"
    assert run_build([folder / "small" / "titles.csv"], older).returncode == 0
    return {"folder": folder, "sets": reference, "older": older}


def test_build_killed_at_random_points_leaves_nothing_or_a_complete_database(demo, tmp_path):
    rng = random.Random(SEED)
    outcomes: dict[str, int] = {}
    kills, attempts, stale = 0, 0, 0
    while kills < KILLS and attempts < 3 * KILLS:
        attempts += 1
        name = ("chunks", "joined")[(attempts // 2) % 2]
        ref = demo["sets"][name]
        replace = attempts % 4 in (2, 3)  # half of the kills replace an older database
        dest = tmp_path / f"kill-{attempts}.db"
        before = None
        if replace:
            shutil.copyfile(demo["older"], dest)
            before = dest.read_bytes()
        extra = [*ref["extra"], *(["--replace"] if replace else [])]
        # every other kill anywhere from start-up to just past the end of a build that is not killed, the
        # others while it writes (from the temporary file's creation to the move into place)
        delay = rng.uniform(0.0, ref["seconds"] * 1.05) if attempts % 2 else rng.uniform(ref["writing"],
                                                                                           ref["seconds"])
        proc = subprocess.Popen(build_command(ref["inputs"], dest, *extra), env=_env(),
                                stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
        time.sleep(delay)
        was_writing = bool(partials(tmp_path))
        if proc.poll() is None:
            proc.send_signal(signal.SIGKILL)
            kills += 1
        proc.wait()
        proc.stderr.close()
        if proc.returncode == -signal.SIGKILL:
            phase = "killed while writing" if was_writing else "killed before writing"
        else:
            assert proc.returncode == 0, f"a build that was not killed failed ({proc.returncode})"
            phase = "finished"
        if not dest.exists():
            assert not replace, "a killed build removed the older database"
            state = "absent"
        elif before is not None and dest.read_bytes() == before:
            state = "as it was"
        else:
            check_complete(dest)
            assert content_digest(dest) == ref["digest"], "a complete-looking database differs from the reference"
            state = "complete"
        if state == "complete" and proc.returncode == -signal.SIGKILL:
            phase = "killed after the move into place"
        outcomes[f"{phase}: {state}"] = outcomes.get(f"{phase}: {state}", 0) + 1
        # a killed process cannot remove its temporary file; count it and clear it for the next attempt
        stale += len(partials(tmp_path))
        for p in partials(tmp_path):
            p.unlink()
    windows = {n: (round(r["writing"], 2), round(r["seconds"], 2)) for n, r in demo["sets"].items()}
    print(f"\n{kills} kills in {attempts} builds (seed {SEED}; writing from/until, s: {windows}); outcomes: {outcomes}; "
          f"stale .partial files left by killed builds: {stale}")
    assert kills >= min(KILLS, 20), outcomes
    assert any(k.startswith("killed while writing") for k in outcomes), f"no kill landed while writing: {outcomes}"


def _fail_with_enospc(monkeypatch, after: int) -> None:
    """The SQLite writer's inserts raise ENOSPC from the ``after``-th call on."""
    from normalise import write

    calls = {"n": 0}
    insert = write.SqliteWriter.insert

    def full(self, name, rows):
        calls["n"] += 1
        if calls["n"] >= after:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return insert(self, name, rows)

    monkeypatch.setattr(write.SqliteWriter, "insert", full)


@pytest.mark.parametrize("name", ["chunks", "joined"])
@pytest.mark.parametrize("existing", [False, True], ids=["fresh", "replacing"])
@pytest.mark.parametrize("after", [1, 6])
def test_full_disk_leaves_destination_untouched(demo, tmp_path, monkeypatch, capsys, name, existing, after):
    from normalise.cli import main

    ref = demo["sets"][name]
    dest = tmp_path / "out.db"
    before = None
    if existing:
        shutil.copyfile(demo["older"], dest)
        before = dest.read_bytes()
    _fail_with_enospc(monkeypatch, after)
    argv = ["build", *map(str, ref["inputs"]), "--db", str(dest), "--quiet", *ref["extra"],
            *(["--replace"] if existing else [])]
    try:
        code = main(argv)
    except OSError as exc:  # no message of the command's own: see test_full_disk_gives_a_one_line_message
        assert exc.errno == errno.ENOSPC
        code = None
    assert code != 0
    assert (dest.read_bytes() == before) if existing else not dest.exists()
    assert partials(tmp_path) == [], "a temporary file was left behind"


def test_full_disk_gives_a_one_line_message(demo, tmp_path, monkeypatch, capsys):
    from normalise.cli import main

    ref = demo["sets"]["chunks"]
    _fail_with_enospc(monkeypatch, 3)
    code = main(["build", *map(str, ref["inputs"]), "--db", str(tmp_path / "out.db"), "--quiet", *ref["extra"]])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 3 and len(err) == 1 and "No space left" in err[0], err  # the destination: exit 3 (README)


@pytest.fixture
def small_tmpfs(tmp_path):
    """A 1 MiB tmpfs (root only; skipped where mounting is not allowed)."""
    mount = tmp_path / "full"
    mount.mkdir()
    result = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=1m", "tmpfs", str(mount)], capture_output=True)
    if result.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here: {result.stderr.decode(errors='replace').strip()}")
    try:
        yield mount
    finally:
        subprocess.run(["umount", "-l", str(mount)], capture_output=True)


@pytest.mark.parametrize("existing", [False, True], ids=["fresh", "replacing"])
def test_real_full_disk_leaves_destination_untouched(demo, small_tmpfs, existing):
    ref = demo["sets"]["chunks"]
    dest = small_tmpfs / "out.db"
    before = None
    if existing:
        shutil.copyfile(demo["older"], dest)  # about 200 KiB of the 1 MiB
        before = dest.read_bytes()
    result = run_build(ref["inputs"], dest, *ref["extra"], *(["--replace"] if existing else []))
    assert result.returncode != 0, "a 4 MiB database fitted in 1 MiB?"
    assert (dest.read_bytes() == before) if existing else not dest.exists()
    assert partials(small_tmpfs) == [], "a temporary file was left behind on the full disk"
    print(f"\nfull disk: exit {result.returncode}, stderr: {result.stderr.strip().splitlines()[-1:]}")


def _hold_exclusive_lock(path: Path) -> subprocess.Popen:
    """Another process holding an exclusive lock on the database until its stdin closes."""
    code = ("import sqlite3, sys; db = sqlite3.connect(sys.argv[1], isolation_level=None); "
            "db.execute('BEGIN EXCLUSIVE'); print('locked', flush=True); sys.stdin.read(); db.execute('ROLLBACK')")
    holder = subprocess.Popen([sys.executable, "-c", code, str(path)], stdin=subprocess.PIPE,
                              stdout=subprocess.PIPE, text=True)
    assert holder.stdout.readline().strip() == "locked"
    return holder


def _build_over_locked(demo, tmp_path):
    """Build with --replace onto an older database that another process holds an exclusive lock on."""
    dest = tmp_path / "out.db"
    shutil.copyfile(demo["older"], dest)
    before = dest.read_bytes()
    holder = _hold_exclusive_lock(dest)
    try:
        result = run_build(demo["sets"]["joined"]["inputs"], dest, "--replace")
    finally:
        holder.stdin.close()
        holder.wait(timeout=30)
    return result, dest, before


def test_locked_destination_is_not_a_traceback(demo, tmp_path):
    """Locked by another process: no traceback, no temporary file left, the older database intact or replaced whole."""
    result, dest, _ = _build_over_locked(demo, tmp_path)
    assert "Traceback" not in result.stderr, result.stderr
    assert result.returncode in (0, 3), result.stderr  # done, or the destination refused: exit 3
    assert partials(tmp_path) == []
    check_complete(dest)


def test_locked_destination_gives_a_message_and_stays_as_it_was(demo, tmp_path):
    result, dest, before = _build_over_locked(demo, tmp_path)
    lines = result.stderr.strip().splitlines()
    assert result.returncode == 3 and len(lines) == 1 and "lock" in lines[0], result.stderr  # busy: exit 3
    assert dest.read_bytes() == before


def test_existing_destination_without_replace_is_a_message(demo, tmp_path):
    ref = demo["sets"]["joined"]
    dest = tmp_path / "out.db"
    shutil.copyfile(demo["older"], dest)
    before = dest.read_bytes()
    result = run_build(ref["inputs"], dest)
    assert result.returncode == 2 and result.stderr.startswith("normalise: ") and "--replace" in result.stderr
    assert len(result.stderr.strip().splitlines()) == 1
    assert dest.read_bytes() == before


@pytest.mark.parametrize("name", ["chunks", "joined"])
def test_building_again_gives_the_same_database(demo, tmp_path, name):
    ref = demo["sets"][name]
    first, second = tmp_path / "first.db", tmp_path / "second.db"
    assert run_build(ref["inputs"], first, *ref["extra"]).returncode == 0
    shutil.copyfile(demo["older"], second)
    assert run_build(ref["inputs"], second, *ref["extra"], "--replace").returncode == 0
    assert content_digest(first) == content_digest(second) == ref["digest"]
    assert first.read_bytes() == second.read_bytes() == ref["db"].read_bytes()
