#!/usr/bin/env bash
# bench-ooc.sh - the same product in RAM and out of core, side by side.
#
# Generates two decimal operands with `vastmul gen`, multiplies them once
# with the default (in-memory) plan and once under a memory budget that
# forces the out-of-core plan, and reports for each: wall time, peak RSS
# (from /usr/bin/time -v), the bytes the plan says each pass reads and
# writes, and whether both products have the same BLAKE3.
#
# Usage: scripts/bench-ooc.sh [DIGITS] [BUDGET]
#   DIGITS  digits per operand (default 100000000)
#   BUDGET  --memory for the out-of-core run (default 256MiB)
# Environment: OOC_DIR (data and scratch folder, default target/ooc),
#   OOC_THREADS (default: all cores), OOC_SKIP_RAM=1 (out-of-core run only,
#   for operands whose in-memory plan does not fit this machine),
#   OOC_CHECKPOINT_COST=0 (skip the second out-of-core run without
#   checkpoints that measures their cost), OOC_PAIRS=N (N more alternating
#   runs with and without checkpoints, for a steadier figure).
# Also measures the scratch disk's sequential bandwidth with dd (O_DIRECT),
# samples the scratch file system's disk use during the out-of-core run
# and checks its product with `vastmul check`.
# Disk: two operands of DIGITS bytes, two products of 2*DIGITS bytes, and
# scratch of about 4 * 8 * (next power of two above 2*DIGITS/19) bytes.
set -euo pipefail
cd "$(dirname "$0")/.."
digits=${1:-100000000}
budget=${2:-256MiB}
dir=${OOC_DIR:-target/ooc}
threads=${OOC_THREADS:-$(nproc)}
mkdir -p "$dir/scratch"
rm -f "$dir"/pair-*.time
cargo build --release --quiet
v=target/release/vastmul
[ -x /usr/bin/time ] || { echo "needs GNU time at /usr/bin/time (apt-get install time)"; exit 2; }

for seed in 11 12; do
  f="$dir/op-$digits-$seed.txt"
  [ -f "$f" ] || { echo "generating $f"; "$v" gen --digits "$digits" --seed "$seed" -o "$f"; }
done
a="$dir/op-$digits-11.txt"; b="$dir/op-$digits-12.txt"

run() { # label, output, extra args...
  local label=$1 out=$2; shift 2
  local log="$dir/time-$label.log"
  rm -f "$out"
  /usr/bin/time -v "$v" mul "$a" "$b" -o "$out" --threads "$threads" --json "$@" 2> "$log" > "$dir/report-$label.json" || { cat "$log"; exit 1; }
  local wall rss
  wall=$(grep "Elapsed (wall clock)" "$log" | awk '{print $NF}')
  rss=$(grep "Maximum resident set size" "$log" | awk '{print $NF}')
  echo "| $label | $wall | $((rss / 1024)) | $(b3sum_of "$out") |"
}
# The file's own BLAKE3 (info also prints the manifest's, which repeats it).
b3sum_of() { "$v" info "$1" --json | grep -m1 '"blake3"' | cut -d'"' -f4 | cut -c1-16; }

echo "# out-of-core benchmark: two $digits-digit decimal operands, $threads threads"
echo "- date: $(date -u), $(uname -m), $(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2 | xargs), $(nproc) cores, $(free -g | awk '/Mem:/{print $2}') GiB RAM"
echo "- vastmul commit $(git rev-parse --short HEAD)"
echo
echo "## Plan under --memory $budget"
"$v" plan "$a" "$b" --memory "$budget" --threads "$threads" --json > "$dir/plan.json"
python3 - "$dir/plan.json" <<'PY'
import json, sys
p = json.load(open(sys.argv[1]))
print(f"- algorithm: {p['algorithm']}")
print(f"- RAM planned: {p['ram_bytes'] / 2**20:.1f} MiB, scratch: {p['scratch_bytes'] / 2**20:.1f} MiB")
print("| pass | reads MiB | writes MiB |\n|---|---|---|")
for s in p['passes']:
    print(f"| {s['name']} | {s['read_bytes'] / 2**20:.1f} | {s['write_bytes'] / 2**20:.1f} |")
PY
# The scratch disk's sequential bandwidth, as dd sees it with the page
# cache bypassed (O_DIRECT), 1 GiB each way: the bar for disk-bound passes.
ddf="$dir/scratch/dd-bandwidth.bin"
dd_rate() { LC_ALL=C dd "$@" bs=16M count=64 2>&1 | awk '/copied/ {print $(NF-1), $NF}'; }
echo
echo "## Disk bandwidth (dd, O_DIRECT, 1 GiB)"
echo "- sequential write: $(dd_rate if=/dev/zero of="$ddf" oflag=direct conv=fsync)"
echo "- sequential read: $(dd_rate if="$ddf" of=/dev/null iflag=direct)"
rm -f "$ddf"
echo
echo "| run | wall (h:mm:ss) | peak RSS MiB | product BLAKE3 (prefix) |"
echo "|---|---|---|---|"
[ "${OOC_SKIP_RAM:-0}" = 1 ] || run in-memory "$dir/product-ram.txt"
# Disk use of the scratch file system, sampled every second during the
# out-of-core run, against the plan's scratch figure.
used() { df -B1 --output=used "$dir/scratch" | tail -1; }
rm -f "$dir/product-ooc.txt"
base=$(used)
( peak=$base; while sleep 1; do u=$(used); [ "$u" -gt "$peak" ] && peak=$u; echo "$peak" > "$dir/disk-peak"; done ) &
sampler=$!
run "out-of-core-$budget" "$dir/product-ooc.txt" --memory "$budget" --scratch "$dir/scratch"
kill "$sampler" 2>/dev/null || true
# The same out-of-core run keeping no resumable state: what checkpoints
# (hashing every block, the journal, syncs, hashing the operands) cost.
# The machine is shared and noisy: OOC_PAIRS=N more checkpointed and plain
# runs alternate, and the cost is the ratio of the summed wall times.
pairs=${OOC_PAIRS:-0}
if [ "${OOC_CHECKPOINT_COST:-1}" = 1 ]; then
  run "out-of-core-$budget-no-checkpoint" "$dir/product-nock.txt" --memory "$budget" --scratch "$dir/scratch" --no-checkpoint
  cmp -s "$dir/product-ooc.txt" "$dir/product-nock.txt" || { echo "checkpointed and plain products differ"; exit 1; }
  rm -f "$dir/product-nock.txt"
  for i in $(seq 1 "$pairs"); do
    for mode in ck nock; do
      extra=(); [ $mode = nock ] && extra=(--no-checkpoint)
      rm -f "$dir/pair.txt"
      /usr/bin/time -f "%e" -o "$dir/pair-$mode-$i.time" "$v" mul "$a" "$b" -o "$dir/pair.txt" --threads "$threads" --memory "$budget" --scratch "$dir/scratch" "${extra[@]}" 2>/dev/null
    done
  done
  rm -f "$dir/pair.txt"
fi
peak=$(cat "$dir/disk-peak" 2>/dev/null || echo "$base")
python3 - "$dir/plan.json" "$base" "$peak" <<'PY'
import json, sys
p = json.load(open(sys.argv[1]))
base, peak = int(sys.argv[2]), int(sys.argv[3])
prod = 19 * p['product_limbs']
print(f"\n- disk: plan says {p['scratch_bytes'] / 2**20:.1f} MiB of scratch plus about "
      f"{prod / 2**20:.1f} MiB of product text; the file system's use peaked "
      f"{(peak - base) / 2**20:.1f} MiB above its level before the run (sampled every second)")
PY
python3 - "$dir" "$budget" <<'PY'
import sys
d, budget = sys.argv[1], sys.argv[2]
def wall(label):
    for line in open(f"{d}/time-{label}.log"):
        if "Elapsed (wall clock)" in line:
            parts = [float(x) for x in line.split()[-1].split(":")]
            return sum(p * 60 ** i for i, p in enumerate(reversed(parts)))
import glob
try:
    w, n = [wall(f"out-of-core-{budget}")], [wall(f"out-of-core-{budget}-no-checkpoint")]
    for path in sorted(glob.glob(f"{d}/pair-ck-*.time")):
        w.append(float(open(path).read().split()[-1]))
        n.append(float(open(path.replace("-ck-", "-nock-")).read().split()[-1]))
    print(f"\n- checkpoint cost: {len(w)} run(s) each, alternating; with checkpoints "
          f"{', '.join(f'{x:.2f}' for x in w)} s, without {', '.join(f'{x:.2f}' for x in n)} s: "
          f"{100 * (sum(w) / sum(n) - 1):+.1f}% of wall time")
except (FileNotFoundError, TypeError):
    pass
PY
echo
echo "## Passes: planned bytes, measured time, achieved MB/s (read + write)"
python3 - "$dir" "$dir"/report-*.json <<'PY'
import json, sys
for path in sys.argv[2:]:
    r = json.load(open(path))
    label = path.rsplit("report-", 1)[1][:-5]
    planned = {p["name"]: p for p in r["plan"]["passes"]}
    print(f"\n### {label}\n| pass | seconds | MB moved | MB/s |\n|---|---|---|---|")
    for t in r["passes"]:
        p = planned.get(t["name"])
        moved = (p["read_bytes"] + p["write_bytes"]) / 1e6 if p else float("nan")
        rate = moved / t["seconds"] if t["seconds"] > 0 else float("nan")
        print(f"| {t['name']} | {t['seconds']:.2f} | {moved:.0f} | {rate:.0f} |")
PY
echo
echo "## Verification"
t0=$(date +%s%N)
if "$v" check "$a" "$b" "$dir/product-ooc.txt"; then ok=passed; else ok=FAILED; fi
echo "- \`vastmul check\` (residues) on the out-of-core product: $ok in $(( ($(date +%s%N) - t0) / 1000000 )) ms"
[ "$ok" = passed ] || exit 1
if [ "${OOC_SKIP_RAM:-0}" != 1 ]; then
  if cmp -s "$dir/product-ram.txt" "$dir/product-ooc.txt"; then echo; echo "products identical: yes"; else echo; echo "products identical: NO"; exit 1; fi
fi
