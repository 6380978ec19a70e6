"""How the cost of ``normalise build`` grows with records, list length and entity count.

    python benchmarks/bench_scaling.py [--dir /tmp/normalise-scaling] [--runs 3]

Each point is an export from ``make_export.py`` built in a fresh process; the
table gives the median wall time, the time per nested element and the peak
memory. One dimension varies at a time, from a base of 10,000 records, 30
links per record and 5,000 distinct persons.
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
from pathlib import Path

from bench_build import HERE, run

BASE = {"records": 10000, "links": 30, "people": 5000}
POINTS = [("records", [5000, 10000, 20000, 40000]), ("links", [10, 30, 60, 120]),
          ("people", [500, 5000, 50000])]


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--dir", default="/tmp/normalise-scaling")
    p.add_argument("--runs", type=int, default=3)
    a = p.parse_args()
    work = Path(a.dir)
    work.mkdir(parents=True, exist_ok=True)
    print(f"{'varied':<9}{'value':>8}{'elements':>11}{'time':>9}{'us/element':>12}{'peak MiB':>10}")
    for name, values in POINTS:
        for value in values:
            spec = dict(BASE, **{name: value})
            export = work / f"export_{spec['records']}_{spec['links']}_{spec['people']}.csv"
            if not export.exists():
                subprocess.run([sys.executable, str(HERE / "make_export.py"), str(export), "--records",
                                str(spec["records"]), "--links", str(spec["links"]), "--people",
                                str(spec["people"])], check=True)
            results = [run([sys.executable, "-m", "normalise", "build", str(export), "--db", str(work / "s.db"),
                            "--replace", "--quiet"]) for _ in range(a.runs)]
            seconds = statistics.median(t for t, _ in results)
            memory = statistics.median(m for _, m in results)
            elements = spec["records"] * (spec["links"] + 2.5)  # links, about 2 labels and the series object
            print(f"{name:<9}{value:>8,}{elements:>11,.0f}{seconds:8.1f}s{seconds / elements * 1e6:11.2f}"
                  f"{memory / 2**20:10,.0f}")


if __name__ == "__main__":
    main()
