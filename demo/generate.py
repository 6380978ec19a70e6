"""Seeded demo data: the catalogue export of the invented "Lanternfield Press Cooperative".

Writes two CSV files that look like a real flat export, nested data as text included:

* ``titles.csv``: ``title_key, title, imprint, release_date, page_count, price``
* ``contributions.csv``: ``title_key, contributors, production_team, subjects, formats``

``contributors`` is a Python ``repr()`` of a list of dicts, ``production_team`` and
``subjects`` are JSON, ``formats`` is a ``|``-delimited list.  Every person, title,
imprint and place is made up.

The export carries deliberate traps (duplicate keys, orphan keys on both sides,
awkward names, one person spelled two ways, people in both lists, empty lists, blank
cells, malformed cells).  :func:`generate` plants them deterministically, even at
``size=10``, and returns them as a dict (also written to ``planted.json``) so a
test or a demo can check what a normaliser finds against the truth.

Standard library only; rows are streamed, so the size is limited only by disk.
Cells never contain newlines, so a row's physical line number is its row number
plus one (the header is line 1).
"""

from __future__ import annotations

import argparse
import csv
import datetime
import json
import random
import sys
from pathlib import Path

TITLES_FILE = "titles.csv"
CONTRIBUTIONS_FILE = "contributions.csv"
PLANTED_FILE = "planted.json"
TITLE_COLUMNS = ["title_key", "title", "imprint", "release_date", "page_count", "price"]
CONTRIBUTION_COLUMNS = ["title_key", "contributors", "production_team", "subjects", "formats"]
MIN_SIZE = 10

# --- invented vocabulary -------------------------------------------------------------

IMPRINTS = [
    "Lanternfield Press", "Hollowmere Books", "Thistlecombe Editions",
    "Quillmarsh Poetry", "Lantern Junior",
]
TITLE_ADJECTIVES = [
    "Quiet", "Salt", "Hollow", "Amber", "Winter", "Drowned", "Copper", "Small",
    "Borrowed", "Crooked", "Patient", "Midnight", "Lantern", "Thistle",
]
TITLE_NOUNS = [
    "Orchard", "Ledger", "Harbour", "Almanac", "Hedgerow", "Weir", "Allotment",
    "Ferry", "Chapel", "Kiln", "Meadow", "Bindery", "Lighthouse", "Granary",
]
PLACES = ["Wrenfold", "Saltmere", "Brackenhythe", "Quillmarsh", "Lanternfield", "Oddaby Moor"]
TITLE_PATTERNS = [
    "The {adj} {noun}",
    "The {noun} at {place}",
    "{adj} {noun}, {adj2} {noun2}",
    "A {noun} in {place}",
    "{place}: Notes from the {noun}",
    'The "{adj}" {noun} Letters',
]
LATER_ROLES = ["author", "editor", "editor", "illustrator", "illustrator", "translator"]
TASKS = {
    "design": ["cover layout", "interior design", "map redraw"],
    "typesetting": ["typesetting", "index setting", "ebook conversion"],
    "proofreading": ["first proof", "final proof", "fact check"],
    "printing": ["print run liaison", "paper sourcing"],
    "marketing": ["launch event", "catalogue copy", "review copies"],
}
DEPARTMENTS = sorted(TASKS)
SUBJECTS = [
    "poetry", "local history", "gardening", "folklore", "cookery", "natural history",
    "memoir", "children's fiction", "crime fiction", "essays", "walking guides",
    "translated fiction", "maritime history", "crafts", "short stories",
]
FORMATS = ["hardback", "paperback", "ebook", "audiobook", "large print"]
COUNT_TABLE = (1, 1, 1, 1, 2, 2, 2, 3, 3, 4)  # contributors per title, skewed to few

# Invented name syllables; the generator combines them bijectively per person.
FIRST_STARTS = [
    "Am", "Bel", "Cor", "Dav", "El", "Fen", "Gal", "Hal", "Is", "Jor", "Kel", "Lum",
    "Mor", "Nel", "Or", "Per", "Quil", "Ros", "Sel", "Tav", "Ul", "Ver", "Wen", "Yar",
    "Zel", "Teod", "Brin", "Cal", "Dor", "Esk",
]
FIRST_ENDS = [
    "rel", "wyn", "ara", "ico", "eth", "isa", "odra", "anth", "ube", "ory", "elle",
    "avo", "ine", "ust", "olin", "ema",
]
SURNAME_STARTS = [
    "Quist", "Valm", "Brask", "Ostr", "Marr", "Dunv", "Kellw", "Fard", "Grel", "Hask",
    "Pellv", "Rov", "Sarn", "Tumb", "Yorv", "Zand", "Crem", "Lisk", "Vard", "Ombr",
]
SURNAME_MIDDLES = ["o", "a", "e", "i", "u", "ou"]
SURNAME_ENDS = [
    "yk", "vane", "ster", "mble", "thor", "zzi", "rn", "ska", "yle", "mere", "vick",
    "ndle", "wyn", "ssa",
]
NAME_SPACE = (len(FIRST_STARTS) * len(FIRST_ENDS) * len(SURNAME_STARTS)
              * len(SURNAME_MIDDLES) * len(SURNAME_ENDS))
NAME_MULTIPLIER = 1_000_003  # prime larger than NAME_SPACE: index -> name is injective

# Hand-written awkward names (all invented), keyed by the trap they exercise.
SPECIAL_NAMES = {
    "apostrophe": "Brennick O'Varra",
    "double_quotes": 'Tamsel "Wren" Oddaby',
    "apostrophe_and_double_quotes": "Dalla \"Pip\" D'Arvento",
    "accents_e_o": "Ilséa Brøndavik",
    "accent_n": "Joviña Larrequen",
    "greek": "Θεοδρίκα Βαλμύρη",
    "cyrillic": "Ярослета Вельмирко",
    "cjk": "苔原 翠鈴",
}
CANONICAL_SPELLING = "Caëlin Drovask"
VARIANT_SPELLING = "Caelin Drovask"  # the accent lost by some upstream system
VARIANT_EVERY = 5  # occurrences 2, 7, 12, ... (1-based) use the variant: a minority,
# even counting the two duplicated rows (distinct rows, so at most two extra variants)

# Cell traps on four contributions rows ("slots"); one trap per column per row.
CELL_TRAPS = [
    {"contributors": "truncated_repr", "production_team": "blank"},
    {"contributors": "empty", "production_team": "trailing_comma", "subjects": "blank"},
    {"contributors": "blank", "production_team": "empty", "subjects": "unclosed_bracket"},
    {"production_team": "single_quotes", "subjects": "empty", "formats": "blank"},
]
MALFORMED_PROBLEMS = {
    "truncated_repr": "Python repr cut off mid-list",
    "trailing_comma": "JSON with a trailing comma",
    "single_quotes": "Python repr (single quotes) where JSON is expected",
    "unclosed_bracket": "JSON list without its closing bracket",
}
FORCED_ROWS = 4  # clean rows that carry the awkward names, both spellings, dual people
N_DUPLICATES = 2
N_ORPHANS = 2


# --- people --------------------------------------------------------------------------

class People:
    """The person pool: creators (contributors) and staff (production team).

    Person ids are ``1000 + index``.  Creators and staff are disjoint except for the
    planted ``dual`` people, who are creators injected into production teams.
    """

    def __init__(self, size: int, rng: random.Random):
        pool = max(30, size // 3)
        self.n_staff = max(6, pool // 5)
        self.n_creators = pool - self.n_staff
        self.offset = rng.randrange(NAME_SPACE)
        chosen = rng.sample(range(1, self.n_creators + 1), len(SPECIAL_NAMES) + 3)
        ids = [1000 + index for index in chosen]
        self.special = dict(zip(SPECIAL_NAMES, ids))
        self.two_spellings_id = ids[len(SPECIAL_NAMES)]
        self.dual_ids = sorted(ids[len(SPECIAL_NAMES) + 1:])
        self.overrides = {pid: SPECIAL_NAMES[kind] for kind, pid in self.special.items()}
        self.overrides[self.two_spellings_id] = CANONICAL_SPELLING
        self._spellings_used = 0

    def name(self, pid: int) -> str:
        """The (canonical) name of a person, a pure function of the id."""
        if pid in self.overrides:
            return self.overrides[pid]
        index = ((pid - 1000) * NAME_MULTIPLIER + self.offset) % NAME_SPACE
        parts = []
        for syllables in (FIRST_STARTS, FIRST_ENDS, SURNAME_STARTS, SURNAME_MIDDLES,
                          SURNAME_ENDS):
            index, pick = divmod(index, len(syllables))
            parts.append(syllables[pick])
        return f"{parts[0]}{parts[1]} {parts[2]}{parts[3]}{parts[4]}"

    def spell(self, pid: int) -> str:
        """The name as written in one cell; the two-spellings person sometimes varies."""
        if pid != self.two_spellings_id:
            return self.name(pid)
        self._spellings_used += 1
        if self._spellings_used % VARIANT_EVERY == 2:
            return VARIANT_SPELLING
        return CANONICAL_SPELLING

    def draw_creators(self, rng: random.Random, k: int) -> list[int]:
        """Distinct creator ids, skewed so that some people are prolific."""
        return self._draw(rng, k, 1, self.n_creators)

    def draw_staff(self, rng: random.Random, k: int) -> list[int]:
        """Distinct staff ids (uniform)."""
        return self._draw(rng, k, self.n_creators + 1, self.n_staff)

    @staticmethod
    def _draw(rng: random.Random, k: int, first: int, count: int) -> list[int]:
        ids: list[int] = []
        while len(ids) < k:
            pid = 1000 + first + int(count * rng.random() ** 1.5)
            if pid not in ids:
                ids.append(pid)
        return ids


# --- the plan: which rows carry which trap -------------------------------------------

class Plan:
    """Row indices (0-based title numbers) chosen up front for every planted trap."""

    def __init__(self, size: int, rng: random.Random):
        picks = rng.sample(range(size), N_DUPLICATES + len(CELL_TRAPS) + FORCED_ROWS)
        self.only_in_titles = set(picks[:N_DUPLICATES])
        trap_rows = picks[N_DUPLICATES:N_DUPLICATES + len(CELL_TRAPS)]
        self.cell_traps = dict(zip(trap_rows, CELL_TRAPS))
        forced_rows = picks[N_DUPLICATES + len(CELL_TRAPS):]
        self.forced = {row: slot for slot, row in enumerate(forced_rows)}
        self.title_duplicates = self._later(rng, rng.sample(range(size), N_DUPLICATES), size)
        self.contribution_duplicates = self._later(
            rng, rng.sample(forced_rows, N_DUPLICATES), size)
        self.orphans_after: dict[int, list[str]] = {}
        for n in range(N_ORPHANS):
            self.orphans_after.setdefault(rng.randrange(size), []).append(
                title_key(size + 1 + n))

    @staticmethod
    def _later(rng: random.Random, rows: list[int], size: int) -> dict[int, tuple[int, bool]]:
        """Map each duplicated row to (row after which the copy goes, identical copy?)."""
        return {row: (min(row + rng.randint(1, 7), size - 1), n == 0)
                for n, row in enumerate(rows)}


def title_key(number: int) -> str:
    """The catalogue key of title number ``number`` (1-based)."""
    return f"LF-{number:06d}"


# --- row builders --------------------------------------------------------------------

def build_title(rng: random.Random, key: str) -> list[str]:
    """One titles.csv row."""
    words = {
        "adj": rng.choice(TITLE_ADJECTIVES), "noun": rng.choice(TITLE_NOUNS),
        "adj2": rng.choice(TITLE_ADJECTIVES), "noun2": rng.choice(TITLE_NOUNS),
        "place": rng.choice(PLACES),
    }
    title = rng.choice(TITLE_PATTERNS).format(**words)
    released = datetime.date(1998, 1, 1) + datetime.timedelta(days=rng.randrange(9862))
    price = f"{rng.randint(8, 44)}.{rng.choice(['00', '50', '95', '99'])}"
    return [key, title, rng.choice(IMPRINTS), released.isoformat(),
            str(rng.randint(48, 640)), price]


def build_contributors(rng, people: People, forced: list[int], exclude: int | None):
    """The contributors list: random creators plus forced ones, positions 1..n."""
    ids = [pid for pid in people.draw_creators(rng, rng.choice(COUNT_TABLE)) if pid != exclude]
    ids += [pid for pid in forced if pid not in ids]
    return [
        {"person_id": pid, "name": people.spell(pid),
         "role": "author" if position == 1 and rng.random() < 0.85 else rng.choice(LATER_ROLES),
         "position": position}
        for position, pid in enumerate(ids, start=1)
    ]


def build_team(rng, people: People, forced: list[int]) -> list[dict]:
    """The production team: one to three staff members plus any forced (dual) people."""
    ids = people.draw_staff(rng, rng.randint(1, 3)) + forced
    team = []
    for pid in ids:
        department = rng.choice(DEPARTMENTS)
        team.append({"person_id": pid, "name": people.name(pid), "department": department,
                     "task": rng.choice(TASKS[department])})
    return team


def build_formats(rng) -> list[str]:
    """One to three formats, in catalogue order."""
    chosen = set(rng.sample(FORMATS, rng.randint(1, 3)))
    return [fmt for fmt in FORMATS if fmt in chosen]


def render(column: str, value: list, trap: str | None) -> str:
    """Serialise a nested value for its column, applying a planted trap if any."""
    if trap == "blank":
        return ""
    if trap == "empty":
        value = []
    if column == "contributors":
        text = repr(value)
    elif column == "formats":
        text = "|".join(value)
    elif trap == "single_quotes":
        text = repr(value)
    else:
        text = json.dumps(value, ensure_ascii=False)
    if trap == "truncated_repr":
        return text[:len(text) * 3 // 5]
    if trap == "trailing_comma":
        return text[:-1] + ",]"
    if trap == "unclosed_bracket":
        return text[:-1]
    return text


class ContributionRow:
    """A contributions.csv row plus what the writer needs to account for it."""

    def __init__(self, key: str, values: dict[str, list], traps: dict[str, str]):
        self.key = key
        self.values = values
        self.traps = traps

    def cells(self) -> list[str]:
        """The CSV cells of this row."""
        return [self.key] + [render(column, self.values[column], self.traps.get(column))
                             for column in CONTRIBUTION_COLUMNS[1:]]

    def conflicting_copy(self, rng) -> "ContributionRow":
        """The same row re-exported with a different formats list."""
        formats = self.values["formats"]
        while formats == self.values["formats"]:
            formats = build_formats(rng)
        return ContributionRow(self.key, {**self.values, "formats": formats}, self.traps)


def build_contribution(rng, people: People, plan: Plan, row: int, key: str) -> ContributionRow:
    """One contributions row, with the forced people or cell traps the plan gives it."""
    traps = plan.cell_traps.get(row, {})
    forced_creators, forced_staff = [], []
    if row in plan.forced:
        slot = plan.forced[row]
        specials = list(people.special.values())
        per_slot = len(specials) // FORCED_ROWS
        dual = people.dual_ids[slot % len(people.dual_ids)]
        forced_creators = ([people.two_spellings_id]
                           + specials[slot * per_slot:(slot + 1) * per_slot] + [dual])
        forced_staff = [dual]
    # keep the two-spellings counts about well-formed cells only
    exclude = people.two_spellings_id if "contributors" in traps else None
    values = {
        "contributors": build_contributors(rng, people, forced_creators, exclude),
        "production_team": build_team(rng, people, forced_staff),
        "subjects": rng.sample(SUBJECTS, rng.randint(1, 3)),
        "formats": build_formats(rng),
    }
    return ContributionRow(key, values, traps)


# --- writing -------------------------------------------------------------------------

class LineWriter:
    """A csv writer that knows the physical line number of the row it just wrote."""

    def __init__(self, handle, header: list[str]):
        self._writer = csv.writer(handle, quoting=csv.QUOTE_MINIMAL, lineterminator="\n")
        self._writer.writerow(header)
        self.line = 1

    def write(self, cells: list[str]) -> int:
        """Write one row; return its 1-based line number."""
        self._writer.writerow(cells)
        self.line += 1
        return self.line


class Recorder:
    """Collects the planted facts while rows are written."""

    def __init__(self, people: People):
        self.people = people
        self.key_lines: dict[str, dict[str, list[int]]] = {
            TITLES_FILE: {}, CONTRIBUTIONS_FILE: {}}
        self.identical: dict[str, dict[str, bool]] = {TITLES_FILE: {}, CONTRIBUTIONS_FILE: {}}
        self.malformed: list[dict] = []
        self.empty = {column: [] for column in ("contributors", "production_team", "subjects")}
        self.blank = {column: [] for column in CONTRIBUTION_COLUMNS[1:]}
        self.spellings = {CANONICAL_SPELLING: 0, VARIANT_SPELLING: 0}

    def note_duplicate(self, file: str, key: str, line: int, identical: bool | None = None):
        """Remember the line of a key that is (or will be) duplicated in ``file``."""
        self.key_lines[file].setdefault(key, []).append(line)
        if identical is not None:
            self.identical[file][key] = identical

    def note_contribution(self, row: ContributionRow, line: int):
        """Record the cell traps of a written contributions row and count spellings."""
        for column, trap in row.traps.items():
            where = {"line": line, "key": row.key}
            if trap == "blank":
                self.blank[column].append(where)
            elif trap == "empty":
                self.empty[column].append(where)
            else:
                self.malformed.append({"file": CONTRIBUTIONS_FILE, "column": column,
                                       **where, "problem": MALFORMED_PROBLEMS[trap]})
        if "contributors" not in row.traps:
            for person in row.values["contributors"]:
                if person["person_id"] == self.people.two_spellings_id:
                    self.spellings[person["name"]] += 1

    def duplicates(self, file: str) -> list[dict]:
        """The duplicated keys of ``file`` with their lines."""
        return [{"key": key, "lines": lines, "identical": self.identical[file][key]}
                for key, lines in sorted(self.key_lines[file].items())]


def _write_all(out: Path, size: int, rng: random.Random, people: People, plan: Plan,
               recorder: Recorder) -> dict[str, int]:
    """Stream both files; return the number of data rows written to each."""
    pending_titles: dict[int, list[tuple[list[str], bool]]] = {}
    pending_contribs: dict[int, list[tuple[ContributionRow, bool]]] = {}
    with open(out / TITLES_FILE, "w", encoding="utf-8", newline="") as tf, \
            open(out / CONTRIBUTIONS_FILE, "w", encoding="utf-8", newline="") as cf:
        titles = LineWriter(tf, TITLE_COLUMNS)
        contribs = LineWriter(cf, CONTRIBUTION_COLUMNS)
        for row in range(size):
            key = title_key(row + 1)
            title = build_title(rng, key)
            line = titles.write(title)
            if row in plan.title_duplicates:
                after, identical = plan.title_duplicates[row]
                recorder.note_duplicate(TITLES_FILE, key, line, identical)
                copy = title if identical else title[:5] + [f"{float(title[5]) + 1:.2f}"]
                pending_titles.setdefault(after, []).append(copy)
            for copy in pending_titles.pop(row, []):
                recorder.note_duplicate(TITLES_FILE, copy[0], titles.write(copy))

            if row not in plan.only_in_titles:
                record = build_contribution(rng, people, plan, row, key)
                line = contribs.write(record.cells())
                recorder.note_contribution(record, line)
                if row in plan.contribution_duplicates:
                    after, identical = plan.contribution_duplicates[row]
                    recorder.note_duplicate(CONTRIBUTIONS_FILE, key, line, identical)
                    copy = record if identical else record.conflicting_copy(rng)
                    pending_contribs.setdefault(after, []).append(copy)
            for orphan_key in plan.orphans_after.get(row, []):
                record = build_contribution(rng, people, plan, -1, orphan_key)
                recorder.note_contribution(record, contribs.write(record.cells()))
            for copy in pending_contribs.pop(row, []):
                line = contribs.write(copy.cells())
                recorder.note_duplicate(CONTRIBUTIONS_FILE, copy.key, line)
                recorder.note_contribution(copy, line)
    return {TITLES_FILE: titles.line - 1, CONTRIBUTIONS_FILE: contribs.line - 1}


def generate(out_dir, size: int = 200, seed: int = 7) -> dict:
    """Write titles.csv, contributions.csv and planted.json into ``out_dir``.

    ``size`` is the number of titles (at least 10).  Returns the planted facts.
    """
    if size < MIN_SIZE:
        raise ValueError(f"size must be at least {MIN_SIZE}, got {size}")
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    rng = random.Random(seed)
    people = People(size, rng)
    plan = Plan(size, rng)
    recorder = Recorder(people)
    rows = _write_all(out, size, rng, people, plan, recorder)
    planted = _planted(size, seed, people, plan, recorder, rows)
    with open(out / PLANTED_FILE, "w", encoding="utf-8") as handle:
        json.dump(planted, handle, ensure_ascii=False, indent=2)
        handle.write("\n")
    return planted


def _planted(size, seed, people: People, plan: Plan, recorder: Recorder, rows) -> dict:
    """Assemble the planted-facts dict."""
    return {
        "seed": seed,
        "size": size,
        "scenario": "catalogue export of the invented Lanternfield Press Cooperative",
        "files": {"titles": TITLES_FILE, "contributions": CONTRIBUTIONS_FILE},
        "duplicate_keys": {TITLES_FILE: recorder.duplicates(TITLES_FILE),
                           CONTRIBUTIONS_FILE: recorder.duplicates(CONTRIBUTIONS_FILE)},
        "only_in_titles": sorted(title_key(row + 1) for row in plan.only_in_titles),
        "only_in_contributions": sorted(k for keys in plan.orphans_after.values() for k in keys),
        "malformed_cells": sorted(recorder.malformed, key=lambda cell: cell["line"]),
        "two_spellings": {"person_id": people.two_spellings_id,
                          "canonical": CANONICAL_SPELLING,
                          "names": dict(recorder.spellings)},
        "in_both_lists": people.dual_ids,
        "special_names": {kind: {"person_id": pid, "name": SPECIAL_NAMES[kind]}
                          for kind, pid in people.special.items()},
        "empty_list_cells": recorder.empty,
        "blank_cells": recorder.blank,
        "rows": rows,
        "notes": [
            "line numbers are 1-based physical lines; the header is line 1",
            "two_spellings counts and in_both_lists cover well-formed cells only",
            "formats is a |-delimited list: its empty list is the blank cell",
        ],
    }


def main(argv: list[str] | None = None) -> int:
    """Command-line entry point."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("out_dir", help="directory to write the CSV files into")
    parser.add_argument("--size", type=int, default=200, help="number of titles (>= 10)")
    parser.add_argument("--seed", type=int, default=7, help="random seed")
    args = parser.parse_args(argv)
    try:
        planted = generate(args.out_dir, size=args.size, seed=args.seed)
    except ValueError as exc:
        parser.error(str(exc))
    print(f"wrote {planted['rows'][TITLES_FILE]} titles rows and "
          f"{planted['rows'][CONTRIBUTIONS_FILE]} contributions rows to {args.out_dir}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
