"""Stored values are the cells as given: never trimmed, never guessed empty inside.

References, named beside each check:

* RFC 8259, section 2: whitespace (space, tab, line feed, carriage return) is
  insignificant around a JSON text and its structural characters, never inside
  a string; ``json.loads`` and ``ast.literal_eval`` are the value references.
* The Python Library Reference, ``str.strip`` and ``str.isspace``: strip removes
  the characters ``isspace`` accepts, which include U+00A0 (no-break space) and
  U+3000 (ideographic space), Unicode category Zs.

Trimming guides detection only (blank cells and whole-cell markers are empty;
a cell is nested when its first non-blank character opens a bracket).
"""

from __future__ import annotations

import csv
import importlib
import json
import sqlite3

import pytest

from normalise.decode import decode_column
from normalise.pipeline import build_database
from normalise.read import read

decode_module = importlib.import_module("normalise.decode")  # the package exports a decode() too


def column(cells, forced=None):
    return decode_column("c", list(cells), list(range(2, len(cells) + 2)), "t.csv", forced=forced)


# --- 1. stored values are never trimmed -------------------------------------------------------

def test_python_strip_removes_unicode_spaces():
    # reference: Python Library Reference, str.isspace (category Zs is whitespace) and str.strip
    assert "\u00a0".isspace() and "\u3000".isspace()
    assert "\u00a0x\u3000".strip() == "x"


def test_scalar_cells_keep_their_surrounding_whitespace():
    cells = ["  Ann ", "\tBo", "Cy\u00a0", "\u3000Di\u3000", "Ed", " 7 "]
    col = column(cells)
    assert col.encoding == "scalar"
    assert col.values == cells


def test_blank_cells_and_whole_cell_markers_are_empty():
    # the documented empty markers (decode.EMPTY_MARKERS) apply to whole cells, blank ones included
    cells = ["", "   ", "\u00a0", "\u3000 ", "None", "null", "nan", "[]", "{}", " None ", "text"]
    col = column(cells)
    assert col.values == [None] * 10 + ["text"]


def test_markers_inside_a_value_are_text():
    col = column(["None of these", "null and void", "nan bread", "x"])
    assert col.values == ["None of these", "null and void", "nan bread", "x"]


def test_json_cell_with_whitespace_around_decodes_and_strings_inside_keep_theirs():
    # reference: RFC 8259 section 2 (insignificant whitespace around a JSON text); json.loads
    cells = [' [1] ', '\t["  a ", "b\u00a0", "\u3000c"]\n', '{"k": " v "}', '[" "]']
    col = column(cells)
    assert col.encoding == "json"
    assert col.values == [json.loads(c) for c in cells]
    assert col.values[1] == ["  a ", "b\u00a0", "\u3000c"]


def test_python_literal_strings_inside_keep_their_spaces():
    # reference: ast.literal_eval
    col = column(["  [' a ', 'b ']", "[{'name': ' Ann'}]", "['x']"])
    assert col.encoding == "python-literal"
    assert col.values == [[" a ", "b "], [{"name": " Ann"}], ["x"]]


@pytest.mark.parametrize("fmt,cells", [
    ("json", ['["None", "null", "nan", "", "[]", "{}"]', '{"a": "null", "b": "None"}', '[null, "null"]']),
    ("python-literal", ["['None', 'null', 'nan', '', '[]']", "{'a': 'null', 'b': 'None'}", "[None, 'None']"]),
])
def test_marker_strings_inside_nested_values_are_strings(fmt, cells):
    # reference: json.loads / ast.literal_eval; the empty markers are for whole cells only
    col = column(cells)
    assert col.encoding == fmt
    assert col.values[0] == ["None", "null", "nan", "", "[]", "{}"][:len(col.values[0])]
    assert col.values[1] == {"a": "null", "b": "None"}
    assert col.values[2][1] in ("null", "None") and col.values[2][0] is None


def test_json_lines_string_fields_are_kept_exactly(tmp_path):
    path = tmp_path / "t.jsonl"
    rows = [{"id": 1, "name": "  Ann ", "tags": [" a ", "None"]}, {"id": 2, "name": "\u3000Bo", "tags": ["b"]}]
    path.write_text("".join(json.dumps(r) + "\n" for r in rows), encoding="utf-8")
    decoded = decode_module.decode(read(path))
    assert decoded["name"].values == ["  Ann ", "\u3000Bo"]
    assert decoded["tags"].values == [[" a ", "None"], ["b"]]


def test_build_stores_values_exactly(tmp_path):
    # the database holds what the cells hold: read back with the sqlite3 module
    path = tmp_path / "t.csv"
    rows = [[str(i), f" name {i} ", json.dumps([f" tag{i % 3} ", "None"]), "\u00a0note\u3000"] for i in range(12)]
    with open(path, "w", encoding="utf-8", newline="") as f:
        writer = csv.writer(f)
        writer.writerow(["id", "name", "tags", "note"])
        writer.writerows(rows)
    db = tmp_path / "t.db"
    build_database([str(path)], str(db))
    stored = set()
    with sqlite3.connect(db) as con:
        for (table,) in con.execute("SELECT name FROM sqlite_master WHERE type = 'table'"):
            for row in con.execute(f'SELECT * FROM "{table}"'):
                stored.update(v for v in row if isinstance(v, str))
    assert {r[1] for r in rows} <= stored
    assert {" tag0 ", " tag1 ", " tag2 ", "None"} <= stored
    assert "\u00a0note\u3000" in stored
    assert "name 0" not in stored and "tag0" not in stored
