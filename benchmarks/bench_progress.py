"""What progress on a terminal costs: the same build with ``--quiet`` and on a terminal, in one run.

    python benchmarks/bench_progress.py [--records 50000] [--runs 3]

The demo export at that size is made once; then ``normalise build`` runs ``--runs`` times each way,
alternating (and which of the two goes first alternates too): with ``--quiet`` (the baseline: no progress at all) and under a pseudo-terminal (Python's ``pty``
module, so stderr is a terminal and every phase shows its tqdm line). Figures are wall-clock medians of the
whole command, the interpreter's start included.
"""

from __future__ import annotations

import argparse
import os
import pty
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from demo.generate import generate  # noqa: E402


def command(where: Path, quiet: bool) -> list[str]:
    inputs = [str(where / "titles.csv"), str(where / "contributions.csv")]
    return [sys.executable, "-m", "normalise", "build", *inputs, "--db", str(where / "out.db"), "--replace",
            *(["--quiet"] if quiet else [])]


def quiet_run(where: Path) -> float:
    started = time.perf_counter()
    subprocess.run(command(where, True), check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - started


def terminal_run(where: Path) -> tuple[float, int]:
    """Seconds, and bytes the terminal was sent (the progress lines' redraws)."""
    sent = 0

    def read(fd):
        nonlocal sent
        data = os.read(fd, 65536)
        sent += len(data)
        return data

    started = time.perf_counter()
    with open(os.devnull, "wb") as sink:
        saved = os.dup(1)
        os.dup2(sink.fileno(), 1)  # what the terminal shows is counted, not printed
        try:
            status = pty.spawn(command(where, False), read)
        finally:
            os.dup2(saved, 1)
            os.close(saved)
    if os.waitstatus_to_exitcode(status) != 0:
        raise SystemExit(f"the build on a terminal failed: {status}")
    return time.perf_counter() - started, sent


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--records", type=int, default=50_000)
    parser.add_argument("--runs", type=int, default=3)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="normalise-progress-") as d:
        where = Path(d)
        generate(where, args.records, seed=7)
        quiet, terminal, sent = [], [], []
        for k in range(args.runs):  # alternating, and which goes first alternates too (no order bias)
            if k % 2:
                seconds, n = terminal_run(where)
                quiet.append(quiet_run(where))
            else:
                quiet.append(quiet_run(where))
                seconds, n = terminal_run(where)
            terminal.append(seconds)
            sent.append(n)
    q, t = statistics.median(quiet), statistics.median(terminal)
    print(f"demo export, {args.records:,} titles; median of {args.runs} runs each, alternating; "
          f"{os.cpu_count()} cores")
    print(f"{'':28}{'time':>8}")
    print(f"{'--quiet (baseline)':28}{q:>7.2f}s")
    print(f"{'on a terminal (progress)':28}{t:>7.2f}s   ({statistics.median(sent):,.0f} bytes to the terminal)")
    print(f"progress costs {t - q:+.2f}s ({(t - q) / q:+.1%}) at the median")
    print("every run, in order:  --quiet " + " ".join(f"{x:.2f}" for x in quiet)
          + "  | terminal " + " ".join(f"{x:.2f}" for x in terminal))


if __name__ == "__main__":
    main()
