"""The Python API a notebook uses (issues 16 and 17): one path or many, a result whose manifest fields are
attributes, and any table or view as a pandas DataFrame.

References: Python's ``sqlite3`` module reading the same database (the rows a DataFrame must hold), ``json``
(the result still serialises as the manifest), pandas' own ``read_sql_query`` semantics for nullable types.
"""

from __future__ import annotations

import json
import sqlite3

import pandas as pd
import pytest

from demo.generate import generate
from normalise import build_database

BOOKS = 'key,title,tags\nb1,Tide tables,"[""sea"", ""maps""]"\nb2,Night sky,\nb3,Salt marsh,"[""sea""]"\n'


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo")
    generate(folder, size=60, seed=3)
    built = build_database([str(folder / "titles.csv"), str(folder / "contributions.csv")],
                           str(folder / "demo.db"))
    return folder / "demo.db", built


@pytest.mark.parametrize("given", ["str", "path", "list"])
def test_one_path_or_many(tmp_path, given):
    path = tmp_path / "books.csv"
    path.write_text(BOOKS, encoding="utf-8")
    paths = {"str": str(path), "path": path, "list": [str(path)]}[given]
    built = build_database(paths, str(tmp_path / f"{given}.db"))
    assert [i["path"] for i in built.inputs] == [str(path)]
    assert built.inputs[0]["records_loaded"] == 3


def test_the_result_is_the_manifest_with_attributes(demo):
    _, built = demo
    assert isinstance(built, dict)
    for key in built:
        assert getattr(built, key) == built[key]
    assert json.loads(json.dumps(built)) == json.loads(json.dumps(dict(built)))
    with pytest.raises(AttributeError, match="no field"):
        built.no_such_field


def test_every_table_and_view_as_a_frame_holds_the_databases_rows(demo):
    db, built = demo
    with sqlite3.connect(db) as con:
        for name in built.names:
            frame = built.frame(name)
            cursor = con.execute(f'SELECT * FROM "{name}"')
            columns = [d[0] for d in cursor.description]
            expected = sorted(map(repr, cursor.fetchall()))
            assert list(frame.columns) == columns, name
            got = sorted(repr(tuple(None if pd.isna(v) else v for v in row))
                         for row in frame.astype(object).itertuples(index=False))
            assert len(got) == len(expected), name
            assert got == expected, name


def test_keys_in_a_frame_are_integers_even_with_nulls(tmp_path):
    path = tmp_path / "books.csv"
    path.write_text(BOOKS, encoding="utf-8")
    built = build_database(str(path), str(tmp_path / "b.db"))
    frame = built.frame("books")
    assert str(frame["book_sk"].dtype) == "Int64"


def test_an_unknown_name_says_the_closest(demo):
    _, built = demo
    with pytest.raises(KeyError, match="person"):
        built.frame("persons")
