#!/usr/bin/env bash
# bench-passes.sh - builds of vastmul side by side, pass by pass.
#
# Runs each given binary on the same operand pair, alternating the
# binaries, REPS rounds back to back (so that each run finds memory a run
# freed a moment before: on a virtual machine, memory untouched for a few
# seconds can cost far more to fault in than the work itself), and prints
# for each binary the min and median wall time and the min and median of
# every pass from `mul --json`.
#
# Usage: scripts/bench-passes.sh THREADS REPS BINARY [BINARY...]
#   e.g. cp target/release/vastmul /tmp/before; (change, build);
#        scripts/bench-passes.sh 1 4 /tmp/before target/release/vastmul
# Environment: PASSES_DIGITS (hexadecimal digits per operand, default
#   67108864, that is 2^28 bits), PASSES_DIR (default target/passes).
set -euo pipefail
cd "$(dirname "$0")/.."
[ $# -ge 3 ] || { sed -n 2,15p "$0"; exit 2; }
threads=$1 reps=$2; shift 2
digits=${PASSES_DIGITS:-67108864}
dir=${PASSES_DIR:-target/passes}
mkdir -p "$dir"
for seed in 1 2; do
  f="$dir/hex-$digits-$seed.txt"
  [ -f "$f" ] || "$1" gen --digits "$digits" --seed "$seed" --radix hex -o "$f"
done
for r in $(seq "$reps"); do
  n=0
  for b in "$@"; do
    n=$((n + 1))
    # A fresh output path each time, as a user's run would have: replacing
    # the last product would add the freeing of its blocks to the write.
    rm -f "$dir/product.txt"
    "$b" -q mul "$dir/hex-$digits-1.txt" "$dir/hex-$digits-2.txt" -o "$dir/product.txt" \
      --threads "$threads" --json > "$dir/report-$n-$r.json"
  done
done
python3 - "$dir" "$reps" "$@" <<'PY'
import json, statistics as st, sys
d, reps, bins = sys.argv[1], int(sys.argv[2]), sys.argv[3:]
for n, b in enumerate(bins, 1):
    rs = [json.load(open(f"{d}/report-{n}-{r}.json")) for r in range(1, reps + 1)]
    walls = [x["wall_seconds"] for x in rs]
    print(f"{b}: wall min {min(walls):.3f} s, median {st.median(walls):.3f} s")
    for i, p in enumerate(rs[0]["passes"]):
        v = [x["passes"][i]["seconds"] for x in rs]
        print(f"  {p['name']:44s} min {min(v):.3f}  median {st.median(v):.3f}")
PY
