"""The Python API as a notebook meets it (issue 17, item 6): public settings types, every command-line option
reachable as a parameter, errors phrased for the caller, ``strict``, and the type hints marker.

References: PEP 561 (a package ships ``py.typed`` to say its inline type hints are meant for checkers);
Python's ``inspect.signature`` and ``dataclasses.fields`` (what a caller can pass); RFC 4180 ("each line
should contain the same number of fields": the ragged row that is set aside); ``sqlite3`` reading the database.
"""

from __future__ import annotations

import argparse
import dataclasses
import inspect
import sqlite3
from importlib import resources

import pytest

import normalise
from normalise import JoinOptions, NotClean, Options, UsageError, build_database, make_plan, survey
from normalise.cli import build_parser, main
from normalise.model.errors import CALLER_NAMES, for_callers
from normalise.pipeline import prepare

BOOKS = 'key,title,tags\nb1,Tide tables,"[""sea"", ""maps""]"\nb2,Night sky,\n'
RAGGED = "key,title\nb1,Tide tables\nb2,Night sky,extra,cells\n"

# options of the command line with no parameter of their own: how the result is shown, not what is built
SHOWN_ONLY = {"--help", "--json"}


def _options(command: str) -> list[str]:
    commands = next(a for a in build_parser()._actions if isinstance(a, argparse._SubParsersAction))
    return [o for a in commands.choices[command]._actions for o in a.option_strings
            if o.startswith("--") and o not in SHOWN_ONLY]


def _reachable(parameter: str, function) -> bool:
    """``options.natural_keys`` is reachable when ``options`` is a parameter and ``Options`` has the field."""
    top, _, field = parameter.split("=")[0].partition(".")
    params = inspect.signature(function).parameters
    if top not in params:
        return False
    if not field:
        return True
    kind = {"options": Options, "join_options": JoinOptions, "limits": normalise.Limits}[top]
    return field in {f.name for f in dataclasses.fields(kind)}


@pytest.mark.parametrize("command, function", [("build", build_database), ("plan", prepare), ("survey", survey)])
def test_every_option_is_a_parameter(command, function):
    extra = {"--output": "output"} if command == "plan" else {}
    for option in _options(command):
        parameter = extra.get(option) or CALLER_NAMES.get(option)
        assert parameter, f"{command} {option} has no Python parameter named in errors.CALLER_NAMES"
        target = make_plan if option == "--output" else function
        assert _reachable(parameter, target), (command, option, parameter)


def test_settings_types_are_public():
    for name in ("Options", "JoinOptions", "Limits", "Built", "NotClean", "build_database", "make_plan"):
        assert name in normalise.__all__ and hasattr(normalise, name)
    assert (resources.files("normalise") / "py.typed").is_file()  # PEP 561


def test_settings_reach_the_build(tmp_path):
    """Options given from Python do what the matching option does on the command line."""
    path = tmp_path / "books.csv"
    path.write_text(BOOKS, encoding="utf-8")
    by_default = build_database(str(path), str(tmp_path / "default.db"))
    keyed = build_database(str(path), str(tmp_path / "keyed.db"), options=Options(natural_keys={"books": "title"}))
    assert [t["natural_key"] for t in by_default.tables if t["name"] == "books"] == [["key"]]
    assert [t["natural_key"] for t in keyed.tables if t["name"] == "books"] == [["title"]]


def test_errors_name_parameters_from_python_and_options_from_the_command_line(tmp_path, capsys):
    path = tmp_path / "books.csv"
    path.write_text(BOOKS, encoding="utf-8")
    db = tmp_path / "out.db"
    build_database(str(path), str(db))
    with pytest.raises(normalise.NormaliseError) as caught:
        build_database(str(path), str(db))
    assert "replace=True" in str(caught.value) and "--replace" not in str(caught.value)
    assert main(["build", str(path), "--db", str(db), "--quiet"]) == caught.value.exit_code
    err = capsys.readouterr().err
    assert "--replace" in err and "replace=True" not in err


def test_a_dict_option_reads_as_the_python_value():
    assert for_callers("name it with --key visits=COLUMN") == "name it with options.natural_keys={'visits': 'COLUMN'}"
    assert for_callers("--decode tags=json: no column") == "formats={'tags': 'json'}: no column"


def test_formats_take_the_command_lines_text(tmp_path):
    """``formats={"tags": "delimited:|"}`` is the same choice as ``--decode tags=delimited:|``."""
    path = tmp_path / "books.csv"
    path.write_text("key,tags\nb1,sea|maps\nb2,sea\n", encoding="utf-8")
    as_text = build_database(str(path), str(tmp_path / "a.db"), formats={"tags": "delimited:|"})
    as_tuple = build_database(str(path), str(tmp_path / "b.db"), formats={"tags": ("delimited", "|")})
    with sqlite3.connect(tmp_path / "a.db") as a, sqlite3.connect(tmp_path / "b.db") as b:
        tables = [r[0] for r in a.execute("SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name")]
        assert tables == [r[0] for r in b.execute("SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name")]
    assert as_text.inputs[0]["records_loaded"] == as_tuple.inputs[0]["records_loaded"] == 2
    with pytest.raises(UsageError, match=r"^formats=\{'tags': 'yaml'\}|unknown format 'yaml'"):
        build_database(str(path), str(tmp_path / "c.db"), formats={"tags": "yaml"})


def test_strict_raises_after_writing(tmp_path):
    """``strict=True`` as ``--strict``: the database is written, then ``NotClean`` carries the result."""
    path = tmp_path / "ragged.csv"
    path.write_text(RAGGED, encoding="utf-8")
    db = tmp_path / "strict.db"
    with pytest.raises(NotClean) as caught:
        build_database(str(path), str(db), strict=True)
    assert caught.value.rejected == 1 and caught.value.quarantined == 0
    assert str(caught.value).startswith("strict=True: 1 rows rejected")
    assert caught.value.result.inputs[0]["rows_rejected"] == 1 and caught.value.exit_code == 1
    with sqlite3.connect(db) as con:
        assert con.execute("SELECT count(*) FROM rejected_rows").fetchone()[0] == 1
    clean = tmp_path / "books.csv"
    clean.write_text(BOOKS, encoding="utf-8")
    assert build_database(str(clean), str(tmp_path / "clean.db"), strict=True).cells_quarantined == 0


def test_the_readme_table_is_the_one_errors_use():
    """The README's option → parameter table lists exactly ``errors.CALLER_NAMES``."""
    from pathlib import Path

    readme = (Path(__file__).parent.parent / "README.md").read_text(encoding="utf-8")
    table = readme[readme.index("| option | Python |"):].split("\n\n")[0].splitlines()[2:]
    rows = dict(tuple(cell.strip().strip("`") for cell in row.strip("|").split("|")) for row in table)
    assert rows == CALLER_NAMES
