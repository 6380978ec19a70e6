"""Option values refused before any work, exit codes, pipes and standard input, header-less files.

Every refused value ends the command with exit 2 and one line on stderr naming the option, what it expects and what
it got, and leaves no file behind; the Python API refuses the same values with ``UsageError``. The exports are
invented (a small press that does not exist, and its invented authors).
"""

from __future__ import annotations

import errno
import json
import os
import re
import sqlite3
import subprocess
import sys
import threading
from importlib.metadata import version
from pathlib import Path

import pytest

from normalise import build_database, make_plan, survey
from normalise.cli import exit_code, main
from normalise.model.errors import EXIT_DATA, EXIT_DESTINATION, EXIT_USAGE, LooksHeaderless, UsageError, for_callers
from normalise.infer import Options
from normalise.decode.literal import Limits
from normalise.read import looks_headerless, read

WORKTREE = str(Path(__file__).resolve().parents[1])

BOOKS = (
    'key,title,people\n'
    'k1,Fen Quarterly,"[{""id"": 31, ""name"": ""Ysolde Marrach""}]"\n'
    'k2,Bramble Atlas,"[{""id"": 32, ""name"": ""Tobin Wexcombe""}, {""id"": 31, ""name"": ""Ysolde Marrach""}]"\n'
    'k3,Loam Songs,"[{""id"": 32, ""name"": ""Tobin Wexcombe""}]"\n'
    'k4,Reed Ledger,"[{""id"": 33, ""name"": ""Pell Sarrow""}]"\n'
)

# the same records without their header: the first line is a record
HEADERLESS = BOOKS.split("\n", 1)[1]


@pytest.fixture
def books(tmp_path):
    path = tmp_path / "books.csv"
    path.write_text(BOOKS, encoding="utf-8")
    return path


def run(argv: list[str], capsys) -> tuple[int, str, str]:
    """The command through ``normalise.cli.main``: exit code (argparse's own exits included), stdout, stderr."""
    try:
        code = main(argv)
    except SystemExit as exc:
        code = exc.code
    out, err = capsys.readouterr()
    return code, out, err


def one_line(err: str) -> str:
    assert "Traceback" not in err, err
    lines = err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("normalise: "), err
    return lines[0]


# (option arguments, the line's start after "normalise: ", commands that take the option)
ALL = ("survey", "plan", "build")
REFUSED = [
    (["--encoding", "klingon"], "--encoding klingon: expected a text encoding", ALL),
    # rot13 is a text-to-text transform and base64 a bytes-to-bytes one: codecs.lookup finds both, and their
    # CodecInfo is marked as no text encoding (Python's codecs module documentation, "Text Transforms" and
    # "Binary Transforms")
    (["--encoding", "rot13"], "--encoding rot13: expected a text encoding", ALL),
    (["--encoding", "base64"], "--encoding base64: expected a text encoding", ALL),
    (["--delimiter", "ab"], "--delimiter 'ab': expected one character (or tab), got 2 characters", ALL),
    (["--delimiter="], "--delimiter '': expected one character (or tab), got nothing", ALL),
    # the double quote encloses fields and a line break ends a record (RFC 4180 section 2, from memory)
    (["--delimiter", '"'], "--delimiter '\"': expected a character other than the quote character", ALL),
    (["--delimiter", "\n"], "--delimiter '\\n': expected a character other than a line break", ALL),
    (["--max-depth", "-1"], "--max-depth -1: expected a whole number of at least 1, got -1", ALL),
    (["--max-depth", "0"], "--max-depth 0: expected a whole number of at least 1, got 0", ALL),
    (["--max-depth", "deep"], "--max-depth deep: expected a whole number of at least 1, got text", ALL),
    (["--max-cell-chars", "0"], "--max-cell-chars 0: expected a whole number of at least 1, got 0", ALL),
    (["--chunk-rows", "-5"], "--chunk-rows -5: expected a whole number of at least 0, got -5", ("build",)),
    (["--chunk-rows", "2.5"], "--chunk-rows 2.5: expected a whole number of at least 0", ("build",)),
    (["--threshold", "nan"], "--threshold nan: expected a number from 0 up to (not including) 1, got NaN",
     ("plan", "build")),
    (["--threshold", "7"], "--threshold 7: expected a number from 0 up to (not including) 1, got a number",
     ("plan", "build")),
    (["--threshold", "1"], "--threshold 1: expected a number from 0 up to (not including) 1", ("plan", "build")),
    (["--threshold", "-0.1"], "--threshold -0.1: expected a number from 0 up to", ("plan", "build")),
    (["--threshold", "inf"], "--threshold inf: expected a number from 0 up to", ("plan", "build")),
    (["--duplicates", "keep"], "--duplicates keep: expected one of first, last, refuse", ("plan", "build")),
    (["--how", "outer"], "--how outer: expected one of left, inner, full", ("plan", "build")),
    (["--cardinality", "many"], "--cardinality many: expected one of one-to-one, one-to-many", ("plan", "build")),
]
CASES = [(command, option, message) for option, message, commands in REFUSED for command in commands]


@pytest.mark.parametrize("command, option, message", CASES,
                         ids=[f"{c} {' '.join(o)!r}" for c, o, _ in CASES])
def test_option_value_refused_in_one_line(books, tmp_path, capsys, command, option, message):
    outputs = {"build": ["--db", str(tmp_path / "out.db"), "--manifest", str(tmp_path / "out.json")],
               "plan": ["-o", str(tmp_path / "plan.toml")], "survey": []}[command]
    before = sorted(os.listdir(tmp_path))
    code, out, err = run([command, str(books), *outputs, *option], capsys)
    assert code == EXIT_USAGE, err
    assert one_line(err).startswith(f"normalise: {message}"), err
    assert out == ""
    assert sorted(os.listdir(tmp_path)) == before  # no database, manifest or plan


def test_refusal_through_the_real_process(books, tmp_path):
    env = {**os.environ, "PYTHONPATH": WORKTREE}
    done = subprocess.run([sys.executable, "-m", "normalise", "build", str(books), "--db", str(tmp_path / "o.db"),
                           "--chunk-rows", "-5"], capture_output=True, text=True, env=env, timeout=120)
    assert done.returncode == EXIT_USAGE
    assert done.stderr == "normalise: --chunk-rows -5: expected a whole number of at least 0, got -5\n"
    assert not (tmp_path / "o.db").exists()


def test_argparse_mistakes_are_one_line_too(books, tmp_path, capsys):
    code, _, err = run(["build", str(books)], capsys)
    assert code == EXIT_USAGE and one_line(err).startswith("normalise: the following arguments are required: --db")
    code, _, err = run(["build", str(books), "--db", str(tmp_path / "o.db"), "--no-such-option"], capsys)
    assert code == EXIT_USAGE and "--no-such-option" in one_line(err)
    code, _, err = run(["rebuild", str(books)], capsys)
    assert code == EXIT_USAGE and one_line(err).startswith("normalise: command rebuild: expected one of survey,")
    assert os.listdir(tmp_path) == ["books.csv"]


def test_accepted_values(books, tmp_path, capsys):
    tsv = tmp_path / "books.tsv"
    tsv.write_text("key\ttitle\tpeople\nk1\tFen Quarterly\t[7]\nk2\tBramble Atlas\t[8]\n", encoding="utf-8")
    for n, extra in enumerate((["--delimiter", "tab"], ["--delimiter", "\\t"])):
        code, _, err = run(["build", str(tsv), "--db", str(tmp_path / f"t{n}.db"), "--quiet", *extra], capsys)
        assert code == 0, err
    for n, extra in enumerate((["--chunk-rows", "0"], ["--encoding", "latin-1"], ["--threshold", "0"],
                               ["--max-depth", "1", "--max-cell-chars", "1"])):
        code, _, err = run(["build", str(books), "--db", str(tmp_path / f"b{n}.db"), "--quiet", *extra], capsys)
        assert code == 0, err


# (keyword arguments of build_database, the message's start)
API_REFUSED = [
    ({"encoding": "klingon"}, "--encoding klingon: expected a text encoding"),
    ({"encoding": "rot13"}, "--encoding rot13: expected a text encoding"),
    ({"delimiter": "ab"}, "--delimiter 'ab': expected one character"),
    ({"delimiter": '"'}, "--delimiter '\"': expected a character other than the quote character"),
    ({"chunk_rows": -5}, "--chunk-rows -5: expected a whole number of at least 0"),
    ({"limits": Limits(max_depth=-1)}, "--max-depth -1: expected a whole number of at least 1"),
    ({"limits": Limits(max_cell_chars=0)}, "--max-cell-chars 0: expected a whole number of at least 1"),
    ({"options": Options(violation_threshold=float("nan"))}, "--threshold nan: expected a number from 0"),
    ({"options": Options(violation_threshold=7)}, "--threshold 7: expected a number from 0"),
    ({"options": Options(duplicates="keep")}, "--duplicates keep: expected one of first, last, refuse"),
]


@pytest.mark.parametrize("kwargs, message", API_REFUSED, ids=[m.split(":")[0] for _, m in API_REFUSED])
def test_api_refuses_the_same_values(books, tmp_path, kwargs, message):
    """The message names the Python parameter where the command line names its option (issue 17)."""
    message = for_callers(message)
    with pytest.raises(UsageError) as info:
        build_database([str(books)], str(tmp_path / "out.db"), manifest_path=str(tmp_path / "m.json"), **kwargs)
    assert str(info.value).startswith(message)
    plan_kwargs = {k: v for k, v in kwargs.items() if k != "chunk_rows"}
    if plan_kwargs:
        with pytest.raises(UsageError, match="^" + re.escape(message.split(":")[0])):
            make_plan([str(books)], str(tmp_path / "plan.toml"), **plan_kwargs)
    survey_kwargs = {k: v for k, v in kwargs.items() if k in ("encoding", "delimiter", "limits")}
    if survey_kwargs:
        with pytest.raises(UsageError, match="^" + re.escape(message.split(":")[0])):
            survey([str(books)], **survey_kwargs)
    assert os.listdir(tmp_path) == ["books.csv"]


def test_api_and_cli_give_the_same_line_each_in_its_own_terms(books, tmp_path, capsys):
    code, _, err = run(["build", str(books), "--db", str(tmp_path / "o.db"), "--encoding", "rot13"], capsys)
    with pytest.raises(UsageError) as info:
        build_database([str(books)], str(tmp_path / "o.db"), encoding="rot13")
    assert one_line(err).startswith("normalise: --encoding rot13: ")
    assert str(info.value) == for_callers(one_line(err).removeprefix("normalise: "))
    assert str(info.value).startswith("encoding rot13: ")


# --- exit codes ---------------------------------------------------------------------------------

def test_data_problem_exits_1_usage_exits_2(tmp_path, capsys):
    repeated = tmp_path / "books.csv"
    repeated.write_text(BOOKS + 'k2,Bramble Atlas Again,"[{""id"": 32, ""name"": ""Tobin Wexcombe""}]"\n',
                        encoding="utf-8")
    code, _, err = run(["build", str(repeated), "--db", str(tmp_path / "r.db"), "--key", "books=key",
                        "--duplicates", "refuse", "--quiet"], capsys)
    assert code == EXIT_DATA and "--duplicates" in one_line(err)
    code, _, err = run(["build", str(tmp_path / "nosuch.csv"), "--db", str(tmp_path / "n.db")], capsys)
    assert code == EXIT_USAGE and "no such file" in one_line(err)
    code, _, err = run(["build", str(tmp_path), "--db", str(tmp_path / "n.db")], capsys)
    assert code == EXIT_USAGE and "is a directory" in one_line(err)
    array = tmp_path / "array.json"
    array.write_text('[{"a": 1}]', encoding="utf-8")
    code, _, err = run(["build", str(array), "--db", str(tmp_path / "a.db")], capsys)
    assert code == EXIT_DATA and "JSON array" in one_line(err)
    assert sorted(os.listdir(tmp_path)) == ["array.json", "books.csv"]


def test_exit_code_of_each_error():
    from normalise.build.append import SchemaMismatch
    from normalise.build import DuplicateNaturalKey, TooManyColumns
    from normalise.check import IntegrityError
    from normalise.join import CardinalityViolation
    from normalise.infer.planfile import InvalidPlan
    from normalise.prove import LossDetected
    from normalise.write import DestinationExists

    for usage in (UsageError("x"), InvalidPlan("x"), SchemaMismatch("x"), DestinationExists("x"),
                  FileNotFoundError(errno.ENOENT, "No such file or directory", "out/x.db"),
                  PermissionError(errno.EACCES, "Permission denied", "/x.db")):
        assert exit_code(usage) == EXIT_USAGE, usage
    for data in (LossDetected("x"), IntegrityError("x"), DuplicateNaturalKey("x"), CardinalityViolation("x"),
                 TooManyColumns("x")):
        assert exit_code(data) == EXIT_DATA, data
    # the call and the data were right, the destination could not take the outputs
    from normalise.outputs import DestinationBusy, OutputNotWritten
    from normalise.write import DestinationFailed, DestinationLocked

    for destination in (DestinationBusy("x"), DestinationLocked("x"), DestinationFailed("x"), OutputNotWritten("x"),
                        OSError(errno.ENOSPC, "No space left on device"), sqlite3.DatabaseError("x")):
        assert exit_code(destination) == EXIT_DESTINATION, destination
    assert len({EXIT_DATA, EXIT_USAGE, EXIT_DESTINATION}) == 3


def test_version_and_exit_codes_in_help():
    env = {**os.environ, "PYTHONPATH": WORKTREE}
    done = subprocess.run([sys.executable, "-m", "normalise", "--version"], capture_output=True, text=True, env=env,
                          timeout=120)
    assert done.returncode == 0 and done.stdout.strip() == f"normalise {version('normalise-exports')}"
    for command in ([], ["build"]):
        done = subprocess.run([sys.executable, "-m", "normalise", *command, "--help"], capture_output=True,
                              text=True, env=env, timeout=120)
        assert done.returncode == 0
        assert "exit codes:" in done.stdout and "  2  usage:" in done.stdout, done.stdout
        assert "  1  data:" in done.stdout and "  3  destination:" in done.stdout, done.stdout


# --- pipes, FIFOs and standard input ---------------------------------------------------------------

def dump(db: Path) -> list[str]:
    with sqlite3.connect(db) as con:
        return list(con.iterdump())


def manifest_counts(path: Path) -> dict:
    m = json.loads(path.read_text(encoding="utf-8"))
    return {t["name"]: t["rows"] for t in m["tables"]}


@pytest.mark.parametrize("chunk_rows", ["5000", "2"])
def test_fifo_gives_the_same_database_as_the_file(books, tmp_path, capsys, chunk_rows):
    code, _, err = run(["build", str(books), "--db", str(tmp_path / "file.db"), "--quiet",
                        "--chunk-rows", chunk_rows], capsys)
    assert code == 0, err
    piped = tmp_path / "piped"
    piped.mkdir()
    fifo = piped / "books.csv"  # the same name, so the same table names
    os.mkfifo(fifo)

    def write():
        with open(fifo, "w", encoding="utf-8") as f:
            f.write(BOOKS)

    writer = threading.Thread(target=write, daemon=True)
    writer.start()
    code, _, err = run(["build", str(fifo), "--db", str(tmp_path / "fifo.db"), "--manifest",
                        str(tmp_path / "fifo.json"), "--quiet", "--chunk-rows", chunk_rows], capsys)
    writer.join(timeout=30)
    assert code == 0, err
    assert not writer.is_alive()
    # the same rows; name_map names each input as given
    as_file = [line.replace(str(fifo), str(books)) for line in dump(tmp_path / "fifo.db")]
    assert as_file == dump(tmp_path / "file.db")
    assert any(str(fifo) in line for line in dump(tmp_path / "fifo.db"))
    manifest = json.loads((tmp_path / "fifo.json").read_text(encoding="utf-8"))
    assert str(fifo) in json.dumps(manifest)  # named as given, not as the copy
    assert "normalise-input-" not in json.dumps(manifest)


@pytest.mark.parametrize("name", ["-", "/dev/stdin"])
def test_standard_input(tmp_path, name):
    env = {**os.environ, "PYTHONPATH": WORKTREE}
    done = subprocess.run([sys.executable, "-m", "normalise", "build", name, "--db", str(tmp_path / "in.db"),
                           "--manifest", str(tmp_path / "in.json"), "--quiet"],
                          input=BOOKS.encode("utf-8"), capture_output=True, env=env, timeout=300)
    assert done.returncode == 0, done.stderr.decode()
    counts = manifest_counts(tmp_path / "in.json")
    assert counts["stdin"] == BOOKS.count("\n") - 1
    with sqlite3.connect(tmp_path / "in.db") as con:
        assert [r[0] for r in con.execute('SELECT title FROM stdin ORDER BY 1')] == \
            ["Bramble Atlas", "Fen Quarterly", "Loam Songs", "Reed Ledger"]


def test_standard_input_survey(tmp_path):
    env = {**os.environ, "PYTHONPATH": WORKTREE}
    done = subprocess.run([sys.executable, "-m", "normalise", "survey", "-", "--json"], input=BOOKS.encode(),
                          capture_output=True, env=env, timeout=300)
    assert done.returncode == 0, done.stderr.decode()
    assert json.loads(done.stdout)["files"][0]["rows"] == 4


# --- header-less files -----------------------------------------------------------------------------

def test_headerless_file_warned_about(tmp_path, capsys):
    path = tmp_path / "shelf.csv"
    path.write_text(HEADERLESS, encoding="utf-8")
    code, _, err = run(["build", str(path), "--db", str(tmp_path / "s.db"), "--quiet"], capsys)
    assert code == 0
    warning = one_line(err)
    assert warning.startswith(f"normalise: warning: {path}: the first row looks like data") and \
        "--no-header" in warning, warning
    code, out, err = run(["survey", str(path)], capsys)
    assert code == 0 and f"normalise: warning: {path}" in one_line(err)


def test_file_with_a_header_gets_no_warning(books, tmp_path, capsys):
    code, _, err = run(["build", str(books), "--db", str(tmp_path / "b.db"), "--quiet"], capsys)
    assert code == 0 and err == ""


@pytest.mark.parametrize("chunk_rows", ["5000", "2", "1"])
def test_no_header_loads_every_line(tmp_path, capsys, chunk_rows):
    path = tmp_path / "shelf.csv"
    path.write_text(HEADERLESS, encoding="utf-8")
    lines = len(path.read_text(encoding="utf-8").splitlines())
    code, _, err = run(["build", str(path), "--db", str(tmp_path / "s.db"), "--manifest", str(tmp_path / "s.json"),
                        "--quiet", "--no-header", "--chunk-rows", chunk_rows], capsys)
    assert code == 0 and err == "", err
    assert manifest_counts(tmp_path / "s.json")["shelf"] == lines == 4
    with sqlite3.connect(tmp_path / "s.db") as con:
        columns = [r[1] for r in con.execute('PRAGMA table_info("shelf")')]
        assert {"column_1", "column_2"} <= set(columns), columns
        assert con.execute("SELECT column_2 FROM shelf ORDER BY shelf_sk").fetchone() == ("Fen Quarterly",)


def test_no_header_reads_the_first_row_as_a_record(tmp_path):
    path = tmp_path / "codes.csv"
    path.write_text("\n1,kiln\n2,loom\n", encoding="utf-8")  # a blank line first: the first record is on line 2
    export = read(path, header=False)
    assert export.columns == ["column_1", "column_2"]
    assert export.cells == {"column_1": ["1", "2"], "column_2": ["kiln", "loom"]} and export.lines == [2, 3]
    one = tmp_path / "one.csv"
    one.write_text('7,"never closed\n', encoding="utf-8")
    with pytest.raises(Exception, match="never closed"):
        read(one, header=False)


HEADERS = [
    # (header, rows below, looks like data)
    (["1", "2.5", "-3"], [], True),  # every cell a number
    (["2024-05-01", "17"], [["2024-05-02", "18"]], True),  # no text, each of the kind below
    (["9", "Fen Quarterly", '["maps"]'], [["10", "Loam Songs", '["essays"]']], True),  # a list over lists
    (["id", "title", "tags"], [["1", "Fen Quarterly", '["maps"]']], False),
    (["id", "2024"], [["1", "5"]], False),  # a year among names is a name
    (["title", "people"], [["Fen Quarterly", "Ysolde Marrach"]], False),
    (["Fen Quarterly", "Ysolde Marrach"], [["Loam Songs", "Tobin Wexcombe"]], False),  # text: cannot be told
    (["", ""], [["1", "2"]], False),
]


@pytest.mark.parametrize("header, rows, expected", HEADERS, ids=[",".join(h) for h, _, _ in HEADERS])
def test_looks_headerless(header, rows, expected):
    assert looks_headerless(header, rows) is expected


def test_headerless_warning_from_python(tmp_path):
    path = tmp_path / "shelf.csv"
    path.write_text(HEADERLESS, encoding="utf-8")
    with pytest.warns(LooksHeaderless, match="shelf.csv: the first row looks like data"):
        export = read(path)
    assert export.number_of_records == 3 and any("--no-header" in w for w in export.warnings)
