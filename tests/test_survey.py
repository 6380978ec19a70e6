"""Tests for the survey (normalise/survey.py) and the ``normalise survey`` command.

The main subject is the seeded demo export of demo/generate.py. Expected facts
are computed in the test from the files themselves (csv, ast and json modules)
or taken from planted.json, never from the survey's own bookkeeping.
"""

import ast
import contextlib
import csv
import io
import json
import statistics
from pathlib import Path

import pytest

from demo.generate import generate
from normalise.cli import main
from normalise.survey import survey

NESTED = {
    # column: (encoding, shape, separator)
    "contributors": ("python-literal", "object-list", None),
    "production_team": ("json", "object-list", None),
    "subjects": ("json", "scalar-list", None),
    "formats": ("delimited", "scalar-list", "|"),
}
TITLE_TYPES = {"title_key": "text", "title": "text", "imprint": "text",
               "release_date": "date", "page_count": "integer", "price": "real"}


# --- fixtures and helpers ------------------------------------------------------------

@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The demo export: (directory, planted facts, [titles path, contributions path])."""
    out = tmp_path_factory.mktemp("lanternfield")
    planted = generate(out, size=200, seed=7)
    paths = [str(out / planted["files"]["titles"]), str(out / planted["files"]["contributions"])]
    return out, planted, paths


def run_cli(capsys, *argv) -> tuple[int, str, str]:
    code = main(["survey", *argv])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def cli_json(capsys, *argv) -> dict:
    code, out, err = run_cli(capsys, *argv, "--json")
    assert code == 0, err
    return json.loads(out)


@pytest.fixture(scope="module")
def demo_json(demo):
    """The survey JSON printed by the command for both demo files."""
    _out, _planted, paths = demo
    buffer = io.StringIO()
    with contextlib.redirect_stdout(buffer):
        assert main(["survey", *paths, "--json"]) == 0
    return json.loads(buffer.getvalue())


def columns_of(file_entry: dict) -> dict:
    return {c["name"]: c for c in file_entry["columns"]}


def file_entry(result: dict, name: str) -> dict:
    [entry] = [f for f in result["files"] if Path(f["path"]).name == name]
    return entry


def raw_rows(path) -> list[dict]:
    """Data rows of a CSV as dicts, with their line (cells hold no newlines: line = row + 1)."""
    # reference: Python's csv module
    with open(path, encoding="utf-8", newline="") as handle:
        rows = list(csv.reader(handle))
    header = rows[0]
    return [{"line": n, **dict(zip(header, row))} for n, row in enumerate(rows[1:], start=2)]


def parse_cell(column: str, text: str):
    """Parse a demo cell the way a consumer would (raises on malformed cells)."""
    if column == "contributors":
        return ast.literal_eval(text)  # reference: Python's ast.literal_eval
    if column == "formats":
        return text.split("|")
    return json.loads(text)  # reference: RFC 8259, Python's json.loads


def independent_lists(path, planted: dict, column: str) -> list[list]:
    """The well-formed, non-empty lists of a column, parsed in the test."""
    bad = {(c["line"], c["column"]) for c in planted["malformed_cells"]}
    out = []
    for row in raw_rows(path):
        text = row[column]
        if not text or (row["line"], column) in bad:
            continue
        value = parse_cell(column, text)
        if value:  # an empty list is an empty cell, not a list of length 0
            out.append(value)
    return out


def report_blocks(report: str) -> dict:
    """Split the plain report into {file name: {column: [lines]}}."""
    blocks: dict = {}
    current_file = current_column = None
    for line in report.splitlines():
        if not line.startswith(" "):
            current_file = Path(line.split("  (")[0]).name
            blocks[current_file] = {}
        elif line.startswith("  ") and not line.startswith("   ") and not line.startswith("  warning"):
            current_column = line.strip().split(":")[0]
            blocks[current_file][current_column] = [line]
        else:
            blocks[current_file][current_column].append(line)
    return blocks


# --- the demo export -----------------------------------------------------------------

def test_survey_json_structure(demo_json, demo):
    _out, planted, paths = demo
    assert isinstance(demo_json, dict) and isinstance(demo_json["files"], list)
    assert [f["path"] for f in demo_json["files"]] == paths
    for entry in demo_json["files"]:
        assert isinstance(entry["path"], str)
        assert isinstance(entry["rows"], int)
        # rows = data rows, header excluded, counted in the test
        assert entry["rows"] == len(raw_rows(entry["path"]))
        assert entry["rows"] == planted["rows"][Path(entry["path"]).name]
        assert entry["rejected_rows"] == 0
        assert isinstance(entry["columns"], list)
        for column in entry["columns"]:
            assert isinstance(column["name"], str)
            assert isinstance(column["format"], str)
            assert isinstance(column["shape"], str)
            assert isinstance(column["quarantined"], int)


def test_survey_function_and_cli_agree(demo, demo_json):
    _out, _planted, paths = demo
    # The command's JSON is the function's result, serialised.
    assert json.loads(json.dumps(survey(paths), default=str)) == demo_json


def test_nested_columns_encoding_and_shape(demo_json):
    columns = columns_of(file_entry(demo_json, "contributions.csv"))
    assert list(columns) == ["title_key", *NESTED]
    assert columns["title_key"]["format"] == "text"
    for name, (encoding, shape, separator) in NESTED.items():
        assert (columns[name]["format"], columns[name]["shape"]) == (encoding, shape), name
        assert columns[name].get("separator") == separator, name
        assert not columns[name].get("ambiguous"), name


def test_titles_columns_are_scalars_with_types(demo_json):
    columns = columns_of(file_entry(demo_json, "titles.csv"))
    assert {name: (c["format"], c["shape"]) for name, c in columns.items()} == {
        name: ("text", "scalar") for name in TITLE_TYPES}
    assert {name: c["type"] for name, c in columns.items()} == TITLE_TYPES
    assert all(c["quarantined"] == 0 for c in columns.values())


def test_quarantined_cells_are_exactly_the_planted_malformed_cells(demo_json, demo):
    _out, planted, _paths = demo
    found = set()
    for entry in demo_json["files"]:
        for column in entry["columns"]:
            listed = column.get("quarantine", [])
            assert column["quarantined"] == len(listed)  # all shown: fewer than five each
            found |= {(Path(entry["path"]).name, column["name"], q["line"]) for q in listed}
        assert entry["quarantined"] == sum(c["quarantined"] for c in entry["columns"])
    expected = {(c["file"], c["column"], c["line"]) for c in planted["malformed_cells"]}
    assert len(expected) == 4
    assert found == expected


def test_list_lengths_match_independent_count(demo_json, demo):
    out, planted, _paths = demo
    path = out / "contributions.csv"
    columns = columns_of(file_entry(demo_json, "contributions.csv"))
    for name in NESTED:
        lengths = [len(v) for v in independent_lists(path, planted, name)]
        expected = {"min": min(lengths), "median": statistics.median(lengths), "max": max(lengths)}
        assert columns[name]["list_length"] == pytest.approx(expected), name


def test_fill_rate_matches_independent_count(demo_json, demo):
    out, planted, _paths = demo
    path = out / "contributions.csv"
    rows = len(raw_rows(path))
    columns = columns_of(file_entry(demo_json, "contributions.csv"))
    for name in NESTED:
        filled = len(independent_lists(path, planted, name))
        assert columns[name]["fill_rate"] == pytest.approx(filled / rows, abs=1e-4), name


def test_object_list_keys_and_identity(demo_json, demo):
    out, planted, _paths = demo
    path = out / "contributions.csv"
    columns = columns_of(file_entry(demo_json, "contributions.csv"))
    for name in ("contributors", "production_team"):
        objects = [obj for value in independent_lists(path, planted, name) for obj in value]
        column = columns[name]
        assert column["objects"] == len(objects)
        key_order = list(dict.fromkeys(k for obj in objects for k in obj))
        assert [k["name"] for k in column["keys"]] == key_order
        assert {k["path"] for k in column["keys"]} == {f"{name}[].{k}" for k in key_order}
        person = {k["name"]: k for k in column["keys"]}["person_id"]
        assert person["types"] == {"integer": len(objects)}
        candidates = column["identity_candidates"]
        assert candidates[0]["field"] == "person_id"
        assert candidates[0]["distinct"] == len({obj["person_id"] for obj in objects})
        assert "name" in candidates[0]["determines"]


def test_plain_report(demo, capsys):
    _out, planted, paths = demo
    code, report, _err = run_cli(capsys, *paths)
    assert code == 0
    blocks = report_blocks(report)
    assert set(blocks) == {"titles.csv", "contributions.csv"}
    contributions = blocks["contributions.csv"]
    for name, (encoding, shape, separator) in NESTED.items():
        head = contributions[name][0]
        assert head.startswith(f"  {name}: {encoding} {shape}")
        if separator:
            assert f"separator {separator!r}" in head
    for name in ("contributors", "production_team"):
        assert any("identity: person_id" in line for line in contributions[name])
    for cell in planted["malformed_cells"]:
        assert any(f"quarantined line {cell['line']}" in line
                   for line in blocks[cell["file"]][cell["column"]]), cell
    for name, kind in TITLE_TYPES.items():
        assert blocks["titles.csv"][name][0].startswith(f"  {name}: {kind},")
    first_lines = [line for line in report.splitlines() if not line.startswith(" ")]
    assert "202 rows: 202 records, 0 rejected; 4 cells quarantined" in first_lines[1]


# --- --decode overrides --------------------------------------------------------------

def test_decode_override_python_literal(demo, capsys):
    _out, planted, paths = demo
    result = cli_json(capsys, paths[1], "--decode", "production_team=python-literal")
    column = columns_of(result["files"][0])["production_team"]
    assert column["format"] == "python-literal"
    assert column["shape"] == "object-list"
    # Both planted production_team cells (a Python repr, a trailing comma) are
    # valid Python literals (reference: Python's ast.literal_eval).
    for cell in planted["malformed_cells"]:
        if cell["column"] == "production_team":
            row = raw_rows(paths[1])[cell["line"] - 2]
            ast.literal_eval(row["production_team"])
    assert column["quarantined"] == 0
    # other columns are untouched
    assert columns_of(result["files"][0])["subjects"]["format"] == "json"


def test_decode_override_text(demo, capsys):
    _out, _planted, paths = demo
    result = cli_json(capsys, paths[1], "--decode", "formats=text")
    column = columns_of(result["files"][0])["formats"]
    assert (column["format"], column["shape"], column["type"]) == ("text", "scalar", "text")
    assert "separator" not in column


def test_decode_override_delimiter(demo, capsys):
    _out, _planted, paths = demo
    result = cli_json(capsys, paths[1], "--decode", "formats=delimited:;")
    column = columns_of(result["files"][0])["formats"]
    assert column["format"] == "delimited"
    assert column["separator"] == ";"
    # no cell holds ";", so every list has one element
    assert column["list_length"] == {"min": 1, "median": 1, "max": 1}


def test_decode_overrides_combine(demo, capsys):
    _out, _planted, paths = demo
    result = cli_json(capsys, paths[1], "--decode", "formats=text",
                      "--decode", "production_team=python-literal")
    columns = columns_of(result["files"][0])
    assert columns["formats"]["format"] == "text"
    assert columns["production_team"]["format"] == "python-literal"


@pytest.mark.parametrize("spec", ["formats", "formats=yaml", "formats=json:;"])
def test_bad_decode_option_is_a_usage_error(demo, capsys, spec):
    _out, _planted, paths = demo
    code, out, err = run_cli(capsys, paths[1], "--decode", spec)
    assert code == 2
    assert out == ""
    assert "--decode" in err


def test_missing_file_is_an_error_not_a_traceback(tmp_path, capsys):
    code, _out, err = run_cli(capsys, str(tmp_path / "missing.csv"))
    assert code == 2
    assert "no such file" in err


# --- mixed formats and delimited ambiguity -------------------------------------------

def test_mixed_column_reports_counts_per_format(tmp_path, capsys):
    path = tmp_path / "mixed.csv"
    with open(path, "w", encoding="utf-8", newline="") as handle:
        writer = csv.writer(handle)
        writer.writerow(["id", "meta"])
        for i in range(20):
            value = [{"k": i, "v": None, "ok": True}]
            # half JSON (null, true), half Python repr (None, True)
            writer.writerow([i, json.dumps(value) if i % 2 else repr(value)])
    text = path.read_text(encoding="utf-8")
    assert text.count("null") == 10 and text.count("None") == 10
    result = cli_json(capsys, str(path))
    column = columns_of(result["files"][0])["meta"]
    assert column["format"] == "mixed"
    assert column["format_counts"] == {"json": 10, "python-literal": 10}
    assert column["quarantined"] == 0
    assert column["shape"] == "object-list"
    keys = {k["name"]: k for k in column["keys"]}
    assert keys["ok"]["types"] == {"boolean": 20}
    assert keys["v"]["types"] == {"null": 20}
    code, report, _err = run_cli(capsys, str(path))
    assert "meta: mixed object-list" in report
    assert "mixed formats: json 10, python-literal 10" in report


def test_delimited_ambiguity_is_reported(tmp_path, capsys):
    path = tmp_path / "authors.csv"
    values = ["Bob Dole, Jr., Ann Lee", "Ann Lee, Cy Young", "Cy Young, Bob Dole", "Ann Lee",
              "Cy Young, Ann Lee, Bob Dole"]
    with open(path, "w", encoding="utf-8", newline="") as handle:
        writer = csv.writer(handle)
        writer.writerow(["id", "authors"])
        for i in range(20):
            writer.writerow([i, values[i % len(values)]])
    result = cli_json(capsys, str(path))
    column = columns_of(result["files"][0])["authors"]
    assert column["format"] == "delimited"
    assert column["separator"] == ","
    assert column["ambiguous"] is True
    ambiguous_lines = [i + 2 for i in range(20) if i % len(values) == 0]
    assert column["ambiguity"]
    for message in column["ambiguity"]:
        assert "Jr." in message
        assert int(message.split(":")[0].removeprefix("line ")) in ambiguous_lines
    code, report, _err = run_cli(capsys, str(path))
    assert "ambiguous separator" in report


def test_unambiguous_delimited_column_is_not_flagged(tmp_path, capsys):
    path = tmp_path / "tags.csv"
    path.write_text("id,tags\n" + "".join(f'{i},"poetry, essays, drama"\n' for i in range(10)),
                    encoding="utf-8")
    column = columns_of(cli_json(capsys, str(path))["files"][0])["tags"]
    assert column["format"] == "delimited" and column["separator"] == ","
    assert "ambiguous" not in column


# --- bytes that are not valid in the file's encoding ----------------------------------

def test_undecodable_bytes_are_reported_not_crashed_on(tmp_path, capsys):
    # "Café" in cp1252 read as UTF-8: the byte 0xE9 is not valid UTF-8, in the
    # header and in a cell. The survey must print (JSON and plain) without a
    # UnicodeEncodeError on a strict UTF-8 stdout (capsys is one).
    path = tmp_path / "latin.csv"
    path.write_bytes("id;café\n1;Café\n2;plain\n".encode("cp1252"))
    result = cli_json(capsys, str(path))
    [entry] = result["files"]
    name = entry["columns"][1]["name"]
    assert name == "caf\\xe9"  # an undecodable byte in a name is written as an escape (a name must be text)
    assert any("not valid in the file's encoding" in w for w in entry["warnings"])
    assert entry["columns"][1]["quarantined"] == 1
    assert entry["columns"][1]["quarantine"][0]["line"] == 2
    assert "encoding" in entry["columns"][1]["quarantine"][0]["message"]
    code, report, err = run_cli(capsys, str(path))
    assert code == 0, err
    assert "quarantined line 2" in report
    # with the right encoding there is nothing to quarantine
    result = cli_json(capsys, str(path), "--encoding", "cp1252")
    assert [c["name"] for c in result["files"][0]["columns"]] == ["id", "café"]
    assert result["files"][0]["quarantined"] == 0
