#!/usr/bin/env bash
# bench-check.sh - throughput of `vastmul check` on decimal files.
#
# Generates two DIGITS-digit decimal operands with `vastmul gen`, multiplies
# them, then times `vastmul check A B C` (five moduli: three fixed, two
# random) RUNS times and reports the wall time and GB/s over the three
# files' bytes. The files were just written, so they are in the page cache:
# the figure is the check's own speed, not the disk's.
#
# Usage: scripts/bench-check.sh [DIGITS] [RUNS]   (default 750000000 3:
#   about 3 GB of files in all)
# Environment: CHECK_DIR (default target/check-bench).
set -euo pipefail
cd "$(dirname "$0")/.."
digits=${1:-750000000}
runs=${2:-3}
dir=${CHECK_DIR:-target/check-bench}
mkdir -p "$dir"
cargo build --release --quiet
v=target/release/vastmul
a="$dir/a-$digits.txt"; b="$dir/b-$digits.txt"; c="$dir/c-$digits.txt"
[ -f "$a" ] || "$v" gen --digits "$digits" --seed 31 -o "$a"
[ -f "$b" ] || "$v" gen --digits "$digits" --seed 32 -o "$b"
[ -f "$c" ] || "$v" mul "$a" "$b" -o "$c"
bytes=$(( $(stat -c %s "$a") + $(stat -c %s "$b") + $(stat -c %s "$c") ))
echo "# vastmul check throughput: $digits-digit operands, $(nproc) cores"
echo "- date: $(date -u), commit $(git rev-parse --short HEAD), files: $bytes bytes"
echo
echo "| run | seconds | GB/s |"
echo "|---|---|---|"
for i in $(seq 1 "$runs"); do
  t0=$(date +%s%N)
  "$v" check "$a" "$b" "$c" --seed "$i" > /dev/null
  t1=$(date +%s%N)
  python3 -c "s=($t1-$t0)/1e9; print(f'| $i | {s:.3f} | {$bytes/s/1e9:.2f} |')"
done
