"""Build open API event payloads whose users sit in many places, exported as JSON Lines and CSV.

Dataset: ``api.github.com/index.json`` of the npm package ``@octokit/webhooks-examples`` version 7.6.1
(licence MIT, the ``license`` field of its package.json), fetched at test time with ``npm pack`` and never
kept in the repository. It lists ``{"name": event kind, "examples": [payload, ...]}``; a payload holds users
as single objects (``sender``, ``repository.owner``, ``issue.user``, ``issue.assignee``,
``issue.milestone.creator``, ``pull_request.head.repo.owner``, ``comment.user``, ...) and in lists
(``issue.assignees``, ``pull_request.requested_reviewers``).

The test writes the exports a system gives: one JSON Lines file per event kind (``issues``,
``pull_request``, ``issue_comment``), one line per example payload, its top-level keys as columns; the same
records as a CSV written by pandas' ``DataFrame(rows).to_csv`` with the nested values as JSON text
(``json.dumps``); and one build of the three JSON Lines files at once.

A user, for this test, is a JSON object that carries the keys ``login``, ``id`` and ``type`` (``User``,
``Organization``), wherever it is in a payload: the shape of every user in these payloads. The
``organization`` objects carry ``login`` and ``id`` but no ``type``: they are organisations of another
shape, not users. Every expected fact (the users, their distinct ids, the payloads each one is in, the
places they are in) is computed here with plain Python from ``index.json``, never from the tool's output
and never hard-coded.
"""

from __future__ import annotations

import json
import sqlite3
from collections import defaultdict

import pandas as pd
import pytest

from normalise.infer import Options
from normalise.pipeline import build_database
from tests.open_data import check_lossless, check_pragmas, npm_package

PACKAGE, VERSION, LICENCE = "@octokit/webhooks-examples", "7.6.1", "MIT"
KINDS = ("issues", "pull_request", "issue_comment")
USER_KEYS = {"login", "id", "type"}
# issue 12: flattening these payloads gave a record table of 111 columns; no table may be as wide. Fields of an
# object its identity does not determine stay on the row holding it (pull_request.head.repo.pushed_at), so a
# table may pass the widest object's own keys (a repository's 78), but not by that much.
WIDEST = 111

# What each build is: (event kind, form) per file, and the options it is built with
CASES = {
    "issues.jsonl": ([("issues", "jsonl")], None),
    "pull_request.jsonl": ([("pull_request", "jsonl")], None),
    "issue_comment.jsonl": ([("issue_comment", "jsonl")], None),
    "issues.csv": ([("issues", "csv")], None),
    "pull_request.csv": ([("pull_request", "csv")], None),
    "three files": ([(k, "jsonl") for k in KINDS], None),
}


# --- facts, from the payloads ---------------------------------------------------------------------------

def is_user(value) -> bool:
    return isinstance(value, dict) and USER_KEYS <= value.keys()


def users_in(payload: dict) -> list[tuple[str, dict]]:
    """(place, user) for every user in a payload, in document order; a place is the keys leading to the
    user joined by dots, list positions left out (``issue.assignees``)."""
    out = []

    def walk(value, path):
        if isinstance(value, dict):
            if is_user(value):
                out.append((".".join(path), value))
            for k, v in value.items():
                walk(v, path + [k])
        elif isinstance(value, list):
            for v in value:
                walk(v, path)

    walk(payload, [])
    return out


def places(files: list[tuple[str, list[dict]]]) -> dict:
    """{(file, record index, place): [user id, ...] in document order}."""
    out: dict = defaultdict(list)
    for stem, payloads in files:
        for i, p in enumerate(payloads):
            for place, user in users_in(p):
                out[(stem, i, place)].append(user["id"])
    return dict(out)


def records_per_user(files) -> dict:
    """{user id: the number of distinct records (payloads) the user is in, anywhere}."""
    seen = defaultdict(set)
    for (stem, i, _), ids in places(files).items():
        for uid in ids:
            seen[uid].add((stem, i))
    return {uid: len(r) for uid, r in seen.items()}


def user_members(files) -> set:
    """The places users are in, as the manifest names entity members: ``file:place``."""
    return {f"{stem}:{place}" for stem, _, place in places(files)}


# --- exports and builds ---------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def package(tmp_path_factory):
    return npm_package(PACKAGE, VERSION, tmp_path_factory.mktemp("npm"))


@pytest.fixture(scope="module")
def events(package) -> dict:
    index = json.loads((package / "api.github.com" / "index.json").read_text(encoding="utf-8"))
    return {e["name"]: e["examples"] for e in index}


def write_export(payloads: list[dict], where, stem: str, form: str):
    if form == "jsonl":
        path = where / f"{stem}.jsonl"
        with open(path, "w", encoding="utf-8") as f:
            for p in payloads:
                f.write(json.dumps(p, ensure_ascii=False) + "\n")
        return path
    path = where / f"{stem}.csv"
    flat = [{k: json.dumps(v, ensure_ascii=False) if isinstance(v, (dict, list)) else v for k, v in p.items()}
            for p in payloads]
    pd.DataFrame(flat).to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def build(events, tmp_path_factory):
    """build(case) -> (files, db, manifest), each case built once; files: [(stem, payloads)] in file order."""
    done = {}

    def make(case: str):
        if case not in done:
            spec, options = CASES[case]
            where = tmp_path_factory.mktemp(case.replace(" ", "_").replace(".", "_"))
            files = [(kind, events[kind]) for kind, _ in spec]
            paths = [str(write_export(events[kind], where, kind, form)) for kind, form in spec]
            db = where / "events.db"
            done[case] = files, db, build_database(paths, str(db), options=options)
        return done[case]

    return make


# --- reading the database back, by the manifest ----------------------------------------------------------

def user_tables(m: dict, files) -> list[dict]:
    """The entity tables whose members (manifest ``entities``) are places users are in."""
    wanted = user_members(files)
    names = [e["table"] for e in m["entities"] if set(e["members"]) & wanted]
    tables = {t["name"]: t for t in m["tables"]}
    return [tables[n] for n in names]


def identities(con, table: dict) -> dict:
    """{surrogate key: natural key value} of an entity table."""
    (pk,), (nk,) = table["primary_key"], table["natural_key"]
    return dict(con.execute(f'SELECT "{pk}", "{nk}" FROM "{table["name"]}"'))


def owner_key(table: dict, tables: dict) -> dict | None:
    """The foreign key of a child or bridge row to the row owning it (a column no input value fills)."""
    sourced = {c["name"]: c["source"] for c in table["columns"]}
    (fk,) = [fk for fk in table["foreign_keys"] if sourced[fk["columns"][0]] is None
             and tables[fk["references"]]["role"] in ("record", "child", "bridge")]
    return fk


def row_places(con, name: str, tables: dict, memo: dict) -> dict:
    """{row key: (file, record index, list positions)} of a record, child or bridge table's rows; a
    record's index is its rank in key order (record keys grow in file order, DEVELOPERS.md "Keys")."""
    if name in memo:
        return memo[name]
    table = tables[name]
    (pk,) = table["primary_key"]
    if table["role"] == "record":
        stem = table["sources"][0]["file"]
        keys = [k for (k,) in con.execute(f'SELECT "{pk}" FROM "{name}" ORDER BY "{pk}"')]
        memo[name] = {k: (stem, i, ()) for i, k in enumerate(keys)}
        return memo[name]
    fk = owner_key(table, tables)
    owners = row_places(con, fk["references"], tables, memo)
    position = f'"{table["position_column"]}"' if table["position_column"] else "NULL"
    out = {}
    for k, owner, pos in con.execute(f'SELECT "{pk}", "{fk["columns"][0]}", {position} FROM "{name}"'):
        stem, i, positions = owners[owner]
        out[k] = (stem, i, positions + ((pos,) if pos is not None else ()))
    memo[name] = out
    return out


def stored_places(db, m: dict, people: list[dict]) -> dict:
    """{(file, record index, place): [user id, ...]} read back through every foreign key to a table of users,
    on record, child and bridge rows; the place is the table's source column and the key column's source."""
    tables = {t["name"]: t for t in m["tables"]}
    found = defaultdict(list)
    memo: dict = {}
    with sqlite3.connect(db) as con:
        ids = {p["name"]: identities(con, p) for p in people}
        for table in m["tables"]:
            if table["role"] not in ("record", "child", "bridge"):
                continue
            where = [s["column"] for s in table["sources"]]
            prefix = where[0] if where and where[0] else ""
            sourced = {c["name"]: c["source"] for c in table["columns"]}
            rows = row_places(con, table["name"], tables, memo)
            (pk,) = table["primary_key"]
            for fk in table["foreign_keys"]:
                if fk["references"] not in ids:
                    continue
                column = fk["columns"][0]
                if sourced[column] is None:
                    assert table["role"] == "bridge"  # a bridge's key to its entity: the list itself
                    place = prefix
                else:
                    place = f"{prefix}.{sourced[column]}" if prefix else sourced[column]
                got = [(rows[k], v) for k, v in
                       con.execute(f'SELECT "{pk}", "{column}" FROM "{table["name"]}" WHERE "{column}" IS NOT NULL')]
                for (stem, i, positions), v in sorted(got, key=lambda x: x[0][2]):
                    found[(stem, i, place)].append(ids[fk["references"]][v])
    return dict(found)


def summary_totals(db, m: dict, people: list[dict]) -> dict:
    """{user id: records_in_total} from the entity summary view (kind entity_summary in the manifest) of
    each table of users."""
    out = {}
    with sqlite3.connect(db) as con:
        for p in people:
            (view,) = [v["name"] for v in m["views"] if v["kind"] == "entity_summary" and v["table"] == p["name"]]
            (nk,) = p["natural_key"]
            for uid, total in con.execute(f'SELECT "{nk}", "records_in_total" FROM "{view}"'):
                assert uid not in out
                out[uid] = total
    return out


# --- tests ------------------------------------------------------------------------------------------------

def test_package_and_licence(package, events):
    # @octokit/webhooks-examples (npm) 7.6.1: MIT, the license field of its package.json
    meta = json.loads((package / "package.json").read_text(encoding="utf-8"))
    assert (meta["name"], meta["version"], meta["license"]) == (PACKAGE, VERSION, LICENCE)
    assert set(KINDS) <= set(events)
    files = [(k, events[k]) for k in KINDS]
    # users in single objects and in lists, at several depths, in every kind
    members = user_members(files)
    assert {"issues:sender", "issues:repository.owner", "issues:issue.user", "issues:issue.assignees",
            "pull_request:pull_request.requested_reviewers", "issue_comment:comment.user"} <= members
    assert all(any(m.startswith(f"{k}:") for m in members) for k in KINDS)
    # every payload has a sender, so every user column sits beside users of other columns
    assert all(is_user(p["sender"]) for _, payloads in files for p in payloads)


@pytest.mark.parametrize("case", list(CASES))
def test_records_proof_and_pragmas(build, case):
    files, db, m = build(case)
    assert [i["rows_read"] for i in m["inputs"]] == [len(p) for _, p in files]
    assert [i["records_loaded"] for i in m["inputs"]] == [len(p) for _, p in files]
    assert all(i["rows_set_aside"] == i["rows_rejected"] == 0 for i in m["inputs"])
    assert m["cells_quarantined"] == 0
    assert m["integrity"]["reconciled"] is True
    check_lossless(m)  # every cell rebuilt from the tables equals the decoded input
    check_pragmas(db, m)  # SQLite: PRAGMA foreign_key_check, PRAGMA integrity_check


@pytest.mark.parametrize("case", list(CASES))
def test_every_user_reference_joins_the_right_user(build, case):
    files, db, m = build(case)
    people = user_tables(m, files)
    # the users of every place, read back through the foreign keys on the owning rows (record sender_sk,
    # child user_sk, bridge rows of a list), equal the users the payloads hold there, in order
    assert stored_places(db, m, people) == places(files)
    # each user id is in one table of users only, and together they hold exactly the payloads' ids
    with sqlite3.connect(db) as con:
        held = [uid for p in people for uid in identities(con, p).values()]
    assert sorted(held) == sorted(records_per_user(files))


@pytest.mark.parametrize("case", CASES)
def test_one_people_table(build, case):
    files, db, m = build(case)
    people = user_tables(m, files)
    assert len(people) == 1, [p["name"] for p in people]
    (entity,) = [e for e in m["entities"] if e["table"] == people[0]["name"]]
    # its members are exactly the places users are in, single objects and lists, in every file
    assert set(entity["members"]) == user_members(files)
    with sqlite3.connect(db) as con:
        assert set(identities(con, people[0]).values()) == set(records_per_user(files))
    assert people[0]["rows"] == len(records_per_user(files))


@pytest.mark.parametrize("case", CASES)
def test_entity_summary_counts_records(build, case):
    files, db, m = build(case)
    # records_in_total: the number of distinct records (payloads) each user is in, across all places
    assert summary_totals(db, m, user_tables(m, files)) == records_per_user(files)


@pytest.fixture(scope="module")
def merged(events, tmp_path_factory):
    """pull_request built with ``--merge`` naming every place users are in."""
    where = tmp_path_factory.mktemp("merged")
    files = [("pull_request", events["pull_request"])]
    path = write_export(events["pull_request"], where, "pull_request", "jsonl")
    db = where / "merged.db"
    return files, db, build_database([str(path)], str(db), options=Options(merge=[sorted(user_members(files))]))


def test_people_merged_on_request(merged):
    # --merge puts the requested reviewers with the other users: one table, every id, every place
    files, db, m = merged
    check_lossless(m)
    check_pragmas(db, m)
    people = user_tables(m, files)
    assert len(people) == 1
    (entity,) = [e for e in m["entities"] if e["table"] == people[0]["name"]]
    assert set(entity["members"]) == user_members(files)
    assert stored_places(db, m, people) == places(files)
    assert people[0]["rows"] == len(records_per_user(files))



def test_entity_summary_counts_records_merged(merged):
    # one table of users, so only the view's counting is left: 5346 is in 22 payloads' requested_reviewers
    files, db, m = merged
    assert summary_totals(db, m, user_tables(m, files)) == records_per_user(files)


@pytest.mark.parametrize("case", CASES)
def test_no_wide_table(build, case):
    files, db, m = build(case)
    payloads = [p for _, ps in files for p in ps]

    def leaves(value):
        if isinstance(value, dict):
            return {(k, *rest) for k, v in value.items() for rest in leaves(v)}
        return {()}

    def objects(value):
        if isinstance(value, dict):
            yield value
            for v in value.values():
                yield from objects(v)
        elif isinstance(value, list):
            for v in value:
                yield from objects(v)

    flattened = set().union(*(leaves(p) for p in payloads))
    widest_object = max(len(o) for p in payloads for o in objects(p))
    assert len(flattened) > 2 * WIDEST  # a column per path would make hundreds
    assert widest_object < WIDEST  # one object's fields fit in a table of that width
    for stem, _ in files:
        (record,) = [t for t in m["tables"] if t["role"] == "record"
                     and {"file": stem, "column": None} in t["sources"]]
        # the record table: about a column per top-level key (its nested objects are references or tables)
        assert len(record["columns"]) <= 2 * len({k for p in dict(files)[stem] for k in p}), record["name"]
    widest = max(m["tables"], key=lambda t: len(t["columns"]))
    assert len(widest["columns"]) < WIDEST, (widest["name"], len(widest["columns"]))
