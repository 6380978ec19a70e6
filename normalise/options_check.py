"""Options that name columns or fields are checked against the inputs before anything is written.

An option that names nothing would otherwise be accepted and do nothing: ``--identity sender=id`` where no
column is called ``sender`` builds the same database as no option at all. ``check_option_names`` runs once,
on the decoded inputs, before the join and the inference, and raises ``UsageError`` naming the option as
written, what it expected and the names that do exist, the closest first.

The names accepted are the ones ``infer.infer_plan`` looks up (and ``join.join`` for ``--join``):

- ``--identity`` and ``--match``: ``COLUMN``, ``FILE:COLUMN`` where FILE is the stem of the file the column
  comes from, or of the main file for a column joined to it (under the name it has there);
- ``--merge`` and ``--no-merge``: ``FILE:COLUMN`` with the stem of the file the column comes from;
- either form may go on with ``.KEY.KEY`` into the column's objects, when the column itself is not so named;
- ``--key FILE=COLUMN``: a column of that file; ``--decode COLUMN=FORMAT``: a column of some file;
- ``--join FILE.COLUMN[=MAINCOLUMN]``: a column of that further file, and one of the main file.

``--pick`` names a bridge table or its columns, which exist only once the model is inferred; ``views.add_pick``
checks it then, still before anything is written.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from .decode import format_choices
from .infer import objects_of
from .model.errors import UsageError
from .model.kinds import Format
from .model.names import closest_first


@dataclass
class _Column:
    """One column of one input file and the names the options find it by."""

    path: str  # the input file
    name: str  # the column's name in that file
    values: list  # its decoded values
    names: set = field(default_factory=set)  # (FILE or None, COLUMN) that --identity and --match accept
    members: set = field(default_factory=set)  # (FILE, COLUMN) that --merge and --no-merge accept


def check_option_names(exports: list, decoded: dict, settings=None, formats: dict | None = None) -> None:
    """Refuse an option that names a file, column or field the inputs do not have.

    Parameters:
        exports: the input files as read, the main one first (before any join).
        decoded: each export's path mapped to its ``{column: DecodedColumn}``.
        settings: ``model.settings.Settings`` (natural keys, identities, match, merge, no-merge, ``--join``).
        formats: ``--decode`` as ``{column: (format, separator)}``.

    Raises:
        UsageError: the option as written, what it expected and the names there are, the closest first.

    Example:
        >>> from normalise.model.export import Export
        >>> from normalise.decode import decode
        >>> from normalise.model.settings import Settings
        >>> books = Export("books.csv", "csv", ["title", "senders"],
        ...                {"title": ["A"], "senders": ['[{"id": 1, "name": "Tamsel"}]']}, [2])
        >>> check_option_names([books], {"books.csv": decode(books)}, Settings(identities={"sender": "id"}))
        Traceback (most recent call last):
        ...
        normalise.model.errors.UsageError: --identity sender=id: books.csv has no column 'sender' (columns: senders, title)
    """
    if settings is None:
        _check_formats(exports, formats or {})
        return
    _check_keys(exports, settings.natural_keys)
    _check_formats(exports, formats or {})
    _check_join(exports, settings.on)
    columns = _columns(exports, decoded, settings)
    for ref, wanted in settings.identities.items():
        _check_fields(f"--identity {ref}={wanted}", ref, wanted, columns, exports)
    for ref, wanted in settings.match.items():
        option = f"--match {ref}={wanted}"
        if not wanted:
            raise UsageError(f"{option}: expected COLUMN=FIELD, the field whose text the objects are matched on")
        _check_fields(option, ref, wanted, columns, exports)
    for group in settings.merge:
        for ref in group:
            _objects(f"--merge {','.join(group)}", ref, columns, exports, members=True)
    for ref in settings.no_merge:
        _objects(f"--no-merge {ref}", ref, columns, exports, members=True)


def _no_column(exports: list, name: str) -> str:
    files = [Path(e.path).name for e in exports]
    if len(files) == 1:
        return f"{files[0]} has no column {name!r}"
    return f"none of {', '.join(files)} has a column {name!r}"


def _require_column(option: str, export, column: str) -> None:
    """``option`` names ``column`` of ``export``'s file: refused when the file has no such column."""
    if column not in export.columns:
        raise UsageError(f"{option}: {Path(export.path).name} has no column {column!r} "
                         f"(columns: {closest_first(column, export.columns)})")


def _check_keys(exports: list, natural_keys: dict) -> None:
    by_stem = {e.name: e for e in exports}
    for stem, column in natural_keys.items():
        option = f"--key {stem}={column}"
        export = by_stem.get(stem)
        if export is None:
            raise UsageError(f"{option}: no input file is called {stem!r}; FILE is the file name without "
                             f"extension (files: {closest_first(stem, by_stem)})")
        _require_column(option, export, column)


def _check_formats(exports: list, formats: dict) -> None:
    every = [c for e in exports for c in e.columns]
    for column, (fmt, sep) in format_choices(formats).items():
        if column not in every:
            spec = f"{fmt}:{sep}" if sep else fmt
            raise UsageError(f"--decode {column}={spec}: {_no_column(exports, column)} "
                             f"(columns: {closest_first(column, every)})")


def _check_join(exports: list, on: dict) -> None:
    main, further = exports[0], exports[1:]
    by_name = {n: e for e in further for n in (e.name, Path(e.path).name)}
    for file, (right, left) in on.items():
        option = f"--join {file}.{right}" + (f"={left}" if left else "")
        other = by_name.get(file)
        if other is None:
            raise UsageError(f"{option}: no further input file is called {file!r} "
                             f"(further files: {closest_first(file, [e.name for e in further])})")
        _require_column(option, other, right)
        if left and left not in main.columns:
            raise UsageError(f"{option}: the main file {Path(main.path).name} has no column {left!r} "
                             f"(columns: {closest_first(left, main.columns)})")


def _columns(exports: list, decoded: dict, settings) -> list[_Column]:
    """Every input column with the names ``infer_plan`` finds it by, joined or not."""
    main = exports[0]
    joins = (len(exports) > 1 and settings is not None and not settings.separate
             and settings.cardinality != "one-to-many")
    taken = set(main.columns)  # the names of the combined export, as join.join makes them
    out = []
    for export in exports:
        stated = (settings.on.get(export.name) or settings.on.get(Path(export.path).name)
                  if joins and export is not main else None)
        for name in export.columns:
            column = _Column(export.path, name, decoded[export.path][name].values)
            column.names = {(None, name), (export.name, name)}
            column.members = {(export.name, name)}
            if joins and export is not main and not (stated and stated[0] == name):
                # a joined column keeps its name unless the combined export has it already (join.join);
                # whether a file is joined depends on its keys, so both names are accepted. Only nested
                # columns are named by these options (and a detected join key, left out by the join, is scalar)
                new = name if name not in taken else f"{export.name}_{name}"
                taken.add(new)
                if decoded[export.path][name].format not in (Format.TEXT, Format.EMPTY):
                    column.names |= {(None, new), (export.name, new), (main.name, new)}
                    column.members.add((export.name, new))
            out.append(column)
    return out


def _matches(ref: str, columns: list[_Column], members: bool) -> list[tuple[_Column, list[str]]]:
    """The columns ``ref`` names, each with the path of keys after the column's name (the longest name wins)."""
    found = []
    for column in columns:
        for file, name in (column.members if members else column.names):
            text = name if file is None else f"{file}:{name}"
            if ref == text:
                found.append((len(text), column, []))
            elif ref.startswith(text + "."):
                found.append((len(text), column, ref[len(text) + 1:].split(".")))
    longest = max((n for n, _, _ in found), default=0)
    return [(column, path) for n, column, path in found if n == longest]


def _unknown_column(option: str, ref: str, columns: list[_Column], exports: list, members: bool) -> UsageError:
    """The error for a ``ref`` that names no column: an unknown file, or no such column in it."""
    stems = [e.name for e in exports]
    file, colon, name = ref.partition(":")
    if members and not colon:
        return UsageError(f"{option}: {ref!r} names no file; expected FILE:COLUMN, FILE the file name without "
                          f"extension, e.g. {stems[0]}:{ref}")
    if colon and file in stems:
        export = exports[stems.index(file)]
        names = [n for c in columns for f, n in (c.members if members else c.names) if f == file]
        elsewhere = sorted({f for c in columns for f, n in (c.members if members else c.names)
                            if n == name and f is not None})
        if elsewhere:
            return UsageError(f"{option}: {Path(export.path).name} has no column {name!r}; name it "
                              f"{elsewhere[0]}:{name} (FILE is the file the column comes from)")
        return UsageError(f"{option}: {Path(export.path).name} has no column {name!r} "
                          f"(columns: {closest_first(name, names)})")
    if colon and file not in stems:
        return UsageError(f"{option}: no input file is called {file!r}; FILE is the file name without "
                          f"extension (files: {closest_first(file, stems)})")
    names = [n for c in columns for f, n in c.names if f is None]
    return UsageError(f"{option}: {_no_column(exports, ref)} (columns: {closest_first(ref, names)})")


def _objects(option: str, ref: str, columns: list[_Column], exports: list, members: bool = False) -> list[dict]:
    """The objects ``ref`` names (a column's, or those at a path of keys into them); refused when there are none."""
    matches = _matches(ref, columns, members)
    if not matches:
        raise _unknown_column(option, ref, columns, exports, members)
    found, problem = [], None
    for column, path in matches:
        objects, problem_here = _follow(column, path)
        found.extend(objects)
        problem = problem or problem_here
    if not found:
        if problem.endswith("holds no objects"):  # the column itself: say which columns do
            with_objects = [c.name for c in columns if objects_of(c.values)[0]]
            problem += f" (columns with objects: {closest_first(ref, with_objects)})"
        raise UsageError(f"{option}: {problem}")
    return found


def _follow(column: _Column, path: list[str]) -> tuple[list[dict], str | None]:
    """The objects at ``path`` in a column's values, or none and why."""
    objects, _ = objects_of(column.values)
    file = Path(column.path).name
    if not objects:
        return [], f"column {column.name!r} of {file} holds no objects"
    for depth, key in enumerate(path):
        where = ".".join([column.name, *path[:depth]])
        if not any(key in o for o in objects):
            return [], (f"no field {key!r} in the objects of column {where!r} "
                        f"(fields: {closest_first(key, _fields(objects))})")
        inner, _ = objects_of([o.get(key) for o in objects])
        if not inner:
            with_objects = [f for f in _fields(objects) if objects_of([o.get(f) for o in objects])[0]]
            return [], (f"{'.'.join([column.name, *path[:depth + 1]])!r} in {file} holds no objects "
                        f"(fields with objects: {closest_first(key, with_objects)})")
        objects = inner
    return objects, None


def _fields(objects: list[dict]) -> list[str]:
    return list(dict.fromkeys(k for o in objects for k in o))


def _check_fields(option: str, ref: str, wanted: str, columns: list[_Column], exports: list) -> None:
    """``ref`` names objects, and ``wanted`` (unless empty: no identity) is a field of them."""
    objects = _objects(option, ref, columns, exports)
    if wanted and not any(wanted in o for o in objects):
        raise UsageError(f"{option}: no field {wanted!r} in the objects of {_described(ref, columns)} "
                         f"(fields: {closest_first(wanted, _fields(objects))})")


def _described(ref: str, columns: list[_Column]) -> str:
    column, path = _matches(ref, columns, members=False)[0]
    return "column " + repr(".".join([column.name, *path]))
