"""Broken and hostile exports: nothing crashes, nothing is lost, nothing from the data runs.

One test, run once per case folder of ``tests/corpus/`` (each holds its inputs, or
says how to generate them, and ``expect.json``; ``tests/corpus/README.md`` lists
the keys). Every case runs ``normalise survey``, ``normalise survey --json`` and
``normalise build`` through ``normalise.cli.main`` in one child process, in a
folder of its own, with a time limit and an address-space limit, its peak
memory measured, and a strict UTF-8 stdout like a real pipe's. Then, for every case:

* the exit code is the expected one (0; 1 or 2 with a one-line ``normalise: ...``
  message: 1 for a file whose content cannot be read, 2 for one that is not there); no traceback on stderr;
* every row read is accounted for: the manifest's ``rows_read = records_loaded +
  rows_set_aside + rows_rejected`` for each input, nested elements reconcile,
  ``integrity.reconciled`` is true, ``PRAGMA foreign_key_check`` is empty and
  ``PRAGMA integrity_check`` is ok; the survey's rows are its records plus its
  rejected rows;
* every quarantined cell and rejected row names its place (file, line, column,
  message), and the expected ones are there;
* every name in the database is ``[a-z_][a-z0-9_]*`` (names.py maps names from
  the data; SQLAlchemy quotes them), the database holds exactly the tables and
  views of the manifest, and no trigger: no name from the data changed the SQL;
* nothing from the data ran: the marker file a hostile cell would create is absent.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import signal
import sqlite3
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

CORPUS = Path(__file__).parent / "corpus"


def _case(folder: Path):
    """A case folder as a test parameter; ``known_bug`` in its expect.json marks a documented failure."""
    bug = json.loads((folder / "expect.json").read_text("utf-8")).get("known_bug")
    return pytest.param(folder.name, marks=pytest.mark.xfail(reason=bug, strict=False) if bug else ())


CASES = [_case(p.parent) for p in sorted(CORPUS.glob("*/expect.json"))]
ROOT = Path(__file__).resolve().parent.parent

TIME_LIMIT = 60  # seconds for the three commands of one case
ADDRESS_SPACE = 8 << 30  # bytes: a runaway allocation fails in the child instead of taking the machine
MAX_RSS_MB = 1536  # peak resident memory of one case, unless its expect.json says otherwise
SQL_NAME = re.compile(r"[a-z_][a-z0-9_]*")

# The child: survey (plain and --json) and build, each through normalise.cli.main, with
# stdout a strict UTF-8 stream (as a pipe's is) and stderr as Python sets it up.
DRIVER = r"""
import contextlib, io, json, sys, time, traceback
spec = json.loads(sys.argv[1])
from normalise.cli import main
results = {}
for name, argv in spec["runs"]:
    raw_out, raw_err = io.BytesIO(), io.BytesIO()
    out = io.TextIOWrapper(raw_out, encoding="utf-8", errors="strict", write_through=True)
    err = io.TextIOWrapper(raw_err, encoding="utf-8", errors="backslashreplace", write_through=True)
    started = time.monotonic()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            code = main(argv)
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else 2
        except BaseException:
            traceback.print_exc()
            code = 1
    results[name] = {"code": code, "stdout": raw_out.getvalue().decode("utf-8", "backslashreplace"),
                     "stderr": raw_err.getvalue().decode("utf-8", "backslashreplace"),
                     "seconds": round(time.monotonic() - started, 3)}
with open(spec["result"], "w", encoding="utf-8") as f:
    json.dump(results, f)
"""


def _limit_child() -> None:
    import resource
    resource.setrlimit(resource.RLIMIT_AS, (ADDRESS_SPACE, ADDRESS_SPACE))


def run_commands(runs: list, cwd: Path, timeout: float = TIME_LIMIT) -> tuple[dict, float, float]:
    """Run the commands in one child; returns their results, the wall time and the peak RSS (MiB)."""
    result = cwd / "result.json"
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]),
               PYTHONHASHSEED="0", PYTHONIOENCODING="utf-8")
    started = time.monotonic()
    proc = subprocess.Popen([sys.executable, "-c", DRIVER, json.dumps({"runs": runs, "result": str(result)})],
                            cwd=cwd, env=env, stdout=subprocess.DEVNULL, stderr=open(cwd / "child.err", "wb"),
                            preexec_fn=_limit_child)
    timer = threading.Timer(timeout, lambda: os.kill(proc.pid, signal.SIGKILL))
    timer.start()
    try:
        _, status, usage = os.wait4(proc.pid, 0)
    finally:
        timer.cancel()
    proc.returncode = os.waitstatus_to_exitcode(status)
    elapsed = time.monotonic() - started
    child_err = (cwd / "child.err").read_text("utf-8", "replace")
    assert proc.returncode != -signal.SIGKILL, f"killed after {timeout} s (time limit): {runs}"
    assert proc.returncode == 0 and result.exists(), f"the child died ({proc.returncode}): {child_err[-3000:]}"
    return json.loads(result.read_text("utf-8")), elapsed, usage.ru_maxrss / 1024


# --- inputs made at test time (big ones are never committed) -------------------------------

def _deep_csv(case_dir: Path, work: Path, spec: dict) -> list[str]:
    depth = spec.get("depth", 100_000)
    with open(work / "deep.csv", "w", encoding="utf-8", newline="") as f:
        f.write("id,as_json,as_python,objects\n")
        f.write('1,"[1]","[\'a\']","[{""k"": 1}]"\n')
        f.write('2,"' + "[" * depth + "]" * depth + '","' + "(" * depth + ")" * depth + '","'
                + '{""k"": ' * depth + "1" + "}" * depth + '"\n')
        f.write('3,"[2]","[\'b\']","' + "[" * depth + '"\n')  # deep and never closed
        f.write('4,"[3]","[\'c\']","[{""k"": 2}]"\n')
    return ["deep.csv"]


def _deep_jsonl(case_dir: Path, work: Path, spec: dict) -> list[str]:
    depth = spec.get("depth", 100_000)
    with open(work / "deep.jsonl", "w", encoding="utf-8") as f:
        f.write('{"id": 1, "v": [1], "t": "[1]"}\n')
        f.write('{"id": 2, "v": ' + "[" * depth + "]" * depth + ', "t": "[2]"}\n')  # the line: rejected
        f.write('{"id": 3, "v": [3], "t": "' + "[" * depth + "]" * depth + '"}\n')  # deep text in a string
        f.write('{"id": 4, "v": [4], "t": "[4]"}\n')
    return ["deep.jsonl"]


def _huge_cell(case_dir: Path, work: Path, spec: dict) -> list[str]:
    over, under = spec.get("over_mb", 40), spec.get("under_mb", 12)
    with open(work / "huge.csv", "w", encoding="utf-8", newline="") as f:
        f.write("id,note,detail\n")
        f.write('1,short,"{""size"": ""small""}"\n')
        f.write('2,"' + "x" * (over << 20) + '","{""size"": ""big""}"\n')  # over --max-cell-chars (16 Mi)
        f.write('3,short,"{""size"": ""' + "y" * (under << 20) + '""}"\n')  # under it: decoded, stored whole
        f.write('4,"' + "[" + "1," * (over << 19) + '1]","{""size"": ""small""}"\n')  # a huge list, over
    return ["huge.csv"]


def _wide(case_dir: Path, work: Path, spec: dict) -> list[str]:
    n, rows = spec.get("columns", 5000), spec.get("rows", 20)
    with open(work / "wide.csv", "w", encoding="utf-8", newline="") as f:
        f.write("id," + ",".join(f"c{i}" for i in range(n)) + "\n")
        for r in range(rows):
            f.write(f"{r}," + ",".join(str(r * i) for i in range(n)) + "\n")
    return ["wide.csv"]


def _wide_object(case_dir: Path, work: Path, spec: dict) -> list[str]:
    n, rows = spec.get("keys", 3000), spec.get("rows", 5)
    with open(work / "wide.jsonl", "w", encoding="utf-8") as f:
        for r in range(rows):
            f.write(json.dumps({"id": r, "obj": {f"k{i}": r * i for i in range(n)}}) + "\n")
    return ["wide.jsonl"]


def _many_keys_jsonl(case_dir: Path, work: Path, spec: dict) -> list[str]:
    n = spec.get("keys", 3000)
    with open(work / "keys.jsonl", "w", encoding="utf-8") as f:
        for r in range(3):
            f.write(json.dumps({"id": r, **{f"field {i}": i for i in range(n)}}) + "\n")
    return ["keys.jsonl"]


def _late_values(case_dir: Path, work: Path, spec: dict) -> list[str]:
    """Values after the first 5,000 records (the sample the model is inferred from) that do not fit it."""
    n = spec.get("rows", 6000)
    with open(work / "late.csv", "w", encoding="utf-8", newline="") as f:
        f.write("id,n,people\n")
        for i in range(n):
            f.write(f'{i},{i},"[{{""id"": {i % 50}, ""n"": {i}}}]"\n')
        big = "123456789012345678901234567890"
        f.write(f'{n},{big},"[{{""id"": 7, ""n"": {big}}}]"\n')
        f.write(f'{n + 1},abc,"[{{""id"": ""abc"", ""n"": 1}}]"\n')
        f.write(f'{n + 2},1e999,"[{{""id"": 99999999999999999999999, ""n"": 1e999}}]"\n')
        f.write(f'{n + 3},-1,"[{{""id"": 1.5, ""n"": 2}}, {{""id"": 8, ""n"": 3}}]"\n')
    return ["late.csv"]


def _late_entity_attribute(case_dir: Path, work: Path, spec: dict) -> list[str]:
    n = spec.get("rows", 6000)
    with open(work / "late.csv", "w", encoding="utf-8", newline="") as f:
        f.write("id,people\n")
        for i in range(n):
            f.write(f'{i},"[{{""id"": {i % 50}, ""age"": {i % 50 + 20}}}]"\n')
        f.write(f'{n},"[{{""id"": 77, ""age"": 123456789012345678901234567890}}]"\n')
        f.write(f'{n + 1},"[{{""id"": 78, ""age"": ""old""}}]"\n')
    return ["late.csv"]


def _missing(case_dir: Path, work: Path, spec: dict) -> list[str]:
    (work / "a_folder.csv").mkdir()
    return [spec.get("path", "no_such_file.csv")]


GENERATORS = {"deep_csv": _deep_csv, "deep_jsonl": _deep_jsonl, "huge_cell": _huge_cell, "wide": _wide, "wide_object": _wide_object,
              "many_keys_jsonl": _many_keys_jsonl, "missing": _missing,
              "late_values": _late_values, "late_entity_attribute": _late_entity_attribute}


def inputs_for(case_dir: Path, expect: dict, work: Path) -> list[str]:
    """Copy (or generate) the case's inputs into the work folder; returns their names in order."""
    if "generate" in expect:
        spec = expect["generate"]
        return GENERATORS[spec["kind"]](case_dir, work, spec)
    names = expect.get("files") or sorted(p.name for p in case_dir.iterdir()
                                          if p.name != "expect.json" and p.is_file())
    renamed = expect.get("rename", {})
    out = []
    for name in names:
        target = renamed.get(name, name)
        shutil.copyfile(case_dir / name, work / target)
        out.append(target)
    for name in expect.get("aside", []):  # files an option names (a plan), not inputs
        shutil.copyfile(case_dir / name, work / name)
    return out


def check_inputs_unchanged(case_dir: Path, expect: dict, work: Path) -> None:
    """No output replaced an input or a file an option read: each is byte for byte its case file."""
    if "generate" in expect:
        return
    renamed = expect.get("rename", {})
    for name in (expect.get("files") or sorted(p.name for p in case_dir.iterdir()
                                               if p.name != "expect.json" and p.is_file())) + expect.get("aside", []):
        target = work / renamed.get(name, name)
        assert target.read_bytes() == (case_dir / name).read_bytes(), f"{target.name} was changed by the run"


# --- checks ---------------------------------------------------------------------------------

def one_line_message(stderr: str) -> str:
    """The one ``normalise: ...`` line of a refusal (a ``  hint: ...`` line may follow it)."""
    lines = [line for line in stderr.splitlines() if line.strip()]
    hints = lines[1:] == [] or (len(lines) == 2 and lines[1].startswith("  hint: "))
    assert lines and lines[0].startswith("normalise: ") and hints, f"expected one message line: {stderr!r}"
    return lines[0]


def check_survey(results: dict, expect: dict) -> None:
    want = expect.get("survey_exit", expect.get("exit", 0))
    for name in ("survey", "survey_json"):
        r = results[name]
        assert "Traceback" not in r["stderr"], r["stderr"][-3000:]
        assert r["code"] == want, f"{name} exited {r['code']}, expected {want}: {r['stderr'][-2000:]}"
        if want != 0:
            assert expect.get("message", "") in one_line_message(r["stderr"])
    if want != 0:
        return
    survey = json.loads(results["survey_json"]["stdout"])
    for f in survey["files"]:
        assert f["rows"] == f["records"] + f["rejected_rows"], f
    # the survey lists the first few rejected rows and quarantined cells of each file and column, and counts all
    rejected = {r["line"] for f in survey["files"] for r in f.get("rejected", [])}
    complete = all(len(f.get("rejected", [])) == f["rejected_rows"] for f in survey["files"])
    quarantined = {(q["line"], c["name"]) for f in survey["files"] for c in f["columns"]
                   for q in c.get("quarantine", [])}
    listed = {c["name"]: len(c.get("quarantine", [])) == c.get("quarantined", 0)
              for f in survey["files"] for c in f["columns"]}
    for r in expect.get("rejected", []):
        if complete:
            assert r["line"] in rejected, f"survey: line {r['line']} not among the rejected rows {sorted(rejected)}"
    for q in expect.get("quarantined", []):
        if "." not in q.get("column", ".") and not q.get("build_only") and listed.get(q["column"]):
            assert (q["line"], q["column"]) in quarantined, f"survey: {q} not in {sorted(quarantined)}"
    total = sum(f.get("quarantined", 0) for f in survey["files"])
    if "quarantined_count" in expect and not expect.get("survey_counts_differ"):
        assert total == expect["quarantined_count"], f"survey: {total} cells quarantined"
    for text in expect.get("survey_says", []):
        assert text in results["survey"]["stdout"], f"survey does not say {text!r}"


def check_names(db: sqlite3.Connection, manifest: dict) -> None:
    objects = db.execute("SELECT type, name, tbl_name FROM sqlite_master").fetchall()
    assert not [o for o in objects if o[0] == "trigger"], objects
    tables = {name for kind, name, _ in objects if kind == "table"}
    views = {name for kind, name, _ in objects if kind == "view"}
    planned = {t["name"] for t in manifest["tables"]}
    assert tables == planned, (sorted(tables), sorted(planned))
    assert views == {v["name"] for v in manifest["views"]}, (views, manifest["views"])
    for kind, name, _ in objects:
        if not name.startswith("sqlite_autoindex_"):
            assert SQL_NAME.fullmatch(name), f"{kind} name {name!r} not mapped to [a-z0-9_]"
    for name in tables | views:
        try:  # a view is compiled only when used: a broken one shows here
            db.execute(f'SELECT * FROM "{name}" LIMIT 1').fetchall()
        except sqlite3.Error as exc:
            raise AssertionError(f"{name} cannot be read: {exc}") from None
        for column in db.execute("SELECT name FROM pragma_table_info(?)", (name,)):
            assert SQL_NAME.fullmatch(column[0]), f"column {name}.{column[0]!r} not mapped to [a-z0-9_]"


def check_build(results: dict, expect: dict, work: Path, inputs: list[str]) -> None:
    r = results["build"]
    want = expect.get("exit", 0)
    assert "Traceback" not in r["stderr"], r["stderr"][-3000:]
    assert r["code"] == want, f"build exited {r['code']}, expected {want}: {r['stderr'][-2000:]}"
    db_path, manifest_path = work / "out.db", work / "manifest.json"
    if want != 0:
        assert expect.get("message", "") in one_line_message(r["stderr"])
        assert not db_path.exists(), "a failed build left a database behind"
        assert not list(work.glob("out.db.partial-*")), "a failed build left its temporary file behind"
        return
    assert not list(work.glob("out.db.partial-*"))
    manifest = json.loads(manifest_path.read_text("utf-8"))
    integrity = manifest["integrity"]
    assert integrity["reconciled"] is True and integrity["foreign_key_violations"] == 0, integrity
    # the lossless proof (prove.py): every loaded cell rebuilt from the tables equals the decoded input
    assert integrity["proof"] == "exact", integrity
    assert integrity["cells_rebuilt_exactly"] == integrity["cells_checked"], integrity
    assert integrity["integrity_check"] == "ok", integrity
    for i in manifest["inputs"]:
        accounted = i["records_loaded"] + i["rows_set_aside"] + i["rows_rejected"] + i.get("rows_unmatched", 0)
        assert i["rows_read"] == accounted, i
        if "elements_decoded" in i:
            assert i["elements_decoded"] == i["elements_written"] + i["elements_quarantined"], i
    main_input = manifest["inputs"][0]
    for key, value in expect.get("rows", {}).items():
        assert main_input[key] == value, f"{key}: {main_input[key]}, expected {value} ({main_input})"
    db = sqlite3.connect(db_path)
    try:
        assert db.execute("PRAGMA foreign_key_check").fetchall() == []
        assert db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        check_names(db, manifest)
        for t in manifest["tables"]:
            count = db.execute(f'SELECT count(*) FROM "{t["name"]}"').fetchone()[0]
            assert count == t["rows"], (t["name"], count, t["rows"])
        quarantined = db.execute("SELECT file, line, column_name, position, excerpt, message "
                                 "FROM quarantined_cells").fetchall()
        assert len(quarantined) >= manifest["cells_quarantined"]
        for file, line, column, position, excerpt, message in quarantined:
            assert file and line >= 1 and column and message, (file, line, column, message)
            assert Path(file).name in inputs, f"quarantined cell names {file!r}, not an input {inputs}"
        rejected = db.execute("SELECT file, line, reason, raw FROM rejected_rows").fetchall()
        assert len(rejected) == sum(i["rows_rejected"] for i in manifest["inputs"])
        for file, line, reason, raw in rejected:
            assert file and line >= 1 and reason, (file, line, reason)
        for q in expect.get("quarantined", []):
            hits = [m for f, line, column, _, _, m in quarantined
                    if line == q["line"] and column == q.get("column", column) and q.get("message", "") in m]
            assert hits, f"expected quarantined {q}; got {[(l, c, m) for _, l, c, _, _, m in quarantined]}"
        if "quarantined_count" in expect:
            assert len(quarantined) == expect["quarantined_count"], quarantined
        # records past the sample the plan was made again for (pipeline._build, "widening"): the manifest says so
        said = [(w["line"], w["column"], w["contradicted"]) for w in manifest["widened"] if "contradicted" in w]
        assert said == [(w["line"], w["column"], w["contradicted"]) for w in expect.get("widened", [])], said
        for q in expect.get("rejected", []):
            hits = [reason for _, line, reason, _ in rejected if line == q["line"] and q.get("reason", "") in reason]
            assert hits, f"expected rejected {q}; got {[(l, reason) for _, l, reason, _ in rejected]}"
        for check in expect.get("values", []):
            got = [list(row) for row in db.execute(check["sql"])]
            assert got == check["equals"], f"{check['sql']}: {got!r}, expected {check['equals']!r}"
        for table, columns in expect.get("columns", {}).items():
            got = [c[1] for c in db.execute("SELECT * FROM pragma_table_info(?)", (table,))]
            assert got == columns, f"{table}: columns {got}, expected {columns}"
    finally:
        db.close()


@pytest.mark.parametrize("case", CASES)
def test_corpus_case(case, tmp_path):
    case_dir = CORPUS / case
    expect = json.loads((case_dir / "expect.json").read_text("utf-8"))
    work = tmp_path / "work"
    work.mkdir()
    inputs = inputs_for(case_dir, expect, work)
    args = expect.get("args", [])
    runs = [["survey", ["survey", *inputs, *args]],
            ["survey_json", ["survey", "--json", *inputs, *args]],
            ["build", ["build", *inputs, "--db", "out.db", "--manifest", "manifest.json", "--quiet",
                       *args, *expect.get("build_args", [])]]]
    results, elapsed, peak_mb = run_commands(runs, work, expect.get("time_limit", TIME_LIMIT))
    print(f"{case}: {elapsed:.1f} s, peak {peak_mb:.0f} MiB")
    assert elapsed < expect.get("time_limit", TIME_LIMIT)
    assert peak_mb < expect.get("max_rss_mb", MAX_RSS_MB), f"peak memory {peak_mb:.0f} MiB"
    check_survey(results, expect)
    check_build(results, expect, work, inputs)
    check_inputs_unchanged(case_dir, expect, work)
    marker = expect.get("marker")
    if marker:  # a hostile cell would have created it, in the folder the commands ran in or here
        for folder in (work, case_dir, Path.cwd(), ROOT):
            assert not (folder / marker).exists(), f"{folder / marker} exists: code from the data ran"
