"""Tests of plans as files: write, replay, edit, refuse.

The references, named beside each check:

* the inferred build itself, for round trips: replaying an unedited plan must
  give the very database the inference gave (read back with ``sqlite3``);
* the CSV files, read with the standard ``csv`` module and decoded as the demo
  generator writes them (``demo/generate.py``, module docstring:
  ``contributors`` is a Python ``repr()``, ``production_team`` JSON), for what
  an edited plan must produce;
* ``planted.json`` of the demo generator (people in both lists, the person
  spelled two ways);
* the plan text: the line an error must name is found in the edited text by
  the test.
"""

from __future__ import annotations

import ast
import csv
import json
import re
import sqlite3

import pytest

from demo.generate import generate
from normalise import JoinOptions
from normalise.cli import main
from normalise.infer.planfile import InvalidPlan
from normalise.pipeline import build_database, make_plan

TITLES, CONTRIBUTIONS = "titles.csv", "contributions.csv"


# --- helpers ------------------------------------------------------------------------------

def at_line(message: str, line) -> bool:
    """The refusal names the plan file and the line: ``plan PATH line N: ...``."""
    return re.match(rf"plan \S+ line {line}: ", message) is not None


def read_csv(path) -> tuple[list[str], list[dict]]:
    with open(path, newline="", encoding="utf-8") as f:
        reader = csv.DictReader(f)
        return list(reader.fieldnames), list(reader)


def write_csv(path, header: list[str], rows: list[dict]) -> None:
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.DictWriter(f, header, lineterminator="\n")
        w.writeheader()
        w.writerows(rows)


def kept_lists(out, column: str, decoder) -> list[list]:
    """The decoded lists of ``column`` for every kept title (first row per key, left join)."""
    _, titles = read_csv(out / TITLES)
    _, contributions = read_csv(out / CONTRIBUTIONS)
    first: dict = {}
    for row in contributions:
        first.setdefault(row["title_key"], row)
    lists = []
    for key in dict.fromkeys(r["title_key"] for r in titles):
        cell = first.get(key, {}).get(column, "")
        try:
            lists.append(decoder(cell) if cell.strip() else [])
        except (ValueError, SyntaxError):
            lists.append([])  # malformed: quarantined
    return lists


def dump(db) -> dict:
    """Every table and view: its SQL, its columns and its rows (sorted)."""
    with sqlite3.connect(f"file:{db}?mode=ro", uri=True) as con:
        out = {}
        for kind, name, sql in con.execute("SELECT type, name, sql FROM sqlite_master "
                                           "WHERE type IN ('table', 'view') ORDER BY name"):
            cur = con.execute(f'SELECT * FROM "{name}"')
            out[name] = (kind, sql, [d[0] for d in cur.description], sorted(cur.fetchall(), key=repr))
        return out


def rows_of(db, sql: str, *args) -> list:
    with sqlite3.connect(f"file:{db}?mode=ro", uri=True) as con:
        return con.execute(sql, args).fetchall()


def edit(text: str, old: str, new: str) -> str:
    assert text.count(old) >= 1, old
    return text.replace(old, new, 1)


def line_of(text: str, needle: str, after: str | None = None) -> int:
    """1-based line of the first line holding ``needle`` (at or after the line holding ``after``)."""
    lines = text.splitlines()
    start = next(n for n, line in enumerate(lines) if after in line) if after else 0
    return next(n for n, line in enumerate(lines[start:], start=start + 1) if needle in line)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    planted = generate(out, size=200, seed=7)
    files = [str(out / TITLES), str(out / CONTRIBUTIONS)]
    text = make_plan(files)
    db = out / "inferred.db"
    m = build_database(files, str(db))
    return out, planted, files, text, str(db), m


def replay(demo, tmp_path, text: str, name: str = "edited"):
    """Write ``text`` as a plan and build with it; returns (db, manifest)."""
    files = demo[2]
    plan = tmp_path / f"{name}.toml"
    plan.write_text(text, encoding="utf-8")
    db = tmp_path / f"{name}.db"
    return str(db), build_database(files, str(db), plan_path=str(plan))


# --- round trip ---------------------------------------------------------------------------

def test_unedited_plan_gives_the_inferred_database(demo, tmp_path):
    _, _, _, text, inferred_db, inferred = demo
    db, m = replay(demo, tmp_path, text, "unedited")
    assert dump(db) == dump(inferred_db)  # table by table, view by view: SQL, columns, rows
    for part in ("inputs", "joins", "tables", "views", "entities", "conflicts", "integrity"):
        assert m[part] == inferred[part], part


def test_plan_of_a_plan_is_the_same_text(demo, tmp_path, capsys):
    _, _, files, text, _, _ = demo
    plan = tmp_path / "plan.toml"
    plan.write_text(text, encoding="utf-8")
    assert make_plan(files, plan_path=str(plan)) == text
    again = tmp_path / "again.toml"
    assert main(["plan", *files, "--plan", str(plan), "-o", str(again)]) == 0
    assert again.read_text(encoding="utf-8") == text
    capsys.readouterr()


# --- edits take effect --------------------------------------------------------------------

ENTITY_HEAD = '[[entity]]\nhandle = "person"\ntable = "person"\n'


def test_rename_entity_table(demo, tmp_path):
    _, _, files, text, inferred_db, _ = demo
    db, m = replay(demo, tmp_path, edit(text, ENTITY_HEAD, '[[entity]]\nhandle = "person"\ntable = "people"\n'))
    tables = {t["name"]: t for t in m["tables"]}
    assert "person" not in tables and tables["people"]["role"] == "entity"
    for bridge in ("title_contributors", "title_production_team"):
        assert tables[bridge]["foreign_keys"][1]["references"] == "people"
    # the same people, the same keys (an entity's key hashes its identity, not its table's name)
    assert rows_of(db, "SELECT * FROM people ORDER BY 1") == rows_of(inferred_db, "SELECT * FROM person ORDER BY 1")
    # its summary view follows the rename (the plan names the entity by its handle)
    assert {"name": "person_summary", "kind": "entity_summary", "table": "people"} in m["views"]
    assert rows_of(db, "SELECT * FROM person_summary ORDER BY 1") == \
        rows_of(inferred_db, "SELECT * FROM person_summary ORDER BY 1")


def test_rename_record_table(demo, tmp_path):
    _, _, _, text, inferred_db, _ = demo
    edited = edit(text, '[[record]]\nfile = "titles"\ntable = "titles"', '[[record]]\nfile = "titles"\ntable = "books"')
    edited = edit(edited, 'name = "titles_summary"\nkind = "record_summary"  # record_summary | entity_summary\n'
                          'table = "titles"', 'name = "titles_summary"\nkind = "record_summary"\ntable = "books"')
    db, m = replay(demo, tmp_path, edited)
    tables = {t["name"]: t for t in m["tables"]}
    assert "titles" not in tables and tables["books"]["rows"] == 200
    assert {t["foreign_keys"][0]["references"] for t in m["tables"] if t["role"] == "bridge"} == {"books"}
    assert rows_of(db, "SELECT * FROM books ORDER BY 1") == rows_of(inferred_db, "SELECT * FROM titles ORDER BY 1")


def test_force_identity(demo, tmp_path):
    """People identified by their name instead of person_id: the two spellings become two people."""
    out, planted, _, text, _, _ = demo
    edited = edit(text, 'identity = "person_id"\nidentity_column = "person_id"\nidentity_type = "integer"',
                  'identity = "name"\nidentity_column = "name"\nidentity_type = "text"')
    edited = edit(edited, 'attributes = [\n  { key = ["name"], name = "name", type = "text" },',
                  'attributes = [\n  { key = ["person_id"], name = "person_id", type = "integer" },')
    edited = edited.replace('identity = "person_id"\nfields', 'identity = "name"\nfields')
    db, m = replay(demo, tmp_path, edited)
    (person,) = [e for e in m["entities"] if e["table"] == "person"]
    assert person["identity"] == "name" and person["attributes"] == ["person_id"]
    lists = (kept_lists(out, "contributors", ast.literal_eval)  # Python repr() (demo/generate.py)
             + kept_lists(out, "production_team", json.loads))  # JSON
    names = {p["name"]: p["person_id"] for people in lists for p in people}
    assert dict(rows_of(db, "SELECT name, person_id FROM person")) == names
    two = planted["two_spellings"]  # planted.json: one person, two spellings
    spelled = {n for n, pid in names.items() if pid == two["person_id"]}
    assert spelled == set(two["names"]) and len(spelled) == 2


def test_force_identity_on_one_column_only_is_refused(demo, tmp_path):
    _, _, _, text, _, _ = demo
    old = 'identity = "person_id"\nfields = [  # link attributes (kept on the bridge)\n  { key = ["department"]'
    edited = edit(text, old, old.replace('"person_id"', '"name"'))
    with pytest.raises(InvalidPlan) as exc:
        replay(demo, tmp_path, edited)
    message = str(exc.value)
    line = line_of(edited, 'identity = "name"')
    assert at_line(message, line)
    assert "production_team" in message and "hint:" in message and "handle of its own" in message


def test_forbid_merge(demo, tmp_path):
    """production_team given an entity handle of its own: its people get a table of their own."""
    out, planted, _, text, _, _ = demo
    edited = edit(text, 'table = "title_production_team"\nentity = "person"',
                  'table = "title_production_team"\nentity = "staff"')
    edited = edit(edited, 'lists = ["title_contributors", "title_production_team"]', 'lists = ["title_contributors"]')
    db, m = replay(demo, tmp_path, edited)
    groups = {e["table"]: e for e in m["entities"]}
    assert groups["person"]["members"] == ["contributions:contributors"]
    assert groups["staff"]["members"] == ["contributions:production_team"]
    assert groups["staff"]["attributes"] == ["name"]
    tables = {t["name"]: t for t in m["tables"]}
    assert tables["title_production_team"]["foreign_keys"][1]["references"] == "staff"
    creators = {p["person_id"] for people in kept_lists(out, "contributors", ast.literal_eval) for p in people}
    staff = {p["person_id"] for people in kept_lists(out, "production_team", json.loads) for p in people}
    assert {pid for (pid,) in rows_of(db, "SELECT person_id FROM person")} == creators
    assert {pid for (pid,) in rows_of(db, "SELECT person_id FROM staff")} == staff
    # the people planted in both lists are now in both tables (planted.json: in_both_lists)
    assert set(planted["in_both_lists"]) <= creators & staff


def test_forbid_merge_alone_names_the_view_to_fix(demo, tmp_path):
    _, _, _, text, _, _ = demo
    edited = edit(text, 'table = "title_production_team"\nentity = "person"',
                  'table = "title_production_team"\nentity = "staff"')
    with pytest.raises(InvalidPlan) as exc:
        replay(demo, tmp_path, edited)
    message = str(exc.value)
    line = line_of(edited, '"title_production_team"', after='name = "person_summary"')
    assert at_line(message, line)
    assert "person_summary" in message and "hint: remove 'title_production_team'" in message


NEW_VIEW = '''
[[view]]
name = "titles_people"
kind = "record_summary"
table = "titles"
lists = ["title_contributors"]
separator = " | "
[[view.pick]]
name = "first_illustrator"
list = "title_contributors"
attribute = "role"
value = "illustrator"
'''


def test_add_view(demo, tmp_path):
    out, _, files, text, _, _ = demo
    db, m = replay(demo, tmp_path, text + NEW_VIEW)
    assert m["views"][-1] == {"name": "titles_people", "kind": "record_summary", "table": "titles"}
    names = dict(rows_of(db, "SELECT person_id, name FROM person"))
    got = {key: (n, shown, pick) for key, n, shown, pick in rows_of(
        db, "SELECT title_key, number_of_contributors, contributors, first_illustrator FROM titles_people")}
    _, titles = read_csv(out / TITLES)
    keys = list(dict.fromkeys(r["title_key"] for r in titles))
    for key, people in zip(keys, kept_lists(out, "contributors", ast.literal_eval)):
        illustrators = [p for p in people if p["role"] == "illustrator"]
        assert got[key] == (len(people), " | ".join(names[p["person_id"]] for p in people) or None,
                            names[illustrators[0]["person_id"]] if illustrators else None), key
    # the added view survives a plan of the plan
    plan = tmp_path / "edited.toml"
    assert "first_illustrator" in make_plan(files, plan_path=str(plan))


# --- invalid plans --------------------------------------------------------------------------

def test_toml_syntax_error_names_its_line(demo, tmp_path):
    _, _, _, text, _, _ = demo
    edited = edit(text, 'how = "left"', 'how = "left')
    with pytest.raises(InvalidPlan) as exc:
        replay(demo, tmp_path, edited)
    line = line_of(edited, 'how = "left')
    assert f"at line {line}," in str(exc.value) and "hint:" in str(exc.value)
    assert not (tmp_path / "edited.db").exists()


@pytest.mark.parametrize("old, new, words", [
    ('kind = "value-list"', 'kind = "value-lst"', ["unknown kind 'value-lst'", "entity-list"]),
    ('name = "page_count", type = "integer"', 'name = "page_count", type = "int"', ["unknown type 'int'", "integer"]),
    ('identity_type = "integer"', 'identity_type = "int"', ["identity_type 'int'", "integer"]),
    ('kind = "entity_summary"', 'kind = "entity_sumary"', ["unknown kind 'entity_sumary'", "record_summary"]),
    ('lists = ["title_subjects"]', 'lists = ["title_subject"]', ["'title_subject'", "use one of", "title_subjects"]),
    ('table = "subject"\nlists', 'table = "subjects"\nlists', ["names table 'subjects'", "use one of"]),
    ('duplicates = "first"', 'duplicates = "frist"', ["'frist'", "first, last, refuse"]),
    ('how = "left"', 'how = "outer"', ["'outer'", "left, inner, full"]),
])
def test_semantic_errors_name_the_line_and_give_a_hint(demo, tmp_path, old, new, words):
    _, _, _, text, _, _ = demo
    edited = edit(text, old, new)
    with pytest.raises(InvalidPlan) as exc:
        replay(demo, tmp_path, edited)
    message = str(exc.value)
    changed = new.split("\n")[0]
    assert at_line(message, line_of(edited, changed)), message
    assert "\n  hint: " in message
    for w in words:
        assert w in message
    assert not (tmp_path / "edited.db").exists()


def test_view_without_kind(demo, tmp_path):
    _, _, _, text, _, _ = demo
    edited = edit(text, 'name = "format_summary"\nkind = "entity_summary"  # record_summary | entity_summary\n',
                  'name = "format_summary"\n')
    with pytest.raises(InvalidPlan) as exc:
        replay(demo, tmp_path, edited)
    line = line_of(edited, 'name = "format_summary"')
    assert at_line(str(exc.value), line)
    assert "lacks kind" in str(exc.value)


@pytest.mark.parametrize("name, taken", [("titles", "titles"), ("person_summary", "person_summary")])
def test_view_name_already_taken(demo, tmp_path, name, taken):
    """A view named like a table or another view: refused before anything is written."""
    _, _, _, text, _, _ = demo
    edited = text + NEW_VIEW.replace('name = "titles_people"', f'name = "{name}"')
    with pytest.raises(InvalidPlan) as exc:
        replay(demo, tmp_path, edited)
    assert f"view name {taken!r} is already taken" in str(exc.value) and "hint:" in str(exc.value)
    assert not (tmp_path / "edited.db").exists()


def test_pick_without_list(demo, tmp_path):
    _, _, _, text, _, _ = demo
    edited = text + NEW_VIEW.replace('list = "title_contributors"\n', "")
    with pytest.raises(InvalidPlan) as exc:
        replay(demo, tmp_path, edited)
    # the line of the pick (its header, or its first key)
    line = line_of(edited, '[[view.pick]]')
    assert at_line(str(exc.value), line) or at_line(str(exc.value), line + 1)
    assert "lacks list" in str(exc.value)


# --- a plan that no longer fits the data ------------------------------------------------------

def drifted(demo, tmp_path, change) -> list[str]:
    """Copies of the demo files with ``change(name, header, rows)`` applied; returns their paths."""
    out = demo[0]
    paths = []
    for name in (TITLES, CONTRIBUTIONS):
        header, rows = read_csv(out / name)
        header, rows = change(name, header, rows)
        write_csv(tmp_path / name, header, rows)
        paths.append(str(tmp_path / name))
    return paths


def drop_column(file: str, column: str):
    def change(name, header, rows):
        if name != file:
            return header, rows
        return [h for h in header if h != column], [{k: v for k, v in r.items() if k != column} for r in rows]
    return change


def new_key(column: str, loads, dumps):
    def change(name, header, rows):
        if name != CONTRIBUTIONS:
            return header, rows
        for r in rows:
            try:
                people = loads(r[column])
            except (ValueError, SyntaxError):
                continue  # blank or malformed cells stay as they are
            r[column] = dumps([dict(p, email=f"p{p['person_id']}@example.org") for p in people])
        return header, rows
    return change


def new_column(name, header, rows):
    if name != TITLES:
        return header, rows
    return header + ["isbn"], [dict(r, isbn=f"978-{n:09d}") for n, r in enumerate(rows)]


@pytest.mark.parametrize("change, words", [
    (drop_column(TITLES, "price"), ["'price'", "gone from the data"]),
    (drop_column(CONTRIBUTIONS, "formats"), ["'formats'", "gone from the data"]),
    (new_key("contributors", ast.literal_eval, repr), ["'contributors'", "email", "write a fresh plan"]),
    (new_key("production_team", json.loads, json.dumps), ["'production_team'", "email"]),
    (new_column, ["isbn", "does not know"]),
], ids=["column-removed", "nested-column-removed", "new-key-repr", "new-key-json", "new-column"])
def test_plan_that_no_longer_fits_the_data(demo, tmp_path, change, words):
    text = demo[3]
    plan = tmp_path / "plan.toml"
    plan.write_text(text, encoding="utf-8")
    files = drifted(demo, tmp_path, change)
    db = tmp_path / "drifted.db"
    with pytest.raises(InvalidPlan) as exc:
        build_database(files, str(db), plan_path=str(plan))
    message = str(exc.value)
    assert at_line(message, r"\d+") and "hint:" in message
    for w in words:
        assert w in message
    assert not db.exists()


# Orders with a single object (a sub-object and a list inside), a list of objects without identity
# (lists inside), a wide object (a 1:1 child), people with a key that only ever holds an empty list.
ORDERS = [
    {"order_no": "A1", "address": {"city": "Wrenfold", "geo": {"lat": 51.5, "lon": -0.1}, "phones": ["555-1"]},
     "lines": [{"label": "kettle", "qty": 2, "tags": ["steel", "red"], "parts": [{"part": "lid", "weight": 3}]},
               {"label": "mug", "qty": 1, "tags": ["red"], "parts": []}],
     "spec": {**{f"f{i}": i for i in range(22)}, "notes": ["a"]},
     "people": [{"pid": 1, "name": "Ann", "tags": []}, {"pid": 2, "name": "Bo", "tags": []}]},
    {"order_no": "A2", "address": {"city": "Saltmere", "geo": {"lat": 50.25, "lon": 1.5}, "phones": []},
     "lines": [{"label": "teapot", "qty": 7, "tags": ["blue"], "parts": [{"part": "spout", "weight": 1}]}],
     "spec": {**{f"f{i}": 2 * i for i in range(22)}, "notes": []},
     "people": [{"pid": 1, "name": "Ann", "tags": []}]},
]


def write_orders(path, orders) -> None:
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(list(orders[0]))
        for o in orders:
            w.writerow([v if isinstance(v, str) else json.dumps(v) for v in o.values()])


def test_round_trip_of_other_nested_shapes(tmp_path):
    """Object columns, child lists, lists inside them, a wide object: an unedited plan replays
    to the same database; a new key inside a list of child objects is refused."""
    path = tmp_path / "orders.csv"
    write_orders(path, ORDERS)
    text = make_plan([str(path)])
    for kind in ("object-columns", "child-list", "object-child", "entity-list"):
        assert f'kind = "{kind}"' in text
    (tmp_path / "plan.toml").write_text(text, encoding="utf-8")
    build_database([str(path)], str(tmp_path / "inferred.db"))
    build_database([str(path)], str(tmp_path / "replayed.db"), plan_path=str(tmp_path / "plan.toml"))
    assert dump(tmp_path / "replayed.db") == dump(tmp_path / "inferred.db")
    drifted_orders = [dict(o, lines=[dict(line, colour="red") for line in o["lines"]]) for o in ORDERS]
    write_orders(path, drifted_orders)
    with pytest.raises(InvalidPlan, match="nested column 'lines' has key.* colour") as exc:
        build_database([str(path)], str(tmp_path / "drifted.db"), plan_path=str(tmp_path / "plan.toml"))
    line = line_of(text, 'column = "lines"')
    assert at_line(str(exc.value), line)


def test_plan_that_no_longer_fits_the_data_cli(demo, tmp_path, capsys):
    plan = tmp_path / "plan.toml"
    plan.write_text(demo[3], encoding="utf-8")
    files = drifted(demo, tmp_path, drop_column(TITLES, "price"))
    rc = main(["build", *files, "--plan", str(plan), "--db", str(tmp_path / "x.db")])
    err = capsys.readouterr().err
    assert rc == 2 and at_line(err.removeprefix("normalise: "), r"\d+") and "'price'" in err


def test_input_file_the_plan_does_not_name(demo, tmp_path):
    """Files kept apart, but the plan has no [[record]] for one of them: refused, not silently dropped."""
    files = demo[2]
    text = make_plan(files, join_options=JoinOptions(separate=True))
    start = text.index('[[record]]\nfile = "contributions"')
    end = text.index("# An entity table")
    edited = text[:start] + text[end:]
    edited = edited[:edited.index("[[view]]")]  # its views go with it
    with pytest.raises(InvalidPlan) as exc:
        replay(demo, tmp_path, edited)
    assert "contributions" in str(exc.value) and "no [[record]]" in str(exc.value)


def test_column_types_and_bookkeeping_tables_are_declared_once():
    """``plan.TYPES`` and ``plan.META_TABLES`` are the one declaration; what maps them covers them exactly."""
    from normalise import write
    from normalise.model.plan import META_ROLES, META_TABLES, TEXT_TYPES, TYPES, Plan
    from normalise.model.schema import add_tables
    from normalise.report import catalog, dictionary

    assert list(write.TYPES) == list(TYPES) and list(dictionary.TYPE_WORDS) == list(TYPES)
    assert set(TEXT_TYPES) <= set(TYPES) and set(catalog._SQL_TYPES.values()) <= set(TYPES)
    plan = Plan()
    add_tables(plan)  # no records: the bookkeeping tables alone, in their declared order
    assert [(t.name, t.role) for t in plan.tables] == [(name, m.role) for name, m in META_TABLES.items()]
    assert {t.role for t in plan.tables} == META_ROLES
