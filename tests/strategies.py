"""Hypothesis strategies for nested cell values, kept in one place.

Values are hostile on purpose: strings mix both quote kinds, backslashes,
newlines, tabs, NUL, non-BMP characters, accents and the words a naive
rewriter might touch (None/True/False/null/NaN); numbers include ints beyond
64 bits, -0.0 and the extremes of the float range. NaN is never generated, so
values can be compared for equality; infinities are left out too, because
neither ``repr`` (``inf``, a name) nor JSON (``Infinity``, refused per
RFC 8259) writes them as a literal.

``strict_equal`` is the comparison the tests use: equal values of the same
types, dict keys in the same order, -0.0 distinct from 0.0.
"""

from __future__ import annotations

import string

from hypothesis import strategies as st

# the comparison of decoded values, one definition shared with the fuzz harnesses (which run outside pytest)
from fuzz.checks import stored as cell_value, strict_equal  # noqa: F401  (re-exported for the tests)

# --- text ---------------------------------------------------------------------

HOSTILE_CHARS = (
    "'\"\\`"            # both quote kinds, backslash, backtick
    "\n\r\t\x00\x0b\x0c\x1f\x7f\x85\u2028\u2029\ufeff"  # line breaks, tab, NUL, controls, BOM
    "[]{}(),:;#|"        # structure and separators
    "éüñßÅØ"             # accents
    "中文日本語"          # CJK
    "😀🎉𝄞\U0010fffd"    # non-BMP (emoji, musical symbol, plane 16)
    " 0123456789.eE+-_xjbrufn"
)

HOSTILE_WORDS = (
    "None", "True", "False", "null", "true", "false", "NaN", "nan", "Infinity", "-Infinity", "inf",
    "'''", '"""', "\\'", '\\"', "\\\\", "\\n", "\\u00e9", "\\ud83d\\ude00", "\\x00", "\\N{BULLET}",
    "O'Hara", 'say "hi"', "it's", "__import__('os')", "1e5", "-0", "0x1F", "1_000", "{'a': 1}",
    '{"a": 1}', "[1, 2]", "(1,)", "\x00", "\t", "\r\n",
)


def hostile_text(max_size: int = 20, surrogates: bool = False) -> st.SearchStrategy[str]:
    """Strings built from awkward characters and words, optionally with lone surrogates."""
    piece = st.one_of(
        st.text(alphabet=HOSTILE_CHARS, max_size=6),
        st.sampled_from(HOSTILE_WORDS),
        st.text(alphabet=st.characters(exclude_categories=("Cs",) if not surrogates else ()),
                max_size=4),
    )
    return st.lists(piece, max_size=max_size // 2).map("".join)


# --- scalars --------------------------------------------------------------------

def big_ints() -> st.SearchStrategy[int]:
    """Ints of every size the references handle, weighted to 64-bit boundaries and beyond."""
    edges = [0, -1, 1, 2**31, -2**31, 2**53 + 1, 2**63 - 1, 2**63, -2**63, -2**63 - 1,
             2**64, -2**64, 10**30, -10**30, 2**200 + 7]
    return st.one_of(st.sampled_from(edges), st.integers(),
                     st.integers(min_value=-2**256, max_value=2**256))


def finite_floats() -> st.SearchStrategy[float]:
    """Floats without NaN or infinity, weighted to signed zero, extremes and subnormals."""
    edges = [0.0, -0.0, 1e308, -1e308, 1.7976931348623157e308, 5e-324, -5e-324,
             2.2250738585072014e-308, 0.1, 1e16, 1e22, 123456789012345680.0]
    return st.one_of(st.sampled_from(edges), st.floats(allow_nan=False, allow_infinity=False))


def json_scalars(surrogates: bool = False) -> st.SearchStrategy:
    return st.one_of(st.none(), st.booleans(), big_ints(), finite_floats(),
                     hostile_text(surrogates=surrogates))


def hashable_scalars() -> st.SearchStrategy:
    return st.one_of(st.none(), st.booleans(), big_ints(), finite_floats(),
                     hostile_text(surrogates=True), st.binary(max_size=8))


def python_hashables() -> st.SearchStrategy:
    """What can be a dict key or set member in a Python literal: scalars and tuples of them."""
    return st.recursive(hashable_scalars(), lambda inner: st.lists(inner, max_size=3).map(tuple),
                        max_leaves=6)


# --- nested values --------------------------------------------------------------

def json_values(surrogates: bool = False, max_leaves: int = 25) -> st.SearchStrategy:
    """Values json.dumps writes and json.loads reads back: lists, dicts with str keys, scalars.

    ``surrogates`` allows lone surrogates in strings (json.dumps escapes them
    with the default ensure_ascii=True).
    """
    return st.recursive(
        json_scalars(surrogates),
        lambda inner: st.one_of(
            st.lists(inner, max_size=5),
            st.dictionaries(hostile_text(surrogates=surrogates), inner, max_size=5),
        ),
        max_leaves=max_leaves,
    )


def python_values(max_leaves: int = 25) -> st.SearchStrategy:
    """Values whose repr() is a Python literal: adds tuples, sets, bytes and non-string keys."""
    return st.recursive(
        hashable_scalars(),
        lambda inner: st.one_of(
            st.lists(inner, max_size=5),
            st.lists(inner, max_size=5).map(tuple),
            st.sets(python_hashables(), max_size=5),
            st.dictionaries(python_hashables(), inner, max_size=5),
        ),
        max_leaves=max_leaves,
    )


# --- cells: valid, mutated, truncated, random ------------------------------------

# Characters and tokens inserted by mutation: every one can turn a valid cell into
# an invalid one, or a valid cell of one grammar into a valid cell of the other.
MUTATION_TOKENS = tuple("'\"\\[]{}(),: \n\t0-1.eEjx#") + (
    "None", "True", "False", "null", "true", "NaN", "Infinity", "'''", '"""', "b'", "r'",
    "u'", "f'", "set()", "1e400", "-0.0", "\\u0000", "\x00", "é", "😀", ",]", ",}", "+", "--",
)


@st.composite
def mutated(draw, texts: st.SearchStrategy[str]) -> str:
    """A text with a few characters deleted, replaced or inserted, or cut short."""
    text = draw(texts)
    for _ in range(draw(st.integers(min_value=1, max_value=3))):
        action = draw(st.sampled_from(["delete", "insert", "replace", "truncate"]))
        at = draw(st.integers(min_value=0, max_value=len(text)))
        if action == "truncate":
            text = text[:at]
        elif action == "delete":
            text = text[:at] + text[at + 1:]
        else:
            token = draw(st.sampled_from(MUTATION_TOKENS))
            text = text[:at] + token + text[at + (action == "replace"):]
    return text


def random_cells() -> st.SearchStrategy[str]:
    """Arbitrary short text from literal-ish tokens: mostly invalid, sometimes not."""
    return st.lists(st.one_of(st.sampled_from(MUTATION_TOKENS),
                              st.text(alphabet=string.digits + " ,", max_size=3)),
                    max_size=12).map("".join)


def python_cells() -> st.SearchStrategy[str]:
    """Cells for a Python-literal column: reprs, JSON, and mutations and cuts of both."""
    valid = st.one_of(python_values().map(repr), json_values().map(_json_dumps))
    return st.one_of(valid, mutated(valid), random_cells())


def json_cells() -> st.SearchStrategy[str]:
    """Cells for a JSON column: JSON texts, reprs, and mutations and cuts of both."""
    valid = st.one_of(json_values(surrogates=True).map(_json_dumps),
                      json_values().map(lambda v: _json_dumps(v, ensure_ascii=False)),
                      python_values(max_leaves=8).map(repr))
    return st.one_of(valid, mutated(valid), random_cells())


def _json_dumps(value, ensure_ascii: bool = True) -> str:
    import json
    return json.dumps(value, ensure_ascii=ensure_ascii)


# --- exports for the build round trips (tests/test_build.py) -----------------------

PEOPLE_ROLES = ("author", "editor", "illustrator", "translator")


@st.composite
def people_exports(draw, max_records: int = 6, text: st.SearchStrategy[str] | None = None) -> list[dict]:
    """Records of a small export: ``key``, ``people`` (objects) and ``tags`` (strings).

    ``people`` holds objects ``{"person_id": int, "name": str, "role": str}``:
    the integer identity is unique within each list, the name is a function of
    the identity (one name per id), and the role varies from list to list (a
    link attribute). ``tags`` is a list of strings. Keys are ``K0``, ``K1``...
    """
    text = text if text is not None else hostile_text(max_size=10)
    ids = draw(st.lists(st.integers(min_value=-5, max_value=2**40), min_size=1, max_size=5, unique=True))
    names = {i: draw(text) for i in ids}
    roles = st.one_of(st.sampled_from(PEOPLE_ROLES), text)
    records = []
    for k in range(draw(st.integers(min_value=1, max_value=max_records))):
        chosen = draw(st.lists(st.sampled_from(ids), max_size=4, unique=True))
        people = [{"person_id": i, "name": names[i], "role": draw(roles)} for i in chosen]
        tags = draw(st.lists(text, max_size=3))
        records.append({"key": f"K{k}", "people": people, "tags": tags})
    return records


def has_lone_surrogate(value) -> bool:
    """Whether any string in the value (keys and members too) holds a lone surrogate.

    The tool refuses such values (RFC 8259, section 8.2: not characters; no
    database stores them as text), though json.loads and ast.literal_eval
    return them.
    """
    if isinstance(value, str):
        return any("\ud800" <= ch <= "\udfff" for ch in value)
    if isinstance(value, dict):
        return any(has_lone_surrogate(k) or has_lone_surrogate(v) for k, v in value.items())
    if isinstance(value, (list, tuple, set, frozenset)):
        return any(has_lone_surrogate(v) for v in value)
    return False


# --- ISO 8601 date and timestamp columns (issue 16) ------------------------------

@st.composite
def iso_columns(draw, max_values: int = 30) -> tuple[str, list[str]]:
    """(kind, values): a date or timestamp column written in one ISO 8601 form (ISO 8601-1:2019, extended
    format) as exports write them: "T" or a space, seconds or not, 0 to 6 fraction digits (or the fraction
    only when not whole, as ``datetime.isoformat`` writes it), no offset or one offset throughout."""
    import datetime

    kind = draw(st.sampled_from(["date", "timestamp"]))
    # from year 2: an instant of year 1 at +14:00 is in 1 BC, which PostgreSQL holds and Python cannot
    moments = draw(st.lists(st.datetimes(min_value=datetime.datetime(2, 1, 1), max_value=datetime.datetime(9999, 12, 30)),
                            min_size=1, max_size=max_values))
    if kind == "date":
        return kind, [m.date().isoformat() for m in moments]
    separator = draw(st.sampled_from(["T", " "]))
    seconds = draw(st.booleans())
    digits = draw(st.integers(0, 6)) if seconds else 0
    bare_whole = digits == 6 and draw(st.booleans())
    offset = draw(st.sampled_from([None, "Z", "+00:00", "+01:00", "-05:30", "+0545", "+14:00", "-12:00"]))
    values = []
    for m in moments:
        text = m.strftime(f"%Y-%m-%d{separator}%H:%M") if m.year >= 1000 else \
            f"{m.year:04d}-{m.month:02d}-{m.day:02d}{separator}{m.hour:02d}:{m.minute:02d}"
        if seconds:
            text += f":{m.second:02d}"
            if digits and not (bare_whole and m.microsecond == 0):
                text += "." + f"{m.microsecond:06d}"[:digits]
        values.append(text + (offset or ""))
    return kind, values
