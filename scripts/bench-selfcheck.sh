#!/usr/bin/env bash
# bench-selfcheck.sh - what the self-check of `vastmul mul` costs.
#
# For each pair (decimal and hexadecimal operands from `vastmul gen`), runs
# `mul` RUNS times with the self-check and RUNS times with --no-self-check,
# alternating (the machine is shared and noisy), and reports: the
# self-check's own seconds from the JSON report (residues of both factors
# and of the product) against the run's total, and the summed wall times of
# the two kinds of run (noisy), and the share of writing the manifest.
#
# Usage: scripts/bench-selfcheck.sh [RUNS]   (default 3)
# Environment: SELFCHECK_DIR (default target/selfcheck-bench).
set -euo pipefail
cd "$(dirname "$0")/.."
runs=${1:-3}
dir=${SELFCHECK_DIR:-target/selfcheck-bench}
mkdir -p "$dir"
cargo build --release --quiet
v=target/release/vastmul
echo "# self-check cost, $(nproc) cores, $(date -u), commit $(git rev-parse --short HEAD)"
echo
echo "| operands | self-check s (each run) | run s (each run) | self-check share | manifest share | wall with / without |"
echo "|---|---|---|---|---|---|"
for spec in "dec 40000000" "dec 100000000" "hex 67108864"; do
  set -- $spec
  radix=$1; digits=$2
  a="$dir/a-$radix-$digits"; b="$dir/b-$radix-$digits"
  [ -f "$a" ] || "$v" gen --radix "$radix" --digits "$digits" --seed 41 -o "$a"
  [ -f "$b" ] || "$v" gen --radix "$radix" --digits "$digits" --seed 42 -o "$b"
  : > "$dir/with.json"; : > "$dir/walls"
  for i in $(seq 1 "$runs"); do
    for mode in with without; do
      extra=(); [ $mode = without ] && extra=(--no-self-check)
      rm -f "$dir/c"
      t0=$(date +%s%N)
      "$v" mul "$a" "$b" -o "$dir/c" --json "${extra[@]}" > "$dir/r.json"
      t1=$(date +%s%N)
      echo "$mode $(( (t1 - t0) / 1000000 ))" >> "$dir/walls"
      [ $mode = with ] && { cat "$dir/r.json"; echo; } >> "$dir/with.json"
    done
  done
  python3 - "$dir" "$radix $digits digits" <<'PY'
import json, sys
d, label = sys.argv[1], sys.argv[2]
text = open(f"{d}/with.json").read()
dec = json.JSONDecoder(); reports = []; i = 0
while i < len(text):
    text_i = text[i:].lstrip()
    if not text_i: break
    r, n = dec.raw_decode(text_i); reports.append(r); i = len(text) - len(text_i) + n
sc = [r["self_check"]["seconds"] for r in reports]
mf = [r["manifest_seconds"] for r in reports]
tot = [r["open_seconds"] + r["compute_seconds"] + r["self_check"]["seconds"] + r["write_seconds"] for r in reports]
# write_seconds includes the manifest (written after the product).
walls = {"with": 0, "without": 0}
for line in open(f"{d}/walls"):
    m, ms = line.split(); walls[m] += int(ms)
print(f"| {label} | {', '.join(f'{x:.3f}' for x in sc)} | {', '.join(f'{x:.3f}' for x in tot)} | "
      f"{100 * sum(sc) / sum(tot):.1f}% | {100 * sum(mf) / sum(tot):.1f}% | {walls['with'] / walls['without']:.3f} |")
PY
done
rm -f "$dir/c" "$dir/r.json"
