"""Tests for normalise/read.py: the reading contract.

Every expected line number is computed in the test from the bytes written
(counting newlines before the row's first character), not taken from the
reader. Line numbers are the lines a person sees: the line on which a row
starts, the header being line 1.
"""

import csv
import io
import json

import pytest

from normalise.decode import decode
from normalise.model.errors import UnreadableFile
from normalise.read import detect_delimiter, read, unique_header
from normalise.survey import survey


# --- helpers -------------------------------------------------------------------------

def write(tmp_path, name: str, data) -> str:
    """Write text (as UTF-8) or bytes exactly as given; return the path."""
    path = tmp_path / name
    path.write_bytes(data.encode("utf-8") if isinstance(data, str) else data)
    return str(path)


def line_of(text: str, marker: str) -> int:
    """The 1-based line on which ``marker`` first occurs in ``text``."""
    # A line ends at "\n" (LF or CRLF) -- common practice, as a text editor counts.
    return text[:text.index(marker)].count("\n") + 1


def check_reconciles(export) -> None:
    """rows_read = records + rejected rows, and every column has a cell per record."""
    assert export.rows_read == export.number_of_records + len(export.rejected)
    assert len(export.lines) == export.number_of_records
    for name in export.columns:
        assert len(export.cells[name]) == export.number_of_records


# --- delimiters ----------------------------------------------------------------------

ROWS = [
    ["id", "name", "tags", "note"],
    ["1", "Smith, J.", "a;b", "x|y"],
    ["2", "Lee; Ann", "c,d", "plain"],
    ["3", "Ng|Bo", "e", "tab\tinside"],
    ["4", "Okafor", "f,g;h|i", ""],
]


@pytest.mark.parametrize("delimiter,suffix", [
    (",", ".csv"), ("\t", ".tsv"), ("\t", ".csv"), (";", ".csv"), ("|", ".csv"), ("|", ".txt"),
])
def test_delimiter_is_detected(tmp_path, delimiter, suffix):
    # Cells contain the other candidate delimiters unquoted, so only the right
    # one splits every row into the same number of fields.
    buffer = io.StringIO()
    # reference: Python's csv.writer (minimal quoting, as RFC 4180 section 2 allows)
    csv.writer(buffer, delimiter=delimiter, lineterminator="\n").writerows(ROWS)
    path = write(tmp_path, "export" + suffix, buffer.getvalue())
    export = read(path)
    assert export.delimiter == delimiter
    assert export.kind == ("tsv" if delimiter == "\t" else "csv")
    assert export.columns == ROWS[0]
    for column, name in enumerate(ROWS[0]):
        assert export.cells[name] == [row[column] for row in ROWS[1:]]
    assert export.lines == [2, 3, 4, 5]
    assert export.rejected == []
    check_reconciles(export)


def test_delimiter_option_overrides_detection(tmp_path):
    path = write(tmp_path, "t.csv", "a;b;c,d\n1;2;3,4\n")
    assert read(path).columns == ["a", "b", "c,d"]
    assert read(path, delimiter=",").columns == ["a;b;c", "d"]


def test_detect_delimiter_ignores_delimiters_inside_quotes():
    # reference: RFC 4180 section 2 rule 6 (fields with delimiters are enclosed in quotes)
    assert detect_delimiter('a;b;c\n1;"x,y,z,w";3\n2;"p,q";4\n') == ";"
    assert detect_delimiter('a,b\n1,"x;y;z"\n') == ","


# --- encodings and line endings ------------------------------------------------------

def test_utf8_without_bom(tmp_path):
    path = write(tmp_path, "t.csv", "id,name\n1,Brøndavik\n2,苔原 翠鈴\n")
    export = read(path)
    assert export.columns == ["id", "name"]
    assert export.cells["name"] == ["Brøndavik", "苔原 翠鈴"]


def test_utf8_with_bom(tmp_path):
    # reference: the Unicode standard, section 23.8 (U+FEFF as UTF-8 signature EF BB BF)
    path = write(tmp_path, "t.csv", b"\xef\xbb\xbf" + "id,name\n1,Ilséa\n".encode("utf-8"))
    export = read(path)
    assert export.columns == ["id", "name"]  # no "\ufeffid"
    assert export.header_names["id"] == "id"
    assert export.cells["name"] == ["Ilséa"]
    assert export.lines == [2]


def test_utf8_with_bom_tsv_and_jsonl(tmp_path):
    bom = b"\xef\xbb\xbf"
    tsv = read(write(tmp_path, "t.tsv", bom + "id\tname\n1\tJoviña\n".encode("utf-8")))
    assert tsv.columns == ["id", "name"] and tsv.cells["name"] == ["Joviña"]
    jsonl = read(write(tmp_path, "t.jsonl", bom + '{"id": 1, "name": "Joviña"}\n'.encode("utf-8")))
    assert jsonl.columns == ["id", "name"] and jsonl.cells["name"] == ["Joviña"]
    assert jsonl.rejected == []


@pytest.mark.parametrize("encoding,text", [
    ("cp1252", "Café Øre, 5 €"),  # € is 0x80 in cp1252 (Windows-1252 code page table)
    ("latin-1", "Café Øre, naïve"),  # ISO/IEC 8859-1
])
def test_other_encoding_by_option(tmp_path, encoding, text):
    data = "id;name\n1;{}\n2;plain\n".format(text).encode(encoding)
    with pytest.raises(UnicodeDecodeError):
        data.decode("utf-8")  # the file really is not UTF-8
    path = write(tmp_path, "t.csv", data)
    export = read(path, encoding=encoding)
    assert export.encoding == encoding
    assert export.delimiter == ";"
    assert export.cells["name"] == [text, "plain"]


def test_wrong_encoding_does_not_crash_and_is_quarantined(tmp_path):
    path = write(tmp_path, "t.csv", "id;name\n1;Café\n".encode("cp1252"))
    export = read(path)  # UTF-8 by default: the byte 0xE9 is not valid UTF-8
    assert export.number_of_records == 1
    column = survey([path])["files"][0]["columns"][1]
    assert column["quarantined"] == 1
    assert column["quarantine"][0]["line"] == 2
    assert "encoding" in column["quarantine"][0]["message"]


def test_crlf_line_endings(tmp_path):
    # reference: RFC 4180 section 2 rule 1 (records end with CRLF)
    text = "id,name\r\n1,Ann\r\n2,Bob\r\n"
    export = read(write(tmp_path, "t.csv", text))
    assert export.cells["name"] == ["Ann", "Bob"]  # no "\r" left in cells
    assert export.lines == [line_of(text, "1,Ann"), line_of(text, "2,Bob")] == [2, 3]


def test_quoted_cells_spanning_lines_keep_line_numbers(tmp_path):
    # reference: RFC 4180 section 2 rule 6 (line breaks inside quoted fields)
    rows = [
        ("r1", "one line"),
        ("r2", "two\nlines"),
        ("r3", "plain"),
        ("r4", "three\nphysical\nlines, with a comma"),
        ("r5", 'quotes ""inside""\nand a break'),
        ("r6", "last"),
    ]
    text = "id,note\n" + "".join(f'{key},"{note}"\n' for key, note in rows)
    export = read(write(tmp_path, "t.csv", text))
    assert export.cells["id"] == [key for key, _ in rows]
    assert export.cells["note"][1] == "two\nlines"
    assert export.cells["note"][4] == 'quotes "inside"\nand a break'
    expected = [line_of(text, key + ",") for key, _ in rows]
    assert expected == [2, 3, 5, 6, 9, 11]  # sanity check of the helper itself
    assert export.lines == expected
    check_reconciles(export)


def test_quoted_cells_spanning_lines_with_crlf(tmp_path):
    text = 'id,note\r\nr1,"a\r\nb"\r\nr2,c\r\nr3,"d\r\n\r\ne"\r\nr4,f\r\n'
    export = read(write(tmp_path, "t.csv", text))
    assert export.cells["note"] == ["a\r\nb", "c", "d\r\n\r\ne", "f"]
    assert export.lines == [line_of(text, f"r{k},") for k in range(1, 5)] == [2, 4, 5, 8]


def test_blank_lines_are_skipped_and_later_lines_still_count(tmp_path):
    text = "a,b\n1,2\n\n3,4\n\n\n5,6\n"
    export = read(write(tmp_path, "t.csv", text))
    assert export.cells["a"] == ["1", "3", "5"]
    assert export.lines == [line_of(text, "1,2"), line_of(text, "3,4"), line_of(text, "5,6")]
    assert any("blank" in w for w in export.warnings)
    check_reconciles(export)


# --- header names --------------------------------------------------------------------

def test_duplicate_and_blank_header_names(tmp_path):
    export = read(write(tmp_path, "t.csv", "id,,name,id, ,name\n1,2,3,4,5,6\n"))
    assert len(export.columns) == 6
    assert len(set(export.columns)) == 6  # unique
    assert export.columns[0] == "id" and export.columns[2] == "name"
    assert all(name.strip() for name in export.columns)  # no blank names left
    assert [export.cells[c][0] for c in export.columns] == ["1", "2", "3", "4", "5", "6"]
    # the file's own names are kept for messages
    assert [export.header_names[c] for c in export.columns] == ["id", "", "name", "id", " ", "name"]
    assert len(export.warnings) == 4  # one per renamed column
    assert sum("repeats" in w for w in export.warnings) == 2
    assert sum("no name" in w for w in export.warnings) == 2


def test_unique_header_avoids_names_already_in_the_header():
    names, warnings = unique_header(["id", "id", "id_2"])
    assert len(set(names)) == 3
    assert names[2] == "id_2"  # the file's own id_2 keeps its name
    assert len(warnings) == 1


# --- rejected rows -------------------------------------------------------------------

def test_too_many_and_too_few_fields_are_rejected_rows(tmp_path):
    text = ("id,name,city\n"
            "1,Ann,Wrenfold\n"
            "2,Bob\n"
            "3,Cy,Saltmere,extra\n"
            '4,"Di\nDee",Quillmarsh,more\n'
            "5,Ed,Oddaby\n")
    export = read(write(tmp_path, "t.csv", text))
    assert export.cells["id"] == ["1", "5"]
    assert export.lines == [line_of(text, "1,Ann"), line_of(text, "5,Ed")] == [2, 7]
    rejected = [(r.line, r.raw, r.reason) for r in export.rejected]
    assert rejected == [
        (line_of(text, "2,Bob"), "2,Bob\n", "too few fields: 2 of 3"),
        (line_of(text, "3,Cy"), "3,Cy,Saltmere,extra\n", "too many fields: 4 of 3"),
        (line_of(text, "4,"), '4,"Di\nDee",Quillmarsh,more\n', "too many fields: 4 of 3"),
    ]
    assert all(r.file.endswith("t.csv") for r in export.rejected)
    assert export.rows_read == 5
    check_reconciles(export)


def test_rejected_rows_do_not_stop_reading(tmp_path):
    body = [("1,2", "x", "1,2,3")[i % 3] for i in range(30)]
    text = "\n".join(["a,b"] + body) + "\n"
    export = read(write(tmp_path, "t.csv", text))
    assert export.rows_read == 30
    assert export.number_of_records == 10  # only "1,2" has 2 fields
    assert export.lines == [i + 2 for i in range(30) if i % 3 == 0]
    assert [r.line for r in export.rejected] == [i + 2 for i in range(30) if i % 3]
    check_reconciles(export)


@pytest.mark.parametrize("ending", ["\n", ""], ids=["newline-at-end", "no-newline-at-end"])
@pytest.mark.parametrize("tail", ["2,\"never closed\n3,x\n4,y",  # right field count
                                  "2,3,\"never closed\n3,x\n4,y",  # too many fields
                                  "\"2,never closed\n3,x\n4,y"])  # too few fields
def test_unclosed_quote_running_to_end_of_file(tmp_path, tail, ending):
    # An opening quote with no closing quote runs to the end of the file
    # (RFC 4180 section 2 rule 7 requires quotes to be paired); the reader
    # must not crash, must not take the rest of the file as a good record,
    # and must say why.
    text = "id,name\n1,ok\n" + tail + ending
    export = read(write(tmp_path, "t.csv", text))
    assert export.cells["id"] == ["1"]
    assert export.lines == [2]
    assert len(export.rejected) == 1
    row = export.rejected[0]
    assert row.line == line_of(text, tail) == 3
    assert row.raw == tail + ending  # kept whole, nothing dropped
    assert "never closed" in row.reason
    check_reconciles(export)


def test_closed_quote_on_last_row_is_not_reported_as_unclosed(tmp_path):
    for text in ('id,name\n1,"a\nb"\n', 'id,name\n1,"a\nb"', 'id,name\n1,ab"c\n', 'id,name\n1,"a""b"'):
        export = read(write(tmp_path, "t.csv", text))
        assert export.number_of_records == 1, text
        assert export.rejected == [], text


def test_empty_file(tmp_path):
    export = read(write(tmp_path, "t.csv", ""))
    assert export.columns == []
    assert export.rows_read == 0 and export.number_of_records == 0
    assert export.rejected == []
    assert any("empty" in w for w in export.warnings)
    result = survey([str(tmp_path / "t.csv")])["files"][0]
    assert result["rows"] == 0 and result["columns"] == []


def test_bom_only_file_is_empty(tmp_path):
    export = read(write(tmp_path, "t.csv", b"\xef\xbb\xbf"))
    assert export.columns == [] and export.rows_read == 0


@pytest.mark.parametrize("text", ["id,name\n", "id,name", "id,name\r\n"])
def test_header_only_file(tmp_path, text):
    export = read(write(tmp_path, "t.csv", text))
    assert export.columns == ["id", "name"]
    assert export.cells == {"id": [], "name": []}
    assert export.rows_read == 0
    assert any("header only" in w for w in export.warnings)
    result = survey([str(tmp_path / "t.csv")])["files"][0]
    assert result["rows"] == 0
    assert [c["name"] for c in result["columns"]] == ["id", "name"]
    assert all(c["format"] == "empty" for c in result["columns"])


def test_missing_file_and_directory_are_errors(tmp_path):
    with pytest.raises(UnreadableFile, match="no such file"):
        read(tmp_path / "missing.csv")
    with pytest.raises(UnreadableFile, match="directory"):
        read(tmp_path)


# --- JSON Lines ----------------------------------------------------------------------

def test_json_lines(tmp_path):
    # reference: JSON Lines (jsonlines.org): one JSON value per line, UTF-8
    lines = [
        {"id": 1, "tags": ["a", "b"], "owner": {"name": "Ann"}},
        {"id": 2, "extra": True},
        {"id": 3, "tags": [], "owner": None},
    ]
    text = (json.dumps(lines[0]) + "\n"
            + "[1, 2]\n"  # JSON, not an object
            + "\n"  # blank line: skipped, still counted as a line
            + json.dumps(lines[1]) + "\n"
            + "{not json\n"
            + '"just a string"\n'
            + json.dumps(lines[2]) + "\n")
    path = write(tmp_path, "t.jsonl", text)
    export = read(path)
    assert export.kind == "jsonl"
    assert export.columns == ["id", "tags", "owner", "extra"]
    assert export.cells["id"] == [1, 2, 3]
    # keys missing on some lines are None
    assert export.cells["tags"] == [["a", "b"], None, []]
    assert export.cells["owner"] == [{"name": "Ann"}, None, None]
    assert export.cells["extra"] == [None, True, None]
    assert export.lines == [line_of(text, '{"id": 1'), line_of(text, '{"id": 2'),
                            line_of(text, '{"id": 3')] == [1, 4, 7]
    rejected = [(r.line, r.raw) for r in export.rejected]
    assert rejected == [(2, "[1, 2]\n"), (5, "{not json\n"), (6, '"just a string"\n')]
    assert "object" in export.rejected[0].reason and "list" in export.rejected[0].reason
    assert "not valid JSON" in export.rejected[1].reason
    assert "object" in export.rejected[2].reason
    check_reconciles(export)
    assert export.rows_read == 6  # the blank line is not a row


def test_json_lines_fields_holding_lists_or_objects_count_as_decoded(tmp_path):
    text = "".join(json.dumps({"id": i, "people": [{"pid": i % 3, "name": f"N{i % 3}"}],
                               "meta": {"n": i}}) + "\n" for i in range(6))
    path = write(tmp_path, "t.jsonl", text)
    columns = decode(read(path))
    assert columns["people"].format == "json"
    assert columns["people"].values[0] == [{"pid": 0, "name": "N0"}]
    assert columns["people"].format_counts == {"json": 6}
    assert columns["meta"].format == "json"
    assert columns["id"].format == "text"
    entry = {c["name"]: c for c in survey([path])["files"][0]["columns"]}
    assert entry["people"]["shape"] == "object-list"
    assert entry["meta"]["shape"] == "object"
    assert entry["people"]["quarantined"] == 0


def test_json_lines_refuses_nan(tmp_path):
    # reference: RFC 8259 section 6 (NaN and Infinity are not permitted)
    export = read(write(tmp_path, "t.jsonl", '{"x": 1}\n{"x": NaN}\n'))
    assert export.cells["x"] == [1]
    assert [r.line for r in export.rejected] == [2]


def test_json_suffix_with_json_lines_content(tmp_path):
    export = read(write(tmp_path, "t.json", '{"a": 1}\r\n{"a": 2}\r\n'))
    assert export.kind == "jsonl"
    assert export.cells["a"] == [1, 2]
    assert export.lines == [1, 2]


# --- several files -------------------------------------------------------------------

def test_several_files(tmp_path):
    a = write(tmp_path, "a.csv", "id,tags\n1,x|y\n2,z\n3\n")
    b = write(tmp_path, "b.tsv", "id\tname\n1\tAnn\n")
    c = write(tmp_path, "c.jsonl", '{"id": 1}\n{"id": 2}\n[3]\n')
    result = survey([a, b, c])
    files = result["files"]
    assert [f["path"] for f in files] == [a, b, c]
    assert [f["format"] for f in files] == ["csv", "tsv", "jsonl"]
    assert [f["rows"] for f in files] == [3, 1, 3]
    assert [f["records"] for f in files] == [2, 1, 2]
    assert [f["rejected_rows"] for f in files] == [1, 0, 1]
    assert files[0]["rejected"][0]["line"] == 4
    assert files[2]["rejected"][0]["line"] == 3
    for f in files:
        assert f["rows"] == f["records"] + f["rejected_rows"]
    # each file keeps its own columns
    assert [c["name"] for c in files[1]["columns"]] == ["id", "name"]


def test_json_array_file_is_refused_with_a_message(tmp_path):
    # A .json file holding one JSON array (RFC 8259 section 5) is not JSON Lines;
    # it must not be read as a CSV file whose header is "[".
    path = write(tmp_path, "t.json", '[\n  {"id": 1, "tags": ["a"]},\n  {"id": 2}\n]\n')
    with pytest.raises(UnreadableFile, match="JSON array"):
        read(path)


def test_unclosed_quote_in_the_header_is_an_error(tmp_path):
    # The quote would swallow every data row into the header (RFC 4180 section 2
    # rule 7: quotes come in pairs); say so instead of reporting "0 rows".
    path = write(tmp_path, "t.csv", 'id,"name\n1,2\n3,4\n')
    with pytest.raises(UnreadableFile, match="never closed"):
        read(path)
    # a closed quote in the header is fine, also across lines
    export = read(write(tmp_path, "u.csv", 'id,"full\nname"\n1,2\n'))
    assert export.columns == ["id", "full\nname"]
    assert export.lines == [3]
