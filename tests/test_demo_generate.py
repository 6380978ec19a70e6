"""Tests for demo/generate.py, the seeded Lanternfield Press Cooperative export.

Every planted fact is checked against the files as read back independently with
the csv, ast and json modules, not against the generator's own bookkeeping.
"""

import ast
import csv
import json
import subprocess
import sys
from collections import Counter, defaultdict
from pathlib import Path

import pytest

from demo.generate import generate

SCRIPT = Path(__file__).resolve().parents[1] / "demo" / "generate.py"
NESTED = ["contributors", "production_team", "subjects", "formats"]
FILES = ["titles.csv", "contributions.csv", "planted.json"]


# --- helpers -------------------------------------------------------------------------

def read_rows(path: Path) -> list[list[str]]:
    """All rows of a CSV file, header included (row i is physical line i + 1)."""
    # reference: Python's csv module (csv.reader, newline="" as its docs require)
    with open(path, encoding="utf-8", newline="") as handle:
        return list(csv.reader(handle))


def physical_lines(path: Path) -> list[str]:
    """The file's lines as a text editor shows them."""
    return path.read_text(encoding="utf-8").split("\n")[:-1]


def parse_cell(column: str, cell: str):
    """Parse a nested cell the way a consumer would; raise on malformed input."""
    if column == "contributors":
        # reference: Python's ast.literal_eval
        return ast.literal_eval(cell)
    if column == "formats":
        return cell.split("|")
    # reference: Python's json.loads (RFC 8259: no trailing commas, double quotes only)
    return json.loads(cell)


def contribution_cells(out: Path):
    """Yield (line, key, {column: cell}) for each data row of contributions.csv."""
    rows = read_rows(out / "contributions.csv")
    header = rows[0]
    for line, row in enumerate(rows[1:], start=2):
        record = dict(zip(header, row))
        yield line, record["title_key"], {column: record[column] for column in NESTED}


def well_formed_people(out: Path, planted: dict, column: str):
    """Yield the person dicts of every well-formed cell of ``column``."""
    bad = {(cell["line"], cell["column"]) for cell in planted["malformed_cells"]}
    for line, _key, cells in contribution_cells(out):
        if cells[column] and (line, column) not in bad:
            yield from parse_cell(column, cells[column])


def locations(entries: list[dict]) -> set[tuple[int, str]]:
    """(line, key) pairs of a planted list."""
    return {(entry["line"], entry["key"]) for entry in entries}


@pytest.fixture(scope="module", params=[10, 500], ids=["size10", "size500"])
def export(request, tmp_path_factory):
    """A generated export: (directory, planted facts)."""
    out = tmp_path_factory.mktemp(f"lanternfield{request.param}")
    return out, generate(out, size=request.param, seed=7)


# --- determinism and interface -------------------------------------------------------

def test_same_seed_and_size_give_identical_bytes(tmp_path):
    first = generate(tmp_path / "a", size=60, seed=11)
    second = generate(tmp_path / "b", size=60, seed=11)
    assert first == second
    for name in FILES:
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()


def test_other_seed_gives_other_data(tmp_path):
    generate(tmp_path / "a", size=60, seed=11)
    generate(tmp_path / "b", size=60, seed=12)
    a = (tmp_path / "a" / "contributions.csv").read_bytes()
    assert a != (tmp_path / "b" / "contributions.csv").read_bytes()


def test_command_line_matches_function(tmp_path):
    generate(tmp_path / "api", size=10, seed=3)
    subprocess.run([sys.executable, str(SCRIPT), str(tmp_path / "cli"), "--size", "10",
                    "--seed", "3"], check=True, capture_output=True)
    for name in FILES:
        assert (tmp_path / "api" / name).read_bytes() == (tmp_path / "cli" / name).read_bytes()


def test_too_small_size_is_rejected(tmp_path):
    with pytest.raises(ValueError):
        generate(tmp_path, size=9)


def test_planted_json_matches_return_value(export):
    out, planted = export
    assert json.loads((out / "planted.json").read_text(encoding="utf-8")) == planted
    assert planted["files"] == {"titles": "titles.csv", "contributions": "contributions.csv"}


# --- every trap is planted -----------------------------------------------------------

def test_every_trap_is_planted(export):
    _out, planted = export
    for name in ("titles.csv", "contributions.csv"):
        assert planted["duplicate_keys"][name]
    assert planted["only_in_titles"] and planted["only_in_contributions"]
    assert {cell["column"] for cell in planted["malformed_cells"]} == {
        "contributors", "production_team", "subjects"}
    names = planted["two_spellings"]["names"]
    canonical = planted["two_spellings"]["canonical"]
    variant = next(name for name in names if name != canonical)
    assert names[canonical] > names[variant] >= 1
    assert planted["in_both_lists"]
    assert all(planted["empty_list_cells"][c] for c in NESTED[:3])
    assert all(planted["blank_cells"][c] for c in NESTED)


# --- planted facts agree with the files ----------------------------------------------

def test_rows_counts_match_files(export):
    out, planted = export
    for name in ("titles.csv", "contributions.csv"):
        assert planted["rows"][name] == len(read_rows(out / name)) - 1


def test_no_cell_spans_lines(export):
    out, _planted = export
    for name in ("titles.csv", "contributions.csv"):
        assert len(read_rows(out / name)) == len(physical_lines(out / name))


def test_planted_line_numbers_point_at_their_keys(export):
    out, planted = export
    spots = [(cell["file"], cell["line"], cell["key"]) for cell in planted["malformed_cells"]]
    for name, duplicates in planted["duplicate_keys"].items():
        spots += [(name, line, dup["key"]) for dup in duplicates for line in dup["lines"]]
    for kind in ("empty_list_cells", "blank_cells"):
        spots += [("contributions.csv", line, key)
                  for entries in planted[kind].values() for line, key in locations(entries)]
    rows = {name: read_rows(out / name) for name in ("titles.csv", "contributions.csv")}
    lines = {name: physical_lines(out / name) for name in rows}
    for name, line, key in spots:
        assert rows[name][line - 1][0] == key
        assert lines[name][line - 1].startswith(key + ",")


def test_duplicate_keys_match_files(export):
    out, planted = export
    for name, duplicates in planted["duplicate_keys"].items():
        rows = read_rows(out / name)
        lines = defaultdict(list)
        for line, row in enumerate(rows[1:], start=2):
            lines[row[0]].append(line)
        found = {key: found_lines for key, found_lines in lines.items() if len(found_lines) > 1}
        assert found == {dup["key"]: dup["lines"] for dup in duplicates}
        for dup in duplicates:
            first, second = (rows[line - 1] for line in dup["lines"])
            assert (first == second) == dup["identical"]


def test_orphan_keys_match_files(export):
    out, planted = export
    titles = {row[0] for row in read_rows(out / "titles.csv")[1:]}
    contributions = {row[0] for row in read_rows(out / "contributions.csv")[1:]}
    assert sorted(titles - contributions) == planted["only_in_titles"]
    assert sorted(contributions - titles) == planted["only_in_contributions"]


def test_nested_cells_parse_exactly_where_expected(export):
    """Well-formed cells round-trip; malformed, empty and blank cells are exactly the planted."""
    out, planted = export
    malformed, empty, blank = set(), defaultdict(set), defaultdict(set)
    for line, key, cells in contribution_cells(out):
        for column, cell in cells.items():
            if cell == "":
                blank[column].add((line, key))
                continue
            try:
                value = parse_cell(column, cell)
            except (ValueError, SyntaxError):  # json.JSONDecodeError is a ValueError
                malformed.add((column, line, key))
                continue
            if column == "contributors":
                assert repr(value) == cell
            elif column != "formats":
                assert json.dumps(value, ensure_ascii=False) == cell
            if value == []:
                empty[column].add((line, key))
    assert malformed == {(c["column"], c["line"], c["key"]) for c in planted["malformed_cells"]}
    assert dict(empty) == {c: locations(e) for c, e in planted["empty_list_cells"].items()}
    assert dict(blank) == {c: locations(e) for c, e in planted["blank_cells"].items()}


def test_nested_dicts_have_the_documented_keys(export):
    out, planted = export
    for person in well_formed_people(out, planted, "contributors"):
        assert set(person) == {"person_id", "name", "role", "position"}
        assert person["role"] in {"author", "editor", "illustrator", "translator"}
    for person in well_formed_people(out, planted, "production_team"):
        assert set(person) == {"person_id", "name", "department", "task"}


def test_contributor_positions_are_one_based_order(export):
    out, planted = export
    bad = {(c["line"], c["column"]) for c in planted["malformed_cells"]}
    for line, _key, cells in contribution_cells(out):
        if cells["contributors"] and (line, "contributors") not in bad:
            people = parse_cell("contributors", cells["contributors"])
            assert [p["position"] for p in people] == list(range(1, len(people) + 1))


def test_names_depend_on_person_id_except_the_two_spellings(export):
    out, planted = export
    spellings = defaultdict(Counter)
    for column in ("contributors", "production_team"):
        for person in well_formed_people(out, planted, column):
            spellings[person["person_id"]][person["name"]] += 1
    two = planted["two_spellings"]
    assert dict(spellings.pop(two["person_id"])) == two["names"]
    assert all(len(names) == 1 for names in spellings.values())


def test_people_in_both_lists_match_files(export):
    out, planted = export
    creators = {p["person_id"] for p in well_formed_people(out, planted, "contributors")}
    staff = {p["person_id"] for p in well_formed_people(out, planted, "production_team")}
    assert sorted(creators & staff) == planted["in_both_lists"]


def test_awkward_names_appear_in_both_python_quote_styles(export):
    out, planted = export
    found = {p["name"] for p in well_formed_people(out, planted, "contributors")}
    assert {entry["name"] for entry in planted["special_names"].values()} <= found
    cells = " ".join(cells["contributors"] for _l, _k, cells in contribution_cells(out))
    # reference: Python's repr() picks double quotes for a str containing only '
    assert "'name': \"Brennick O'Varra\"" in cells
    assert "'name': 'Tamsel \"Wren\" Oddaby'" in cells
