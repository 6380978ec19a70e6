"""Coverage-guided fuzzing of the read pass (atheris, libFuzzer).

The first byte of each input picks the file's suffix (.csv, .tsv, .jsonl,
.json, .txt); the rest is written as the file's bytes. ``checks.check_read``
reads it whole and in chunks of two rows: nothing but ``UnreadableFile`` (with a
one-line message) may escape, every row is a record or a rejected row with its
line, the chunks agree with the whole file, and decoding what was read never
raises.

    python fuzz/fuzz_read.py -max_total_time=300 fuzz/corpus/read
    (or: bash fuzz/run.sh SECONDS)
"""

from __future__ import annotations

import os
import sys
import tempfile
import warnings

import atheris

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))

with atheris.instrument_imports(include=["normalise", "csv", "json"]):
    import normalise.read  # noqa: F401
    import normalise.decode  # noqa: F401
    from fuzz.checks import SUFFIXES, check_read

warnings.simplefilter("ignore")
# a RAM-backed folder when there is one: every input is written as a file
DIRECTORY = tempfile.mkdtemp(prefix="normalise-fuzz-", dir="/dev/shm" if os.path.isdir("/dev/shm") else None)


def one_input(data: bytes) -> None:
    if not data:
        return
    check_read(data[1:], SUFFIXES[data[0] % len(SUFFIXES)], chunk_rows=1 + data[0] // 64,
               directory=DIRECTORY)


def main() -> None:
    atheris.Setup(sys.argv, one_input)
    atheris.Fuzz()


if __name__ == "__main__":
    main()
