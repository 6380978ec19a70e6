"""Stored values are the cells as given: never trimmed, never guessed empty inside, always given back.

References, named beside each check:

* RFC 8259, section 2: whitespace (space, tab, line feed, carriage return) is
  insignificant around a JSON text and its structural characters, never inside
  a string; ``json.loads`` and ``ast.literal_eval`` are the value references.
* The Python Library Reference, ``str.strip`` and ``str.isspace``: strip removes
  the characters ``isspace`` accepts, which include U+00A0 (no-break space) and
  U+3000 (ideographic space), Unicode category Zs.
* ``csv.reader`` (the standard library) for how a quoted delimited cell reads.
* The demo catalogue (``demo/generate.py``) and tzdata's ``zone1970.tab`` (PyPI
  package ``tzdata``, data in the public domain) for the round trip of
  delimited cells.

Trimming guides detection only (blank cells and whole-cell markers are empty;
a cell is nested when its first non-blank character opens a bracket).
"""

from __future__ import annotations

import csv
import importlib
import importlib.resources
import json
import sqlite3

import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from demo.generate import generate
from normalise.decode import (NAME_SUFFIXES, DecodedColumn, decode_column, detect_separator, join_delimited,
                              split_delimited)
from normalise.pipeline import build_database
from normalise.read import read
from normalise.survey import render, survey

decode_module = importlib.import_module("normalise.decode")  # the package exports a decode() too

BOUNDED = settings(max_examples=300, deadline=None, derandomize=True,
                   suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])


def column(cells, forced=None):
    return decode_column("c", list(cells), list(range(2, len(cells) + 2)), "t.csv", forced=forced)


def given_back(col: DecodedColumn, i: int) -> str:
    """The cell a delimited column gives back for row i: its layout entry, else its values joined."""
    if col.layout[i] is not None:
        return col.layout[i]
    return "" if col.values[i] is None else join_delimited(col.values[i], col.join_separator)


def assert_given_back(col: DecodedColumn, cells: list) -> None:
    assert col.format == "delimited"
    assert len(col.layout) == len(col.values) == len(cells)
    for i, cell in enumerate(cells):
        if isinstance(cell, str):
            assert given_back(col, i) == cell, (i, cell, col.values[i], col.layout[i])
        # the common case needs no layout entry: the cell is its values joined
        if col.values[i] is not None and cell == col.join_separator.join(col.values[i]):
            assert col.layout[i] is None


# --- 1. stored values are never trimmed -------------------------------------------------------

def test_python_strip_removes_unicode_spaces():
    # reference: Python Library Reference, str.isspace (category Zs is whitespace) and str.strip
    assert "\u00a0".isspace() and "\u3000".isspace()
    assert "\u00a0x\u3000".strip() == "x"


def test_scalar_cells_keep_their_surrounding_whitespace():
    cells = ["  Ann ", "\tBo", "Cy\u00a0", "\u3000Di\u3000", "Ed", " 7 "]
    col = column(cells)
    assert col.format == "text"
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
    assert col.format == "json"
    assert col.values == [json.loads(c) for c in cells]
    assert col.values[1] == ["  a ", "b\u00a0", "\u3000c"]


def test_python_literal_strings_inside_keep_their_spaces():
    # reference: ast.literal_eval
    col = column(["  [' a ', 'b ']", "[{'name': ' Ann'}]", "['x']"])
    assert col.format == "python-literal"
    assert col.values == [[" a ", "b "], [{"name": " Ann"}], ["x"]]


@pytest.mark.parametrize("fmt,cells", [
    ("json", ['["None", "null", "nan", "", "[]", "{}"]', '{"a": "null", "b": "None"}', '[null, "null"]']),
    ("python-literal", ["['None', 'null', 'nan', '', '[]']", "{'a': 'null', 'b': 'None'}", "[None, 'None']"]),
])
def test_marker_strings_inside_nested_values_are_strings(fmt, cells):
    # reference: json.loads / ast.literal_eval; the empty markers are for whole cells only
    col = column(cells)
    assert col.format == fmt
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


# --- 2. delimited lists decided by evidence -------------------------------------------------------

EMOTICONS = [":)", ";)", ":(", ":D", ";-)", ":-(", ";P", ":o", ":)", ";)"]


def test_emoticons_stay_text():
    col = column(EMOTICONS * 3)
    assert col.format == "text" and col.separator is None
    assert col.values == EMOTICONS * 3  # ";)" is ";)", never ")"
    assert detect_separator(EMOTICONS) is None


def test_text_with_a_winking_face_stays_text():
    cells = ["Great book ;)", "Loved it", "Not for me ;-)", "Fine", "Superb ;)"] * 4
    assert detect_separator(cells) is None
    assert column(cells).values == cells


def test_empty_pieces_are_evidence_against():
    assert detect_separator(["a;;b", ";c", "d;", "e;;", "f", "g;"] * 3) is None


NAMES = ["Ann Lee, Bo Chen", "Cy Young, Di Park, Ed Moss", "Flo Ng, Gus Hale", "Hal Roe",
         "Ivy Dunn, Jo Marsh, Kit Lane, Lou Bell", "Max Hart, Ned Ford", "Oz Kerr, Pam Shaw, Quin Tate",
         "Rex Ash, Sue Bond", "Tom Cole, Una Dix", "Vic Gray, Wes Holt, Xia Lin"]


def test_person_names_that_never_repeat_are_a_list():
    col = column(NAMES)
    assert col.format == "delimited" and col.separator == ","
    assert col.values[0] == ["Ann Lee", "Bo Chen"] and col.values[3] == ["Hal Roe"]
    assert col.join_separator == ", "
    assert all(entry is None for entry in col.layout)


def test_pairs_of_names_are_a_list():
    cells = [f"{a} Lee, {b} Chen" for a, b in zip("Ann Bo Cy Di Ed Flo Gus Hal Ivy Jo".split(),
                                                  "Kit Lou Max Ned Oz Pam Quin Rex Sue Tom".split())]
    col = column(cells)
    assert col.format == "delimited" and all(len(v) == 2 for v in col.values)


def test_file_extensions_are_a_list():
    cells = [".csv;.tsv", ".json;.jsonl;.ndjson", ".txt", ".md;.rst", ".xml;.xsd;.xsl", ".py;.pyi",
             ".c;.h", ".toml;.ini;.cfg", ".png;.jpg"]
    col = column(cells)
    assert col.format == "delimited" and col.separator == ";"
    assert col.values[1] == [".json", ".jsonl", ".ndjson"] and col.values[2] == [".txt"]


def test_keywords_that_rarely_repeat_are_a_list():
    cells = ["machine learning, statistics", "graph theory, combinatorics, topology", "algebra",
             "number theory, cryptography", "fluid dynamics, turbulence, chaos", "optics, lasers",
             "genomics, proteomics", "ecology, climate models, oceanography"]
    col = column(cells)
    assert col.format == "delimited" and col.values[0] == ["machine learning", "statistics"]


@pytest.mark.parametrize("cells", [
    ["The Orchard, Revisited", "A Chapel in Brackenhythe", "Winter Ferry", "Salt, Smoke and Stone",
     "The Quiet Bindery", "Letters, Mostly Unsent", "Harbour Lights", "Small Hours"],
    ["The Orchard, Revisited", "Letters, Mostly Unsent", "Salt, Smoke", "Dusk, Again", "Home, Finally"],
    ["Hello, world", "A sentence, with commas", "Plain"],
    ["We came, we saw, and we left.", "It rained, then it stopped.", "Nothing happened.",
     "She said no, twice, and meant it.", "Quiet, for once."],
    ["Lee, Ann", "Chen, Bo", "Young, Cy", "Park, Di", "Moss, Ed", "Ng, Flo"],
])
def test_prose_with_commas_stays_text(cells):
    col = column(cells)
    assert col.format == "text", col.values
    assert col.values == cells


# --- 3. name suffixes rejoin the value before them -------------------------------------------------

def test_a_name_suffix_stays_with_its_name():
    assert split_delimited("Carl Dole, Jr., Ann Lee", ",") == ["Carl Dole, Jr.", "Ann Lee"]
    # the separator text between them exactly as the cell has it
    assert split_delimited("Carl Dole ,Jr.,Ann Lee", ",") == ["Carl Dole ,Jr.", "Ann Lee"]
    assert split_delimited("Carl Dole,\u00a0Jr, PhD, Ann Lee", ",") == ["Carl Dole,\u00a0Jr, PhD", "Ann Lee"]
    assert split_delimited("Acme Widgets, Inc., Bolt Ltd.", ",") == ["Acme Widgets, Inc.", "Bolt Ltd."]


def test_suffixes_are_listed_once():
    # the list lives in decode.NAME_SUFFIXES; each spelling, with or without its full stop, rejoins
    for suffix in NAME_SUFFIXES:
        for written in (suffix, suffix + "."):
            assert split_delimited(f"Carl Dole, {written}, Ann Lee", ",") == [f"Carl Dole, {written}", "Ann Lee"]


def test_codes_take_no_suffix():
    # "MD" is Moldova and "CO" Colombia among country codes (ISO 3166-1), not a doctor and a company
    assert split_delimited("RO,MD,UA", ",") == ["RO", "MD", "UA"]
    assert split_delimited("PA,CO", ",") == ["PA", "CO"]
    col = column(["RO,MD", "PA,CO", "US,CA", "RO", "MD"])
    assert col.rejoined == 0 and col.ambiguity == []


def test_a_quoted_suffix_is_a_value_of_its_own():
    # reference: csv.reader (a quoted field is one value)
    assert split_delimited('Carl Dole, "Jr.", Ann Lee', ",") == ["Carl Dole", "Jr.", "Ann Lee"]


def test_rejoined_values_are_counted_and_reported(tmp_path, capsys):
    cells = ["Carl Dole, Jr., Ann Lee", "Ann Lee, Bo Chen", "Bo Chen, Dee Fox, Sr., Carl Dole, Jr.",
             "Dee Fox, Ann Lee", "Ed Moss, PhD", "Ann Lee"]
    col = column(cells)
    assert col.format == "delimited"
    assert col.values[2] == ["Bo Chen", "Dee Fox, Sr.", "Carl Dole, Jr."]
    assert col.rejoined == 4  # one per value holding a suffix
    assert all("kept with the value before it" in a for a in col.ambiguity)
    assert_given_back(col, cells)

    path = tmp_path / "authors.csv"
    with open(path, "w", encoding="utf-8", newline="") as f:
        writer = csv.writer(f)
        writer.writerow(["id", "authors"])
        writer.writerows([i, c] for i, c in enumerate(cells))
    entry = {c["name"]: c for c in survey([str(path)])["files"][0]["columns"]}["authors"]
    assert entry["rejoined"] == 4 and entry["ambiguous"] is True
    assert "4 values kept a name suffix" in render(survey([str(path)]))


def test_a_column_without_suffixes_reports_none_rejoined(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("id,tags\n" + "".join(f"{i},poetry|essays\n" for i in range(5)), encoding="utf-8")
    entry = {c["name"]: c for c in survey([str(path)])["files"][0]["columns"]}["tags"]
    assert entry["rejoined"] == 0 and "ambiguous" not in entry


# --- 4. every delimited cell can be given back exactly --------------------------------------------

def test_layout_records_what_joining_cannot_give_back():
    cells = ["poetry, essays", "drama", '"essays, letters", poetry', " poetry ,essays", "None", "", None,
             "poetry,, essays", "poetry, essays,"]
    col = column(cells, forced=("delimited", ","))
    assert col.join_separator == ", "
    assert col.layout == [None, None, '"essays, letters", poetry', " poetry ,essays", "None", None, None,
                          "poetry,, essays", "poetry, essays,"]
    assert col.values[2] == ["essays, letters", "poetry"]
    assert_given_back(col, cells)


def test_join_separator_defaults_to_the_separator():
    col = column(["a|b", "c|d|e", "f"])
    assert col.separator == col.join_separator == "|"
    assert column(["x", "y"]).join_separator is None  # not delimited


_PIECES = st.sampled_from(["a", "Bo", "Jr.", "II", "MD", " ", "  ", "\u00a0", "\t", ",", "|", '"', '""', ";",
                           "\n", "x y", "None", ""])


@BOUNDED
@given(st.lists(st.lists(_PIECES, max_size=8).map("".join), min_size=1, max_size=6), st.sampled_from([",", "|"]))
@example(['"a, b" ,Jr.', "Bo,"], ",")
@example(['a\n"b|c', '""|"', " a | b "], "|")
def test_every_cell_is_given_back(cells, sep):
    col = column(cells, forced=("delimited", sep))
    if col.format == "empty":  # no cell held a value
        assert col.values == [None] * len(cells)
        return
    for i, cell in enumerate(cells):
        if col.values[i] is not None:
            assert all(v and v == v.strip() for v in col.values[i])  # pieces are stripped, none empty
        assert given_back(col, i) == cell


def test_demo_delimited_cells_are_given_back(tmp_path):
    generate(str(tmp_path), size=200)
    found = 0
    for name in ("titles.csv", "contributions.csv"):
        export = read(tmp_path / name)
        for col in decode_module.decode(export).values():
            if col.format == "delimited":
                found += 1
                assert_given_back(col, export.cells[col.name])
    assert found  # the demo's formats column


def test_zone1970_delimited_cells_are_given_back(tmp_path):
    # tzdata (PyPI, Apache-2.0; data public domain), read as tests/test_build_open_dataset.py reads it
    text = (importlib.resources.files("tzdata") / "zoneinfo" / "zone1970.tab").read_text(encoding="utf-8")
    rows = [line.split("\t") for line in text.splitlines() if line and not line.startswith("#")]
    path = tmp_path / "zone1970.tsv"
    with open(path, "w", encoding="utf-8", newline="") as f:
        f.write("countries\tcoordinates\ttz\tcomments\n")
        for row in rows:
            f.write("\t".join(row + [""] * (4 - len(row))) + "\n")
    export = read(path)
    countries = decode_module.decode(export)["countries"]
    assert countries.separator == countries.join_separator == ","
    assert_given_back(countries, export.cells["countries"])
    assert countries.values == [row[0].split(",") for row in rows]  # reference: the file's header, column 1
    assert countries.rejoined == 0


# --- the quoted-cell reader against csv.reader ------------------------------------------------------

@BOUNDED
@given(st.lists(st.sampled_from(['"', "|", " ", "a", "b", "\n", "\r", "\x00", "\t", '""']), max_size=12).map("".join))
@example('a| "b|c" x|d')
@example('"unclosed|d')
@example("a|b\n")
@example('"a"\r\n')
def test_quoted_cells_read_as_csv_reader_reads_them(text):
    # reference: csv.reader with the dialect decode has always used for quoted cells
    try:
        want = next(csv.reader([text], delimiter="|", skipinitialspace=True), [])
    except csv.Error:
        want = None
    fields = importlib.import_module("normalise.decode.delimited")._csv_fields(text, "|")
    if want is None:
        assert fields is None
        return
    assert fields is not None and [value for _, value, _ in fields] == want
    if text.strip("\r\n"):
        assert "|".join(raw for raw, _, _ in fields) == text  # the raw fields are the cell, cut at separators
