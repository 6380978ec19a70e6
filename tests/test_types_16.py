"""Issue 16: PostgreSQL's own types for dates and timestamps, given back exactly; descriptions in the database.

The references, named beside each check:

* PostgreSQL's catalogue: ``format_type`` of ``pg_attribute`` for column types
  (https://www.postgresql.org/docs/current/catalog-pg-attribute.html), ``col_description`` and
  ``obj_description`` for comments (https://www.postgresql.org/docs/current/functions-info.html);
* Python's ISO 8601 parser (``datetime.date.fromisoformat``, ``datetime.datetime.fromisoformat``) for
  the instant each input text names, compared with the value PostgreSQL holds (read with psycopg);
* the input file itself, for the text a column kept as TEXT holds;
* SQLite output of the same input, view by view.
"""

from __future__ import annotations

import csv
import datetime
import sqlite3

import pytest
from hypothesis import HealthCheck, assume, given, settings

from normalise.pipeline import build_database
from tests.strategies import iso_columns
from tests.test_postgresql import (_drop, _new_schema, pg, pg_relation, pg_url, relation_names, sqlite_relation,
                                   schema)  # noqa: F401 (fixtures)

ROWS = 5_010  # the types are inferred from the first 5,000 records (pipeline.SAMPLE_ROWS); the last rows come after


def _events(n: int = ROWS) -> list[dict]:
    """Invented events: a date, timestamps in the forms exports write, and columns no native type gives back."""
    start = datetime.datetime(2023, 12, 30, 22, 15, 5, 250000)
    rows = []
    for k in range(n):
        t = start + datetime.timedelta(hours=7 * k, seconds=k, microseconds=137 * k)
        utc = t.replace(tzinfo=datetime.timezone.utc)
        paris = datetime.timezone(datetime.timedelta(hours=1))
        summer = datetime.timezone(datetime.timedelta(hours=2 if 3 < t.month < 11 else 1))
        rows.append({
            "event_id": f"E{k:05d}",
            # JavaScript's Date.toISOString: milliseconds and Z, always
            "sent": utc.strftime("%Y-%m-%dT%H:%M:%S.") + f"{t.microsecond // 1000:03d}Z",
            "day": t.date().isoformat(),
            "logged": t.strftime("%Y-%m-%d %H:%M:%S"),  # a database's text form: a space, whole seconds
            "local": t.replace(microsecond=0, tzinfo=paris).isoformat(),  # one offset throughout
            "python": (t if k % 3 else t.replace(microsecond=0)).isoformat(),  # the fraction only when not whole
            "summer": t.replace(microsecond=0, tzinfo=summer).isoformat(),  # two offsets: the instant only
            "spaced": t.strftime("%Y-%m-%dT%H:%M" if k % 2 else "%Y-%m-%d %H:%M"),  # two separators
            "due": t.date().isoformat() if k < n - 1 else "2024-02-30",  # a date that is none, after the sample
            "team": f'[{{"team_id": {k % 7}, "code": "C{k % 7}"}}, {{"team_id": {(k + 3) % 7}, "code": "C{(k + 3) % 7}"}}]',
        })
    return rows


NATIVE = {"sent": "timestamp with time zone", "day": "date", "logged": "timestamp without time zone",
          "local": "timestamp with time zone", "python": "timestamp without time zone"}
KEPT_TEXT = {"summer": "different offsets", "spaced": "different forms", "due": "'2024-02-30'"}


@pytest.fixture(scope="module")
def events(tmp_path_factory):
    out = tmp_path_factory.mktemp("events")
    rows = _events()
    path = out / "events.csv"
    with open(path, "w", newline="", encoding="utf-8") as f:
        writer = csv.DictWriter(f, fieldnames=list(rows[0]))
        writer.writeheader()
        writer.writerows(rows)
    db = str(out / "events.db")
    m = build_database([str(path)], db)
    return str(path), rows, db, m


@pytest.fixture(scope="module")
def events_pg(events, pg, pg_url):
    path, _, _, _ = events
    name = _new_schema()
    m = build_database([path], pg_url, schema=name)
    yield name, m
    _drop(pg, name)


def _column_types(pg, schema: str, table: str) -> dict[str, str]:
    """Reference: pg_attribute and format_type, the catalogue's own name of each column's type."""
    return dict(pg.execute(
        "SELECT a.attname, pg_catalog.format_type(a.atttypid, a.atttypmod) FROM pg_catalog.pg_attribute a "
        "JOIN pg_catalog.pg_class c ON c.oid = a.attrelid JOIN pg_catalog.pg_namespace n ON n.oid = c.relnamespace "
        "WHERE n.nspname = %s AND c.relname = %s AND a.attnum > 0 AND NOT a.attisdropped",
        (schema, table)).fetchall())


def test_the_plan_types_the_columns_date_and_timestamp(events):
    """The plan's types, from the first 5,000 records: the late non-date leaves ``due`` a date column."""
    _, _, _, m = events
    types = {c["name"]: c["type"] for t in m["tables"] if t["name"] == "events" for c in t["columns"]}
    assert {c: types[c] for c in [*NATIVE, *KEPT_TEXT]} == {
        "sent": "timestamp", "day": "date", "logged": "timestamp", "local": "timestamp", "python": "timestamp",
        "summer": "timestamp", "spaced": "timestamp", "due": "date"}


def test_native_types_where_every_value_comes_back_and_text_elsewhere(pg, events, events_pg):
    """DATE, TIMESTAMP and TIMESTAMP WITH TIME ZONE (offsets) where one written form gives every value back;
    TEXT for two offsets, two forms, or a value that is no date. Reference: pg_attribute / format_type."""
    schema, m = events_pg
    types = _column_types(pg, schema, "events")
    assert {c: types[c] for c in NATIVE} == NATIVE
    assert {c: types[c] for c in KEPT_TEXT} == dict.fromkeys(KEPT_TEXT, "text")
    assert types["event_sk"] == "bigint" and types["event_id"] == "text"
    assert m["integrity"]["proof"] == "exact" and m["integrity"]["cells_differing"] == 0


def test_native_values_are_the_instants_the_text_names(pg, events, events_pg):
    """Each native value is the date or instant its input text names (reference: Python's ISO 8601 parser;
    aware datetimes compare as instants), and each TEXT value is the input's text exactly."""
    from psycopg import sql

    _, rows, _, _ = events
    schema, _ = events_pg
    columns = [*NATIVE, *KEPT_TEXT]
    got = {r[0]: r[1:] for r in pg.execute(sql.SQL("SELECT {} FROM {}").format(
        sql.SQL(", ").join(map(sql.Identifier, ["event_id", *columns])), sql.Identifier(schema, "events")))}
    assert len(got) == len(rows)
    for row in rows:
        held = dict(zip(columns, got[row["event_id"]]))
        assert held["day"] == datetime.date.fromisoformat(row["day"])
        for column in ("sent", "logged", "local", "python"):
            assert held[column] == datetime.datetime.fromisoformat(row[column]), (column, row[column])
        assert held["sent"].utcoffset() is not None and held["logged"].tzinfo is None
        for column in KEPT_TEXT:
            assert held[column] == row[column]


def test_each_date_and_timestamp_column_says_how_it_is_stored(pg, events_pg):
    """The comment of each date and timestamp column (reference: PostgreSQL's col_description) names its type and
    the to_char expression that gives its text back, or why it kept TEXT (issue 16: faithful first)."""
    schema, _ = events_pg
    comments = {c: text for (t, c), text in _pg_comments(pg, schema).items() if t == "events"}
    for column, type_ in NATIVE.items():
        assert f"Stored as {type_.replace(' without time zone', '').upper()}; to_char(" in comments[column], column
    for column, why in KEPT_TEXT.items():
        assert "Kept as TEXT, ISO 8601 as written: " in comments[column] and why in comments[column], column


def _same(p, s) -> bool:
    """A PostgreSQL value and SQLite's: a native date or timestamp is the one SQLite's ISO 8601 text names
    (reference: Python's ISO 8601 parser); booleans are SQLite's 0 and 1."""
    if isinstance(p, datetime.datetime) and isinstance(s, str):
        return p == datetime.datetime.fromisoformat(s)
    if isinstance(p, datetime.date) and isinstance(s, str):
        return p == datetime.date.fromisoformat(s)
    return p == s


def test_views_give_the_same_values_as_sqlite(pg, events, events_pg):
    """Every table and view, SQLite's and PostgreSQL's, row by row (the entity summary's first and last
    records ordered by a TIMESTAMP WITH TIME ZONE on one side, by ISO text on the other)."""
    from psycopg import sql

    _, _, db, m_sqlite = events
    schema, m = events_pg
    assert any(v["kind"] == "entity_summary" for v in m["views"])
    for name in relation_names(m_sqlite):
        s_cols, _ = sqlite_relation(db, name)
        p_cols, _ = pg_relation(pg, schema, name)
        assert p_cols == s_cols, name
        key = s_cols[0]
        with sqlite3.connect(db) as lite:
            s_rows = {r[0]: r for r in lite.execute(f'SELECT * FROM "{name}"')}
        p_rows = {r[0]: r for r in pg.execute(sql.SQL("SELECT * FROM {}").format(sql.Identifier(schema, name)))}
        assert p_rows.keys() == s_rows.keys(), name
        for k, p_row in p_rows.items():
            assert all(_same(p, s) for p, s in zip(p_row, s_rows[k])), (name, key, k, p_row, s_rows[k])
    summary = next(v["name"] for v in m["views"] if v["kind"] == "entity_summary")
    assert "first_sent" in pg_relation(pg, schema, summary)[0]


def test_the_proof_reads_native_columns_as_their_text(events, pg_url, pg, monkeypatch):
    """The lossless proof reads a native column through its form: a form that writes a space where the input
    has "T" is caught, and nothing is written (the schema stays absent; reference: pg_namespace)."""
    from normalise.model.datetimes import TextForm
    from normalise.prove import LossDetected

    path, _, _, _ = events
    pattern = TextForm.pattern
    monkeypatch.setattr(TextForm, "pattern", lambda self: pattern(self).replace('"T"', " "))
    name = _new_schema()
    try:
        with pytest.raises(LossDetected, match="sent|python|local"):
            build_database([path], pg_url, schema=name)
        assert not pg.execute("SELECT count(*) FROM pg_catalog.pg_namespace WHERE nspname = %s", (name,)).fetchone()[0]
    finally:
        _drop(pg, name)


@given(iso_columns())
@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
def test_every_form_comes_back_from_postgresql(pg, column):
    """Any column of one ISO 8601 form: stored in the form's type, PostgreSQL's value is the instant Python's
    ISO 8601 parser reads (``fromisoformat``), and ``to_char`` through the form gives each text back exactly.
    Reference: a real PostgreSQL server, and Python's ``datetime``."""
    from normalise.model.datetimes import text_form

    kind, values = column
    form, why = text_form(kind, values)
    if form is None:  # a fraction that is whole in every value but written out where others are not, say
        assume(False)
    with pg.transaction():
        pg.execute(f"CREATE TEMPORARY TABLE t (n int, v {form.sql_type}) ON COMMIT DROP")
        with pg.cursor().copy("COPY t (n, v) FROM STDIN") as copy:  # as write_postgresql loads them
            for row in enumerate(values):
                copy.write_row(row)
        back = pg.execute(f"SELECT v, {form.text_sql('v')} FROM t ORDER BY n").fetchall()
    parse = datetime.date.fromisoformat if kind == "date" else datetime.datetime.fromisoformat
    assert [p for p, _ in back] == [parse(v) for v in values]
    assert [t for _, t in back] == values


EDGE_TEXTS = [  # (kind, text, the TextForm that would write it)
    ("timestamp", "2016-12-31T23:59:60", {}),  # a leap second: PostgreSQL reads it as the next minute
    ("timestamp", "2024-01-31T24:00:00", {}),  # hour 24: the next day
    ("timestamp", "2024-01-31T12:00:00.1234567", {"digits": 6}),  # rounded to microseconds
    ("timestamp", "2024-01-31T12:00:00+16:00", {"offset": "+16:00"}),  # out of range
    ("timestamp", "2024-01-31T12:00:00+15:59", {"offset": "+15:59"}),  # the largest PostgreSQL takes
    ("timestamp", "2024-02-29 12:00", {"separator": " ", "seconds": False}),
    ("date", "2023-02-29", {}), ("date", "0000-01-01", {}), ("date", "0001-01-01", {}), ("date", "9999-12-31", {}),
]


@pytest.mark.parametrize("kind, text, shape", EDGE_TEXTS)
def test_values_refused_are_those_postgresql_does_not_give_back(pg, kind, text, shape):
    """``datetimes.parse`` accepts a text exactly when PostgreSQL stores it and ``to_char`` gives it back.
    Reference: a real PostgreSQL server (a refused cast, or a different text back)."""
    from psycopg import errors

    from normalise.model.datetimes import TextForm, parse

    form = TextForm(kind, **shape)
    try:
        with pg.transaction():
            back = pg.execute(f"SELECT {form.text_sql(f'CAST(%s AS {form.sql_type})')}", (text,)).fetchone()[0]
    except (errors.DatetimeFieldOverflow, errors.InvalidDatetimeFormat, errors.InvalidTimeZoneDisplacementValue):
        back = None
    assert (parse(kind, text) is not None) == (back == text), (text, back)


# --- descriptions: COMMENT ON in PostgreSQL, the descriptions table in SQLite ----------------------------------

@pytest.fixture(scope="module")
def demo_both(tmp_path_factory, pg, pg_url):
    """The demo (demo/generate.py) built into SQLite, with its data dictionary, and into PostgreSQL."""
    from demo.generate import generate

    out = tmp_path_factory.mktemp("demo16")
    generate(out, size=120, seed=16)
    paths = [str(out / "titles.csv"), str(out / "contributions.csv")]
    db, dictionary = str(out / "demo.db"), out / "dictionary.md"
    m_sqlite = build_database(paths, db, picks=["first_editor=contributors:role=editor"],
                              dictionary_path=str(dictionary))
    name = _new_schema()
    m = build_database(paths, pg_url, schema=name, picks=["first_editor=contributors:role=editor"])
    yield db, m_sqlite, dictionary.read_text(encoding="utf-8"), name, m
    _drop(pg, name)


def _pg_comments(pg, schema: str) -> dict[tuple[str, str | None], str | None]:
    """Reference: PostgreSQL's catalogue, obj_description of each table and view (pg_class) and col_description
    of each of their columns (pg_attribute)."""
    out = {}
    for relation, oid in pg.execute(
            "SELECT c.relname, c.oid FROM pg_catalog.pg_class c JOIN pg_catalog.pg_namespace n ON n.oid = c.relnamespace "
            "WHERE n.nspname = %s AND c.relkind IN ('r', 'v')", (schema,)).fetchall():
        out[(relation, None)] = pg.execute("SELECT pg_catalog.obj_description(%s, 'pg_class')", (oid,)).fetchone()[0]
        for column, text in pg.execute(
                "SELECT a.attname, pg_catalog.col_description(a.attrelid, a.attnum) FROM pg_catalog.pg_attribute a "
                "WHERE a.attrelid = %s AND a.attnum > 0 AND NOT a.attisdropped", (oid,)).fetchall():
            out[(relation, column)] = text
    return out


def _sqlite_catalogue(db: str) -> set[tuple[str, str | None]]:
    """Reference: SQLite's catalogue, every table and view (sqlite_master) and their columns (PRAGMA table_info)."""
    with sqlite3.connect(db) as lite:
        names = [n for (n,) in lite.execute("SELECT name FROM sqlite_master WHERE type IN ('table', 'view')")]
        return {(n, None) for n in names} | {(n, r[1]) for n in names for r in lite.execute(f'PRAGMA table_info("{n}")')}


def test_every_table_view_and_column_has_a_comment(pg, demo_both):
    """COMMENT ON every table, view and column PostgreSQL's catalogue lists, each the text the build's
    ``descriptions`` table holds for it (a date column with its type noted); the register says what it is."""
    from psycopg import sql

    from normalise.write import PG_REGISTER

    _, _, _, schema, _ = demo_both
    comments = _pg_comments(pg, schema)
    held = {(t, c): d for t, c, d in pg.execute(sql.SQL("SELECT table_name, column_name, description FROM {}").format(
        sql.Identifier(schema, "descriptions")))}
    ours = {k: v for k, v in comments.items() if k[0] != PG_REGISTER}
    assert set(ours) == set(held) and all(comments.values())
    for key, text in ours.items():
        assert text == held[key] or text.startswith((held[key] + " Stored as DATE;", held[key] + " Stored as NUMERIC;")), key
    assert comments[("titles", "release_date")].endswith(
        "Stored as DATE; to_char(\"release_date\", 'YYYY-MM-DD') gives each value as it came in.")
    # the demo's prices ("12.50"): an exact decimal (tests/test_decimals_16.py)
    assert comments[("titles", "price")].endswith('Stored as NUMERIC; ("price")::text gives each value as it came in.')


def test_the_descriptions_table_covers_the_database_and_says_what_the_dictionary_says(demo_both):
    """SQLite keeps no comments: the ``descriptions`` table has one row for each table, view and column of the
    database (reference: SQLite's catalogue), and each column's description is its meaning in the data
    dictionary (the Markdown file the same build wrote), names quoted instead of marked as code."""
    import re

    db, m, dictionary, _, _ = demo_both
    with sqlite3.connect(db) as lite:
        rows = lite.execute("SELECT table_name, column_name, description FROM descriptions").fetchall()
    held = {(t, c): d for t, c, d in rows}
    assert len(held) == len(rows) and set(held) == _sqlite_catalogue(db)
    assert "descriptions" in [t["name"] for t in m["tables"] if t["role"] == "descriptions"]
    section, checked = None, 0
    for line in dictionary.splitlines():
        if line.startswith("### "):
            section = line[4:].strip("`")
        cells = [c.strip() for c in line.strip("|").split(" | ")] if line.startswith("| `") else []
        if section and len(cells) >= 2 and (section, cells[0].strip("`")) in held:
            meaning = cells[-1]
            if meaning:
                assert re.sub(r"`([^`]*)`", r'"\1"', meaning).replace("\\|", "|") == held[(section, cells[0].strip("`"))]
                checked += 1
    assert checked > 100
