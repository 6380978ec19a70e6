"""Progress for every phase on a terminal, and nothing elsewhere or with --quiet.

The terminal is a real pseudo-terminal (the Python library reference: ``pty.openpty``, and ``termios``'
``TIOCSWINSZ`` to give it a size), so the command sees what it sees in a shell; the bars are tqdm's. The data is
the invented demo (``demo/generate.py``).
"""

from __future__ import annotations

import csv
import fcntl
import io
import os
import pty
import struct
import subprocess
import sys
import termios
from pathlib import Path

import pytest

from normalise.pipeline import build_database
from normalise.progress import Phases
from tests.test_postgresql import pg, pg_url, schema  # noqa: F401 (fixtures: a real server, a schema of its own)

ROOT = Path(__file__).resolve().parent.parent
SQLITE_PHASES = ["reading", "decoding", "joining", "planning", "building", "indexing", "checking", "outputs"]


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    where = tmp_path_factory.mktemp("progress")
    subprocess.run([sys.executable, str(ROOT / "demo" / "generate.py"), str(where), "--size", "400"], check=True,
                   capture_output=True)
    return [str(where / "titles.csv"), str(where / "contributions.csv")]


def _on_a_terminal(args: list[str], cwd) -> tuple[int, str]:
    """Run the command with stdout and stderr on a pseudo-terminal of 40 rows and 120 columns; its output."""
    leader, follower = pty.openpty()
    fcntl.ioctl(follower, termios.TIOCSWINSZ, struct.pack("HHHH", 40, 120, 0, 0))
    process = subprocess.Popen([sys.executable, "-m", "normalise", *args], stdout=follower, stderr=follower,
                               stdin=subprocess.DEVNULL, cwd=cwd, env={**os.environ, "PYTHONPATH": str(ROOT)})
    os.close(follower)
    out = b""
    while True:
        try:
            chunk = os.read(leader, 65536)
        except OSError:  # the terminal is closed once the process has exited (EIO on Linux)
            break
        if not chunk:
            break
        out += chunk
    os.close(leader)
    return process.wait(timeout=120), out.decode("utf-8", "replace")


def test_every_phase_is_shown_on_a_terminal(demo, tmp_path):
    code, out = _on_a_terminal(["build", *demo, "--db", "out.db", "--report", "r.html", "--parquet", "pq"],
                               tmp_path)
    assert code == 0, out[-2000:]
    shown = [name for name in SQLITE_PHASES if f"\r{name:<12}" in out]
    assert shown == SQLITE_PHASES
    assert "100%" in out and "records" in out  # bars with their totals; the building phase counts records


def test_quiet_shows_nothing_on_a_terminal(demo, tmp_path):
    code, out = _on_a_terminal(["build", *demo, "--db", "out.db", "--quiet"], tmp_path)
    assert code == 0 and out == ""


def test_nothing_when_not_a_terminal(demo, tmp_path):
    done = subprocess.run([sys.executable, "-m", "normalise", "build", *demo, "--db", "out.db"], cwd=tmp_path,
                          capture_output=True, text=True, env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert done.returncode == 0
    assert not any(name in done.stderr for name in SQLITE_PHASES), done.stderr


def test_python_callers_choose(demo, tmp_path):
    calls = []
    build_database(demo, tmp_path / "a.db", progress=lambda records, chars: calls.append((records, chars)))
    with open(demo[0], newline="", encoding="utf-8") as f:
        rows = sum(1 for _ in csv.reader(f)) - 1  # the main file's data rows (csv, the Python library reference)
    assert calls and calls == sorted(calls) and calls[-1][0] == rows
    shown = io.StringIO()
    build_database(demo, tmp_path / "b.db", progress=Phases(demo, stream=shown, enabled=True))
    assert all(f"{name:<12}" in shown.getvalue() for name in ["reading", "building", "checking"])


def test_a_bad_progress_is_refused(demo, tmp_path):
    from normalise.model.errors import UsageError

    with pytest.raises(UsageError, match="progress="):
        build_database(demo, tmp_path / "c.db", progress="yes")


def test_postgresql_phases(demo, pg, pg_url, schema):
    shown = io.StringIO()
    build_database(demo, pg_url, schema=schema, progress=Phases(demo, stream=shown, enabled=True))
    text = shown.getvalue()
    assert all(f"{name:<12}" in text for name in ["reading", "building", "writing", "indexing", "checking"]), text
