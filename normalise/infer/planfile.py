"""Plans as files: write the inferred model as commented TOML, read it back, check it against the data.

The file holds the decisions, not the data: record tables and their keys,
scalar columns and types, what each nested column becomes, entity tables
with their identity and attributes (the rest are link attributes on the
bridges), joins and views. Tables are derived from those decisions, so
renaming a table is one edit, and replaying an unedited plan gives the same
database as the inference did.

An entity is referred to by its ``handle``: a nested column with
``entity = "person"`` shares the entity whose handle is ``person``. Giving a
nested column a handle no ``[[entity]]`` defines keeps its entities apart (a
forbidden merge): its entity table is then inferred for it alone.
"""

from __future__ import annotations

import tomllib
from dataclasses import replace
from pathlib import Path

from ..model.kinds import Format, Kind, Role, ViewKind
from ..model.plan import META_TABLES, TYPES, EntityGroup, FieldMap, NestedColumn, Plan, RecordSource
from ..model.settings import Settings
from ..model.views import Pick, View
from .planschema import KINDS, InvalidPlan, PlanText, check_shape, refuse
from .plantext import PLAN_VERSION, toml_value


def _maps(text: str, items, where: str) -> list[FieldMap]:
    out = []
    for f in items or []:
        if not isinstance(f, dict) or not {"key", "name", "type"} <= set(f):
            refuse(text, f"{where}: each field needs key, name and type", 'write { key = ["name"], name = "name", type = "text" }',
                  where.split(".")[-1])
        if f["type"] not in TYPES:
            refuse(text, f"{where}: unknown type {f['type']!r}", f"use one of {', '.join(TYPES)}", f'"{f["type"]}"')
        key = f["key"] if isinstance(f["key"], list) else [f["key"]]
        null_means = f.get("null", "null")
        if null_means not in ("null", "absent"):
            refuse(text, f"{where}: null = {null_means!r}", 'write null = "absent" (NULL means the key is absent) '
                  'or leave it out (NULL means null)', f'"{null_means}"')
        scale = f.get("scale")
        if scale is not None and (type(scale) is not int or not 0 <= scale <= 38):
            refuse(text, f"{where}: scale = {scale!r}", "write a whole number of places from 0 to 38", f"scale = {scale!r}")
        out.append(FieldMap([str(k) for k in key], f["name"], f["type"], null_means, bool(f.get("as_text", False)),
                            references=str(f.get("references", "")), entity=str(f.get("entity", "")), scale=scale))
    return out


def read_plan(path: str) -> tuple[dict, str]:
    """The raw plan document and its text; TOML syntax errors name their line."""
    try:
        text = PlanText.of(Path(path).read_text(encoding="utf-8"), path)
    except UnicodeDecodeError as exc:
        raise InvalidPlan(f"plan {path}: not UTF-8 text (byte {exc.start}: {exc.object[exc.start:exc.start + 1]!r})"
                          "\n  hint: a plan file is UTF-8 TOML; save it as UTF-8", file=path) from None
    except OSError as exc:
        raise InvalidPlan(f"plan {path}: cannot be read ({exc.strerror})", file=path) from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InvalidPlan(f"plan {path}: {exc}\n  hint: the plan is TOML; check quotes, brackets and "
                          "commas on that line", file=path) from None
    check_shape(doc, text)
    if doc.get("version") != PLAN_VERSION:
        refuse(text, f"version {doc.get('version')!r} is not {PLAN_VERSION}", f"set version = {PLAN_VERSION}",
              "version")
    for setting, allowed in (("how", ("left", "inner", "full")), ("cardinality", ("one-to-one", "one-to-many"))):
        value = doc.get("join", {}).get(setting, allowed[0])
        if value not in allowed:
            refuse(text, f"[join] {setting} {value!r} is not one of {', '.join(allowed)}",
                  f"set {setting} = {toml_value(allowed[0])}", f"{setting} =", after="[join]")
    return doc, text


def settings_from_doc(doc: dict, base: Settings = Settings()) -> Settings:
    """The settings a plan file says (its ``[join]``, each record's natural key, the main record's duplicates
    policy, the violation threshold) over ``base`` (what the command line said besides)."""
    j = doc.get("join", {})
    records = doc.get("record", [])
    return replace(base, how=j.get("how", "left"), cardinality=j.get("cardinality", "one-to-one"),
                   separate=bool(j.get("separate", False)), on={k: (v, None) for k, v in j.get("on", {}).items()},
                   duplicates=records[0].get("duplicates", base.duplicates) if records else base.duplicates,
                   natural_keys={r["file"]: r["natural_key"] for r in records if r.get("natural_key")},
                   violation_threshold=float(doc.get("violation_threshold", base.violation_threshold)))


# Long (about 155 lines): a plan file's blocks read in the order they name each other (records, entities, nested
# columns, views), each checked against the data at its own line; the checks share the maps of what is named.
def plan_from_doc(doc: dict, text: str, exports: list, decoded: dict, settings: Settings | None = None) -> Plan:
    """Rebuild the plan from its file and check that it still fits the decoded data; ``settings``: the run's
    (``settings_from_doc``), held by the plan."""
    from ..model.schema import add_tables
    from .dependencies import entity_attributes
    from .planner import Found
    from .shapes import objects_of, scalar_fields, type_at

    settings = settings or settings_from_doc(doc)
    plan = Plan(settings=settings)
    by_name: dict[str, list] = {}  # file stem -> its inputs, in order: a/titles.csv and b/titles.csv share one
    for e in exports:
        by_name.setdefault(e.name, []).append(e)
    taken: set[str] = set()  # paths of the inputs a [[record]] block has claimed
    handles = {}
    for e in doc.get("entity", []):
        missing = {"handle", "table", "identity", "identity_column", "identity_type"} - set(e)
        if missing:
            refuse(text, f"[[entity]] {e.get('handle', '?')} lacks {', '.join(sorted(missing))}",
                  "every [[entity]] needs handle, table, identity, identity_column and identity_type", "[[entity]]")
        if e["identity_type"] not in TYPES:
            refuse(text, f"entity {e['handle']!r}: unknown identity_type {e['identity_type']!r}",
                  f"use one of {', '.join(TYPES)}", f'identity_type = "{e["identity_type"]}"')
        group = EntityGroup(table=e["table"], key_column=f"{e['table']}_sk", identity=e["identity"],
                            identity_column=e["identity_column"], identity_type=e["identity_type"],
                            matched=bool(e.get("matched", False)),
                            attributes=_maps(text, e.get("attributes"), f"entity {e['handle']}.attributes"))
        handles[e["handle"]] = group
    for r in doc.get("record", []):
        file = r.get("file")
        if file not in by_name:
            refuse(text, f"[[record]] file {file!r} is not among the inputs ({', '.join(by_name)})",
                  "give that file on the command line, or remove its [[record]] block", f'"{file}"')
        free = [e for e in by_name[file] if e.path not in taken]
        if not free:
            refuse(text, f"[[record]] file {file!r} has more [[record]] blocks than inputs of that name "
                        f"({len(by_name[file])})", "give each of those files on the command line, in the order "
                  "the plan was written, or remove the extra block", f'"{file}"')
        missing = {"table", "key"} - set(r)
        if missing:
            refuse(text, f"[[record]] {file} lacks {', '.join(sorted(missing))}",
                  "every [[record]] needs file, table and key", f'file = "{file}"')
        if r.get("duplicates", "first") not in ("first", "last", "refuse"):
            refuse(text, f"[[record]] {file}: unknown duplicates policy {r['duplicates']!r}",
                  "use first, last or refuse", f'duplicates = "{r["duplicates"]}"')
        export = free[0]  # blocks of one file name take its inputs in order (the plan lists them so)
        taken.add(export.path)
        columns = decoded[export.path]
        record = RecordSource(file=file, path=export.path, table=r["table"], key_column=r["key"],
                              natural_key=[r["natural_key"]] if r.get("natural_key") else [],
                              duplicates=r.get("duplicates", "first"),
                              scalars=_maps(text, r.get("columns"), f"record {file}.columns"),
                              parent_path=export.parent_path, parent_column=export.parent_column)
        if record.natural_key and record.natural_key[0] not in [f.column for f in record.scalars]:
            refuse(text, f"[[record]] {file}: natural_key {record.natural_key[0]!r} is none of its columns",
                  f"use one of: {', '.join(f.column for f in record.scalars) or '(none)'}, or \"\" for none",
                  f'natural_key = "{record.natural_key[0]}"')
        planned = {f.path[0] for f in record.scalars}
        for nested in r.get("nested", []):
            record.nested.append(_nested_from(text, nested, columns, handles, plan))
            planned.add(nested["column"])
        for f in record.scalars:
            if f.path[0] not in columns:
                refuse(text, f"column {f.path[0]!r} of {file} is gone from the data",
                      "remove it from the plan's columns, or check the input file", f'"{f.path[0]}"')
        new = [c for c in columns if c not in planned]
        if new:
            refuse(text, f"{file} has column(s) the plan does not know: {', '.join(new)}",
                  "write a fresh plan with `normalise plan`, or add them to the record's columns",
                  f'file = "{file}"')
        plan.records.append(record)
    unplanned = [e.name if len(by_name[e.name]) == 1 else e.path for e in exports if e.path not in taken]
    if unplanned:
        refuse(text, f"input file(s) {', '.join(unplanned)} have no [[record]] block, so their rows would be lost",
              "write a fresh plan with `normalise plan`, or give only the files the plan names", "[[record]]")
    # entity lists whose handle no [[entity]] defines get an entity table of their own
    for record in plan.records:
        for nested in record.nested:
            if nested.kind != Kind.ENTITY_LIST or nested.entity in handles:
                continue
            objects, _ = objects_of(_values(decoded[record.path][nested.column].values, nested))
            fields, _ = scalar_fields(objects)
            top = [p[0] for p in fields if len(p) == 1]
            attrs = entity_attributes(objects, nested.identity, top, plan.violation_threshold)
            handles[nested.entity] = EntityGroup(
                table=nested.entity, key_column=f"{nested.entity}_sk", identity=nested.identity,
                identity_column=nested.identity, identity_type="integer" if all(
                    isinstance(o.get(nested.identity), int) for o in objects if o.get(nested.identity) is not None)
                else "text", attributes=[FieldMap([a], a, type_at(objects, [a])) for a in attrs])
            nested.row_fields = [f for f in nested.row_fields if f.path[0] not in attrs]
    done: set = set()  # references and inner entity lists already given their entity table
    for handle, group in handles.items():
        for record in plan.records:
            for nested in record.nested:
                if nested.kind == Kind.ENTITY_LIST and nested.entity == handle:
                    nested.entity = group.table
                    if nested.identity != group.identity:
                        refuse(text, f"nested column {nested.column!r} has identity {nested.identity!r} but entity "
                                    f"{handle!r} is identified by {group.identity!r}",
                              "use the same identity, or give the column an entity handle of its own",
                              f'identity = "{nested.identity}"')
                    group.members.append(f"{nested.file}:{nested.column}")
                    _check_keys(text, _values(decoded[record.path][nested.column].values, nested), nested, group)
        for nested, inner in _inside(plan):  # entity lists inside objects, and references to single objects
            if nested.path and nested.kind == Kind.ENTITY_LIST and nested.entity == handle and id(nested) not in done:
                nested.entity = group.table
                group.members.append(Found.name_of(nested))
                done.add(id(nested))
            for f in nested.row_fields:
                if f.entity == handle and id(f) not in done:
                    f.entity = group.table
                    group.members.append(Found.name_of(nested, f.path))
                    done.add(id(f))
        if group.members:
            written = [str(m) for m in next((e.get("members") or [] for e in doc.get("entity", [])
                                             if e.get("handle") == handle), [])]
            group.members.sort(key=lambda m: written.index(m) if m in written else len(written))
            plan.entities.append(group)
    for record in plan.records:  # objects that are no entities: child rows or record columns
        for nested in record.nested:
            if nested.kind in (Kind.CHILD_LIST, Kind.OBJECT_COLUMNS, Kind.OBJECT_CHILD):
                _check_keys(text, _values(decoded[record.path][nested.column].values, nested), nested,
                            groups={g.table: g for g in plan.entities})
    for nested, _ in _inside(plan):
        for f in nested.row_fields:
            if f.entity and id(f) not in done:
                refuse(text, f"field {'.'.join(f.path) or '(the object itself)'} of {nested.column!r} refers to "
                            f"entity {f.entity!r}, which no [[entity]] defines",
                      f"use one of: {', '.join(handles) or '(none)'}, or remove entity = from the field",
                      f'entity = "{f.entity}"')
    _check_references(text, plan)
    add_tables(plan)
    _check_names(text, plan)
    names = {t.name for t in plan.tables}
    for v in doc.get("view", []):
        missing = {"name", "kind", "table"} - set(v)
        if missing:
            refuse(text, f"[[view]] {v.get('name', '?')} lacks {', '.join(sorted(missing))}",
                  "every [[view]] needs name, kind and table", f'name = "{v.get("name")}"', "[[view]]")
        if v["table"] not in names and v["table"] in handles:
            v = dict(v, table=handles[v["table"]].table)  # the handle of an entity whose table was renamed
        lists = v.get("lists", [])
        for name in [v.get("table")] + [n.partition(".")[0] for n in lists]:
            if name not in names:
                refuse(text, f"view {v.get('name')!r} names table {name!r}, which the plan does not make",
                      f"use one of: {', '.join(sorted(names))}", f'"{name}"', after=f'name = "{v.get("name")}"')
        view = View(v["name"], v["kind"], v["table"], lists, date_column=v.get("date_column"),
                    separator=v.get("separator", "; "))
        for p in v.get("pick", []):
            if not {"name", "list", "attribute", "value"} <= set(p):
                refuse(text, f"a pick of view {view.name!r} lacks "
                            f"{', '.join(sorted({'name', 'list', 'attribute', 'value'} - set(p)))}",
                      "every [[view.pick]] needs name, list, attribute and value", "[[view.pick]]",
                      after=f'name = "{view.name}"')
            view.picks.append(Pick(p["name"], p["list"], p["attribute"], str(p["value"])))
        _check_view(text, plan, view)
        plan.views.append(view)
    return plan


def _check_names(text: str, plan: Plan) -> None:
    """Table names unique (and none a bookkeeping table's), column names unique within a table (and none a key
    the tool gives the table itself), so every statement the plan makes can run."""
    seen: set = set()
    for t in plan.tables:
        if t.name in seen:
            what = "a bookkeeping table of the tool" if t.name in META_TABLES else "another table"
            refuse(text, f"table name {t.name!r} is taken twice ({what} has it)", "give each table a name of its own",
                  f'table = "{t.name}"', f'"{t.name}"')
        seen.add(t.name)
        columns: set = set()
        for c in t.columns:
            if c.name in columns:
                refuse(text, f"table {t.name!r} has two columns named {c.name!r} (a key the tool adds, or another "
                            f"field)", "give the field a name of its own", f'name = "{c.name}"', f'"{c.name}"')
            columns.add(c.name)


def _check_references(text: str, plan: Plan) -> None:
    """Every ``references`` names a record table with a natural key (the values are matched against it)."""
    keyed = {r.table for r in plan.records if r.natural_key}
    for record in plan.records:
        named = [(f.path[0], f.references) for f in record.scalars if f.references]
        named += [(n.column, n.references) for n in record.nested if n.kind == Kind.VALUE_LIST and n.references]
        for column, table in named:
            if table not in keyed:
                refuse(text, f"column {column!r} of {record.file} references {table!r}, which is not a record "
                            f"table with a natural key", f"use one of: {', '.join(sorted(keyed)) or '(none)'}, "
                      "or remove references to keep the values without a foreign key", f'"{table}"')


def _check_view(text: str, plan: Plan, view: View) -> None:
    if view.name in {t.name for t in plan.tables} | {v.name for v in plan.views}:
        refuse(text, f"view name {view.name!r} is already taken by a table or another view",
              "give the view a name of its own", f'name = "{view.name}"')
    if view.kind not in (ViewKind.RECORD_SUMMARY, ViewKind.ENTITY_SUMMARY):
        refuse(text, f"view {view.name!r}: unknown kind {view.kind!r}", "use record_summary or entity_summary",
              f'"{view.kind}"')
    end = 0 if view.kind == ViewKind.RECORD_SUMMARY else 1
    from ..model.views import occurrence, references

    if end == 1 and not view.lists:
        refuse(text, f"view {view.name!r} counts the records of {view.table!r} through no list",
              "name the bridges or references it counts in lists, or remove the view", f'name = "{view.name}"')
    for name in view.lists:
        if "." in name:  # a reference: TABLE.COLUMN, a foreign key to one entity
            table = plan.table(name.partition(".")[0])
            if name not in references(plan, table) or (
                    end == 0 and table.name != view.table) or (end == 1 and next(
                        k for k in table.foreign_keys if k.columns[0] == name.partition(".")[2]).references
                                                               != view.table):
                refuse(text, f"view {view.name!r} lists {name!r}, which is not a reference of {view.table!r}",
                      f"remove {name!r} from the view's lists", f'"{name}"', after=f'name = "{view.name}"')
            continue
        table = plan.table(name)
        if table.role != Role.BRIDGE or table.foreign_keys[end].references != view.table:
            what = "is owned by" if end == 0 else "links to"
            refuse(text, f"view {view.name!r} lists {name!r}, which is not a bridge that {what} {view.table!r}",
                  f"remove {name!r} from the view's lists", f'"{name}"', after=f'name = "{view.name}"')
    for pick in view.picks:
        if pick.bridge not in view.lists:
            refuse(text, f"pick {pick.name!r} uses list {pick.bridge!r}, which view {view.name!r} does not show",
                  "add the list to the view's lists", f'"{pick.name}"', after=f'name = "{view.name}"')
        if pick.attribute not in [c.name for c in plan.table(pick.bridge).columns]:
            refuse(text, f"pick {pick.name!r}: {pick.attribute!r} is not a column of {pick.bridge!r}",
                  "name a link attribute of that bridge", f'"{pick.attribute}"', after=f'name = "{view.name}"')
    if view.date_column and view.kind == ViewKind.ENTITY_SUMMARY and view.lists:
        owner = plan.table(occurrence(plan, view.lists[0])[1])
        if view.date_column not in [c.name for c in owner.columns]:
            refuse(text, f"view {view.name!r}: {owner.name!r} has no column {view.date_column!r}",
                  "name a date column of the records, or remove date_column", f'"{view.date_column}"')


def _nested_from(text: str, n: dict, columns: dict, handles: dict, plan: Plan) -> NestedColumn:
    column = n.get("column")
    if "path" not in n and column not in columns:
        refuse(text, f"nested column {column!r} is gone from the data", "remove its [[record.nested]] block",
              f'column = "{column}"')
    kind = n.get("kind")
    if kind not in KINDS:
        refuse(text, f"nested column {column!r}: unknown kind {kind!r}", f"use one of {', '.join(KINDS)}",
              f'kind = "{kind}"')
    nested = NestedColumn(file=n.get("file", ""), column=column, kind=kind, table=n.get("table"),
                          entity=n.get("entity") or n.get("values_table"), path=n.get("path", ""),
                          identity=n.get("identity", ""), matched=bool(n.get("matched", False)),
                          row_fields=_maps(text, n.get("fields"), f"{column}.fields"))
    needs = {Kind.ENTITY_LIST: ("table", "entity", "identity"), Kind.CHILD_LIST: ("table",), Kind.OBJECT_CHILD: ("table",),
             Kind.VALUE_LIST: ("table", "values_table")}.get(kind, ())
    if [k for k in needs if not n.get(k)]:
        refuse(text, f"nested column {column!r} ({kind}) lacks {', '.join(k for k in needs if not n.get(k))}",
              f"a {kind} needs {', '.join(needs)}; or write a fresh plan with `normalise plan`", f'column = "{column}"')
    nested.children = [_nested_from(text, c, columns, handles, plan) for c in n.get("children", [])]
    nested.keyed, nested.keyed_value = str(n.get("keyed", "")), str(n.get("keyed_value", ""))
    if nested.keyed and kind not in (Kind.ENTITY_LIST, Kind.CHILD_LIST):
        refuse(text, f"nested column {column!r}: keyed = {nested.keyed!r} with kind {kind!r}",
              'an object keyed by data is a list of its keys: use kind = "entity-list" or "child-list", or '
              'keyed = ""', f'keyed = "{nested.keyed}"')
    if kind == Kind.VALUE_LIST:
        value_type = n.get("value_type", "text")
        if value_type not in ("integer", "real", "boolean", "text"):
            refuse(text, f"nested column {column!r}: value_type {value_type!r}", "use integer, real, boolean or text",
                  f'value_type = "{value_type}"')
        nested.value_type = value_type
        nested.references = str(n.get("references", ""))
    decoded = columns.get(column) if "path" not in n else None
    if kind == Kind.VALUE_LIST and decoded is not None and decoded.format == Format.DELIMITED:
        nested.separator = str(n.get("separator", decoded.join_separator or decoded.separator or ""))
    return nested


def _inside(plan: Plan):
    """Every nested column of the plan, lists inside objects too, with whether it is inside another."""
    for record in plan.records:
        stack = [(n, False) for n in record.nested]
        while stack:
            nested, inner = stack.pop(0)
            yield nested, inner
            stack[:0] = [(c, True) for c in nested.children]


def _values(values: list, nested: NestedColumn) -> list:
    """A column's values as the build reads them: an object keyed by data as the list of its keys."""
    if not nested.keyed:
        return values
    from ..model.exact import keyed_items

    return [keyed_items(v, nested.keyed, nested.keyed_value) for v in values]


def _check_keys(text: str, values: list, nested: NestedColumn, group: EntityGroup | None = None,
                groups: dict | None = None) -> None:
    """Every key of the column's objects must be planned (identity, attribute, link or nested list).

    Keys that only ever hold empty lists or objects make no column or table, so they need no plan.
    """
    attributes = group.attributes if group else []
    groups = groups or {}
    known = {nested.identity} | {f.path[0] for f in attributes} | {f.path[0] for f in nested.row_fields if f.path}
    for f in nested.row_fields:
        if f.entity and not f.path and groups.get(f.entity):  # the object itself is an entity
            known |= {groups[f.entity].identity} | {a.path[0] for a in groups[f.entity].attributes}
    known |= {c.path.split(".")[0] for c in nested.children}
    found = set()
    for v in values:
        for o in (v if isinstance(v, (list, tuple)) else [v]):
            if isinstance(o, dict):
                found.update(str(k) for k, x in o.items() if not (isinstance(x, (list, tuple, dict)) and not x))
    new = sorted(found - known)
    if new:
        where = (f" (link attributes) or to the attributes of entity {group.table!r}" if group else "")
        refuse(text, f"nested column {nested.column!r} has key(s) the plan does not know: {', '.join(new)}",
              f"add them to the fields of {nested.column!r}{where}, or write a fresh plan",
              f'column = "{nested.column}"')
