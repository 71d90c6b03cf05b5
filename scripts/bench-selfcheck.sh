#!/usr/bin/env bash
# bench-selfcheck.sh - what the self-check of `vastmul mul` costs.
#
# For each pair (decimal and hexadecimal operands from `vastmul gen`), runs
# `mul` RUNS times with the self-check and RUNS times with --no-self-check,
# in ABBA order (the first run of a pair is slower here whichever it is),
# and reports for both modes:
#   - work time: open + compute + self-check + write, without the manifest
#     (from the JSON report; the factors' residues are taken inside compute),
#   - user CPU seconds of the process (getrusage). The self-check is pure
#     arithmetic on data already in cache, so all it adds is user time.
#     Wall and system time here scatter by up to 0.7 s between identical
#     runs (the kernel zeroing and faulting in fresh pages in the first
#     passes), while user time stays within a few percent,
# each as the minimum and the median over the runs, and the self-check's
# cost as the ratio of the minima and of the medians.
# Also the product residue's own seconds and the manifest's share.
#
# With SELFCHECK_INSTRUCTIONS=1 it also counts the instructions each mode
# executes, under valgrind's cachegrind (about 50 times slower, but exact
# and untouched by the machine's noise): the self-check's share of the
# work without timing it.
#
# Usage: scripts/bench-selfcheck.sh [RUNS]   (default 8)
# Environment: SELFCHECK_DIR (default target/selfcheck-bench),
#              SELFCHECK_SPECS (default "dec:40000000 dec:100000000 hex:67108864").
set -euo pipefail
cd "$(dirname "$0")/.."
runs=${1:-8}
dir=${SELFCHECK_DIR:-target/selfcheck-bench}
specs=${SELFCHECK_SPECS:-"dec:40000000 dec:100000000 hex:67108864"}
mkdir -p "$dir"
cargo build --release --quiet
v=target/release/vastmul
echo "# self-check cost, $(nproc) cores, $(date -u), commit $(git rev-parse --short HEAD), $runs runs per mode"
echo
echo "| operands | work s with (min / median) | work s without (min / median) | cost by min | cost by median | user s with (min / median) | user s without (min / median) | user cost by min | user cost by median | product residue s (median) | manifest share |"
echo "|---|---|---|---|---|---|---|---|---|---|---|"
for spec in $specs; do
  radix=${spec%%:*}; digits=${spec##*:}
  a="$dir/a-$radix-$digits"; b="$dir/b-$radix-$digits"
  [ -f "$a" ] || "$v" gen --radix "$radix" --digits "$digits" --seed 41 -o "$a"
  [ -f "$b" ] || "$v" gen --radix "$radix" --digits "$digits" --seed 42 -o "$b"
  python3 - "$v" "$a" "$b" "$dir/c" "$runs" "$radix $digits digits" <<'PY'
import json, os, resource, statistics, subprocess, sys
v, a, b, c, runs, label = sys.argv[1:7]
runs = int(runs)
res = {"with": [], "without": []}
def cpu():
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime
for i in range(runs):
    order = ["with", "without"] if i % 2 == 0 else ["without", "with"]
    for mode in order:
        if os.path.exists(c): os.remove(c)
        m = c + ".vastmul.json"
        if os.path.exists(m): os.remove(m)
        args = [v, "mul", a, b, "-o", c, "--json"] + (["--no-self-check"] if mode == "without" else [])
        t0 = cpu()
        out = subprocess.run(args, check=True, capture_output=True, text=True).stdout
        used = cpu() - t0
        r = json.loads(out)
        sc = r["self_check"]["seconds"] if r.get("self_check") else 0.0
        work = r["open_seconds"] + r["compute_seconds"] + sc + r["write_seconds"] - r["manifest_seconds"]
        res[mode].append((work, used, sc, r["manifest_seconds"]))
def col(mode, k): return [x[k] for x in res[mode]]
def mm(xs): return f"{min(xs):.3f} / {statistics.median(xs):.3f}"
def cost(f, k): return f"{100 * (f(col('with', k)) / f(col('without', k)) - 1):+.1f}%"
med = statistics.median
share = 100 * sum(col("with", 3)) / sum(col("with", 0))
print(f"| {label} | {mm(col('with', 0))} | {mm(col('without', 0))} | {cost(min, 0)} | {cost(med, 0)} | "
      f"{mm(col('with', 1))} | {mm(col('without', 1))} | {cost(min, 1)} | {cost(med, 1)} | "
      f"{med(col('with', 2)):.3f} | {share:.1f}% |", flush=True)
PY
done
if [ "${SELFCHECK_INSTRUCTIONS:-0}" = 1 ]; then
  echo
  echo "| operands | instructions with self-check | without | self-check's share |"
  echo "|---|---|---|---|"
  for spec in $specs; do
    radix=${spec%%:*}; digits=${spec##*:}
    a="$dir/a-$radix-$digits"; b="$dir/b-$radix-$digits"
    count() {
      rm -f "$dir/c" "$dir/c.vastmul.json"
      valgrind --tool=cachegrind --cache-sim=no --cachegrind-out-file=/dev/null \
        "$v" mul "$a" "$b" -o "$dir/c" --quiet "$@" 2>&1 |
        sed -n 's/.*I *refs: *//p' | tr -d ,
    }
    with=$(count); without=$(count --no-self-check)
    python3 -c "import sys; w, n = int(sys.argv[1]), int(sys.argv[2]); print(f'| $radix $digits digits | {w:,} | {n:,} | {100 * (w / n - 1):+.2f}% |')" "$with" "$without"
  done
fi
rm -f "$dir/c" "$dir/c.vastmul.json"
