"""How long the lossless proof takes within one build (the proof is timed from inside the process).

    python benchmarks/proof_share.py EXPORT.csv OUT.db

Prints one JSON line: {"total": seconds, "proof": seconds, "cells_checked": n}.
"""

from __future__ import annotations

import json
import sys
import time

import normalise.pipeline as pipeline


def main() -> None:
    export, db = sys.argv[1], sys.argv[2]
    taken = {}
    prove = pipeline.prove

    def timed(*args, **kwargs):
        started = time.perf_counter()
        try:
            return prove(*args, **kwargs)
        finally:
            taken["proof"] = time.perf_counter() - started

    pipeline.prove = timed
    started = time.perf_counter()
    m = pipeline.build_database([export], db, replace=True, chunk_rows=5000)  # as the command line builds it
    print(json.dumps({"total": round(time.perf_counter() - started, 2), "proof": round(taken["proof"], 2),
                      "cells_checked": m["integrity"]["cells_checked"]}))


if __name__ == "__main__":
    main()
