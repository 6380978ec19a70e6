"""Decoding throughput against per-cell references, measured in one run.

    python benchmarks/bench_decode.py [--cells 3000] [--runs 5]

Cells are realistic nested values: lists of 10-100 objects of 5-10 fields
with apostrophes, double quotes, accents, non-Latin letters and Nones. Three
columns of the same values are decoded:

* Python literals: ``normalise`` vs per-cell ``ast.literal_eval`` (target: >= 10x);
* JSON: ``normalise`` vs per-cell ``json.loads`` (target: no slower);
* the upper reference: pyarrow's columnar JSON reader on the same data as JSON Lines.

Results must be identical to the references; the script stops if they are not.
Figures are medians of ``--runs`` runs.
"""

from __future__ import annotations

import argparse
import ast
import io
import json
import random
import statistics
import time

from normalise.decode import ACCELERATED, decode_column

NAMES = ["Ann Orrel", "Brennick O'Varra", 'Tamsel "Wren" Oddaby', "Ilséa Brøndavik", "Joviña Larrequen",
         "Θεοδρίκα Βαλμύρη", "Жанна Вальмир", "苔原 翠鈴", "Dalla D'Arvento", "Corust Liskiska"]


def make_values(cells: int, seed: int = 1) -> list:
    rng = random.Random(seed)
    values = []
    for _ in range(cells):
        fields = rng.randint(5, 10)
        row = []
        for i in range(rng.randint(10, 100)):
            obj = {"person_id": rng.randint(1, 20000), "name": rng.choice(NAMES),
                   "role": rng.choice(["author", "editor", "illustrator"]), "position": i + 1,
                   "share": round(rng.random(), 4), "lead": rng.choice([True, False, None]),
                   "note": rng.choice([None, "guest", "it's \"new\""]), "hours": rng.randint(0, 90),
                   "city": rng.choice(["Åsby", "Montréal", "Łódź", None]), "code": f"C-{rng.randint(0, 999)}"}
            row.append(dict(list(obj.items())[:fields]))
        values.append(row)
    return values


def median_time(fn, runs: int) -> tuple[float, object]:
    times, result = [], None
    for _ in range(runs):
        start = time.perf_counter()
        result = fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times), result


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--cells", type=int, default=3000)
    p.add_argument("--runs", type=int, default=5)
    a = p.parse_args()
    values = make_values(a.cells)
    py_cells = [repr(v) for v in values]
    js_cells = [json.dumps(v, ensure_ascii=False) for v in values]
    lines = list(range(2, a.cells + 2))
    py_mb = sum(len(c.encode()) for c in py_cells) / 1e6
    js_mb = sum(len(c.encode()) for c in js_cells) / 1e6

    t_lit, ref_py = median_time(lambda: [ast.literal_eval(c) for c in py_cells], a.runs)
    # raw_surrogates=False: as for a file whose bytes all decoded (the reader notes when one did not)
    t_py, ours_py = median_time(lambda: decode_column("c", py_cells, lines, "bench", forced=("python-literal", None),
                                                      raw_surrogates=False).values, a.runs)
    assert ours_py == ref_py and repr(ours_py) == repr(ref_py), "Python-literal results differ from ast.literal_eval"

    t_loads, ref_js = median_time(lambda: [json.loads(c) for c in js_cells], a.runs)
    t_js, ours_js = median_time(lambda: decode_column("c", js_cells, lines, "bench", forced=("json", None),
                                                      raw_surrogates=False).values, a.runs)
    assert ours_js == ref_js and repr(ours_js) == repr(ref_js), "JSON results differ from json.loads"

    import pyarrow.json as pj
    ndjson = "\n".join(json.dumps({"c": v}, ensure_ascii=False) for v in values).encode()
    t_arrow, _ = median_time(lambda: pj.read_json(io.BytesIO(ndjson)), a.runs)

    print(f"decoding {a.cells:,} cells, lists of 10-100 objects of 5-10 fields; median of {a.runs} runs; "
          f"C accelerator {'built' if ACCELERATED else 'NOT built (pure Python)'}")
    print(f"{'column':<16}{'reference':>24}{'normalise':>22}{'speed-up':>10}")
    print(f"{'Python literal':<16}{'ast.literal_eval ' + f'{py_mb / t_lit:6.1f} MB/s':>24}"
          f"{py_mb / t_py:16.1f} MB/s{t_lit / t_py:9.1f}x   (target >= 10x)")
    print(f"{'JSON':<16}{'json.loads ' + f'{js_mb / t_loads:6.1f} MB/s':>24}"
          f"{js_mb / t_js:16.1f} MB/s{t_loads / t_js:9.1f}x   (target >= 1x)")
    print(f"{'JSON (upper)':<16}{'pyarrow read_json ' + f'{js_mb / t_arrow:6.1f} MB/s':>24}"
          f"{'':>22}   normalise JSON at {t_arrow / t_js:.0%} of pyarrow, Python literals at "
          f"{(py_mb / t_py) / (js_mb / t_arrow):.0%}")
    print("results identical to ast.literal_eval and json.loads: yes")


if __name__ == "__main__":
    main()
