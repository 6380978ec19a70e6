#!/usr/bin/env bash
# Bounded coverage-guided fuzzing of the read and decode passes with atheris (libFuzzer).
#
#   bash fuzz/run.sh SECONDS [WORKDIR]
#
# Runs fuzz/fuzz_decode.py, then fuzz/fuzz_read.py, each for SECONDS seconds (default 60), keeping the
# grown corpora in WORKDIR (default fuzz/work, git-ignored; keep it between runs, e.g. as a CI cache, so each
# run starts where the last one stopped). The read fuzzer is seeded with the files of tests/corpus/. Exits 1
# when either harness found a crash (an exception, or a broken invariant: fuzz/checks.py), with the input in
# WORKDIR/crashes/; replay one with `python fuzz/fuzz_decode.py WORKDIR/crashes/crash-...`, then add it to
# tests/test_fuzz_regressions.py. Needs `pip install atheris` (a wheel for CPython 3.11 on x86-64 Linux).
set -uo pipefail
cd "$(dirname "$0")/.."
SECONDS_EACH=${1:-60}
WORK=${2:-fuzz/work}
PYTHON=${PYTHON:-python}
mkdir -p "$WORK/decode" "$WORK/read" "$WORK/crashes"
if ! "$PYTHON" -c "import atheris" 2>/dev/null; then
    echo "fuzz/run.sh: atheris is not installed (pip install atheris)" >&2
    exit 2
fi
# seeds for the read fuzzer: every corpus file, its first byte choosing the suffix as fuzz_read.py reads it
"$PYTHON" - "$WORK/read" <<'PY'
import hashlib, pathlib, sys
suffixes = [".csv", ".tsv", ".jsonl", ".json", ".txt"]
out = pathlib.Path(sys.argv[1])
for f in sorted(pathlib.Path("tests/corpus").glob("*/*")):
    if f.name == "expect.json" or f.suffix not in suffixes or f.stat().st_size > 50_000:
        continue
    data = bytes([suffixes.index(f.suffix)]) + f.read_bytes()
    (out / ("seed-" + hashlib.sha1(data).hexdigest())).write_bytes(data)
PY
status=0
for harness in decode read; do
    echo "== fuzz_$harness: ${SECONDS_EACH}s"
    "$PYTHON" "fuzz/fuzz_$harness.py" "$WORK/$harness" -dict="fuzz/$harness.dict" \
        -max_total_time="$SECONDS_EACH" -timeout=20 -rss_limit_mb=4096 -max_len=4096 \
        -artifact_prefix="$WORK/crashes/$harness-" -print_final_stats=1 2>&1 \
        | grep -v -E '^#[0-9]+[[:space:]]+(NEW|REDUCE|pulse)' || true
    if ls "$WORK/crashes/$harness-"* >/dev/null 2>&1; then
        echo "fuzz/run.sh: fuzz_$harness found crashes:" "$WORK/crashes/$harness-"* >&2
        status=1
    fi
done
exit $status
