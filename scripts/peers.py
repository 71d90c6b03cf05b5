#!/usr/bin/env python3
"""Peer comparison: vastmul against GMP (gmpy2) and FLINT (python-flint).

What it does
    On one set of operands per size, it times
      * vastmul file to file (`vastmul mul A B -o C --threads T`), wall clock
        around the whole process (reading the inputs, multiplying, writing
        the output), best of K runs, with the process's peak RSS (from GNU
        time at /usr/bin/time when present);
      * gmpy2 and FLINT in memory on the same operands:
          binary cases  - multiply only (operands parsed beforehand, untimed);
          decimal cases - parse both operands, multiply, print the product
                          to a decimal string; each part and the total.
    It checks every vastmul output byte for byte against the peers' product
    (lowercase hex or decimal, no leading zeros, one trailing newline) and
    checks FLINT's product against gmpy2's. It prints a markdown report and
    writes it to target/peers/results-YYYYMMDD-HHMMSS.md (UTC time).

    Binary cases: 2^20, 2^22, ..., 2^30-bit operands (hex files of bits/4
    digits). Decimal cases: 10^6, 4*10^6, 10^7, 4*10^7, 10^8-digit operands.
    Operands come from `vastmul gen` with fixed seeds, so every run with the
    same vastmul generator multiplies the same numbers.

    gmpy2 is single-threaded: it is measured once per size and its figure
    stands on every thread row. FLINT is measured with flint.ctx.threads = T.

How to run
    Normally through scripts/compare-peers.sh, which prepares the virtual
    environment and the release build. Directly:
        target/peers/venv/bin/python scripts/peers.py
    Exit status: 0 when every check passed, 1 on any MISMATCH or failed
    vastmul run (the report is still written), 2 on a setup error.

Environment knobs
    PEERS_MAX_BITS     largest binary size as a power of two (default 30)
    PEERS_MAX_DIGITS   largest decimal size in digits (default 100000000)
    PEERS_QUICK=1      smoke run: caps at 2^24 bits and 10^7 digits
    PEERS_REPEAT       runs per measurement, best taken (default 3, and 1
                       for operands of 2^30 bits or more)
    PEERS_THREADS      thread counts to measure (default "1 2")
    PEERS_ONLY         "bin" or "dec" to run one family only (default both)
    PEERS_VASTMUL      vastmul binary (default target/release/vastmul)
    PEERS_DATA         operand folder (default target/peers/data)
    PEERS_REGEN=1      regenerate operand files even when present
    PEERS_KEEP_OUTPUT=1  keep vastmul's product files after checking them
    PEERS_TIMEOUT      seconds before a vastmul run is killed (default 0,
                       no limit)

Disk and memory
    Operand files are kept in the data folder and reused when their name
    (radix, digits, seed) matches and their length is right: all sizes
    together take about 1 GB (two 256 MiB hex files at 2^30 bits, two
    100 MB decimal files at 10^8 digits). Product files (up to 512 MiB) are
    written next to them and deleted once checked. The Python side holds at
    most a few copies of one case's numbers and strings: under 3 GiB at the
    largest sizes. vastmul runs before the peers load anything.
"""

import datetime
import math
import os
import platform
import subprocess
import sys
import tempfile
import threading
import time

import flint
import gmpy2

REPO = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
PEERS_DIR = os.path.join(REPO, "target", "peers")

BIN_EXPONENTS = [20, 22, 24, 26, 28, 30]
DEC_DIGITS = [10**6, 4 * 10**6, 10**7, 4 * 10**7, 10**8]
# Fixed seeds: operand A of a case uses SEED_A + k, operand B uses SEED_B + k,
# k being the bit exponent (binary) or the digit count's index (decimal).
BIN_SEED_A, BIN_SEED_B = 1000, 2000
DEC_SEED_A, DEC_SEED_B = 3000, 4000
SINGLE_RUN_BITS = 2**30
CHUNK = 1 << 26


def fail_setup(msg):
    print(f"peers: {msg}", file=sys.stderr)
    sys.exit(2)


def env_int(name, default):
    raw = os.environ.get(name, "").strip()
    if not raw:
        return default
    try:
        return int(raw)
    except ValueError:
        fail_setup(f"{name}={raw!r} is not an integer")


class Config:
    def __init__(self):
        self.quick = os.environ.get("PEERS_QUICK", "") == "1"
        self.max_bits = env_int("PEERS_MAX_BITS", 30)
        self.max_digits = env_int("PEERS_MAX_DIGITS", 10**8)
        if self.quick:
            self.max_bits = min(self.max_bits, 24)
            self.max_digits = min(self.max_digits, 10**7)
        self.repeat = env_int("PEERS_REPEAT", 0)
        if self.repeat < 0:
            fail_setup("PEERS_REPEAT must be positive")
        threads = os.environ.get("PEERS_THREADS", "1 2").split()
        try:
            self.threads = [int(t) for t in threads]
        except ValueError:
            fail_setup(f"PEERS_THREADS={threads!r} must be integers")
        if not self.threads or min(self.threads) < 1:
            fail_setup("PEERS_THREADS needs at least one count >= 1")
        only = os.environ.get("PEERS_ONLY", "").strip()
        if only not in ("", "bin", "dec"):
            fail_setup("PEERS_ONLY must be 'bin' or 'dec'")
        self.run_bin = only in ("", "bin")
        self.run_dec = only in ("", "dec")
        self.vastmul = os.environ.get("PEERS_VASTMUL") or os.path.join(
            REPO, "target", "release", "vastmul")
        self.data = os.environ.get("PEERS_DATA") or os.path.join(PEERS_DIR, "data")
        self.regen = os.environ.get("PEERS_REGEN", "") == "1"
        self.keep_output = os.environ.get("PEERS_KEEP_OUTPUT", "") == "1"
        self.timeout = env_int("PEERS_TIMEOUT", 0)

    def reps(self, bits):
        if self.repeat:
            return self.repeat
        return 1 if bits >= SINGLE_RUN_BITS else 3


# ----------------------------------------------------------------- helpers

def fmt_s(x):
    if x is None:
        return "n/a"
    if x >= 100:
        return f"{x:.1f}"
    if x >= 1:
        return f"{x:.3f}"
    return f"{x:.4f}"


def fmt_ratio(num, den):
    if num is None or den is None or den <= 0:
        return "n/a"
    return f"{num / den:.3g}"


def fmt_mib(kib):
    return "n/a" if kib is None else f"{kib / 1024:.0f}"


def fmt_digits(d):
    for m in (1, 2, 4, 5):
        for e in range(0, 20):
            if m * 10**e == d:
                return f"10^{e}" if m == 1 else f"{m}·10^{e}"
    return str(d)


def log(msg):
    print(msg, flush=True)


def best_of(reps, fn):
    """Run fn() reps times; return (best seconds, all seconds, last result).

    The previous result is dropped before each run so that at most one
    product is alive at a time."""
    times, res = [], None
    for _ in range(reps):
        res = None
        t0 = time.perf_counter()
        res = fn()
        times.append(time.perf_counter() - t0)
    return min(times), times, res


def read_text(path):
    with open(path, "r", encoding="ascii", newline="") as f:
        return f.read()


def compare_file_with(path, expected):
    """Byte-compare a product file with expected text plus one newline.

    Returns (ok, reason). Works in chunks so no second full copy is made."""
    try:
        size = os.path.getsize(path)
    except OSError as e:
        return False, f"cannot read output: {e}"
    if size != len(expected) + 1:
        return False, (f"output has {size} bytes, expected {len(expected) + 1}"
                       f" ({len(expected)} digits and a newline)")
    with open(path, "rb") as f:
        pos = 0
        while pos < len(expected):
            want = expected[pos:pos + CHUNK].encode("ascii")
            got = f.read(len(want))
            if got != want:
                at = next((i for i in range(len(want))
                           if i >= len(got) or got[i] != want[i]), 0)
                return False, f"first difference at byte {pos + at}"
            pos += len(want)
        if f.read(1) != b"\n":
            return False, "output does not end with a single newline"
    return True, ""


# ----------------------------------------------------------------- vastmul

class VastmulError(Exception):
    pass


GNU_TIME = "/usr/bin/time"


def have_gnu_time():
    try:
        r = subprocess.run([GNU_TIME, "-f", "%M", "true"], capture_output=True,
                           text=True, timeout=10)
    except (OSError, subprocess.SubprocessError):
        return False
    return r.returncode == 0 and r.stderr.strip().isdigit()


USE_GNU_TIME = have_gnu_time()


def run_process(argv, timeout):
    """Run argv; return (seconds, peak RSS KiB or None). Raises VastmulError.

    Wall time is taken here around the whole process. Peak RSS comes from
    GNU time, which forks the command from its own small process: a
    command started straight from this (large) Python process would have
    Python's own resident size counted in its ru_maxrss."""
    with tempfile.TemporaryFile() as err, \
            tempfile.NamedTemporaryFile("r", suffix=".rss") as rss:
        cmd = ([GNU_TIME, "-f", "%M", "-o", rss.name] + argv
               if USE_GNU_TIME else argv)
        killed = []

        def kill():
            killed.append(True)
            try:
                os.killpg(p.pid, 9)
            except ProcessLookupError:
                pass

        t0 = time.perf_counter()
        p = subprocess.Popen(cmd, stdin=subprocess.DEVNULL,
                             stdout=subprocess.DEVNULL, stderr=err,
                             start_new_session=True)
        timer = threading.Timer(timeout, kill) if timeout > 0 else None
        if timer:
            timer.start()
        try:
            rc = p.wait()
        finally:
            if timer:
                timer.cancel()
        dt = time.perf_counter() - t0
        if rc != 0:
            err.seek(0)
            tail = err.read()[-2000:].decode("utf-8", "replace").strip()
            why = (f"killed after {timeout} s (PEERS_TIMEOUT)" if killed
                   else f"exit {rc}")
            raise VastmulError(f"{' '.join(argv)}: {why}\n{tail}")
        kib = None
        if USE_GNU_TIME:
            lines = rss.read().split()
            if lines and lines[-1].isdigit():
                kib = int(lines[-1])
        return dt, kib


def ensure_operand(cfg, radix, digits, seed):
    """Return the path of a vastmul-generated operand, generating if needed."""
    os.makedirs(cfg.data, exist_ok=True)
    path = os.path.join(cfg.data, f"{radix}-{digits}d-seed{seed}.txt")
    if not cfg.regen and valid_operand(path, digits):
        return path
    tmp = path + ".part"
    if os.path.exists(tmp):
        os.remove(tmp)
    log(f"  generating {os.path.basename(path)}")
    run_process([cfg.vastmul, "gen", "--digits", str(digits), "--seed", str(seed),
                 "--radix", radix, "-o", tmp, "--force"], cfg.timeout)
    if not valid_operand(tmp, digits):
        raise VastmulError(f"vastmul gen wrote {tmp} with the wrong shape "
                           f"(expected {digits} digits, non-zero first digit, "
                           f"one trailing newline)")
    os.replace(tmp, path)
    return path


def valid_operand(path, digits):
    try:
        if os.path.getsize(path) != digits + 1:
            return False
        with open(path, "rb") as f:
            first = f.read(1)
            f.seek(-1, os.SEEK_END)
            last = f.read(1)
    except OSError:
        return False
    return first not in (b"0", b"") and last == b"\n"


def time_vastmul(cfg, a, b, out_prefix, bits, label, results, failures):
    """Time vastmul for each thread count; fills results[t] with a dict."""
    for t in cfg.threads:
        out = f"{out_prefix}-t{t}.txt"
        reps = cfg.reps(bits)
        times, rss = [], []
        try:
            for _ in range(reps):
                if os.path.exists(out):
                    os.remove(out)
                dt, kib = run_process([cfg.vastmul, "mul", a, b, "-o", out,
                                       "--threads", str(t), "--force"], cfg.timeout)
                times.append(dt)
                rss.append(kib)
        except VastmulError as e:
            log(f"  vastmul t={t}: FAILED\n{e}")
            failures.append(f"{label} t={t}: vastmul failed")
            results[t] = {"s": None, "times": times, "rss": None, "out": None,
                          "check": "FAIL"}
            continue
        rss = [x for x in rss if x is not None]
        results[t] = {"s": min(times), "times": times, "rss": max(rss) if rss else None,
                      "out": out, "check": None}
        log(f"  vastmul t={t}: {fmt_s(min(times))} s (runs: "
            f"{', '.join(fmt_s(x) for x in times)}), peak RSS "
            f"{fmt_mib(results[t]['rss'])} MiB")


def check_vastmul(cfg, results, expected, label, failures):
    for t in cfg.threads:
        r = results[t]
        if r["out"] is None:
            continue
        ok, why = compare_file_with(r["out"], expected)
        r["check"] = "OK" if ok else "MISMATCH"
        log(f"  check vastmul t={t}: {r['check']}" + ("" if ok else f" ({why})"))
        if not ok:
            failures.append(f"{label} t={t}: vastmul MISMATCH ({why})")
        if not cfg.keep_output:
            os.remove(r["out"])


# ----------------------------------------------------------------- cases

def binary_case(cfg, e, failures):
    bits = 2**e
    digits = bits // 4
    label = f"2^{e} bits"
    log(f"\n[bin] {label} ({digits} hex digits)")
    a_path = ensure_operand(cfg, "hex", digits, BIN_SEED_A + e)
    b_path = ensure_operand(cfg, "hex", digits, BIN_SEED_B + e)
    reps = cfg.reps(bits)

    vast = {}
    time_vastmul(cfg, a_path, b_path, os.path.join(cfg.data, f"out-bin-{e}"),
                 bits, f"bin {label}", vast, failures)

    a = gmpy2.mpz(read_text(a_path), 16)
    b = gmpy2.mpz(read_text(b_path), 16)
    g_s, g_times, g_prod = best_of(reps, lambda: a * b)
    log(f"  gmpy2 mul: {fmt_s(g_s)} s (runs: {', '.join(fmt_s(x) for x in g_times)})")

    fa = flint.fmpz(int(a))
    fb = flint.fmpz(int(b))
    del a, b
    fl = {}
    for t in cfg.threads:
        flint.ctx.threads = t
        f_s, f_times, f_prod = best_of(reps, lambda: fa * fb)
        flint.ctx.threads = 1
        same = gmpy2.mpz(int(f_prod)) == g_prod
        del f_prod
        fl[t] = {"s": f_s, "times": f_times, "check": "OK" if same else "MISMATCH"}
        log(f"  FLINT mul t={t}: {fmt_s(f_s)} s (runs: "
            f"{', '.join(fmt_s(x) for x in f_times)}), vs gmpy2: {fl[t]['check']}")
        if not same:
            failures.append(f"bin {label} t={t}: FLINT and gmpy2 products differ")
    del fa, fb

    expected = g_prod.digits(16)
    del g_prod
    check_vastmul(cfg, vast, expected, f"bin {label}", failures)
    del expected
    return {"family": "bin", "e": e, "bits": bits, "label": label,
            "reps": reps, "vast": vast, "gmpy2": {"s": g_s, "times": g_times},
            "flint": fl}


def decimal_case(cfg, idx, digits, failures):
    bits = math.ceil(digits * math.log2(10))
    label = f"{fmt_digits(digits)} digits"
    log(f"\n[dec] {label}")
    a_path = ensure_operand(cfg, "dec", digits, DEC_SEED_A + idx)
    b_path = ensure_operand(cfg, "dec", digits, DEC_SEED_B + idx)
    reps = cfg.reps(bits)

    vast = {}
    time_vastmul(cfg, a_path, b_path, os.path.join(cfg.data, f"out-dec-{digits}"),
                 bits, f"dec {label}", vast, failures)

    sa = read_text(a_path)
    sb = read_text(b_path)

    def pipeline(parse, threads=None):
        """parse both, multiply, print; best rep by total, with its parts."""
        best, printed, all_totals = None, None, []
        for _ in range(reps):
            printed = None
            if threads is not None:
                flint.ctx.threads = threads
            t0 = time.perf_counter()
            x = parse(sa)
            y = parse(sb)
            t1 = time.perf_counter()
            p = x * y
            t2 = time.perf_counter()
            del x, y
            printed = str(p)
            t3 = time.perf_counter()
            del p
            if threads is not None:
                flint.ctx.threads = 1
            parts = {"parse": t1 - t0, "mul": t2 - t1, "print": t3 - t2,
                     "s": t3 - t0}
            all_totals.append(parts["s"])
            if best is None or parts["s"] < best["s"]:
                best = parts
        best["times"] = all_totals
        return best, printed

    g, g_str = pipeline(gmpy2.mpz)
    log(f"  gmpy2: parse {fmt_s(g['parse'])} + mul {fmt_s(g['mul'])} + print "
        f"{fmt_s(g['print'])} = {fmt_s(g['s'])} s (totals: "
        f"{', '.join(fmt_s(x) for x in g['times'])})")
    fl = {}
    for t in cfg.threads:
        f, f_str = pipeline(flint.fmpz, t)
        same = f_str == g_str
        del f_str
        f["check"] = "OK" if same else "MISMATCH"
        fl[t] = f
        log(f"  FLINT t={t}: parse {fmt_s(f['parse'])} + mul {fmt_s(f['mul'])} + "
            f"print {fmt_s(f['print'])} = {fmt_s(f['s'])} s (totals: "
            f"{', '.join(fmt_s(x) for x in f['times'])}), vs gmpy2: {f['check']}")
        if not same:
            failures.append(f"dec {label} t={t}: FLINT and gmpy2 strings differ")
    del sa, sb
    check_vastmul(cfg, vast, g_str, f"dec {label}", failures)
    del g_str
    return {"family": "dec", "digits": digits, "bits": bits, "label": label,
            "reps": reps, "vast": vast, "gmpy2": g, "flint": fl}


# ----------------------------------------------------------------- report

def sh(argv, cwd=REPO):
    try:
        return subprocess.run(argv, cwd=cwd, capture_output=True, text=True,
                              check=True).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return None


def cpu_model():
    try:
        with open("/proc/cpuinfo") as f:
            for line in f:
                if line.lower().startswith(("model name", "cpu model", "hardware")):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def loadavg():
    try:
        with open("/proc/loadavg") as f:
            return " ".join(f.read().split()[:3])
    except OSError:
        return "unknown"


def vastmul_commit():
    commit = sh(["git", "rev-parse", "--short=12", "HEAD"])
    if commit is None:
        return "unknown"
    dirty = sh(["git", "status", "--porcelain", "--untracked-files=no"])
    return commit + ("-dirty" if dirty else "")


def header(cfg, load_end=None):
    cores = os.cpu_count()
    try:
        usable = len(os.sched_getaffinity(0))
    except AttributeError:
        usable = cores
    lines = [
        "# vastmul peer comparison",
        "",
        f"- date: {cfg.date}",
        f"- machine: {sh(['uname', '-m']) or platform.machine()}, "
        f"CPU: {cpu_model()}, cores: {cores} ({usable} usable)",
        f"- peers: gmpy2 {gmpy2.version()} ({gmpy2.mp_version()}), "
        f"python-flint {flint.__version__} (FLINT {flint.__FLINT_VERSION__}), "
        f"Python {platform.python_version()}",
        f"- vastmul: commit {vastmul_commit()}, binary {os.path.relpath(cfg.vastmul, REPO)}",
        f"- load average (1/5/15 min) at start: {cfg.load_start}"
        + (f", at end: {load_end}" if load_end else ""),
        f"- runs per measurement: "
        + (f"{cfg.repeat} (PEERS_REPEAT)" if cfg.repeat
           else "best of 3, single run for operands of 2^30 bits or more"),
    ]
    return lines


def report(cfg, cases, failures):
    out = header(cfg, loadavg())
    out += ["",
            "Times in seconds. vastmul: whole process, file to file (inputs from "
            "the page cache). Peers: in memory. Ratios are vastmul time / peer "
            "time (below 1: vastmul faster). gmpy2 is single-threaded; its one "
            "figure stands on each thread row."]
    bins = [c for c in cases if c["family"] == "bin"]
    decs = [c for c in cases if c["family"] == "dec"]
    if bins:
        out += ["", "## Binary (hex files; peers: multiply only)", "",
                "| case | size | threads | vastmul s | FLINT s | gmpy2 s | "
                "vastmul/FLINT | vastmul/gmpy2 | vastmul RSS MiB | check |",
                "|---|---|---|---|---|---|---|---|---|---|"]
        for c in bins:
            for t in cfg.threads:
                v, f, g = c["vast"][t], c["flint"][t], c["gmpy2"]
                check = v["check"] if f["check"] == "OK" else f"{v['check']}, FLINT {f['check']}"
                out.append(f"| bin | {c['label']} | {t} | {fmt_s(v['s'])} | "
                           f"{fmt_s(f['s'])} | {fmt_s(g['s'])} | "
                           f"{fmt_ratio(v['s'], f['s'])} | {fmt_ratio(v['s'], g['s'])} | "
                           f"{fmt_mib(v['rss'])} | {check} |")
    if decs:
        out += ["", "## Decimal (decimal files; peers: parse both + multiply + print)", "",
                "| case | size | threads | vastmul s | FLINT s | gmpy2 s | "
                "vastmul/FLINT | vastmul/gmpy2 | FLINT parse/mul/print | "
                "gmpy2 parse/mul/print | vastmul RSS MiB | check |",
                "|---|---|---|---|---|---|---|---|---|---|---|---|"]
        for c in decs:
            for t in cfg.threads:
                v, f, g = c["vast"][t], c["flint"][t], c["gmpy2"]
                check = v["check"] if f["check"] == "OK" else f"{v['check']}, FLINT {f['check']}"
                parts = lambda p: f"{fmt_s(p['parse'])} / {fmt_s(p['mul'])} / {fmt_s(p['print'])}"
                out.append(f"| dec | {c['label']} | {t} | {fmt_s(v['s'])} | "
                           f"{fmt_s(f['s'])} | {fmt_s(g['s'])} | "
                           f"{fmt_ratio(v['s'], f['s'])} | {fmt_ratio(v['s'], g['s'])} | "
                           f"{parts(f)} | {parts(g)} | {fmt_mib(v['rss'])} | {check} |")

    out += ["", "## Tracked figures", ""]
    if 1 in cfg.threads and 2 in cfg.threads and bins:
        for c in bins:
            v1, v2 = c["vast"][1]["s"], c["vast"][2]["s"]
            out.append(f"- vastmul 1->2 thread speedup, {c['label']}: "
                       f"{fmt_ratio(v1, v2) if v1 and v2 else 'n/a (run failed)'}")
    else:
        out.append("- vastmul 1->2 thread speedup: not measured "
                   "(needs binary cases with PEERS_THREADS including 1 and 2)")
    c28 = next((c for c in bins if c["e"] == 28), None)
    if c28 and 2 in cfg.threads:
        out.append(f"- 2^28 bits, 2 threads, vastmul/FLINT: "
                   f"{fmt_ratio(c28['vast'][2]['s'], c28['flint'][2]['s'])}")
    else:
        out.append("- 2^28 bits, 2 threads, vastmul/FLINT: not measured (case not run)")
    c4e7 = next((c for c in decs if c["digits"] == 4 * 10**7), None)
    if c4e7:
        for t in cfg.threads:
            out.append(f"- 4·10^7 digits, vastmul {t} thread{'s' if t > 1 else ''} / "
                       f"gmpy2 total: {fmt_ratio(c4e7['vast'][t]['s'], c4e7['gmpy2']['s'])}")
    else:
        out.append("- 4·10^7 digits, vastmul/gmpy2 total: not measured (case not run)")

    out += ["", "## Checks", ""]
    if failures:
        out += [f"- FAILED: {x}" for x in failures]
    elif cases:
        out.append("- all vastmul outputs equal the peers' products byte for byte; "
                   "FLINT equals gmpy2 everywhere")
    else:
        out.append("- no case ran (check PEERS_MAX_BITS / PEERS_MAX_DIGITS / PEERS_ONLY)")
    return "\n".join(out) + "\n"


def main():
    cfg = Config()
    if not (os.path.isfile(cfg.vastmul) and os.access(cfg.vastmul, os.X_OK)):
        fail_setup(f"no vastmul binary at {cfg.vastmul} (run cargo build --release "
                   f"or set PEERS_VASTMUL)")
    os.makedirs(PEERS_DIR, exist_ok=True)
    now = datetime.datetime.now(datetime.timezone.utc)
    stamp = now.strftime("%Y%m%d-%H%M%S")
    cfg.date = sh(["date", "-u"]) or now.strftime("%a %b %d %H:%M:%S UTC %Y")
    cfg.load_start = loadavg()
    for line in header(cfg):
        log(line)
    cases, failures = [], []
    try:
        if cfg.run_bin:
            for e in BIN_EXPONENTS:
                if e <= cfg.max_bits:
                    cases.append(binary_case(cfg, e, failures))
        if cfg.run_dec:
            for idx, d in enumerate(DEC_DIGITS):
                if d <= cfg.max_digits:
                    cases.append(decimal_case(cfg, idx, d, failures))
    except VastmulError as e:
        # Operand generation failed: no operands, no case. Report what ran.
        log(f"\nvastmul gen failed:\n{e}")
        failures.append("vastmul gen failed; later cases not run")
    text = report(cfg, cases, failures)
    path = os.path.join(PEERS_DIR, f"results-{stamp}.md")
    n = 2
    while os.path.exists(path):
        path = os.path.join(PEERS_DIR, f"results-{stamp}-{n}.md")
        n += 1
    with open(path, "w") as f:
        f.write(text)
    log("\n" + text)
    log(f"results written to {path}")
    if failures:
        log(f"{len(failures)} check(s) FAILED")
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
