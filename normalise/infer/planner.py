"""The plan from the first records of each export: record tables, nested columns and their tables, entity groups,
references, views (``infer_plan``).
"""

from __future__ import annotations

from pathlib import Path

from ..model.decimals import decimal_scale
from ..model.exact import ABSENT as _ABSENT, get
from ..model.kinds import Format, Kind
from ..model.names import Namer, singular, sql_name
from ..model.plan import META_TABLES, FieldMap, NestedColumn, Plan, RecordSource
from ..model.settings import Options, Settings, settings_of
from .dependencies import ObjectTable, hashable, identity_candidates
from .entities import Member, group_entities
from .keyed import keyed_column, keyed_fields, keys_like_codes
from .options import WIDE_OBJECT_KEYS
from .references import infer_references
from .shapes import field_map, field_maps, get_path, object_paths, objects_of, scalar_fields, shape_of
from .types import detect_natural_key, list_value_type, scalar_column_type


# Long (about 110 lines): the inference's steps in their order (records and their keys, nested columns, entity
# groups, tables, references, views), each a call; what remains is the loop that hands each the one before's result.
def infer_plan(exports: list, decoded: dict, settings: Settings | Options | None = None) -> Plan:
    """Infer the relational model of decoded exports.

    ``decoded`` maps each export's path to its ``{column: DecodedColumn}``.
    """
    settings = settings_of(settings)
    plan = Plan(settings=settings)
    tables = Namer(META_TABLES)
    found = Found(settings)  # where entities are: lists of them and single objects with an identity

    for export in exports:
        columns = decoded[export.path]
        record_table = tables(export.name)
        scalar_values, scalar_types = {}, {}
        record = RecordSource(file=export.name, path=export.path, table=record_table,
                              key_column=f"{singular(record_table)}_sk", natural_key=[],
                              duplicates=settings.duplicates)
        names = Namer([record.key_column])
        for name, col in columns.items():
            shape = "scalar"
            if col.format not in (Format.TEXT, Format.EMPTY):
                shape = shape_of(col.values)
            if shape == "scalar":
                # texts later records hold that the first records' type could not (the build's widening)
                later = [t for p, c, texts in settings.column_texts if (p, c) == (export.path, name) for t in texts]
                values = col.values + later if later else col.values
                t = scalar_column_type(values)
                scalar_values[name] = col.values
                scalar_types[name] = t
                as_text = t in ("integer", "real") and any(type(v) is str for v in values)
                record.scalars.append(FieldMap([name], names(name), t, as_text=as_text,
                                               scale=decimal_scale(values) if t == "decimal" else None))
                continue
            origin = export.origin.get(name)
            nested = NestedColumn(file=Path(origin[0]).stem if origin else export.name, column=name,
                                  kind=None)  # decided below
            values = col.values
            if shape == "object":
                values = keyed_column(nested, values, settings, export.name)
                if nested.keyed:
                    shape = "object-list"
            if shape == "scalar-list":
                nested.kind = Kind.VALUE_LIST
                if col.format == Format.DELIMITED:
                    nested.separator = col.join_separator or col.separator or ""
                else:
                    nested.value_type = list_value_type(col.values)
            elif shape == "object":
                objects, _ = objects_of(col.values)
                table = ObjectTable(objects)
                fields, lists = scalar_fields(objects, table=table)
                wide = len(fields) > WIDE_OBJECT_KEYS
                nested.kind = Kind.OBJECT_CHILD if wide else Kind.OBJECT_COLUMNS
                refs = found.references(nested, export.name, objects, table, itself=True)
                found.row_fields(nested, objects, table, fields, refs, Namer() if wide else names,
                            "" if wide else name + "_")
                nested.children = _child_lists(export.name, name, objects, lists, table, found)
            else:
                objects, owners = objects_of(values)
                table = ObjectTable(objects)
                # FILE:COLUMN names the file the column comes from (a joined file's own name), as
                # entity members and --no-merge do; the main file's name and the bare column also work
                wanted = settings.identities.get(f"{nested.file}:{name}", settings.identities.get(
                    f"{export.name}:{name}", settings.identities.get(name)))
                matched = settings.match.get(f"{nested.file}:{name}", settings.match.get(
                    f"{export.name}:{name}", settings.match.get(name)))
                if matched:
                    wanted, nested.matched = matched, True
                if wanted is None:
                    candidates = identity_candidates(objects, owners, settings.violation_threshold, table)
                    wanted = candidates[0].field if candidates else ""
                nested.kind = Kind.ENTITY_LIST if wanted else Kind.CHILD_LIST
                nested.identity = wanted
                if wanted:
                    found.members.append(Member(nested, table, wanted, nested.matched,
                                                 f"{nested.file}:{nested.column}", nested.column))
                fields, lists = scalar_fields(objects, table=table)
                refs = found.references(nested, export.name, objects, table)
                found.row_fields(nested, objects, table, fields, refs, Namer(["list_position"] if wanted else []), "")
                nested.children = _child_lists(export.name, name, objects, lists, table, found)
            record.nested.append(nested)
        chosen = settings.natural_keys.get(export.name)
        if chosen is None:
            chosen = detect_natural_key(list(scalar_values), scalar_values, scalar_types)
        if chosen:
            if chosen not in scalar_values:
                from ..model.errors import UsageError
                raise UsageError(f"--key {export.name}={chosen}: {export.path} has no scalar column {chosen!r}")
            record.natural_key = [next(f.column for f in record.scalars if f.path == [chosen])]
        record.parent_path = export.parent_path
        record.parent_column = export.parent_column
        plan.records.append(record)

    found.settle()
    group_entities(plan, found.members, settings, tables)
    found.make_row_fields(plan)
    for record in plan.records:
        owner = singular(record.table)
        for nested in record.nested:
            if nested.kind in (Kind.ENTITY_LIST, Kind.VALUE_LIST, Kind.CHILD_LIST, Kind.OBJECT_CHILD):
                nested.table = tables(f"{owner}_{nested.column}")
            if nested.kind == Kind.VALUE_LIST:
                nested.entity = tables(singular(sql_name(nested.column)))
            for child in nested.children:
                _name_children(child, nested.table or record.table, tables)
            _free_key_names(plan, nested, record.key_column)
    infer_references(plan, decoded)
    from ..model.schema import add_tables
    from ..model.views import default_views

    add_tables(plan)
    plan.views = default_views(plan)
    return plan


def _name_children(nested, owner_table: str, tables: Namer) -> None:
    nested.table = tables(f"{singular(owner_table)}_{nested.path.replace('.', '_')}")
    if nested.kind == Kind.VALUE_LIST:
        nested.entity = tables(singular(sql_name(nested.path.split(".")[-1])) + "_value")
    for child in nested.children:
        _name_children(child, nested.table, tables)


def _child_lists(file: str, column: str, objects: list[dict], lists: list[list[str]],
                 table: ObjectTable | None = None, found: "Found | None" = None) -> list:
    """Lists inside objects become grandchild tables: value lists, entity lists or child lists, recursively.

    A list of objects with an identity named like one (``id``, ``user_id``) is an entity list, its entities
    shared with the other columns of the same identity space; ``found`` collects them.
    """
    from ..model.plan import NestedColumn

    out = []
    for path in lists:
        if table is not None and len(path) == 1:
            inner = table.values(path[0])
        else:
            inner = [get_path(o, path) for o in objects]
        key, value_field = keyed_fields([v for v in inner if isinstance(v, dict)], path[-1])
        if key:  # an object keyed by data: read as the list of its keys (exact.keyed_items)
            from ..model.exact import keyed_items

            inner = [keyed_items(v, key, value_field) if isinstance(v, dict) else v for v in inner]
        # a value that is not a list is taken as a list of one (build.rows, ``Builder._rows``), so its type counts too
        wrapped = [v if isinstance(v, (list, tuple)) else [v] for v in inner if v is not None]
        inner = [v for v in inner if isinstance(v, (list, tuple))]
        items = [x for v in inner for x in v if x is not None]
        nested = NestedColumn(file, column, None, path=".".join(path), keyed=key, keyed_value=value_field)
        if items and all(isinstance(x, dict) for x in items):
            nested.kind = Kind.CHILD_LIST
            sub_table = ObjectTable(items)
            fields, sub = scalar_fields(items, table=sub_table)
            if found is None:
                nested.row_fields = field_maps(items, fields, Namer(), sub_table)
            else:
                owners = [k for k, v in enumerate(inner) for x in v if x is not None]
                wanted = found.identity_of(nested, file, owners, items, sub_table)
                if wanted:
                    nested.kind, nested.identity = Kind.ENTITY_LIST, wanted
                    found.members.append(Member(nested, sub_table, wanted, False, found.name_of(nested),
                                                 path[-1]))
                refs = found.references(nested, file, items, sub_table)
                found.row_fields(nested, items, sub_table, fields, refs, Namer(["list_position"] if wanted else []),
                            "")
            nested.children = _child_lists(file, column + "." + ".".join(path), items, sub, sub_table, found)
        else:
            nested.kind = Kind.VALUE_LIST
            nested.value_type = list_value_type(wrapped)
        out.append(nested)
    return out


class Found:
    """Entities wherever they are, collected while the columns are read; links made once attributes are known.

    The fields an entity's table holds (its identity and attributes) are not columns of the rows that refer
    to it, so the rows' columns (``NestedColumn.row_fields``) are made after the entities are grouped.
    """

    def __init__(self, settings: "Settings"):
        self.settings = settings
        self.members: list[Member] = []
        self.pending: list[tuple] = []

    @staticmethod
    def name_of(nested, path: list[str] = ()) -> str:
        inside = ".".join(([nested.path] if nested.path else []) + list(path))
        return f"{nested.file}:{nested.column}" + (f".{inside}" if inside else "")

    def _forced(self, nested, file: str, path: list[str] = ()):
        """The identity an option names for these objects (``--identity``), or None."""
        name = self.name_of(nested, path)
        bare = name.split(":", 1)[1]
        for key in (name, f"{file}:{bare}", bare):
            if key in self.settings.identities:
                return self.settings.identities[key]
        return None

    def identity_of(self, nested, file: str, owners: list[int], objects: list[dict], table: ObjectTable) -> str:
        """The identity of objects inside objects: one an option names, or a field named like an identifier."""
        forced = self._forced(nested, file)
        if forced is not None:
            return forced
        candidates = identity_candidates(objects, owners, self.settings.violation_threshold, table)
        named = [c for c in candidates if c.named_like_identity]
        return named[0].field if named else ""

    def references(self, nested, file: str, objects: list[dict], table: ObjectTable, itself: bool = False) -> list:
        """Single objects with an identity inside the objects (at any depth; ``itself``: the objects too)."""
        from ..model.plan import FieldMap

        out = []
        paths = ([([], objects, table)] if itself else []) + object_paths(objects, table)
        for path, subs, sub_table in paths:
            wanted = self.identity_of_single(nested, file, path, subs, sub_table)
            if not wanted:
                continue
            found = [get(o, path) for o in objects] if path else objects
            absent = sum(v is _ABSENT for v in found)
            nulls = sum(v is None for v in found)
            ref = FieldMap(list(path), "", "integer", "absent" if absent > nulls else "null")
            forced = self._forced(nested, file, path) is not None
            codes, _, isnull = sub_table.codes(wanted)
            repeats = len(set(codes[~isnull].tolist())) < int((~isnull).sum())
            self.members.append(Member(ref, sub_table, wanted, False, self.name_of(nested, path),
                                        path[-1] if path else nested.column, tentative=not (forced or repeats)))
            out.append(ref)
        return out

    def settle(self) -> None:
        """Single objects whose identities never repeat are an entity only when another member (a list or
        a reference) shares identities with them; otherwise they stay fields of the rows holding them (a
        one-to-one object identifies nothing shared; its keys may as well be codes, e.g. ``id`` Indonesian)."""
        def identities(m):
            return set(map(hashable, m.table.values(m.identity))) - {None}

        dropped = []
        for m in self.members:
            if m.tentative:
                own = identities(m)
                if not any(o is not m and o.identity == m.identity and own & identities(o)
                           for o in self.members):
                    dropped.append(m)
        gone = {id(m.holder) for m in dropped}
        self.members = [m for m in self.members if id(m.holder) not in gone]
        for entry in self.pending:
            entry[4][:] = [r for r in entry[4] if id(r) not in gone]

    def identity_of_single(self, nested, file: str, path, objects: list[dict], table: ObjectTable) -> str:
        forced = self._forced(nested, file, path)
        if forced is not None:
            return forced if forced in table.keys() else ""
        if keys_like_codes(table):
            return ""  # {"de": ..., "id": ...}: keyed by codes, its "id" a language, not an identity
        return self.identity_of(nested, file, list(range(len(objects))), objects, table) if objects else ""

    def row_fields(self, nested, objects, table, fields, refs, names: Namer, prefix: str) -> None:
        if not refs and nested.kind != Kind.ENTITY_LIST:
            nested.row_fields = [field_map(objects, p, names(prefix + "_".join(p)), table) for p in fields]
            return
        self.pending.append((nested, objects, table, fields, refs, names, prefix))

    def make_row_fields(self, plan) -> None:
        """Each row's columns: references first (the entity's key), then the fields no entity table holds."""
        for nested, objects, table, fields, refs, names, prefix in self.pending:
            held = set()
            if nested.kind == Kind.ENTITY_LIST:
                group = plan.entity_group(nested.entity)
                held |= {(nested.identity,)} | {tuple(f.path) for f in group.attributes}
            for ref in refs:
                group = plan.entity_group(ref.entity)
                held |= {tuple(ref.path + [group.identity])} | {tuple(ref.path + f.path) for f in group.attributes}
                ref.column = names(prefix + "_".join(ref.path + ["sk"]))
            nested.row_fields = list(refs) + [field_map(objects, p, names(prefix + "_".join(p)), table)
                                         for p in fields if tuple(p) not in held]


def _free_key_names(plan, nested, owner_key: str) -> None:
    """A row's column named like a key its table is given (its own, its owner's, the entity's) is renamed."""
    if nested.table:
        taken = {f"{nested.table}_sk", owner_key, "list_position"}
        if nested.kind == Kind.ENTITY_LIST:
            taken.add(f"{nested.entity}_sk")
        names = Namer(sorted(taken))
        for f in nested.row_fields:
            f.column = names(f.column)
    for child in nested.children:
        _free_key_names(plan, child, f"{nested.table}_sk" if nested.table else owner_key)
