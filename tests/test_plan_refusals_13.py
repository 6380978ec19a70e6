"""Hand-edited plan files that cannot work are refused in one message naming the line, never a traceback.

Issue 13: values of the wrong type (``violation_threshold = "abc"``, ``join = "x"``, ``record = 5``), duplicate
table or column names, a column named like a key the tool adds, ``natural_key = "nosuch"``, invalid UTF-8,
unknown keys, names that are not SQL names. Plans are TOML (toml.io, v1.0.0); a plan is refused by
``normalise.infer.planfile.InvalidPlan`` before any database file is made. A Hypothesis test mutates a valid plan at
random and asserts the same: a build that works and proves exact, or a clean refusal with nothing written.
"""

from __future__ import annotations

import re

import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from normalise.cli import main
from normalise.model.errors import NormaliseError
from normalise.pipeline import build_database, make_plan
from normalise.infer.planfile import InvalidPlan
from tests.test_single_entities_12 import tickets, write


@pytest.fixture(scope="module")
def planned(tmp_path_factory):
    where = tmp_path_factory.mktemp("plans")
    path = write(tickets(), where / "tickets.csv")
    text = make_plan([path])
    return path, text


def replay(path: str, text, where, name="edited"):
    plan = where / f"{name}.toml"
    plan.write_bytes(text if isinstance(text, bytes) else text.encode("utf-8"))
    db = where / f"{name}.db"
    return build_database([path], str(db), plan_path=str(plan)), db


def refused(planned, tmp_path, old: str, new: str, count: int = 1) -> str:
    path, text = planned
    assert old in text, old
    with pytest.raises(InvalidPlan) as exc:
        replay(path, text.replace(old, new, count), tmp_path)
    assert not (tmp_path / "edited.db").exists()
    message = str(exc.value)
    assert message.startswith("plan ") and "\n  hint: " in message and "Traceback" not in message
    return message


@pytest.mark.parametrize("old, new, words", [
    ("violation_threshold = 0.05", 'violation_threshold = "abc"', ["violation_threshold", "a number from 0 to 1"]),
    ("violation_threshold = 0.05", "violation_threshold = 7", ["violation_threshold", "got 7"]),
    ('[join]\nhow = "left"', 'join = "x"\n[joins]\nhow = "left"', ["join", "a table of keys"]),
    ('natural_key = "key"', 'natural_key = "nosuch"', ["natural_key 'nosuch'", "use one of"]),
    ('table = "ticket_watchers"', 'table = "tickets"', ["'tickets' is taken twice"]),
    ('table = "ticket_watchers"', 'table = "value_traces"', ["'value_traces'", "bookkeeping"]),
    ('name = "opened_by_desk"', 'name = "ticket_sk"', ["two columns named 'ticket_sk'"]),
    ('table = "ticket_watchers"', 'table = "t\\"; DROP TABLE name_map; --"', ["expected name", "lower case"]),
    ('duplicates = "first"', 'duplicates = "first"\ncolour = "red"', ["unknown key 'colour'", "use one of"]),
    ('natural_key = ', 'natual_key = ', ["unknown key 'natual_key'", "did you mean 'natural_key'?"]),
    ('type = "text"', "type = 5", ["type", "unknown type 5"]),
])
def test_a_plan_that_cannot_work_is_refused_with_its_line(planned, tmp_path, old, new, words):
    message = refused(planned, tmp_path, old, new)
    assert re.match(r"plan \S+\.toml line \d+: ", message), message
    for w in words:
        assert w in message, message


def test_a_block_of_the_wrong_kind_is_refused(planned, tmp_path):
    path, _ = planned
    with pytest.raises(InvalidPlan, match=r"plan \S+\.toml line 2: record: expected a list of"):
        replay(path, "version = 1\nrecord = 5\n", tmp_path)
    assert not (tmp_path / "edited.db").exists()


def test_a_plan_that_is_not_utf8_is_refused(planned, tmp_path):
    path, text = planned
    with pytest.raises(InvalidPlan, match="not UTF-8"):
        replay(path, text.encode("utf-8").replace(b"# normalise plan", b"# normalise \xff plan"), tmp_path)
    assert not (tmp_path / "edited.db").exists()


def test_the_command_line_says_it_in_one_line_and_exits_2(planned, tmp_path, capsys):
    path, text = planned
    plan = tmp_path / "p.toml"
    plan.write_text(text.replace("violation_threshold = 0.05", 'violation_threshold = "abc"'), encoding="utf-8")
    code = main(["build", path, "--plan", str(plan), "--db", str(tmp_path / "x.db"), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2 and "violation_threshold" in err and "Traceback" not in err
    assert not (tmp_path / "x.db").exists()


_VALUES = st.sampled_from(['"abc"', "5", "-1", "true", "[1, 2]", '["x"]', "{ a = 1 }", '""', "0.5", "nan",
                           '"t\\"; DROP TABLE name_map; --"', '"\\u007f"', '"ticket_sk"', '"tickets"',
                           '"list_position"', '"é"'])


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                                  HealthCheck.too_slow])
@given(data=st.data())
def test_any_mutation_works_or_is_refused_cleanly(planned, tmp_path_factory, data):
    path, text = planned
    lines = text.split("\n")
    settable = [n for n, line in enumerate(lines) if re.match(r"\s*\w+ = ", line)]
    fields = [n for n, line in enumerate(lines) if re.match(r"\s*\{ key = ", line)]
    kind = data.draw(st.sampled_from(["value", "delete", "field", "unknown"]))
    if kind == "value":
        n = data.draw(st.sampled_from(settable))
        key = lines[n].split("=", 1)[0]
        lines[n] = key + "= " + data.draw(_VALUES)
    elif kind == "delete":
        del lines[data.draw(st.sampled_from(settable + fields))]
    elif kind == "field":
        n = data.draw(st.sampled_from(fields))
        which = data.draw(st.sampled_from(["name", "type", "key"]))
        value = data.draw(_VALUES)
        lines[n] = re.sub(rf"{which} = (\[[^\]]*\]|\"[^\"]*\")", lambda _: f"{which} = {value}", lines[n])
    else:
        n = data.draw(st.sampled_from(settable))
        lines.insert(n + 1, "oddity = 1")
    where = tmp_path_factory.mktemp("mutated")
    try:
        m, db = replay(path, "\n".join(lines), where)
    except NormaliseError as exc:  # a refusal: one message, a hint, and nothing written
        message = str(exc)
        assert "Traceback" not in message and message.count("\n") <= 1, message
        assert not (where / "edited.db").exists()
    else:
        assert m["integrity"]["proof"] == "exact"


def test_a_header_with_control_characters_round_trips_through_the_plan(tmp_path):
    # TOML v1.0.0 (toml.io, "String"): DEL and the other control characters are escaped in basic strings
    import tomllib

    from tests.test_lossless import write_rows

    path = tmp_path / "odd.csv"
    write_rows(path, ["key", "odd\x7fname", "tab\tname"], [("k1", "x", "y"), ("k2", "z", "w")])
    text = make_plan([str(path)], str(tmp_path / "p.toml"))
    assert "\x7f" not in text and tomllib.loads(text)
    m = build_database([str(path)], str(tmp_path / "o.db"), plan_path=str(tmp_path / "p.toml"))
    assert m["integrity"]["proof"] == "exact"
