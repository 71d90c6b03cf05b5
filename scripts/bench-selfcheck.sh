#!/usr/bin/env bash
# bench-selfcheck.sh - what the self-check of `vastmul mul` costs.
#
# For each pair (decimal and hexadecimal operands from `vastmul gen`), runs
# `mul` RUNS times with the self-check and RUNS times with --no-self-check,
# alternating (the machine is shared and noisy), and reports from the JSON
# reports: the work time of each run (open, compute, self-check, write;
# the factors' residues are taken inside compute), the self-check's cost
# as the ratio of the summed work times, the product residue's own
# seconds, and the share of writing the manifest.
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
echo "| operands | with self-check s | without s | self-check cost | product residue s | manifest share |"
echo "|---|---|---|---|---|---|"
for spec in "dec 40000000" "dec 100000000" "hex 67108864"; do
  set -- $spec
  radix=$1; digits=$2
  a="$dir/a-$radix-$digits"; b="$dir/b-$radix-$digits"
  [ -f "$a" ] || "$v" gen --radix "$radix" --digits "$digits" --seed 41 -o "$a"
  [ -f "$b" ] || "$v" gen --radix "$radix" --digits "$digits" --seed 42 -o "$b"
  : > "$dir/with.json"; : > "$dir/without.json"; : > "$dir/walls"
  # ABBA order: the first run of a pair is slower here whichever it is.
  for i in $(seq 1 "$runs"); do
    order="with without"; [ $((i % 2)) = 0 ] && order="without with"
    for mode in $order; do
      extra=(); [ $mode = without ] && extra=(--no-self-check)
      rm -f "$dir/c"
      t0=$(date +%s%N)
      "$v" mul "$a" "$b" -o "$dir/c" --json "${extra[@]}" > "$dir/r.json"
      t1=$(date +%s%N)
      echo "$mode $(( (t1 - t0) / 1000000 ))" >> "$dir/walls"
      { cat "$dir/r.json"; echo; } >> "$dir/$mode.json"
    done
  done
  python3 - "$dir" "$radix $digits digits" <<'PY'
import json, sys
d, label = sys.argv[1], sys.argv[2]
def load(name):
    text = open(f"{d}/{name}.json").read()
    dec = json.JSONDecoder(); out = []; i = 0
    while True:
        rest = text[i:].lstrip()
        if not rest: return out
        r, n = dec.raw_decode(rest); out.append(r); i = len(text) - len(rest) + n
def work(r):
    # open, compute (which now includes taking the factors' residues),
    # the self-check's own seconds and the write, without the manifest.
    sc = r["self_check"]["seconds"] if r.get("self_check") else 0.0
    return r["open_seconds"] + r["compute_seconds"] + sc + r["write_seconds"] - r["manifest_seconds"]
w, n = load("with"), load("without")
sc = [r["self_check"]["seconds"] for r in w]
mf = [r["manifest_seconds"] for r in w]
tw, tn = [work(r) for r in w], [work(r) for r in n]
print(f"| {label} | {', '.join(f'{x:.3f}' for x in tw)} | {', '.join(f'{x:.3f}' for x in tn)} | "
      f"{100 * (sum(tw) / sum(tn) - 1):+.1f}% | {', '.join(f'{x:.3f}' for x in sc)} | "
      f"{100 * sum(mf) / sum(tw):.1f}% |")
PY
done
rm -f "$dir/c" "$dir/r.json"
