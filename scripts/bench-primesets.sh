#!/usr/bin/env bash
# bench-primesets.sh - the same products on every kernel path, side by side.
#
# Multiplies each operand pair with VASTMUL_KERNEL set to each path this CPU
# runs (wide: three primes below 2^62, portable kernels; scalar, avx2,
# ifma: four primes below 2^50), at each thread count, in rotating order
# (the machine is shared and noisy), file to file with --json, and reports
# the best and median wall time per path, the ratio of each path's best to
# the wide path's best, the per-pass breakdown of the fastest path's best
# run, and whether every product is byte-identical (cmp).
#
# Usage: scripts/bench-primesets.sh [RUNS]   (default 3)
# Environment: PRIMESETS_DIR (default target/primesets-bench),
#   PRIMESETS_SPECS (default "hex:67108864 dec:40000000": radix and digits;
#   67108864 hex digits are 2^28 bits), PRIMESETS_THREADS (default "1 2"),
#   PRIMESETS_PATHS (default: every path the CPU runs, scalar excluded:
#   "wide avx2 ifma"), PRIMESETS_MEMORY (a --memory budget, default none).
set -euo pipefail
cd "$(dirname "$0")/.."
runs=${1:-3}
dir=${PRIMESETS_DIR:-target/primesets-bench}
specs=${PRIMESETS_SPECS:-"hex:67108864 dec:40000000"}
threads=${PRIMESETS_THREADS:-"1 2"}
mkdir -p "$dir"
cargo build --release --quiet
bin=target/release/vastmul
flags=" $(grep -m1 '^flags' /proc/cpuinfo 2>/dev/null | cut -d: -f2) "
has() { for f in "$@"; do [[ "$flags" == *" $f "* ]] || return 1; done; }
if [[ -n "${PRIMESETS_PATHS:-}" ]]; then
  read -r -a paths <<< "$PRIMESETS_PATHS"
else
  paths=(wide)
  has avx2 fma && paths+=(avx2)
  has avx512f avx512ifma avx512vl && paths+=(ifma)
fi
mem=(); [[ -n "${PRIMESETS_MEMORY:-}" ]] && mem=(--memory "$PRIMESETS_MEMORY")
echo "# kernel paths side by side, $(nproc) cores, $(date -u '+%Y-%m-%d %H:%M UTC')"
echo "# commit $(git rev-parse --short HEAD); $runs runs per path, rotating order; ${mem[*]:-in RAM}"
echo
echo "| operands | threads | path | best s | median s | best / wide best | same product |"
echo "|---|---|---|---|---|---|---|"
breakdowns=()
for spec in $specs; do
  IFS=: read -r radix digits <<< "$spec"
  a="$dir/a-$radix-$digits"; b="$dir/b-$radix-$digits"
  [[ -f "$a" ]] || "$bin" gen --radix "$radix" --digits "$digits" --seed 41 -o "$a" --quiet
  [[ -f "$b" ]] || "$bin" gen --radix "$radix" --digits "$digits" --seed 42 -o "$b" --quiet
  for t in $threads; do
    declare -A times=()
    for i in $(seq 1 "$runs"); do
      n=${#paths[@]}
      for j in $(seq 0 $((n - 1))); do
        k=${paths[$(((i + j) % n))]}
        VASTMUL_KERNEL=$k "$bin" mul "$a" "$b" -o "$dir/c-$k" --threads "$t" --force \
          --json --quiet > "$dir/report-$k-$t-$i.json"
        w=$(python3 -c "import json,sys; print(json.load(open(sys.argv[1]))['wall_seconds'])" \
          "$dir/report-$k-$t-$i.json")
        times[$k]="${times[$k]:-} $w"
      done
    done
    best_wide=$(tr ' ' '\n' <<< "${times[wide]:-}" | grep . | sort -g | head -1)
    fastest=""; fastest_s=""
    for k in "${paths[@]}"; do
      read -r best median <<< "$(tr ' ' '\n' <<< "${times[$k]}" | grep . | sort -g |
        awk '{v[NR]=$1} END {print v[1], v[int((NR+1)/2)]}')"
      same=yes; cmp -s "$dir/c-$k" "$dir/c-${paths[0]}" || same=NO
      ratio=-; [[ -n "$best_wide" ]] && ratio=$(awk -v x="$best" -v y="$best_wide" 'BEGIN {printf "%.3f", x / y}')
      echo "| $radix $digits digits | $t | $k | $best | $median | $ratio | $same |"
      if [[ -z "$fastest_s" ]] || awk -v x="$best" -v y="$fastest_s" 'BEGIN {exit !(x < y)}'; then
        fastest=$k; fastest_s=$best
      fi
    done
    # the pass breakdown of the fastest path's best run
    bestrun=$(for i in $(seq 1 "$runs"); do
      python3 -c "import json,sys; print(json.load(open(sys.argv[1]))['wall_seconds'], sys.argv[1])" \
        "$dir/report-$fastest-$t-$i.json"; done | sort -g | head -1 | cut -d' ' -f2)
    breakdowns+=("$(python3 - "$bestrun" "$radix $digits digits, $t threads, $fastest" <<'PY'
import json, sys
j = json.load(open(sys.argv[1]))
lines = [f"{sys.argv[2]}: wall {j['wall_seconds']:.3f} s, peak RSS {j['peak_rss_bytes'] / 2**20:.0f} MiB"]
for p in j['passes']:
    lines.append(f"  {p['seconds']:.3f} s  {p['name']}")
for key in ('open_seconds', 'identify_seconds', 'write_seconds', 'manifest_seconds'):
    if key in j:
        lines.append(f"  {j[key]:.3f} s  ({key})")
print("\n".join(lines))
PY
)")
    unset times
  done
done
echo
echo '```'
for b in "${breakdowns[@]}"; do echo "$b"; echo; done
echo '```'
