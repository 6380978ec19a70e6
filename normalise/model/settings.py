"""Every choice a run is made with, in one immutable object: what the user decided and what the inference may not.

A run's ``Settings`` are made once, before anything is read: from the command line or the Python API
(``settings_of``: ``Options``, ``JoinOptions`` and ``Limits`` folded together, each field once), or from a plan file
(``planfile.settings_from_doc``). Every pass reads them (the join, the inference, the sharing pass) and none
writes them; a pass that finds something new (the sharing pass, ``sharing.widened``) makes new settings with
``dataclasses.replace``. The plan holds the settings it was made with (``Plan.settings``), so a plan says every
decision of its run.

Mappings are read-only (``ReadOnly``) and lists are tuples: a setting cannot change under a pass.

Example:
    >>> s = Settings(natural_keys={"books": "isbn"}, merge=[["books:authors", "books:editors"]], how="inner")
    >>> s.natural_keys["books"], s.merge, s.how
    ('isbn', (('books:authors', 'books:editors'),), 'inner')
    >>> s.natural_keys["books"] = "id"
    Traceback (most recent call last):
    ...
    TypeError: settings are read-only: make new ones with dataclasses.replace
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Mapping

from .errors import UsageError

DEFAULT_VIOLATION_THRESHOLD = 0.05  # the share of records that may break a dependency or a key and still keep it
DUPLICATES = ("first", "last", "refuse")
HOWS = ("left", "inner", "full")
CARDINALITIES = ("one-to-one", "one-to-many")

DEFAULT_MAX_DEPTH = 100
DEFAULT_MAX_CELL_CHARS = 16 * 1024 * 1024

_FROZEN_MAPPINGS = ("natural_keys", "identities", "match", "keyed", "on")


class ReadOnly(dict):
    """A dict no one can change once made; it pickles and copies as a dict does (a process pool can take it),
    which ``types.MappingProxyType`` does not."""

    def _refuse(self, *args, **kwargs):
        raise TypeError("settings are read-only: make new ones with dataclasses.replace")

    __setitem__ = __delitem__ = clear = pop = popitem = setdefault = update = __ior__ = _refuse

    def __reduce__(self):
        return ReadOnly, (dict(self),)

    def __deepcopy__(self, memo):
        return self  # nothing inside changes either: the values are text and tuples


@dataclass(frozen=True)
class Limits:
    """Bounds on one cell; a cell beyond them is quarantined with a message."""

    max_depth: int = DEFAULT_MAX_DEPTH
    max_cell_chars: int = DEFAULT_MAX_CELL_CHARS


@dataclass(frozen=True)
class Settings:
    """What a user can decide instead of the inference, and how further exports are joined."""

    natural_keys: Mapping[str, str] = None  # file stem -> column name
    duplicates: str = "first"  # first | last | refuse: of records (and joined rows) repeating a natural key
    violation_threshold: float = DEFAULT_VIOLATION_THRESHOLD
    identities: Mapping[str, str] = None  # "file:column" or "column" -> identity field ("" = none)
    merge: tuple[tuple[str, ...], ...] = ()  # groups of "file:column" forced into one entity
    match: Mapping[str, str] = None  # "file:column" or "column" -> field matched on its normalised text
    no_merge: tuple[str, ...] = ()  # "file:column" never merged with another column
    keyed: Mapping[str, str] = None  # "file:column" or "column" -> field an object's keys go to ("" = not keyed)
    how: str = "left"  # left | inner | full: which main records a join keeps
    cardinality: str = "one-to-one"  # one-to-one | one-to-many: rows of a joined file per main record
    on: Mapping[str, tuple[str, str | None]] = None  # joined file stem -> (its key column, main column or None)
    separate: bool = False  # never join: every file its own record table
    limits: Limits = None  # bounds on one cell (depth, characters); beyond them a cell is quarantined
    # ("file:column", field) pairs every record showed the identity does not determine, though the first records
    # did: kept on the link (bridge), not the entity table (set by the build's widening, ``pipeline._build``)
    link_fields: tuple[tuple[str, str], ...] = ()
    # (input path, column, texts) of columns of texts whose later records hold texts the first records' type cannot
    # hold: the column's type is decided on its first records and these (set by the build's widening)
    column_texts: tuple[tuple[str, str, tuple[str, ...]], ...] = ()

    def __post_init__(self):
        for name in _FROZEN_MAPPINGS:
            value = getattr(self, name) or {}
            object.__setattr__(self, name, value if isinstance(value, ReadOnly) else ReadOnly(value))
        object.__setattr__(self, "merge", tuple(tuple(group) for group in self.merge or ()))
        object.__setattr__(self, "no_merge", tuple(self.no_merge or ()))
        object.__setattr__(self, "link_fields", tuple(tuple(pair) for pair in self.link_fields or ()))
        object.__setattr__(self, "column_texts", tuple((p, c, tuple(t)) for p, c, t in self.column_texts or ()))
        object.__setattr__(self, "limits", self.limits or Limits())


@dataclass
class Options:
    """The inference's part of ``Settings``, as the Python API takes it (``build_database(options=...)``)."""

    natural_keys: dict = None
    duplicates: str = "first"
    violation_threshold: float = DEFAULT_VIOLATION_THRESHOLD
    identities: dict = None
    merge: list = None
    match: dict = None
    no_merge: list = None
    keyed: dict = None


@dataclass
class JoinOptions:
    """The join's part of ``Settings``, as the Python API takes it (``build_database(join_options=...)``).
    Its ``duplicates`` is the one policy of the run when ``Options`` does not set another."""

    how: str = "left"
    cardinality: str = "one-to-one"
    on: dict = None
    separate: bool = False
    duplicates: str = "first"


def settings_of(options: Options | Settings | None = None, join_options: JoinOptions | None = None,
                limits: Limits | None = None) -> Settings:
    """The one ``Settings`` of a run given the API's ``Options``, ``JoinOptions`` and ``Limits`` (any may be absent).

    Duplicates are one policy, of records and of joined rows alike: the one that is not the default wins, and two
    different ones are refused.

    Example:
        >>> settings_of(Options(duplicates="last"), JoinOptions(how="inner")).duplicates
        'last'
    """
    if isinstance(options, Settings):
        base = options if limits is None else replace(options, limits=limits)
    else:
        o = options or Options()
        base = Settings(natural_keys=o.natural_keys, duplicates=o.duplicates, violation_threshold=o.violation_threshold,
                        identities=o.identities, merge=o.merge, match=o.match, no_merge=o.no_merge, keyed=o.keyed,
                        limits=limits)
    if join_options is None:
        return base
    duplicates = {base.duplicates, join_options.duplicates} - {"first"} or {"first"}
    if len(duplicates) > 1:
        raise UsageError(f"duplicates: Options says {base.duplicates!r} and JoinOptions {join_options.duplicates!r}; "
                         "a run has one policy for repeated keys")
    return replace(base, duplicates=duplicates.pop(), how=join_options.how, cardinality=join_options.cardinality,
                   on=join_options.on, separate=join_options.separate)
