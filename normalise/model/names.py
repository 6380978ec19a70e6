"""SQL names for things found in the data.

No name taken from the data ever reaches SQL text unquoted: every table and
column name is mapped to ``[a-z0-9_]`` here (and quoted by SQLAlchemy when it
is written), and the plan keeps the original name beside it.
"""

from __future__ import annotations

import re
import unicodedata
from collections.abc import Callable
from difflib import get_close_matches

_UNSAFE = re.compile(r"[^a-z0-9_]+")
MAX_NAME = 60


def quote_name(name: str) -> str:
    """A name as an SQL identifier in double quotes, a quote inside it doubled (SQL-92; SQLite and PostgreSQL
    read it so), so no name can change the statement around it.

    Example:
        >>> quote_name('t"; DROP TABLE x; --')
        '"t""; DROP TABLE x; --"'
    """
    return '"' + str(name).replace('"', '""') + '"'


def fit(name: str, limit: int = MAX_NAME) -> str:
    """A name shortened to ``limit`` characters when longer, with a stable hash of the whole name at its end,
    so names that differ past the limit stay apart (PostgreSQL keeps 63 bytes of a name: its documentation,
    "Identifiers and Key Words"; the tool keeps 60, so that ``_sk`` still fits).

    Example:
        >>> fit("a" * 70) == "a" * 51 + "_" + fit("a" * 70)[-8:], len(fit("a" * 70)), fit("short")
        (True, 60, 'short')
    """
    if len(name.encode("utf-8")) <= limit:
        return name
    from hashlib import blake2b

    return name[:limit - 9] + "_" + blake2b(name.encode("utf-8"), digest_size=4).hexdigest()


def sql_name(text: str) -> str:
    """A lower-case SQL identifier for a name from the data.

    Example:
        >>> sql_name("Release Date"), sql_name("2nd-author"), sql_name("prénom"), sql_name("")
        ('release_date', 'c_2nd_author', 'prenom', 'c')
    """
    text = unicodedata.normalize("NFKD", str(text)).encode("ascii", "ignore").decode()
    name = _UNSAFE.sub("_", text.lower()).strip("_")
    if not name or name[0].isdigit():
        name = "c_" + name if name else "c"
    return fit(name)


_IRREGULAR = {"people": "person", "children": "child", "men": "man", "women": "woman", "data": "data",
              "series": "series", "species": "species", "news": "news", "status": "status",
              # Latin and Greek plurals, and -us words doubled in -uses (English spelling, common practice)
              "indices": "index", "matrices": "matrix", "vertices": "vertex", "appendices": "appendix",
              "analyses": "analysis", "theses": "thesis", "crises": "crisis", "diagnoses": "diagnosis",
              "criteria": "criterion", "phenomena": "phenomenon", "media": "media",
              "buses": "bus", "campuses": "campus", "viruses": "virus", "bonuses": "bonus", "censuses": "census"}
# -ies words whose singular ends in -ie, not -y (English spelling, common practice)
_IE = frozenset(["cookies", "rookies", "calories", "pies", "ties", "lies", "zombies", "selfies", "brownies"])
# plurals in -es after a sibilant: box -> boxes, match -> matches, wish -> wishes, address -> addresses,
# alias -> aliases, status -> statuses (English spelling, common practice)
_SIBILANT_ES = ("xes", "ches", "shes", "sses", "zzes", "iases", "tuses", "suses")


def singular(name: str) -> str:
    """A rough English singular, for naming a table after a plural column.

    Example:
        >>> singular("contributors"), singular("titles"), singular("categories"), singular("press"), singular("people")
        ('contributor', 'title', 'category', 'press', 'person')
        >>> singular("aliases"), singular("suffixes"), singular("series"), singular("status"), singular("cookies")
        ('alias', 'suffix', 'series', 'status', 'cookie')
        >>> singular("statuses"), singular("buses"), singular("analyses"), singular("indices"), singular("prices")
        ('status', 'bus', 'analysis', 'index', 'price')
    """
    for plural, one in _IRREGULAR.items():
        if name == plural or name.endswith("_" + plural):
            return name[: len(name) - len(plural)] + one
    last = name.rsplit("_", 1)[-1]
    if last in _IE:
        return name[:-1]
    if name.endswith("ies") and len(name) > 4:
        return name[:-3] + "y"
    if name.endswith(_SIBILANT_ES) and len(last) > 4:
        return name[:-2]
    if name.endswith(("ss", "us", "is")):
        return name
    if name.endswith("s") and len(name) > 3:
        return name[:-1]
    return name


def free_name(base: str, is_taken: Callable[[str], bool], shorten: Callable[[str], str] = str) -> str:
    """``base``, else ``base_2``, ``base_3``, ...: the first that ``is_taken`` does not refuse, each made by
    ``shorten`` from the full name (``fit``, so that a suffix survives a cut).

    Example:
        >>> free_name("id", {"id", "id_2"}.__contains__), free_name("name", {"id"}.__contains__)
        ('id_3', 'name')
    """
    name, n = shorten(base), 2
    while is_taken(name):
        name = shorten(f"{base}_{n}")
        n += 1
    return name


class Namer:
    """Hands out names unique within one scope (case-insensitively, as SQL compares them)."""

    def __init__(self, taken=()):
        self.taken = {t.lower() for t in taken}

    def __call__(self, wanted: str) -> str:
        name = free_name(sql_name(wanted), lambda name: name.lower() in self.taken, fit)
        self.taken.add(name.lower())
        return name


NAMES_SHOWN = 8  # names a message lists before "..."


def closest_first(word: str, names, limit: int = NAMES_SHOWN) -> str:
    """The names, the ones closest to ``word`` first (``difflib.get_close_matches``), then the rest in order.

    Example:
        >>> closest_first("sender", ["title", "senders", "id", "recipients"])
        'senders, title, id, recipients'
        >>> closest_first("x", [str(i) for i in range(10)], limit=3)
        '0, 1, 2, ...'
    """
    names = list(dict.fromkeys(names))
    if not names:
        return "none"
    close = get_close_matches(word, names, n=limit, cutoff=0.6)
    ordered = close + [n for n in names if n not in close]
    return ", ".join(ordered[:limit]) + (", ..." if len(ordered) > limit else "")
