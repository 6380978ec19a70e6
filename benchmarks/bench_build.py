"""End-to-end build against the hand-written way, and the scale run, measured in one run.

    python benchmarks/bench_build.py [--records 50000] [--runs 3] [--scale 10] [--dir /tmp/normalise-bench]

For the 1x export (``--records`` records, two nested object lists of about 30
links per record, a scalar list and an object column) it runs, ``--runs`` times
each, ``normalise build`` to SQLite and ``benchmarks/baseline_handwritten.py``
(per-cell ``ast.literal_eval``/``json.loads``, ``explode``, ``json_normalize``,
``drop_duplicates``, ``to_sql``), each in a fresh process, and prints the median
wall time and peak memory (the child's maximum resident set size) side by side.
With ``--scale N`` it also builds an export N times larger (once) and reports
its peak memory and its time against N times the 1x median.
Targets: >= 5x faster and <= 0.3x the memory of the baseline; at 10x, peak
memory under 2 GiB and time within 11x of the 1x run. ``--workers 2,4`` and
``--dask 1,2,3`` add partitioned builds (a process pool; a Dask local cluster
of N workers) to the same rounds, with their records per second per worker.
Peak memory is the whole process tree's.

It also runs ``benchmarks/sqlite_floor.py`` on the 1x export: the time SQLite
alone takes to load and check the same rows (``--skip-floor`` to leave it out),
set beside the time the 5x target allows.
"""

from __future__ import annotations

import argparse
import json
import os
import sqlite3
import statistics
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent


def run(cmd: list[str]) -> tuple[float, int]:
    """Wall seconds and peak resident memory (bytes) of one child process with every process it starts: the
    larger of its own peak (``ru_maxrss``) and the peak of the whole tree's proportional set size (PSS, from
    /proc/PID/smaps_rollup), sampled every 50 ms: a pool of processes or a Dask cluster holds memory in several
    processes at once, and pages forked processes share are counted once."""
    import threading

    import psutil

    start = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    tree_peak, done = [0], threading.Event()

    def sample():
        top = psutil.Process(proc.pid)
        while not done.wait(0.05):
            try:
                # proportional set sizes: a page shared by forked processes is counted once, not in each
                total = sum(q.memory_full_info().pss for q in [top, *top.children(recursive=True)])
            except psutil.Error:
                continue
            tree_peak[0] = max(tree_peak[0], total)

    sampler = threading.Thread(target=sample, daemon=True)
    sampler.start()
    _, status, usage = os.wait4(proc.pid, 0)
    elapsed = time.perf_counter() - start
    done.set()
    sampler.join()
    err = proc.stderr.read().decode(errors="replace")
    proc.stderr.close()
    if os.waitstatus_to_exitcode(status) != 0:
        raise SystemExit(f"failed: {' '.join(cmd)}\n{err}")
    return elapsed, max(usage.ru_maxrss * 1024, tree_peak[0])  # ru_maxrss is in KiB on Linux


def ensure_export(path: Path, records: int) -> None:
    if not path.exists():
        subprocess.run([sys.executable, str(HERE / "make_export.py"), str(path), "--records", str(records)],
                       check=True)


def count(db: Path, table: str) -> int:
    with sqlite3.connect(db) as con:
        return con.execute(f'SELECT count(*) FROM "{table}"').fetchone()[0]


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--records", type=int, default=50000)
    p.add_argument("--runs", type=int, default=3)
    p.add_argument("--scale", type=int, default=0, help="also build an export this many times larger (0: skip)")
    p.add_argument("--dir", default="/tmp/normalise-bench")
    p.add_argument("--skip-baseline", action="store_true")
    p.add_argument("--skip-floor", action="store_true")
    p.add_argument("--workers", default=str(os.cpu_count() or 1),
                   help="also build with --workers N for each N of this comma-separated list (default: the cores)")
    p.add_argument("--dask", default="",
                   help="also build with --dask local:N for each N of this comma-separated list (e.g. 1,2,3)")
    a = p.parse_args()
    work = Path(a.dir)
    work.mkdir(parents=True, exist_ok=True)
    export = work / f"export_{a.records}.csv"
    ensure_export(export, a.records)
    size_mb = export.stat().st_size / 1e6

    ours, theirs = [], []
    # partitioned builds, each in the same rounds as the one-process build and the baseline
    spread = {f"--workers {n}": ["--workers", n] for n in filter(None, a.workers.split(",")) if n != "1"}
    spread.update({f"--dask local:{n}": ["--dask", f"local:{n}"] for n in filter(None, a.dask.split(","))})
    apart: dict[str, list] = {name: [] for name in spread}
    for _ in range(a.runs):
        db = work / "normalise.db"
        ours.append(run([sys.executable, "-m", "normalise", "build", str(export), "--db", str(db),
                         "--replace", "--quiet"]))
        for name, extra in spread.items():
            apart[name].append(run([sys.executable, "-m", "normalise", "build", str(export), "--db",
                                    str(work / "apart.db"), "--replace", "--quiet", *extra]))
        if not a.skip_baseline:
            base_db = work / "baseline.db"
            if base_db.exists():
                base_db.unlink()
            theirs.append(run([sys.executable, str(HERE / "baseline_handwritten.py"), str(export), str(base_db)]))
    stem = export.stem
    links = count(db, f"{stem}_contributors") + count(db, f"{stem}_team")
    if not a.skip_baseline:
        base_links = count(base_db, "record_contributors") + count(base_db, "record_team")
        assert links == base_links, f"link counts differ: normalise {links}, baseline {base_links}"

    t_ours = statistics.median(t for t, _ in ours)
    m_ours = statistics.median(m for _, m in ours)
    print(f"export: {a.records:,} records, {links:,} links, {size_mb:,.0f} MB; median of {a.runs} runs; "
          f"{os.cpu_count()} cores")
    print(f"{'':<26}{'time':>10}{'peak memory':>14}")
    share = json.loads(subprocess.run([sys.executable, str(HERE / "proof_share.py"), str(export), str(work / "share.db")],
                                      check=True, capture_output=True, text=True).stdout.strip().splitlines()[-1])
    print(f"{'normalise build':<26}{t_ours:9.1f}s{m_ours / 2**20:11,.0f} MiB   (one more build, timed inside: "
          f"{share['total']:.1f}s, of which the lossless proof {share['proof']:.1f}s)")
    for name, runs in apart.items():
        t, m = statistics.median(t for t, _ in runs), statistics.median(m for _, m in runs)
        workers = int(name.rsplit(" ", 1)[1].split(":")[-1])
        print(f"{'normalise ' + name:<26}{t:9.1f}s{m / 2**20:11,.0f} MiB   ({t_ours / t:.2f}x the one-process "
              f"build; {a.records / t:,.0f} records/s, {a.records / t / workers:,.0f} per worker)")
    print(f"{'one process':<26}{'':>25}   ({a.records / t_ours:,.0f} records/s)")
    if theirs:
        t_base = statistics.median(t for t, _ in theirs)
        m_base = statistics.median(m for _, m in theirs)
        print(f"{'hand-written baseline':<26}{t_base:9.1f}s{m_base / 2**20:11,.0f} MiB")
        print(f"normalise: {t_base / t_ours:.1f}x faster (target >= 5x), {m_ours / m_base:.2f}x the memory "
              f"(target <= 0.3x)")
        for name, runs in apart.items():
            t, m = statistics.median(t for t, _ in runs), statistics.median(m for _, m in runs)
            print(f"normalise {name}: {t_base / t:.1f}x faster, {m / m_base:.2f}x the memory")
    if not a.skip_floor:
        out = subprocess.run([sys.executable, str(HERE / "sqlite_floor.py"), str(export), "--runs", str(a.runs),
                              "--json"], check=True, capture_output=True, text=True).stdout
        floor = json.loads(out.strip().splitlines()[-1])
        print(f"{'SQLite alone, same rows':<26}{floor['total']:9.1f}s   (inserts {floor['insert']:.1f}s; indexes, "
              f"views, checks, commit {floor['finish']:.1f}s, of which integrity_check "
              f"{floor['integrity_check']:.1f}s, foreign_key_check {floor['foreign_key_check']:.1f}s)")
        if theirs:
            print(f"the 5x target allows {t_base / 5:.1f}s for the whole build; SQLite alone takes "
                  f"{floor['total'] / (t_base / 5):.0%} of that")
    if a.scale:
        big = work / f"export_{a.records * a.scale}.csv"
        ensure_export(big, a.records * a.scale)
        t_big, m_big = run([sys.executable, "-m", "normalise", "build", str(big), "--db",
                            str(work / "normalise_big.db"), "--replace", "--quiet"])
        print(f"{a.scale}x export ({big.stat().st_size / 1e9:.1f} GB): {t_big:.1f}s = "
              f"{t_big / t_ours:.1f}x the 1x time (target <= 11x), peak {m_big / 2**30:.2f} GiB (target < 2 GiB)")


if __name__ == "__main__":
    main()
