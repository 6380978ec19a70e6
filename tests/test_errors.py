"""One error family (normalise/model/errors.py): every error the tool raises on purpose is a ``NormaliseError``, which is
a ``ValueError``, says how the command ends (``exit_code``) and, when it is about one place, gives the place as
attributes (``file``, ``line``, ``column``, ``position``) besides naming it in the message.
"""

from __future__ import annotations

import importlib
import inspect
import pkgutil
import warnings

import pytest

import normalise
from normalise import JoinOptions, decode_json, decode_python_literal
from normalise.cli import exit_code, main
from normalise.decode.literal import CellError
from normalise.infer.planfile import InvalidPlan
from normalise.join import CardinalityViolation
from normalise.model.errors import EXIT_DATA, EXIT_DESTINATION, EXIT_USAGE, MissingInput, NormaliseError, UnreadableFile
from normalise.pipeline import build_database, make_plan
from normalise.read import read


def error_classes() -> list[type]:
    """Every exception class the package defines."""
    found = set()
    for info in pkgutil.walk_packages(normalise.__path__, "normalise."):  # subpackages' modules too
        if info.name == "normalise.__main__":  # runs the command
            continue
        module = importlib.import_module(info.name)
        for _, value in inspect.getmembers(module, inspect.isclass):
            if issubclass(value, Exception) and value.__module__.startswith("normalise."):
                found.add(value)
    return sorted(found, key=lambda c: (c.__module__, c.__name__))


def test_every_error_the_tool_defines_is_a_normalise_error():
    classes = error_classes()
    assert CellError in classes and len(classes) > 15
    assert [c for c in classes if not issubclass(c, (NormaliseError, Warning))] == []
    for cls in classes:
        if issubclass(cls, NormaliseError):
            assert issubclass(cls, ValueError) and cls.exit_code in (EXIT_DATA, EXIT_USAGE, EXIT_DESTINATION), cls
            # what the command returns is the class's own exit_code
            assert exit_code(cls("x") if cls is not CellError else CellError("x", 1)) == cls.exit_code, cls


def test_a_cell_error_is_a_normalise_error_with_its_position():
    with pytest.raises(NormaliseError) as exc:
        decode_json("[1, 2")
    assert isinstance(exc.value, CellError) and isinstance(exc.value, ValueError)
    assert exc.value.message == str(exc.value) and exc.value.message.startswith("not valid JSON")
    assert exc.value.position == 6 and (exc.value.file, exc.value.line, exc.value.column) == (None, None, None)
    with pytest.raises(CellError, match="a call is not a Python literal") as exc:
        decode_python_literal("[print(1)]")
    assert exc.value.position == 2 and exc.value.exit_code == EXIT_DATA


def test_a_missing_or_unreadable_input_names_its_file(tmp_path):
    with pytest.raises(MissingInput) as exc:
        read(tmp_path / "nothing.csv")
    assert exc.value.file == str(tmp_path / "nothing.csv") and exc.value.exit_code == EXIT_USAGE
    broken = tmp_path / "broken.csv"
    broken.write_text('\nid,"name\n1,a\n2,b\n', encoding="utf-8")
    with pytest.raises(UnreadableFile, match=r"\(line 2\) is never closed") as exc:
        read(broken)
    assert (exc.value.file, exc.value.line, exc.value.column) == (str(broken), 2, None)


def test_a_plan_error_names_its_line(tmp_path):
    books = tmp_path / "books.csv"
    books.write_text("id,title\n1,Tide tables\n2,Night sky\n", encoding="utf-8")
    text = make_plan([str(books)]).replace("violation_threshold = 0.05", 'violation_threshold = "abc"')
    line = next(n for n, row in enumerate(text.splitlines(), 1) if row.startswith("violation_threshold"))
    plan = tmp_path / "plan.toml"
    plan.write_text(text, encoding="utf-8")
    with pytest.raises(InvalidPlan) as exc:
        build_database([str(books)], str(tmp_path / "books.db"), plan_path=str(plan))
    assert exc.value.line == line and f"plan {plan} line {line}: " in str(exc.value)
    assert exc.value.file == str(plan)
    assert exc.value.exit_code == EXIT_USAGE
    assert main(["build", str(books), "--db", str(tmp_path / "books.db"), "--plan", str(plan)]) == EXIT_USAGE


def test_a_broken_join_names_the_file_line_and_column(tmp_path):
    books, notes = tmp_path / "books.csv", tmp_path / "notes.csv"
    books.write_text("book_id,title\n1,Tide tables\n2,Night sky\n3,Salt marsh\n", encoding="utf-8")
    notes.write_text("book_id,note\n1,first\n2,second\n2,again\n3,third\n", encoding="utf-8")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with pytest.raises(CardinalityViolation) as exc:
            build_database([str(books), str(notes)], str(tmp_path / "b.db"),
                           join_options=JoinOptions(duplicates="refuse"))
    assert (exc.value.file, exc.value.line, exc.value.column) == (str(notes), 4, "book_id")
    assert "(line 4)" in str(exc.value)
