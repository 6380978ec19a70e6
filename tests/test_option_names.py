"""Options that name a file, column or field the inputs do not have are refused before anything is written.

Each refusal exits 2 with one line: the option as written, what was expected and the names that do exist, the
closest first. The exports are invented in the tests (an invented small press and its issue tracker).
"""

from __future__ import annotations

import json
import re
import subprocess
import sys

import pytest

from normalise import build_database
from normalise.cli import main
from normalise.model.errors import UsageError
from normalise.infer import Options

BOOKS = (
    'key,title,senders,people,tags\n'
    'b1,Moss Ledger,"{""id"": 1, ""login"": ""tamsel"", ""owner"": {""id"": 5, ""name"": ""Velo Quarrick""}}",'
    '"[{""id"": 7, ""name"": ""Orla Venn"", ""role"": ""editor""}]",essays|maps\n'
    'b2,Salt Almanac,"{""id"": 2, ""login"": ""pimora"", ""owner"": {""id"": 5, ""name"": ""Velo Quarrick""}}",'
    '"[{""id"": 8, ""name"": ""Brisk Holloway"", ""role"": ""author""}, '
    '{""id"": 7, ""name"": ""Orla Venn"", ""role"": ""author""}]",maps|poetry\n'
    'b3,Tide Tables,"{""id"": 3, ""login"": ""quenby"", ""owner"": {""id"": 6, ""name"": ""Ilse Marrow""}}",'
    '"[{""id"": 8, ""name"": ""Brisk Holloway"", ""role"": ""editor""}]",poetry\n'
)

# a further file joined to books by book_key; its own list of objects
REVIEWS = (
    'book_key,reviewers,score\n'
    'b1,"[{""rid"": 31, ""name"": ""Wenna Thrush""}]",4\n'
    'b2,"[{""rid"": 32, ""name"": ""Cato Fell""}, {""rid"": 31, ""name"": ""Wenna Thrush""}]",5\n'
    'b3,"[{""rid"": 32, ""name"": ""Cato Fell""}]",3\n'
)

# JSON Lines events: a single object with an object inside (repository.owner)
EVENTS = [
    {"event_id": 1, "kind": "opened", "repository": {"id": 40, "name": "kiln", "owner": {"id": 5, "login": "velo"}}},
    {"event_id": 2, "kind": "closed", "repository": {"id": 41, "name": "loom", "owner": {"id": 6, "login": "ilse"}}},
    {"event_id": 3, "kind": "opened", "repository": {"id": 40, "name": "kiln", "owner": {"id": 5, "login": "velo"}}},
]


@pytest.fixture
def files(tmp_path):
    books = tmp_path / "books.csv"
    books.write_text(BOOKS, encoding="utf-8")
    reviews = tmp_path / "reviews.csv"
    reviews.write_text(REVIEWS, encoding="utf-8")
    events = tmp_path / "events.jsonl"
    events.write_text("".join(json.dumps(e) + "\n" for e in EVENTS), encoding="utf-8")
    return {"books": str(books), "reviews": str(reviews), "events": str(events)}


def refused(capsys, argv: list[str]) -> str:
    """Run the command, which must exit 2 with one line on stderr; that line."""
    rc = main(argv)
    out, err = capsys.readouterr()
    assert rc == 2, (out, err)
    lines = err.splitlines()
    assert len(lines) == 1, err
    return lines[0]


def names_listed(message: str) -> list[str]:
    """The names in the closing parentheses of a message: ``(columns: a, b, ...)``."""
    listed = re.search(r"\((?:columns|fields|files|further files|lists|columns with objects|"
                       r"fields with objects): ([^()]*)\)$", message)
    assert listed, message
    return listed.group(1).split(", ")


# (files, option arguments, the start of the message, the name listed first)
REFUSED = [
    (["books"], ["--identity", "sender=id"],
     "--identity sender=id: books.csv has no column 'sender'", "senders"),
    (["books"], ["--identity", "people=pid"],
     "--identity people=pid: no field 'pid' in the objects of column 'people'", "id"),
    (["books"], ["--identity", "bks:people=id"],
     "--identity bks:people=id: no input file is called 'bks'", "books"),
    (["books"], ["--identity", "title=id"],
     "--identity title=id: column 'title' of books.csv holds no objects", "senders"),
    (["books"], ["--identity", "books:senders.ownr=id"],
     "--identity books:senders.ownr=id: no field 'ownr' in the objects of column 'senders'", "owner"),
    (["books"], ["--identity", "books:senders.owner=nme"],
     "--identity books:senders.owner=nme: no field 'nme' in the objects of column 'senders.owner'", "name"),
    (["books"], ["--identity", "books:senders.login=id"],
     "--identity books:senders.login=id: 'senders.login' in books.csv holds no objects", "owner"),
    (["books"], ["--match", "people=nam"],
     "--match people=nam: no field 'nam' in the objects of column 'people'", "name"),
    (["books"], ["--merge", "books:people,books:sendr"],
     "--merge books:people,books:sendr: books.csv has no column 'sendr'", "senders"),
    (["books"], ["--no-merge", "books:peeple"],
     "--no-merge books:peeple: books.csv has no column 'peeple'", "people"),
    (["books"], ["--key", "book=key"],
     "--key book=key: no input file is called 'book'", "books"),
    (["books"], ["--key", "books=kee"],
     "--key books=kee: books.csv has no column 'kee'", "key"),
    (["books"], ["--decode", "tag=delimited:|"],
     "--decode tag=delimited:|: books.csv has no column 'tag'", "tags"),
    (["books"], ["--pick", "first_editor=peple:role=editor"],
     "--pick 'first_editor=peple:role=editor': no list of entities comes from 'peple'", "people"),
    (["books"], ["--pick", "first_editor=people:rol=editor"],
     "--pick 'first_editor=people:rol=editor': 'rol' is not a link attribute of book_people", "role"),
    (["books", "reviews"], ["--identity", "reviews:reviewers=id"],
     "--identity reviews:reviewers=id: no field 'id' in the objects of column 'reviewers'", "rid"),
    (["books", "reviews"], ["--identity", "reviewer=rid"],
     "--identity reviewer=rid: none of books.csv, reviews.csv has a column 'reviewer'", "reviewers"),
    (["books", "reviews"], ["--decode", "scores=text"],
     "--decode scores=text: none of books.csv, reviews.csv has a column 'scores'", "score"),
    (["books", "reviews"], ["--key", "reviews=book_kee"],
     "--key reviews=book_kee: reviews.csv has no column 'book_kee'", "book_key"),
    (["books", "reviews"], ["--join", "reviews.bookkey"],
     "--join reviews.bookkey: reviews.csv has no column 'bookkey'", "book_key"),
    (["books", "reviews"], ["--join", "review.book_key"],
     "--join review.book_key: no further input file is called 'review'", "reviews"),
    (["books", "reviews"], ["--join", "reviews.book_key=kay"],
     "--join reviews.book_key=kay: the main file books.csv has no column 'kay'", "key"),
    (["events"], ["--identity", "events:repository.ownr=id"],
     "--identity events:repository.ownr=id: no field 'ownr' in the objects of column 'repository'", "owner"),
    (["events"], ["--identity", "events:repository.owner=ids"],
     "--identity events:repository.owner=ids: no field 'ids' in the objects of column 'repository.owner'", "id"),
    (["events"], ["--merge", "events:repository.owner,events:repositry"],
     "--merge events:repository.owner,events:repositry: events.jsonl has no column 'repositry'", "repository"),
]


@pytest.mark.parametrize("command", ["build", "plan"])
@pytest.mark.parametrize("inputs, option, message, first", REFUSED,
                         ids=[" ".join(case[1]) for case in REFUSED])
def test_option_naming_nothing_is_refused(files, tmp_path, capsys, command, inputs, option, message, first):
    db, plan = tmp_path / "out.db", tmp_path / "plan.toml"
    where = ["--db", str(db)] if command == "build" else ["-o", str(plan)]
    line = refused(capsys, [command, *(files[i] for i in inputs), *where, *option])
    assert line.startswith(f"normalise: {message}"), line
    assert names_listed(line)[0] == first, line
    assert not db.exists() and not plan.exists()
    assert not list(tmp_path.glob("out.db*")), "no temporary database file either"


def test_members_of_a_merge_name_their_file(files, tmp_path, capsys):
    """--merge and --no-merge take FILE:COLUMN only (as the manifest's entity members are named)."""
    line = refused(capsys, ["build", files["books"], "--db", str(tmp_path / "out.db"), "--merge", "people,senders"])
    assert line == ("normalise: --merge people,senders: 'people' names no file; expected FILE:COLUMN, "
                    "FILE the file name without extension, e.g. books:people")
    assert not (tmp_path / "out.db").exists()


def test_a_joined_column_is_named_by_its_own_file(files, tmp_path, capsys):
    """A joined file's column is FILE:COLUMN with that file's stem; the main file's stem is refused with a hint."""
    line = refused(capsys, ["build", files["books"], files["reviews"], "--db", str(tmp_path / "out.db"),
                            "--no-merge", "books:reviewers"])
    assert line == ("normalise: --no-merge books:reviewers: books.csv has no column 'reviewers'; "
                    "name it reviews:reviewers (FILE is the file the column comes from)")


@pytest.mark.parametrize("chunk_rows", ["5000", "0"])  # one CSV file: streamed in chunks, or read whole
def test_both_build_paths_check(files, tmp_path, capsys, chunk_rows):
    line = refused(capsys, ["build", files["books"], "--db", str(tmp_path / "out.db"), "--chunk-rows", chunk_rows,
                            "--identity", "sender=id"])
    assert "has no column 'sender'" in line
    assert not (tmp_path / "out.db").exists()


def test_existing_database_is_left_alone(files, tmp_path, capsys):
    """With --replace, a refused option leaves the database that is there as it was."""
    db = tmp_path / "out.db"
    assert main(["build", files["books"], "--db", str(db), "--quiet"]) == 0
    before = db.read_bytes()
    refused(capsys, ["build", files["books"], "--db", str(db), "--replace", "--key", "books=kee"])
    assert db.read_bytes() == before


def test_python_api_refuses_too(files, tmp_path):
    db = tmp_path / "out.db"
    with pytest.raises(UsageError, match=r"^options\.identities=\{'people': 'pid'\}: no field 'pid' .*\(fields: id, name, role\)$"):
        build_database([files["books"]], str(db), options=Options(identities={"people": "pid"}))
    with pytest.raises(UsageError, match=r"formats=\{'tag': 'json'\}: books.csv has no column 'tag' \(columns: tags, "):
        build_database([files["books"]], str(db), formats={"tag": ("json", None)})
    assert not db.exists()


def test_a_real_process_exits_2_with_one_line(files, tmp_path):
    db = tmp_path / "out.db"
    done = subprocess.run([sys.executable, "-m", "normalise", "build", files["books"], "--db", str(db),
                           "--identity", "sender=id"], capture_output=True, text=True, timeout=120)
    assert done.returncode == 2
    assert done.stderr == ("normalise: --identity sender=id: books.csv has no column 'sender' "
                           "(columns: senders, key, title, people, tags)\n")
    assert not db.exists()


def manifest_of(argv: list[str], tmp_path) -> dict:
    manifest = tmp_path / "run.json"
    assert main([*argv, "--manifest", str(manifest), "--quiet"]) == 0
    return json.loads(manifest.read_text(encoding="utf-8"))


def tables(m: dict) -> dict:
    return {t["name"]: t for t in m["tables"]}


def test_options_that_name_something_still_work(files, tmp_path):
    db = tmp_path / "a.db"
    m = manifest_of(["build", files["books"], "--db", str(db), "--identity", "people=", "--key", "books=key",
                     "--decode", "tags=delimited:|", "--pick", "first_editor=tags:list_position=1"], tmp_path)
    assert db.exists()
    assert tables(m)["book_people"]["role"] == "child"  # no identity: the objects are child rows
    assert tables(m)["books"]["natural_key"] == ["key"]
    # the main file's stem, the joined file's stem and the bare column all name a joined column
    for ref in ("reviews:reviewers", "books:reviewers", "reviewers"):
        db = tmp_path / f"{ref.replace(':', '_')}.db"
        m = manifest_of(["build", files["books"], files["reviews"], "--db", str(db), "--identity", f"{ref}=",
                         "--join", "reviews.book_key=key", "--no-merge", "reviews:reviewers"], tmp_path)
        assert db.exists()
        assert [t["role"] for t in m["tables"] if t["name"].endswith("_reviewers")] == ["child"], ref


def test_a_path_into_nested_objects_is_accepted(files, tmp_path, capsys):
    """FILE:COLUMN.PATH names the objects inside a column's objects (entity members of single objects)."""
    assert main(["plan", files["events"], "--identity", "events:repository.owner=id",
                 "--merge", "events:repository,events:repository.owner", "--no-merge", "events:repository"]) == 0
    assert "[[record]]" in capsys.readouterr().out
