"""Wide summary views that BI tools read directly (part of the plan and write passes).

* A record summary: one row per record with, for each list, the number of
  linked entities and their display names joined in list order (NULL for an
  empty list), plus *picks*: the first entity of a list whose link attribute
  equals a value (the first contributor whose role is editor).
* An entity summary: one row per entity with the number of distinct records
  it appears in, per source column and in total, and the first and last record
  by a date column of the records when there is one.

Views are plain data in the plan; ``view_sql`` renders one for a SQL dialect.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from .kinds import Role, ViewKind
from .names import fit, free_name, quote_name as _q, singular
from .plan import TEXT_TYPES, Plan, Sealable, Table

LIST_SEPARATOR = "; "
_DISPLAY_NAMES = ("name", "display_name", "full_name", "title", "label", "login", "username")


@dataclass
class Pick(Sealable):
    """The first entity of a list whose link attribute equals a value, as one column."""

    name: str
    bridge: str
    attribute: str
    value: str


@dataclass
class View(Sealable):
    name: str
    kind: str  # record_summary | entity_summary
    table: str
    # bridges summarised (record summary) or counted (entity summary); "TABLE.COLUMN": a reference, the foreign
    # key COLUMN of TABLE to a single entity (a record's sender, a child row's author)
    lists: list[str] = field(default_factory=list)
    picks: list[Pick] = field(default_factory=list)
    date_column: str | None = None
    separator: str = LIST_SEPARATOR


def display_column(table: Table) -> str:
    """The column that names an entity for people: a name-like text column, else its natural key."""
    return name_column([(c.name, c.type) for c in table.columns], table.primary_key, table.natural_key)


def name_column(columns: list[tuple[str, str]], primary_key: list[str], natural_key: list[str]) -> str:
    """Of a table's ``(name, type)`` columns, the one that names a row for people: a name-like text column,
    else the natural key's first column, else the primary key's (the views, the report and the data dictionary
    all choose by this).

    Example:
        >>> name_column([("person_sk", "integer"), ("login", "text")], ["person_sk"], [])
        'login'
    """
    names = {name for name, _ in columns}
    for wanted in _DISPLAY_NAMES:
        if wanted in names:
            return wanted
    for name, type_ in columns:
        if type_ == "text" and name not in primary_key and name.endswith("name"):
            return name
    if natural_key:
        return natural_key[0]
    return primary_key[0] if primary_key else columns[0][0]


def _bridge_entity(plan: Plan, bridge: Table) -> Table:
    return plan.table(bridge.foreign_keys[1].references)


def references(plan: Plan, table: Table) -> list[str]:
    """The references of a table's rows to single entities, as "TABLE.COLUMN" (``FieldMap.entity``)."""
    entities = {g.table for g in plan.entities}
    own = {"bridge": 2, "child": 1}.get(table.role, 0)  # the owner's key, and a bridge's entity or value key
    return [f"{table.name}.{fk.columns[0]}" for fk in table.foreign_keys[own:] if fk.references in entities]


def occurrence(plan: Plan, entry: str) -> tuple[str, str, str, str] | None:
    """Where a view's list entry finds its entities: (the FROM clause, with ``b`` the table of the entry and
    its owners joined up to the record, the record table, the expression of the record's key, the expression
    of the entity's key). A list inside a one-to-one child (``pull_request.requested_reviewers``) counts for
    the record owning the child. None when no record owns the rows."""
    name, dot, column = entry.partition(".")
    table = plan.table(name)
    link = f"b.{_q(column if dot else table.foreign_keys[1].columns[0])}"
    source, alias, here, n = f"{_q(name)} b", "b", table, 0
    while here.role != Role.RECORD:
        if here.role not in (Role.BRIDGE, Role.CHILD):
            return None
        fk = here.foreign_keys[0]
        parent = plan.table(fk.references)
        if parent.role == Role.RECORD:
            return source, parent.name, f"{alias}.{_q(fk.columns[0])}", link
        n += 1
        source += (f" JOIN {_q(parent.name)} p{n} ON p{n}.{_q(parent.primary_key[0])} = "
                   f"{alias}.{_q(fk.columns[0])}")
        alias, here = f"p{n}", parent
    return source, name, f"b.{_q(table.primary_key[0])}", link


def default_views(plan: Plan) -> list[View]:
    """A record summary per record table with lists or references, an entity summary per entity table that
    records hold (through bridges, or references on their rows and on their child rows)."""
    views = []
    taken = {t.name for t in plan.tables}
    bridges = [t for t in plan.tables if t.role == Role.BRIDGE]
    for record in (t for t in plan.tables if t.role == Role.RECORD):
        own = [b.name for b in bridges if b.foreign_keys[0].references == record.name] + references(plan, record)
        if own:
            name = _free(f"{record.name}_summary", taken)
            views.append(View(name, "record_summary", record.name, own))
    entries = [b.name for b in bridges] + [r for t in plan.tables if t.role in (Role.RECORD, Role.BRIDGE, Role.CHILD)
                                           for r in references(plan, t)]
    for entity in (t for t in plan.tables if t.role == Role.ENTITY):
        used = []
        for entry in entries:
            name, dot, column = entry.partition(".")
            table = plan.table(name)
            fk = next(k for k in table.foreign_keys if k.columns[0] == column) if dot else table.foreign_keys[1]
            if fk.references == entity.name and occurrence(plan, entry) is not None:
                used.append(entry)
        if not used:
            continue
        owners = {occurrence(plan, e)[1] for e in used}
        date_column = None
        if len(owners) == 1:
            owner = plan.table(owners.pop())
            dates = [c.name for c in owner.columns if c.type in ("date", "timestamp")]
            date_column = dates[0] if dates else None
        name = _free(f"{entity.name}_summary", taken)
        views.append(View(name, "entity_summary", entity.name, used, date_column=date_column))
    return views


def _free(name: str, taken: set) -> str:
    name = free_name(name, taken.__contains__, fit)
    taken.add(name)
    return name


def _label(name: str) -> str:
    """A view column's name, shortened with a hash when longer than a PostgreSQL name (63 bytes)."""
    return fit(name, 63)


def _lit(value: str) -> str:
    return "'" + str(value).replace("'", "''") + "'"


def _bytewise(dialect: str, expr: str, type_: str, native: bool = False) -> str:
    """A text expression compared byte by byte, as SQLite compares text (its BINARY collation).

    PostgreSQL would otherwise order text by the database's locale ("B" after
    "a" in en_US), so a view's first and last rows would depend on the server. A date or timestamp
    PostgreSQL holds natively (``native``) has no collation: it orders by time, which its text form
    (``datetimes.TextForm``, one width and offset per column) orders alike.
    """
    if dialect == "postgresql" and type_ in TEXT_TYPES and not native:
        return f'{expr} COLLATE "C"'
    return expr


# A REAL as SQLite writes it as text (CAST(x AS TEXT) is printf's "%!.15g": 15 significant digits, a decimal
# point always, an exponent below 1e-4 and from 1e15 on; sqlite.org/printf.html, the "!" flag). PostgreSQL
# writes the same from to_char's "%+.14e" digits (PostgreSQL documentation, "9.8. Data Type Formatting
# Functions", EEEE): the mantissa's trailing zeros dropped, or, between the exponents, the decimal itself
# (numeric, trim_scale). Both round the 15th digit of the binary value; SQLite computes it in long double,
# so where the 16th digit of the shortest form is a 5 (about 1 value in 1,000 at random) it may round the
# other way.
_PG_SCIENTIFIC = "ltrim(to_char({x}, '9.99999999999999EEEE'))"
_PG_REAL_TEXT = ("CASE WHEN {x} IS NULL THEN NULL WHEN {x} = 'NaN'::float8 THEN 'NaN' "
                 "WHEN {x} = 'Infinity'::float8 THEN 'Inf' WHEN {x} = '-Infinity'::float8 THEN '-Inf' "
                 "WHEN {x} = 0 THEN '0.0' "
                 "WHEN split_part({s}, 'e', 2)::int NOT BETWEEN -4 AND 14 "
                 "THEN regexp_replace(rtrim(split_part({s}, 'e', 1), '0'), '\\.$', '.0') || 'e' || split_part({s}, 'e', 2) "
                 "ELSE regexp_replace(trim_scale(({s})::numeric)::text, '^(-?[0-9]+)$', '\\1.0') END")


def as_text(dialect: str, expr: str, type_: str, form=None) -> str:
    """An expression of a column's type as text, the same on SQLite and PostgreSQL (lists and picks).

    Booleans are ``true`` and ``false`` (JSON's words, RFC 8259 section 3; SQLite stores 1 and 0), reals as
    SQLite writes them (``_PG_REAL_TEXT``), a date or timestamp PostgreSQL holds natively in the text it came
    in (``form``, a ``datetimes.TextForm``), anything else through CAST.

    Example:
        >>> as_text("sqlite", "b.flag", "boolean")
        "CASE WHEN b.flag THEN 'true' WHEN NOT b.flag THEN 'false' END"
        >>> as_text("sqlite", "v.x", "real")
        "CASE WHEN v.x IS NULL THEN NULL ELSE printf('%!.15g', v.x) END"
    """
    if type_ == "boolean":
        return f"CASE WHEN {expr} THEN 'true' WHEN NOT {expr} THEN 'false' END"
    if type_ == "real":
        if dialect == "postgresql":
            return _PG_REAL_TEXT.format(x=expr, s=_PG_SCIENTIFIC.format(x=expr))
        return f"CASE WHEN {expr} IS NULL THEN NULL ELSE printf('%!.15g', {expr}) END"
    if form is not None and dialect == "postgresql":
        return form.text_sql(expr)
    return f"CAST({expr} AS TEXT)"


def _ordered_join(dialect: str, text: str, order: str, source: str, separator: str) -> str:
    """An aggregate joining the text expression ``text`` over ``source`` in ``order``; NULL when there are no rows."""
    if dialect == "postgresql":
        return f"(SELECT string_agg({text}, {_lit(separator)} ORDER BY {order}) FROM {source})"
    # SQLite before 3.44 has no ORDER BY inside aggregates; group_concat takes the rows
    # in the order the inner query delivers them.
    return (f"(SELECT group_concat(v, {_lit(separator)}) FROM (SELECT {text} AS v "
            f"FROM {source} ORDER BY {order}))")


@dataclass
class ViewColumn(Sealable):
    """One column of a view: its name, its SELECT expression, and the plan type of its values."""

    name: str
    expression: str
    type: str


# The views' SQL is text, not SQLAlchemy Core. What differs between the dialects is not what Core compiles per
# dialect (quoting, LIMIT, types) but how a value becomes the same text on both: SQLite's printf('%!.15g') for a REAL
# against PostgreSQL's to_char EEEE and trim_scale (_PG_REAL_TEXT), a native date's text form (TextForm.text_sql),
# COLLATE "C" for SQLite's byte order, and an ordered aggregate that SQLite before 3.44 lacks (_ordered_join). In
# Core each of these is a custom construct with a compile rule per dialect holding the same text as here, so the
# branches would remain, behind one more layer; the tests compare both backends' views value by value.
def view_sql(view: View, plan: Plan, dialect: str, forms: dict | None = None) -> str:
    """The SELECT that defines a view, in the given dialect ("sqlite" or "postgresql").

    ``forms`` maps (table, column) to the ``datetimes.TextForm`` of the date and timestamp columns
    PostgreSQL holds natively (``write.native_forms``); the others are text.
    """
    alias = "r" if view.kind == ViewKind.RECORD_SUMMARY else "e"
    columns = ", ".join(c.expression if c.expression == f"{alias}.{_q(c.name)}" else f"{c.expression} AS {_q(c.name)}"
                        for c in view_columns(view, plan, dialect, forms))
    joins = "".join(" " + j for j in _aggregate_joins(view, plan, dialect, forms or {}))
    return f"SELECT {columns} FROM {_q(view.table)} {alias}{joins}"


def view_columns(view: View, plan: Plan, dialect: str = "sqlite", forms: dict | None = None) -> list[ViewColumn]:
    """The columns of a view, in order: what ``view_sql`` selects, with the plan type of each."""
    forms = forms or {}
    if view.kind == ViewKind.RECORD_SUMMARY:
        return _record_summary(view, plan, dialect, forms)
    return _entity_summary(view, plan, dialect, forms)


def _record_summary(view: View, plan: Plan, dialect: str, forms: dict) -> list[ViewColumn]:
    record = plan.table(view.table)
    key = record.primary_key[0]
    cols = [ViewColumn(key, f"r.{_q(key)}", "integer")]
    cols += [ViewColumn(c, f"r.{_q(c)}", record.column(c).type)
             for c in record.natural_key]
    for name in view.lists:
        if "." in name:  # a reference on the record's row: the entity's display name
            column = name.partition(".")[2]
            fk = next(k for k in record.foreign_keys if k.columns[0] == column)
            entity = plan.table(fk.references)
            label = column[:-3] if column.endswith("_sk") else column
            shown = display_column(entity)
            cols.append(ViewColumn(label, f"(SELECT e.{_q(shown)} FROM {_q(entity.name)} e "
                                          f"WHERE e.{_q(fk.ref_columns[0])} = r.{_q(column)})",
                                   entity.column(shown).type))
            continue
        bridge = plan.table(name)
        entity = _bridge_entity(plan, bridge)
        owner_col = bridge.foreign_keys[0].columns[0]
        entity_col = bridge.foreign_keys[1].columns[0]  # the bridge's column; it may be named apart
        entity_key = bridge.foreign_keys[1].ref_columns[0]
        shown = display_column(entity)
        label = name[len(singular_prefix(record.name)):] if name.startswith(singular_prefix(record.name)) else name
        source = (f"{_q(name)} b JOIN {_q(entity.name)} e ON e.{_q(entity_key)} = b.{_q(entity_col)} "
                  f"WHERE b.{_q(owner_col)} = r.{_q(key)}")
        cols.append(ViewColumn(_label("number_of_" + label),
                               f"(SELECT count(*) FROM {_q(name)} b WHERE b.{_q(owner_col)} = r.{_q(key)})",
                               "integer"))
        text = as_text(dialect, f"e.{_q(shown)}", entity.column(shown).type, forms.get((entity.name, shown)))
        cols.append(ViewColumn(label, _ordered_join(dialect, text, "b.list_position", source, view.separator), "text"))
    for pick in view.picks:
        bridge = plan.table(pick.bridge)
        entity = _bridge_entity(plan, bridge)
        owner_col = bridge.foreign_keys[0].columns[0]
        entity_col = bridge.foreign_keys[1].columns[0]
        entity_key = bridge.foreign_keys[1].ref_columns[0]
        shown = display_column(entity)
        attribute = as_text(dialect, f"b.{_q(pick.attribute)}", bridge.column(pick.attribute).type,
                            forms.get((bridge.name, pick.attribute)))
        cols.append(ViewColumn(pick.name,
                               f"(SELECT e.{_q(shown)} FROM {_q(pick.bridge)} b JOIN {_q(entity.name)} e "
                               f"ON e.{_q(entity_key)} = b.{_q(entity_col)} WHERE b.{_q(owner_col)} = r.{_q(key)} "
                               f"AND {attribute} = {_lit(pick.value)} "
                               f"ORDER BY b.list_position LIMIT 1)", entity.column(shown).type))
    return cols


def add_pick(plan: Plan, spec: str) -> Pick:
    """Add a pick ``NAME=COLUMN:ATTRIBUTE=VALUE`` to the record summary that shows COLUMN.

    COLUMN is the nested input column (or its bridge table), ATTRIBUTE a link
    attribute on its bridge: ``editor=contributors:role=editor`` names, per
    record, the first contributor whose role is editor.
    """
    from .errors import UsageError
    from .names import closest_first

    name, eq, rest = spec.partition("=")
    column, colon, condition = rest.partition(":")
    attribute, eq2, value = condition.partition("=")
    if not (eq and colon and eq2 and name and column and attribute):
        raise UsageError(f"--pick {spec!r}: expected NAME=COLUMN:ATTRIBUTE=VALUE, "
                         "e.g. --pick first_editor=contributors:role=editor")
    bridges = [t for t in plan.tables if t.role == Role.BRIDGE and
               (t.name == column or any(s.get("column") == column for s in t.sources))]
    if not bridges:
        lists = sorted({s["column"] for t in plan.tables if t.role == Role.BRIDGE for s in t.sources})
        raise UsageError(f"--pick {spec!r}: no list of entities comes from {column!r} "
                         f"(lists: {closest_first(column, lists)})")
    bridge = bridges[0]
    if attribute not in [c.name for c in bridge.columns]:
        raise UsageError(f"--pick {spec!r}: {attribute!r} is not a link attribute of {bridge.name} "
                         f"(columns: {closest_first(attribute, [c.name for c in bridge.columns])})")
    for view in plan.views:
        if view.kind == ViewKind.RECORD_SUMMARY and bridge.name in view.lists:
            pick = Pick(name, bridge.name, attribute, value)
            view.picks.append(pick)
            return pick
    raise UsageError(f"--pick {spec!r}: {bridge.name} belongs to no record summary")


def singular_prefix(record_table: str) -> str:
    return singular(record_table) + "_"


def _entity_summary(view: View, plan: Plan, dialect: str, forms: dict) -> list[ViewColumn]:
    """One row per entity: the distinct records it appears in, per list and in total, and its first and
    last record by date. SQLite answers subqueries per entity through the bridges' foreign-key indexes
    faster than aggregates over whole tables; PostgreSQL the other way round, so there the columns read
    the aggregates ``_aggregate_joins`` joins (measured: benchmarks/bench_views.py, docs/performance.md)."""
    if dialect == "postgresql":
        return _entity_summary_joined(view, plan, forms)
    entity = plan.table(view.table)
    key = entity.primary_key[0]
    cols = _entity_columns(entity)
    unions = []
    for entry in view.lists:
        source, owner, record_key, link = occurrence(plan, entry)
        cols.append(ViewColumn(_label("records_in_" + _list_label(entry)),
                               f"(SELECT count(DISTINCT {record_key}) FROM {source} WHERE {link} = e.{_q(key)})",
                               "integer"))
        unions.append(f"SELECT {_lit(owner)} AS t, {record_key} AS k FROM {source} WHERE {link} = e.{_q(key)}")
    # distinct records: an entity twice in one record's list is one record (one list has no UNION to drop it)
    cols.append(ViewColumn("records_in_total",
                           f"(SELECT count(*) FROM (SELECT DISTINCT t, k FROM ({' UNION '.join(unions)}) a) u)",
                           "integer"))
    if view.date_column:
        owner, label, date, shown_label = _first_last(view, plan, forms, dialect)
        owner_key = owner.primary_key[0]
        inner = " UNION ".join(f"SELECT {o[2]} AS k FROM {o[0]} WHERE {o[3]} = e.{_q(key)}"
                               for o in map(lambda n: occurrence(plan, n), view.lists))
        date_type, label_type = owner.column(view.date_column).type, owner.column(label).type
        for which, direction in (("first", "ASC"), ("last", "DESC")):
            cols.append(ViewColumn(_label(f"{which}_{singular_prefix(owner.name)[:-1]}"),
                                   f"(SELECT r.{_q(label)} FROM {_q(owner.name)} r "
                                   f"WHERE r.{_q(owner_key)} IN ({inner}) AND r.{_q(view.date_column)} IS NOT NULL "
                                   f"ORDER BY {date} {direction}, {shown_label} {direction} LIMIT 1)", label_type))
            cols.append(ViewColumn(_label(f"{which}_{view.date_column}"),
                                   f"(SELECT {'min' if which == 'first' else 'max'}({date}) "
                                   f"FROM {_q(owner.name)} r WHERE r.{_q(owner_key)} IN ({inner}))", date_type))
    return cols


def _entity_columns(entity: Table) -> list[ViewColumn]:
    key = entity.primary_key[0]
    cols = [ViewColumn(key, f"e.{_q(key)}", "integer")]
    cols += [ViewColumn(c, f"e.{_q(c)}", entity.column(c).type) for c in entity.natural_key]
    shown = display_column(entity)
    if shown not in entity.natural_key:
        cols.append(ViewColumn(shown, f"e.{_q(shown)}", entity.column(shown).type))
    return cols


def _list_label(entry: str) -> str:
    """What an entity summary's count column calls a list entry: ``records_in_`` + this."""
    label = entry.replace(".", "_")
    return label[:-3] if "." in entry and label.endswith("_sk") else label


def _first_last(view: View, plan: Plan, forms: dict, dialect: str):
    """(owner table, its label column, the date and label expressions in ``dialect``) of an entity summary
    with a date column."""
    owner = plan.table(occurrence(plan, view.lists[0])[1])
    label = owner.natural_key[0] if owner.natural_key else owner.primary_key[0]
    date = _bytewise(dialect, f"r.{_q(view.date_column)}", owner.column(view.date_column).type,
                     (owner.name, view.date_column) in forms)
    shown = _bytewise(dialect, f"r.{_q(label)}", owner.column(label).type, (owner.name, label) in forms)
    return owner, label, date, shown


def _entity_summary_joined(view: View, plan: Plan, forms: dict) -> list[ViewColumn]:
    """PostgreSQL's entity summary columns, read from the aggregates ``_aggregate_joins`` joins."""
    cols = _entity_columns(plan.table(view.table))
    for n, entry in enumerate(view.lists):
        cols.append(ViewColumn(_label("records_in_" + _list_label(entry)), f"coalesce(c{n}.n, 0)", "integer"))
    cols.append(ViewColumn("records_in_total", "coalesce(tot.n, 0)", "integer"))
    if view.date_column:
        owner, label, _, _ = _first_last(view, plan, forms, "postgresql")
        for which in ("first", "last"):
            cols.append(ViewColumn(_label(f"{which}_{singular_prefix(owner.name)[:-1]}"), f"{which}.shown",
                                   owner.column(label).type))
            cols.append(ViewColumn(_label(f"{which}_{view.date_column}"), f"{which}.d",
                                   owner.column(view.date_column).type))
    return cols


def _aggregate_joins(view: View, plan: Plan, dialect: str, forms: dict) -> list[str]:
    """The LEFT JOINs of PostgreSQL's entity summary: one GROUP BY per list over its whole table, the
    distinct records in total, and the first and last record by date (ROW_NUMBER); none elsewhere."""
    if dialect != "postgresql" or view.kind != ViewKind.ENTITY_SUMMARY:
        return []
    key = _q(plan.table(view.table).primary_key[0])
    joins, unions = [], []
    for n, entry in enumerate(view.lists):
        source, owner, record_key, link = occurrence(plan, entry)
        joins.append(f"LEFT JOIN (SELECT {link} AS ek, count(DISTINCT {record_key}) AS n FROM {source} "
                     f"GROUP BY {link}) c{n} ON c{n}.ek = e.{key}")
        unions.append(f"SELECT {_lit(owner)} AS t, {record_key} AS k, {link} AS ek FROM {source}")
    # distinct (record table, record, entity): an entity twice in one record's lists is one record, also
    # with one list (no UNION there to drop the second)
    occurrences = f"SELECT DISTINCT t, k, ek FROM ({' UNION '.join(unions)}) a"
    joins.append(f"LEFT JOIN (SELECT ek, count(*) AS n FROM ({occurrences}) u GROUP BY ek) tot ON tot.ek = e.{key}")
    if view.date_column:
        owner, label, date, shown = _first_last(view, plan, forms, "postgresql")
        for which, direction in (("first", "ASC"), ("last", "DESC")):
            ranked = (f"SELECT o.ek, r.{_q(label)} AS shown, {date} AS d, ROW_NUMBER() OVER (PARTITION BY o.ek "
                      f"ORDER BY {date} {direction}, {shown} {direction}) AS place "
                      f"FROM (SELECT DISTINCT k, ek FROM ({occurrences}) u) o JOIN {_q(owner.name)} r "
                      f"ON r.{_q(owner.primary_key[0])} = o.k WHERE r.{_q(view.date_column)} IS NOT NULL")
            joins.append(f"LEFT JOIN (SELECT ek, shown, d FROM ({ranked}) x WHERE place = 1) {which} "
                         f"ON {which}.ek = e.{key}")
    return joins
