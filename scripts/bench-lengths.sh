#!/usr/bin/env bash
# bench-lengths.sh - what transform lengths of 3*2^k save, against a build
# that only knows powers of two.
#
# Builds the baseline revision (default 11cf272, the last commit with
# power-of-two lengths only) into target/baseline-lengths through a git
# worktree, then multiplies each pair with both binaries in alternating
# order (the machine is shared and noisy), in RAM and under --memory, and
# reports wall time, peak RSS (/usr/bin/time), planned scratch and the
# transform shape of each, and whether the products are identical (cmp).
#
# Usage: scripts/bench-lengths.sh [RUNS]   (default 3)
# Environment: LENGTHS_BASE (revision), LENGTHS_DIR (default
#              target/lengths-bench), LENGTHS_SPECS (default
#              "dec:100000000:ram dec:100000000:64MiB hex:80000000:ram").
set -euo pipefail
cd "$(dirname "$0")/.."
runs=${1:-3}
base=${LENGTHS_BASE:-11cf272}
dir=${LENGTHS_DIR:-target/lengths-bench}
specs=${LENGTHS_SPECS:-"dec:100000000:ram dec:100000000:64MiB hex:80000000:ram"}
mkdir -p "$dir"
cargo build --release --quiet
new=target/release/vastmul
wt=target/baseline-lengths-src
if [ ! -x target/baseline-lengths/release/vastmul ]; then
  rm -rf "$wt"; git worktree prune
  git worktree add --detach "$wt" "$base" >/dev/null
  (cd "$wt" && CARGO_TARGET_DIR=../baseline-lengths cargo build --release --quiet)
  git worktree remove --force "$wt"
fi
old=target/baseline-lengths/release/vastmul
echo "# transform lengths 3*2^k against powers of two, $(nproc) cores, $(date -u)"
echo "# new: commit $(git rev-parse --short HEAD); baseline: $base; $runs runs each, alternating"
echo
echo "| operands | budget | baseline s | new s | new/baseline (sum) | baseline shape, scratch | new shape, scratch | peak RSS baseline / new | same product |"
echo "|---|---|---|---|---|---|---|---|---|"
for spec in $specs; do
  IFS=: read -r radix digits budget <<< "$spec"
  a="$dir/a-$radix-$digits"; b="$dir/b-$radix-$digits"
  [ -f "$a" ] || "$new" gen --radix "$radix" --digits "$digits" --seed 31 -o "$a"
  [ -f "$b" ] || "$new" gen --radix "$radix" --digits "$digits" --seed 32 -o "$b"
  mem=(); [ "$budget" = ram ] || mem=(--memory "$budget")
  shape() {
    "$1" plan "$a" "$b" "${mem[@]}" --json | python3 -c "
import json, sys
p = json.load(sys.stdin); s = p['algorithm'].get('shape', {})
print(f\"{s.get('rows')}x{s.get('cols')}, {p['scratch_bytes'] / 2**20:.0f} MiB\")"
  }
  t_old=(); t_new=(); r_old=0; r_new=0
  for i in $(seq 1 "$runs"); do
    order="old new"; [ $((i % 2)) = 0 ] && order="new old"
    for which in $order; do
      bin=$old; [ $which = new ] && bin=$new
      rm -f "$dir/c-$which" "$dir/c-$which.vastmul.json"
      /usr/bin/time -f "%e %M" -o "$dir/time" "$bin" mul "$a" "$b" -o "$dir/c-$which" --quiet "${mem[@]}"
      read -r secs kb < "$dir/time"
      if [ $which = old ]; then t_old+=("$secs"); r_old=$kb; else t_new+=("$secs"); r_new=$kb; fi
    done
  done
  same=no; cmp -s "$dir/c-old" "$dir/c-new" && same=yes
  python3 - "$radix $digits digits" "$budget" "${t_old[*]}" "${t_new[*]}" "$(shape "$old")" "$(shape "$new")" "$r_old" "$r_new" "$same" <<'PY'
import sys
label, budget, old, new, so, sn, ro, rn, same = sys.argv[1:]
o = [float(x) for x in old.split()]; n = [float(x) for x in new.split()]
print(f"| {label} | {budget} | {', '.join(f'{x:.2f}' for x in o)} | {', '.join(f'{x:.2f}' for x in n)} | "
      f"{sum(n) / sum(o):.3f} | {so} | {sn} | {int(ro) // 1024} / {int(rn) // 1024} MiB | {same} |")
PY
done
rm -f "$dir"/c-old* "$dir"/c-new*
