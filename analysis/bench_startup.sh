#!/usr/bin/env bash
# Cold and warm start of the command: a fresh virtual environment, an empty numba cache,
# then the demo twice and one corrected-model run twice (a built-in correction compiles
# the staged kernel).  Writes the wall times to stdout as a Markdown table:
#     bash analysis/bench_startup.sh > analysis/bench_startup.md
# Wall times on this project's 2-core machine; the first run of each pair compiles.
set -euo pipefail
cd "$(dirname "$0")/.."
work=$(mktemp -d)
python3 -m venv "$work/venv"
"$work/venv/bin/pip" install --quiet . >/dev/null
export NUMBA_CACHE_DIR="$work/numba-cache"   # empty: nothing compiled yet
cd "$work"
seconds() { local start end; start=$(date +%s.%N); "$@" >/dev/null 2>&1 || true; end=$(date +%s.%N); echo "$end - $start" | bc; }
echo "| run | cold s | warm s |"
echo "| --- | --- | --- |"
cold=$(seconds "$work/venv/bin/solitons" demo --out demo1 --no-figures)
warm=$(seconds "$work/venv/bin/solitons" demo --out demo2 --no-figures)
echo "| solitons demo (61^3, sixth order, saddle check) | $cold | $warm |"
cold=$(seconds "$work/venv/bin/solitons" demo --out c1 --no-figures terms.mass.kind='"potential"' relax.saddle_check=false)
warm=$(seconds "$work/venv/bin/solitons" demo --out c2 --no-figures terms.mass.kind='"potential"' relax.saddle_check=false)
echo "| demo + potential (staged kernel), no saddle check | $cold | $warm |"
echo
echo "$(date -u +%Y-%m-%d), $(nproc) cores; fresh venv, NUMBA_CACHE_DIR empty before the first run"
rm -rf "$work"
