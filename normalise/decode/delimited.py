"""Values joined by a separator (``poetry|essays``): the separator detected, cells split with CSV quoting, name
suffixes ("Carl Dole, Jr.") rejoined, and what gives every cell back exactly (``join_separator``, ``layout``).
"""

from __future__ import annotations

import re
import unicodedata
from collections import Counter
from functools import lru_cache

SEPARATOR_CANDIDATES = ("|", ";", ",")  # the separators a delimited column is looked for with, in this order

# Name suffixes and company forms, written after a comma inside one value ("Carl Dole, Jr.",
# "Acme Widgets, Inc."): the one list that both the rejoin and the ambiguity report read.
# Each may end in a full stop ("Jr." or "Jr"); case is not significant. From memory of how
# names and company names are commonly written; not a standard.
NAME_SUFFIXES = ("Jr", "Sr", "II", "III", "IV", "V", "PhD", "Ph.D", "MD", "M.D", "Esq", "Inc", "Ltd", "LLC",
                 "LLP", "PLC", "Co", "Corp", "GmbH")


_SUFFIX_WORDS = "|".join(re.escape(s) for s in sorted(NAME_SUFFIXES, key=len, reverse=True))
_SUFFIX_PIECE = re.compile(rf"(?i)(?:{_SUFFIX_WORDS})\.?")  # fullmatch against a stripped piece


@lru_cache(maxsize=16)
def _suffix_after(sep: str) -> re.Pattern:
    """Finds a separator followed by a suffix piece: only cells it finds need the slower rejoin step."""
    return re.compile(rf"(?i){re.escape(sep)}\s*(?:{_SUFFIX_WORDS})\.?\s*(?:{re.escape(sep)}|$)")


_RECORD_START, _FIELD_START, _IN_FIELD, _IN_QUOTED, _QUOTE_IN_QUOTED = range(5)


def _csv_fields(text: str, sep: str) -> list[tuple[str, str, bool]] | None:
    """Each field of a cell as ``(raw, value, quoted)``, as ``csv.reader`` reads the cell, or None
    where ``csv.reader`` raises (a line break outside quotes with more text after it).

    The dialect: ``delimiter=sep`` (one character), ``quotechar='"'``, ``doublequote=True``,
    ``skipinitialspace=True``, ``strict=False``. The states are those of CPython's csv reader
    (``parse_process_char`` in ``Modules/_csv.c``); tests/test_exact_values.py checks the values
    against ``csv.reader`` itself. csv's field size limit is not applied. ``raw`` is the field as
    written, quotes and spaces included, so ``sep.join(raw for raw, _, _ in fields) == text``
    unless the text is only line breaks.

    Example:
        >>> _csv_fields('a| "b|c" |d', "|")
        [('a', 'a', False), (' "b|c" ', 'b|c ', True), ('d', 'd', False)]
    """
    fields: list[tuple[str, str, bool]] = []
    buf: list[str] = []
    start, state, quoted = 0, _RECORD_START, False
    for i, c in enumerate(text):
        if state == _IN_QUOTED:
            if c == '"':
                state = _QUOTE_IN_QUOTED
            else:
                buf.append(c)
            continue
        if c == "\n" or c == "\r":  # the record ends here; csv refuses any text after it
            if text[i:].strip("\r\n"):
                return None
            if state == _RECORD_START:
                return []
            fields.append((text[start:], "".join(buf), quoted))
            return fields
        if state == _IN_FIELD:
            if c == sep:
                fields.append((text[start:i], "".join(buf), quoted))
                buf, start, state, quoted = [], i + 1, _FIELD_START, False
            else:
                buf.append(c)
        elif state == _QUOTE_IN_QUOTED:
            if c == '"':  # "" inside quotes is one "
                buf.append(c)
                state = _IN_QUOTED
            elif c == sep:
                fields.append((text[start:i], "".join(buf), quoted))
                buf, start, state, quoted = [], i + 1, _FIELD_START, False
            else:  # text after the closing quote joins the field (strict=False)
                buf.append(c)
                state = _IN_FIELD
        elif c == '"':
            state, quoted = _IN_QUOTED, True
        elif c == " ":  # skipinitialspace
            state = _FIELD_START
        elif c == sep:
            fields.append((text[start:i], "", False))
            buf, start, state, quoted = [], i + 1, _FIELD_START, False
        else:
            buf.append(c)
            state = _IN_FIELD
    if state == _RECORD_START:
        return []
    fields.append((text[start:], "".join(buf), quoted))
    return fields


def _fields(text: str, sep: str) -> list[tuple[str, str, bool]]:
    """``(raw, value, quoted)`` per field: quoted values keep their separators; a cell csv refuses
    (a line break outside quotes) and a separator longer than one character split plainly."""
    if '"' in text and len(sep) == 1 and sep not in '"\r\n':
        fields = _csv_fields(text, sep)
        if fields is not None:
            return fields
    return [(p, p, False) for p in text.split(sep)]


def _looks_like_code(piece: str) -> bool:
    """One word in capitals or without letters ("RO", "A1", "12"): a code, which takes no name suffix."""
    return not any(ch.isspace() for ch in piece) and (piece.isupper() or not any(ch.isalpha() for ch in piece))


def cut_pieces(text: str, sep: str) -> tuple[list[str], list[str], list[tuple[str, int]], list[str]]:
    """Split a cell: ``(values, heads, rejoins, strays)``.

    Values are the pieces stripped, empty ones dropped, each name suffix after a
    comma rejoined to the value before it with the cell's own text between them.
    ``heads[j]`` is ``values[j]`` without a rejoined suffix; ``rejoins`` holds
    ``(suffix, index of the value it joined)``; ``strays`` the suffix-like pieces left as values
    of their own (quoted, after an empty piece, or after another separator). After
    a code ("RO,MD": Moldova, not a doctor) a suffix-like piece is a value, and no
    evidence of anything.
    """
    if '"' not in text:
        raws = text.split(sep)
        if len(raws) == 1:
            piece = text.strip()
            return ([piece], [piece], [], []) if piece else ([], [], [], [])
        if not _suffix_after(sep).search(text):
            values = [v for v in (p.strip() for p in raws) if v]
            return values, values, [], []
        fields = [(p, p, False) for p in raws]
    else:
        fields = _fields(text, sep)
    values: list[str] = []
    heads: list[str] = []
    rejoins: list[tuple[str, int]] = []
    strays: list[str] = []
    last_raw = None  # the raw text of the field just before, when it gave the last value
    for raw, value, quoted in fields:
        piece = value.strip()
        if not piece:
            last_raw = None
            continue
        if values and _SUFFIX_PIECE.fullmatch(piece) and not _looks_like_code(heads[-1]):
            if sep == "," and last_raw is not None and not quoted:
                # the separator text exactly as written: spaces after the value, the comma, spaces before the suffix
                between = last_raw[len(last_raw.rstrip()):] + sep + raw[:len(raw) - len(raw.lstrip())]
                values[-1] = values[-1] + between + piece
                rejoins.append((piece, len(values) - 1))
                last_raw = raw
                continue
            strays.append(piece)
        values.append(piece)
        heads.append(piece)
        last_raw = raw
    return values, heads, rejoins, strays


def split_delimited(text: str, sep: str) -> list[str]:
    """Split a delimited cell into its values, stripped, empty pieces dropped.

    A value quoted with double quotes keeps its separators; a name suffix after a
    comma ("Jr.", "Inc.", see ``NAME_SUFFIXES``) stays with the value before it,
    with the separator text as the cell has it.

    Example:
        >>> split_delimited('poetry|"essays|letters"| drama', "|")
        ['poetry', 'essays|letters', 'drama']
        >>> split_delimited("Carl Dole, Jr., Ann Lee", ",")
        ['Carl Dole, Jr.', 'Ann Lee']
    """
    return cut_pieces(text, sep)[0]


def join_delimited(pieces: list[str], sep: str) -> str:
    """The cell a column's values give back, joined by the column's ``join_separator``.

    The inverse of ``split_delimited`` for every cell a ``DecodedColumn.layout``
    leaves None (the cell is exactly its values joined); any other cell (quoted
    pieces, uneven spacing, empty pieces, surrounding spaces) is kept in the
    layout as written.

    Example:
        >>> join_delimited(split_delimited("Carl Dole, Jr., Ann Lee", ","), ", ")
        'Carl Dole, Jr., Ann Lee'
    """
    return sep.join(pieces)


def join_separator_of(texts: list[str], sep: str, sample: int = 2000) -> str:
    """The separator text the cells use around ``sep`` (``", "`` in "a, b, c"), the most frequent one.

    Example:
        >>> join_separator_of(["a, b", "c, d, e", "f,g"], ",")
        ', '
    """
    runs: Counter = Counter()
    pattern = _separator_run(sep)
    seen = 0
    for text in texts:
        if sep in text and '"' not in text:
            runs.update(pattern.findall(text))
            seen += 1
            if seen >= sample:
                break
    return runs.most_common(1)[0][0] if runs else sep


@lru_cache(maxsize=16)
def _separator_run(sep: str) -> re.Pattern:
    return re.compile(rf"[^\S\r\n]*{re.escape(sep)}[^\S\r\n]*")  # spaces around it, never a line break


def _punctuation_only(piece: str) -> bool:
    """No letter, digit or symbol (emoji, currency) in the piece: what a split of ";)" or "a;;b" leaves."""
    return not any(ch.isalnum() or unicodedata.category(ch) in ("So", "Sc") for ch in piece)


# A column is not delimited by a separator when more than this share of the cells holding it
# split into an empty piece or one made only of punctuation (";)", ";-)", "a|b|").
MAX_BROKEN_SHARE = 0.2


def detect_separator(texts: list[str]) -> str | None:
    """The separator of a delimited column, or None when the cells look like plain text.

    A separator must occur in a fair share of the cells, and cut them into real
    pieces: splits that leave empty pieces or pieces of punctuation alone (";)",
    ";-)") are evidence against. Then one of two kinds of evidence must hold:
    the pieces repeat across rows (labels do; words of prose do not), or most
    cells hold several pieces of one shape (names "Ann Lee, Bo Chen", extensions
    ".csv;.tsv"), even when pieces rarely repeat.

    Example:
        >>> detect_separator(["poetry|essays", "essays", "drama|poetry|essays"])
        '|'
        >>> detect_separator(["Hello, world", "A sentence, with commas", "Plain"]) is None
        True
        >>> detect_separator([":)", ";)", ":(", ":D", ";-)"]) is None
        True
    """
    if not texts:
        return None
    best = None
    for sep in SEPARATOR_CANDIDATES:
        with_sep = [t for t in texts if sep in t]
        if len(with_sep) < max(2, 0.1 * len(texts)) and not (len(texts) < 10 and with_sep):
            continue
        broken = sum(any(not v.strip() or _punctuation_only(v) for _, v, _ in _fields(t, sep)) for t in with_sep)
        if broken > MAX_BROKEN_SHARE * len(with_sep):
            continue
        cut = [cut_pieces(t, sep) for t in texts]
        pieces = [p for c in cut for p in c[0]]
        if not pieces:
            continue
        distinct = len(set(pieces))
        repeat = 1 - distinct / len(pieces)
        long_prose = sum(len(p) > 60 for p in pieces) / len(pieces)
        if long_prose > 0.2:
            continue
        if sep == ",":
            by_repeat = repeat >= 0.3 and _pieces_stand_alone(texts, cut, sep)
        else:
            by_repeat = repeat >= 0.1 or len(pieces) <= 20
        if not by_repeat and not _pieces_of_one_kind([c[1] for c in cut], sep):
            continue
        score = (len(with_sep), repeat)
        if best is None or score > best[0]:
            best = (score, sep)
    return None if best is None else best[1]


def _pieces_stand_alone(texts: list[str], cut: list, sep: str) -> bool:
    """Whether the values found between separators also fill cells on their own, as list items do.

    A comma inside prose or a title ("The Orchard, Revisited") splits off
    phrases that never stand alone; the items of a list are codes or tags
    ("AE,OM", "poetry, essays") or values that also fill cells alone.
    """
    alone = {t.strip() for t in texts if sep not in t}
    pieces = [p for t, c in zip(texts, cut) if sep in t for p in c[0]]
    if not alone:
        return True  # every cell holds several values: nothing to compare with
    if not pieces:
        return False
    if sum(not any(ch.isspace() for ch in p) and len(p) <= 24 for p in pieces) >= 0.9 * len(pieces):
        return True  # codes and tags ("AE,OM", "poetry, essays"), not phrases
    return sum(p in alone for p in pieces) / len(pieces) >= 0.2


# A run of letters (with the marks inside names: O'Neil, Mary-Jane, St.John) or of digits.
_LETTER_RUN = re.compile(r"[^\W\d_]+(?:['’.\-][^\W\d_]+)*")
_DIGIT_RUN = re.compile(r"\d+")


def _case_class(match: re.Match) -> str:
    run = match.group()
    return "a" if run.islower() else "U" if run.isupper() and len(run) > 1 else "A"


def _shape(piece: str) -> tuple | None:
    """The kind of a piece: its words as lower-case (a), capitalised (A) or capitals (U) letter
    runs and digit runs (9), other characters kept, words of one shape in a row counted once;
    None for more than four words (a phrase, not a name, tag or code).

    Example:
        >>> _shape("Ann Lee"), _shape("Mary-Jane O'Neil"), _shape("short stories"), _shape(".csv"), _shape("AE")
        (('A',), ('A',), ('a',), ('.a',), ('U',))
    """
    words = piece.split()
    if len(words) > 4:
        return None
    out: list[str] = []
    for word in words:
        shape = _DIGIT_RUN.sub("9", _LETTER_RUN.sub(_case_class, word))
        if not out or out[-1] != shape:
            out.append(shape)
    return tuple(out)


def _pieces_of_one_kind(heads: list[list[str]], sep: str) -> bool:
    """Whether most cells hold several pieces, and the pieces within a cell are mostly of one shape.

    Name suffixes do not count (``heads`` are the values without them). When
    no cell holds more than two pieces and the separator is a comma, the two
    must also have the same number of words, two or more ("Ann Lee, Bo Chen"):
    a comma inside one value ("Lee, Ann", "Paris, France", "The Orchard,
    Revisited") parts it in two just as often.
    """
    multi = [h for h in heads if len(h) >= 2]
    if not multi or len(multi) < 0.5 * len(heads):
        return False
    agree = total = 0
    for pieces in multi:
        shapes = Counter(s for s in map(_shape, pieces) if s is not None)
        agree += shapes.most_common(1)[0][1] if shapes else 0
        total += len(pieces)
    if agree < 0.8 * total:
        return False
    if sep == "," and all(len(h) == 2 for h in multi):
        alike = sum(len(h[0].split()) == len(h[1].split()) >= 2 for h in multi)
        return alike >= 0.8 * len(multi)
    return True


def ambiguity_message(line: int, text: str, values: list[str], rejoins: list, strays: list) -> str:
    if rejoins:
        suffix, index = rejoins[0]
        return (f"line {line}: {suffix!r} in {text!r} was kept with the value before it ({values[index]!r}), "
                f"not read as a value of its own")
    return (f"line {line}: {strays[0]!r} in {text!r} looks like part of the value before it, "
            f"not a value of its own")


AMBIGUITY_SHOWN = 5  # evidence messages kept per column
