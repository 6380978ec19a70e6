"""Generate the benchmark export: records with two nested object lists, a scalar list and an object.

    python benchmarks/make_export.py OUT.csv --records 50000 [--links 30] [--seed 1]

Invented data only. Each record has ``contributors`` (Python repr of a list of
objects), ``team`` (JSON list of objects), ``labels`` (JSON list of strings)
and ``series`` (JSON object); on average ``--links`` objects per record across
the two lists, drawn from a pool of ``--people`` persons. Names carry
apostrophes, double quotes, accents and non-Latin letters; some fields are None.
"""

from __future__ import annotations

import argparse
import csv
import json
import random

SYLLABLES = ["an", "bel", "cor", "dra", "el", "fen", "gal", "hal", "ith", "jor", "kel", "lis", "mar", "nor",
             "ol", "pel", "quin", "ros", "sel", "tav", "ul", "vor", "wyn", "yar", "zel"]
SPECIAL = ["O'Varra", 'Tamsel "Wren"', "Ilséa Brøndavik", "Joviña", "Θεοδρίκα", "Жанна Вальмир", "苔原 翠鈴"]
ROLES = ["author", "editor", "illustrator", "translator"]
DEPARTMENTS = ["design", "typesetting", "proofreading", "printing", "marketing"]
LABELS = ["poetry", "essays", "local history", "gardening", "cookery", "crafts", "travel", "short stories",
          "natural history", "children's fiction", "drama", "letters"]


def person_name(rng: random.Random, pid: int) -> str:
    if pid % 9 == 0:
        return SPECIAL[pid % len(SPECIAL)] + " " + rng.choice(SYLLABLES).title()
    return " ".join("".join(rng.choice(SYLLABLES) for _ in range(2)).title() for _ in range(2))


def generate(path: str, records: int, links: int = 30, people: int | None = None, seed: int = 1) -> None:
    rng = random.Random(seed)
    people = people or max(100, records // 2)
    names = [person_name(random.Random(seed * 1_000_003 + pid), pid) for pid in range(people)]
    with open(path, "w", encoding="utf-8", newline="") as f:
        w = csv.writer(f)
        w.writerow(["record_key", "title", "released", "pages", "contributors", "team", "labels", "series"])
        for n in range(1, records + 1):
            k = rng.randint(links // 4, links * 3 // 4)
            contributors = [{"person_id": pid, "name": names[pid], "role": rng.choice(ROLES), "position": i,
                             "share": round(rng.random(), 3), "note": rng.choice([None, None, "guest"])}
                            for i, pid in enumerate(rng.sample(range(people), k), start=1)]
            team = [{"person_id": pid, "name": names[pid], "department": rng.choice(DEPARTMENTS),
                     "task": rng.choice(["cover layout", "index", "first proof", "print run", "launch"]),
                     "hours": rng.randint(1, 80), "lead": rng.choice([True, False, None])}
                    for pid in rng.sample(range(people), links - k)]
            w.writerow([f"R{n:08d}", f"Volume {n}", f"{rng.randint(1990, 2025)}-{rng.randint(1, 12):02d}-"
                        f"{rng.randint(1, 28):02d}", rng.randint(48, 900), repr(contributors),
                        json.dumps(team, ensure_ascii=False),
                        json.dumps(rng.sample(LABELS, rng.randint(0, 4)), ensure_ascii=False),
                        json.dumps({"series": f"Series {rng.randint(1, 400)}", "volume": rng.randint(1, 30)})])


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("out")
    p.add_argument("--records", type=int, default=50000)
    p.add_argument("--links", type=int, default=30)
    p.add_argument("--people", type=int)
    p.add_argument("--seed", type=int, default=1)
    a = p.parse_args()
    generate(a.out, a.records, a.links, a.people, a.seed)


if __name__ == "__main__":
    main()
