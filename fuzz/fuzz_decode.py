"""Coverage-guided fuzzing of the decode pass (atheris, libFuzzer).

Each input becomes a mode (json, python-literal, or auto: the column's format
detected) and one to six cells; ``checks.check_decode`` decodes them as one
column and checks every value against ``json.loads`` / ``ast.literal_eval``:
equal where the reference accepts, quarantined (with place and message) where
it refuses, and no exception ever.

    python fuzz/fuzz_decode.py -max_total_time=300 fuzz/corpus/decode
    (or: bash fuzz/run.sh SECONDS)

A crash writes ``crash-*`` with the input; ``python fuzz/fuzz_decode.py crash-*``
replays it. Seeds come from the project's own test cells (see ``seeds``).
"""

from __future__ import annotations

import os
import sys
import warnings

import atheris

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))
sys.setrecursionlimit(10_000)

with atheris.instrument_imports(include=["normalise", "json", "ast"]):
    import normalise.decode  # noqa: F401
    import normalise.decode.literal  # noqa: F401
    from fuzz.checks import MODES, check_decode

warnings.simplefilter("ignore")


def one_input(data: bytes) -> None:
    fdp = atheris.FuzzedDataProvider(data)
    mode = MODES[fdp.ConsumeIntInRange(0, len(MODES) - 1)]
    count = fdp.ConsumeIntInRange(1, 6)
    cells = []
    for k in range(count):
        if k == count - 1:
            cells.append(fdp.ConsumeUnicodeNoSurrogates(fdp.remaining_bytes()) if fdp.ConsumeBool()
                         else fdp.ConsumeUnicode(fdp.remaining_bytes()))
        else:
            size = fdp.ConsumeIntInRange(0, 64)
            cells.append(fdp.ConsumeUnicodeNoSurrogates(size) if fdp.ConsumeBool() else fdp.ConsumeUnicode(size))
    check_decode(cells, mode)


def main() -> None:
    atheris.Setup(sys.argv, one_input)
    atheris.Fuzz()


if __name__ == "__main__":
    main()
