#!/usr/bin/env bash
# compare-peers.sh - time vastmul against GMP (gmpy2) and FLINT (python-flint)
# on the same operands, check vastmul's products, and write a markdown report.
#
# What it does
#   1. Creates (or reuses) a virtual environment at target/peers/venv and
#      installs the pinned peer packages below into it; prints their versions.
#   2. Builds vastmul with `cargo build --release` (a no-op when up to date).
#   3. Runs scripts/peers.py: binary cases 2^20..2^30 bits and decimal cases
#      10^6..10^8 digits, vastmul at 1 and 2 threads, gmpy2, FLINT at 1 and 2
#      threads; every vastmul output is compared byte for byte with the peers'
#      product. The report goes to target/peers/results-YYYYMMDD-HHMMSS.md
#      and to standard output. See scripts/peers.py and
#      scripts/README-peers.md for what each figure measures.
#
# How to run (from anywhere)
#   scripts/compare-peers.sh                 # full run (about 15 min on 2 cores)
#   PEERS_QUICK=1 scripts/compare-peers.sh   # smoke run, up to 2^24 bits / 10^7 digits
#
# Environment knobs
#   PEERS_MAX_BITS      largest binary size, power of two (default 30)
#   PEERS_MAX_DIGITS    largest decimal size in digits (default 100000000)
#   PEERS_QUICK=1       caps at 2^24 bits and 10^7 digits
#   PEERS_REPEAT        runs per measurement, best taken (default 3; 1 from 2^30 bits)
#   PEERS_THREADS       thread counts (default "1 2")
#   PEERS_ONLY          "bin" or "dec" for one family only
#   PEERS_VASTMUL       vastmul binary to test (default target/release/vastmul;
#                       when set, no build is done)
#   PEERS_BUILD=0       do not run cargo build (the binary must exist)
#   PEERS_DATA          operand folder (default target/peers/data)
#   PEERS_REGEN=1       regenerate operand files
#   PEERS_KEEP_OUTPUT=1 keep vastmul's product files
#   PEERS_TIMEOUT       seconds before one vastmul run is killed (0: no limit)
#
# Disk: operand files are kept in target/peers/data and reused, about 1 GB
# for all sizes; product files (up to 512 MiB each) are deleted once checked.
# Memory: the largest cases need a few GiB on the Python side besides
# vastmul's own; a 24 GiB machine is enough.
#
# Exit status: 0 all checks passed; 1 a MISMATCH or a failed vastmul run
# (report still written); 2 setup error.

set -euo pipefail

ROOT="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
PEERS_DIR="$ROOT/target/peers"
VENV="$PEERS_DIR/venv"
PY="$VENV/bin/python"

# Pinned peer versions.
GMPY2_VERSION="2.3.2"
PYTHON_FLINT_VERSION="0.9.0"

mkdir -p "$PEERS_DIR"

if [[ ! -x "$PY" ]]; then
    echo "peers: creating virtual environment $VENV"
    python3 -m venv "$VENV"
fi

have_pins() {
    "$PY" - "$GMPY2_VERSION" "$PYTHON_FLINT_VERSION" <<'EOF' 2>/dev/null
import sys
from importlib.metadata import version
sys.exit(0 if (version("gmpy2"), version("python-flint")) == tuple(sys.argv[1:3]) else 1)
EOF
}

if ! have_pins; then
    echo "peers: installing gmpy2==$GMPY2_VERSION python-flint==$PYTHON_FLINT_VERSION"
    "$PY" -m pip install --disable-pip-version-check --quiet \
        "gmpy2==$GMPY2_VERSION" "python-flint==$PYTHON_FLINT_VERSION"
fi
"$PY" -c 'import gmpy2, flint
print("peers: gmpy2", gmpy2.version(), "(" + gmpy2.mp_version() + "),",
      "python-flint", flint.__version__, "(FLINT " + flint.__FLINT_VERSION__ + ")")'

if [[ -z "${PEERS_VASTMUL:-}" ]]; then
    if [[ "${PEERS_BUILD:-1}" != "0" ]]; then
        echo "peers: cargo build --release"
        (cd "$ROOT" && cargo build --release)
    fi
    if [[ ! -x "$ROOT/target/release/vastmul" ]]; then
        echo "peers: no binary at $ROOT/target/release/vastmul" >&2
        exit 2
    fi
fi

cd "$ROOT"
exec "$PY" "$ROOT/scripts/peers.py" "$@"
