"""Hypothesis strategies for whole exports, for the lossless-proof tests (``tests/test_lossless.py``).

An export is a list of records ``{"key", "n", "title", "people", "tags"}``
written as one CSV file, its nested cells in one format per column (JSON,
RFC 8259, or Python literals, ``repr``), so ``json.loads`` or
``ast.literal_eval`` is the reference for each cell. The shapes are the ones
a relational model finds hard to give back exactly:

* (a) sparse keys: ``note`` is on some objects only;
* (b) flags on some record–entity pairs only: ``lead: True`` on some occurrences of a person, absent on others;
* (c) null and absent mixed: ``score`` is an integer, ``None`` or missing;
* (d) an entity attribute spelled two ways for one id: ``name`` with a doubled space, or a trailing NBSP,
  and another role on one occurrence;
* (e) values of another type after the first records (the tests patch ``pipeline.SAMPLE_ROWS`` to
  ``SAMPLE``): ``3.7``/``-0.5`` for an integer, ``"maybe"``/``7`` for a boolean, a list for a text;
* (f) JSON and Python-repr cells (tuples among the reprs: a type JSON does not have);
* (g) with or without streaming (``chunk_rows``).

Text is kept to what survives a CSV cell unchanged and is never an empty
marker on its own: letters, quotes, the spaces ``str.strip`` removes (U+00A0,
U+3000; Python Library Reference, ``str.isspace``) and the word ``None``.
"""

from __future__ import annotations

import csv
import json

from hypothesis import strategies as st

SAMPLE = 5  # the tests infer the model from this many records (pipeline.SAMPLE_ROWS patched)

SPACES = (" ", "\u00a0", "\u3000", "  ")
WORDS = ("Ann", "Bo", "Lee", "None", "O'Hara", 'say "hi"', "null", "é", "中文", "x")


def words() -> st.SearchStrategy[str]:
    """A text with at least one visible word, maybe wrapped in spaces of several kinds."""
    inner = st.lists(st.sampled_from(WORDS), min_size=1, max_size=3).map(" ".join)
    pad = st.sampled_from(("",) + SPACES)
    return st.tuples(pad, inner, pad).map("".join)


@st.composite
def exports(draw, max_records: int = 12) -> dict:
    """One export: ``{"records": [...], "format": "json" | "python", "chunk_rows": None | 3}``.

    Each person's first occurrence is complete: its name as usually spelled, and each optional key it
    has at all (``role``, ``lead``, ``note``, ``score``) with the person's usual value. Later occurrences
    repeat those values, drop keys, give null, or depart once per person and key (the second spelling,
    another role, a value of another type), so the usual value stays the most frequent one. (When the
    first occurrence is the odd one, the build loses values: ``test_lossless.py``,
    ``test_first_occurrence_spelled_the_odd_way``.)
    """
    fmt = draw(st.sampled_from(["json", "python"]))
    ids = draw(st.lists(st.integers(min_value=-3, max_value=10**6), min_size=2, max_size=6, unique=True))
    usual = {}
    for j, i in enumerate(ids):  # distinct names: the identity stays pid (a name shared by two ids determines nothing)
        person = {"pid": i, "name": f"P{j} " + draw(words())}
        for key, values in (("role", st.sampled_from(["author", "editor", " editor ", "None"])),
                            ("lead", st.just(True)), ("note", words()), ("score", st.integers(-100, 100))):
            if draw(st.booleans()):
                person[key] = draw(values)
        usual[i] = person
    seen: dict = {}  # pid -> occurrences so far
    departed: set = set()  # (pid, key): the one departure from the usual value is taken
    late_types = draw(st.booleans())  # (e)
    n_records = draw(st.integers(min_value=1, max_value=max_records))
    records = []
    for k in range(n_records):
        late = late_types and k >= SAMPLE
        chosen = draw(st.lists(st.sampled_from(ids), min_size=1, max_size=4, unique=True))
        people = []
        for i in chosen:
            obj = dict(usual[i])
            if seen.get(i):
                for key in [key for key in obj if key != "pid"]:
                    change = draw(st.sampled_from(["keep", "keep", "keep", "drop", "null", "depart"]))
                    if change == "drop" and key != "name":  # (a), (b): a key on some occurrences only
                        del obj[key]
                    elif change == "null" and key == "score":  # (c): null where others are absent
                        obj[key] = None
                    elif change == "depart" and (i, key) not in departed and seen[i] >= 2:
                        departed.add((i, key))
                        obj[key] = draw(departure(key, obj[key], late))
            seen[i] = seen.get(i, 0) + 1
            if draw(st.booleans()):  # key order is not significant (RFC 8259, section 4): vary it
                obj = dict(reversed(list(obj.items())))
            people.append(obj)
        tags = draw(st.lists(words(), max_size=3))
        n = draw(st.integers(0, 999))
        records.append({"key": f"K{k}", "n": "3.7" if late and draw(st.booleans()) else str(n),
                        "title": "T" + draw(words()), "people": people, "tags": tags,
                        "tuple_tags": fmt == "python" and draw(st.integers(0, 4)) == 0})
    return {"records": records, "format": fmt, "chunk_rows": draw(st.sampled_from([None, 3]))}


def departure(key: str, value, late: bool) -> st.SearchStrategy:
    """Another value for one occurrence: (d) a second spelling of the name, another role, or (e) after
    the sample a value of another type (3.7 or -0.5 for an integer, "maybe" or 7 for a boolean, a list
    for a text)."""
    if key == "name":
        return st.sampled_from([value.replace(" ", "  ", 1), value + "\u00a0"])
    if not late:
        return {"role": st.sampled_from(["author", "editor", "translator"]), "note": words(),
                "score": st.integers(-100, 100), "lead": st.just(True)}[key]
    return {"role": st.just(["x", value]), "note": st.just(["x"]), "score": st.sampled_from([3.7, -0.5]),
            "lead": st.sampled_from(["maybe", 7])}[key]


COLUMNS = ["key", "n", "title", "people", "tags"]


def cell_text(value, fmt: str, as_tuple: bool = False) -> str:
    """A nested value as its export writes it: JSON text (RFC 8259) or a Python literal (``repr``)."""
    if fmt == "json":
        return json.dumps(value, ensure_ascii=False)
    return repr(tuple(value) if as_tuple else value)


def write_csv(path, export: dict) -> None:
    """The export as a CSV file (the standard library's ``csv`` module quotes what needs quoting)."""
    fmt = export["format"]
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(COLUMNS)
        for r in export["records"]:
            w.writerow([r["key"], r["n"], r["title"], cell_text(r["people"], fmt),
                        cell_text(r["tags"], fmt, r["tuple_tags"]) if r["tags"] else ""])
