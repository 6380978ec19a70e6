"""The reduce step's cost as entities grow: the time the writing process spends merging partitions built apart
(``build.reduce.merge``), beside the whole build's time measured in the same run.

    python benchmarks/bench_reduce.py [--records 20000] [--people 500,5000,50000] [--workers 2] [--dir DIR]

Each export is made by ``benchmarks/make_export.py`` with a pool of P people (so about P distinct entities).
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from normalise.build import partitions as build_partitions  # noqa: E402
from normalise.pipeline import build_database  # noqa: E402


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--records", type=int, default=20000)
    p.add_argument("--people", default="500,5000,50000")
    p.add_argument("--workers", type=int, default=2)
    p.add_argument("--dir", default="/tmp/normalise-bench-reduce")
    a = p.parse_args()
    work = Path(a.dir)
    work.mkdir(parents=True, exist_ok=True)
    spent: list[float] = []
    merge = build_partitions.merge

    def timed(*args):
        started = time.perf_counter()
        try:
            return merge(*args)
        finally:
            spent.append(time.perf_counter() - started)

    build_partitions.merge = timed
    print(f"{a.records:,} records, partitions of 5,000, --workers {a.workers}")
    for people in map(int, a.people.split(",")):
        path = work / f"people_{people}.csv"
        if not path.exists():
            subprocess.run([sys.executable, str(HERE / "make_export.py"), str(path), "--records", str(a.records),
                            "--people", str(people)], check=True, capture_output=True)
        spent.clear()
        started = time.perf_counter()
        m = build_database([str(path)], work / f"people_{people}.db", replace=True, chunk_rows=5000,
                           workers=a.workers, progress=False)
        total = time.perf_counter() - started
        entities = sum(t["rows"] for t in m["tables"] if t["role"] == "entity")
        print(f"people pool {people:>7,}: {entities:>7,} entities; merging {sum(spent):6.2f}s over {len(spent)} "
              f"partitions; whole build {total:5.1f}s; built again in order: {m['partitions']['built_again']}")


if __name__ == "__main__":
    main()
