#!/usr/bin/env bash
# test-kernels.sh - the engine's test suites again, once per kernel path.
#
# `cargo test` runs every suite on the prime set and kernels vastmul picks
# for this CPU (four primes below 2^50 with AVX-512 IFMA or AVX2 where the
# CPU has them). This script reruns the suites that multiply through the
# engine (the library's unit tests, the engine against num-bigint, pieces,
# out of core and resume suites) with VASTMUL_KERNEL forcing each path in
# turn:
#   wide    three primes below 2^62, portable scalar kernels
#   scalar  four primes below 2^50, portable scalar kernels
#   avx2    four primes below 2^50, AVX2 and FMA
#   ifma    four primes below 2^50, AVX-512 IFMA
# A path the CPU cannot run is reported as skipped, never as passed. The
# path vastmul picks by itself (ifma, else avx2, else wide) is left out of
# the default list, since `cargo test` has just run everything on it; name
# it to run it anyway.
#
# Usage: scripts/test-kernels.sh [path...]     (default: the other paths)
# Exit status: 0 when every path run passed; non-zero on the first failure.

set -euo pipefail
cd "$(dirname "$0")/.."

flags=" $(grep -m1 '^flags' /proc/cpuinfo 2>/dev/null | cut -d: -f2) "
has() {
    for f in "$@"; do
        [[ "$flags" == *" $f "* ]] || return 1
    done
}

if has avx512f avx512ifma avx512vl; then
    detected=ifma
elif has avx2 fma; then
    detected=avx2
else
    detected=wide
fi
paths=("$@")
if [[ ${#paths[@]} -eq 0 ]]; then
    for k in wide scalar avx2 ifma; do
        if [[ $k == "$detected" ]]; then
            echo "test-kernels: $k is the detected path, run by cargo test"
        else
            paths+=("$k")
        fi
    done
fi
for k in "${paths[@]}"; do
    case "$k" in
        wide | scalar) ok=1 ;;
        avx2) has avx2 fma && ok=1 || ok=0 ;;
        ifma) has avx512f avx512ifma avx512vl && ok=1 || ok=0 ;;
        *)
            echo "test-kernels: unknown path $k (wide, scalar, avx2 or ifma)" >&2
            exit 2
            ;;
    esac
    if [[ $ok == 0 ]]; then
        echo "test-kernels: $k SKIPPED (this CPU lacks it)"
        continue
    fi
    echo "test-kernels: $k"
    start=$(date +%s)
    VASTMUL_KERNEL=$k cargo test --quiet --lib --test engine_vs_reference \
        --test out_of_core --test pieces --test resume
    echo "test-kernels: $k passed in $(($(date +%s) - start)) s"
done
