//! The `vastmul` binary on real files in temporary directories: products
//! checked against num-bigint, and bad invocations checked for their exit
//! code, a message naming the file and place, and no file at the `-o` path.

use num_bigint::BigInt;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn vastmul(args: &[&str], dir: &Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_vastmul"))
        .args(args)
        .current_dir(dir)
        .output()
        .expect("run vastmul")
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

fn write(dir: &Path, name: &str, bytes: &[u8]) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, bytes).unwrap();
    p
}

/// Asserts a failed run: exit code, message fragments, no output, no panic.
fn assert_fails(o: &Output, code: i32, fragments: &[&str], out: &Path) {
    let err = stderr(o);
    assert_eq!(o.status.code(), Some(code), "stderr: {err}");
    for f in fragments {
        assert!(err.contains(f), "missing {f:?} in: {err}");
    }
    assert!(!err.contains("panicked at"), "{err}");
    assert!(!out.exists(), "partial output left at {}", out.display());
    // no temporary file left beside it either
    let dir = out.parent().unwrap();
    let Ok(entries) = std::fs::read_dir(dir) else {
        return;
    };
    for e in entries {
        let name = e.unwrap().file_name().into_string().unwrap();
        assert!(
            !name.contains("vastmul-partial"),
            "temporary file {name} left behind"
        );
    }
}

fn digits(n: usize, seed: u64) -> String {
    let mut x = seed | 1;
    let mut s: String = (0..n)
        .map(|_| {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            char::from(b'0' + (x % 10) as u8)
        })
        .collect();
    s.replace_range(0..1, "7");
    s
}

#[test]
fn decimal_product_with_signs_matches_reference() {
    let t = tempfile::tempdir().unwrap();
    for (na, nb) in [(1, 1), (40, 20_000), (30_000, 25_000)] {
        let (a, b) = (digits(na, na as u64), digits(nb, 3 + nb as u64));
        write(t.path(), "a.txt", format!("-{a}\n").as_bytes());
        write(t.path(), "b.txt", format!("000{b}\r\n").as_bytes());
        let o = vastmul(
            &["mul", "a.txt", "b.txt", "-o", "c.txt", "--force"],
            t.path(),
        );
        assert!(o.status.success(), "{}", stderr(&o));
        let got = std::fs::read_to_string(t.path().join("c.txt")).unwrap();
        let expect = -a.parse::<BigInt>().unwrap() * b.parse::<BigInt>().unwrap();
        assert_eq!(got, format!("{expect}\n"), "{na}x{nb}");
    }
}

#[test]
fn hex_square_of_the_same_file_and_zero() {
    let t = tempfile::tempdir().unwrap();
    let h = "fedcba9876543210".repeat(3000);
    write(t.path(), "h.txt", format!("0x{h}\n").as_bytes());
    let o = vastmul(&["mul", "h.txt", "h.txt", "-o", "sq.txt"], t.path());
    assert!(o.status.success(), "{}", stderr(&o));
    let x = BigInt::parse_bytes(h.as_bytes(), 16).unwrap();
    let got = std::fs::read_to_string(t.path().join("sq.txt")).unwrap();
    assert_eq!(got, format!("{}\n", (&x * &x).to_str_radix(16)));
    write(t.path(), "z.txt", b"-0000\n");
    let o = vastmul(
        &[
            "mul",
            "z.txt",
            "h.txt",
            "-o",
            "zero.txt",
            "--in-format",
            "hex",
        ],
        t.path(),
    );
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(
        std::fs::read_to_string(t.path().join("zero.txt")).unwrap(),
        "0\n"
    );
}

#[test]
fn container_and_limb_outputs_round_trip() {
    let t = tempfile::tempdir().unwrap();
    write(t.path(), "a.txt", b"123456789012345678901234567890\n");
    write(t.path(), "b.txt", b"-98765432109876543210\n");
    let o = vastmul(
        &[
            "mul",
            "a.txt",
            "b.txt",
            "-o",
            "c.vint",
            "--out-format",
            "container",
        ],
        t.path(),
    );
    assert!(o.status.success(), "{}", stderr(&o));
    // container times one gives the same number back as decimal text
    write(t.path(), "one.txt", b"1\n");
    let o = vastmul(&["info", "c.vint", "--json"], t.path());
    assert!(o.status.success(), "{}", stderr(&o));
    let info = String::from_utf8_lossy(&o.stdout);
    assert!(info.contains("container"), "{info}");
    assert!(info.contains("\"negative\": true"), "{info}");
    let expect = "123456789012345678901234567890".parse::<BigInt>().unwrap()
        * "-98765432109876543210".parse::<BigInt>().unwrap();
    let o = vastmul(
        &[
            "mul",
            "c.vint",
            "c.vint",
            "-o",
            "sq.txt",
            "--out-format",
            "dec",
        ],
        t.path(),
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let got = std::fs::read_to_string(t.path().join("sq.txt")).unwrap();
    assert_eq!(got, format!("{}\n", &expect * &expect));
    // raw limbs: 2^64 - 1 squared
    write(t.path(), "l.bin", &u64::MAX.to_le_bytes());
    let o = vastmul(
        &[
            "mul",
            "l.bin",
            "l.bin",
            "-o",
            "l2.bin",
            "--in-format",
            "limbs",
        ],
        t.path(),
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let bytes = std::fs::read(t.path().join("l2.bin")).unwrap();
    let mut expect = Vec::new();
    expect.extend_from_slice(&1u64.to_le_bytes());
    expect.extend_from_slice(&(u64::MAX - 1).to_le_bytes());
    assert_eq!(bytes, expect);
}

#[test]
fn gen_is_reproducible_and_info_reports_it() {
    let t = tempfile::tempdir().unwrap();
    for f in ["g1.txt", "g2.txt"] {
        let o = vastmul(
            &["gen", "--digits", "100000", "--seed", "42", "-o", f],
            t.path(),
        );
        assert!(o.status.success(), "{}", stderr(&o));
    }
    let g1 = std::fs::read(t.path().join("g1.txt")).unwrap();
    assert_eq!(g1, std::fs::read(t.path().join("g2.txt")).unwrap());
    assert_eq!(g1.len(), 100_001);
    let o = vastmul(&["info", "g1.txt"], t.path());
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(text.contains("100000"), "{text}");
    assert!(
        text.contains(&blake3::hash(&g1).to_hex().to_string()),
        "{text}"
    );
}

#[test]
fn bad_inputs_name_the_file_and_offset_and_leave_no_output() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    write(d, "good.txt", b"12345\n");
    write(d, "bad.txt", b"1234x678\n");
    write(d, "empty.txt", b"");
    write(d, "hex.txt", b"abc\n");
    std::fs::create_dir(d.join("adir")).unwrap();
    let out = d.join("out.txt");
    let o = vastmul(&["mul", "good.txt", "bad.txt", "-o", "out.txt"], d);
    assert_fails(&o, 3, &["bad.txt", "offset 4"], &out);
    let o = vastmul(&["mul", "empty.txt", "good.txt", "-o", "out.txt"], d);
    assert_fails(&o, 3, &["empty.txt", "empty"], &out);
    let o = vastmul(&["mul", "missing.txt", "good.txt", "-o", "out.txt"], d);
    assert_fails(&o, 3, &["missing.txt"], &out);
    let o = vastmul(&["mul", "adir", "good.txt", "-o", "out.txt"], d);
    assert_fails(&o, 3, &["adir", "directory"], &out);
    let o = vastmul(&["mul", "good.txt", "hex.txt", "-o", "out.txt"], d);
    assert_fails(&o, 3, &["hex.txt", "radix"], &out);
    let o = vastmul(
        &[
            "mul",
            "good.txt",
            "good.txt",
            "-o",
            "out.txt",
            "--threads",
            "0",
        ],
        d,
    );
    assert_fails(&o, 2, &["--threads"], &out);
    let o = vastmul(&["mul", "good.txt", "good.txt", "-o", "nodir/out.txt"], d);
    assert_fails(&o, 4, &["nodir"], &d.join("nodir/out.txt"));
    let o = vastmul(
        &[
            "mul",
            "good.txt",
            "good.txt",
            "-o",
            "o.txt",
            "--out-format",
            "hex",
        ],
        d,
    );
    assert_fails(&o, 2, &["--out-format"], &d.join("o.txt"));
}

#[test]
fn existing_output_and_output_equal_to_input_are_refused() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    write(d, "a.txt", b"99\n");
    write(d, "taken.txt", b"precious\n");
    let o = vastmul(&["mul", "a.txt", "a.txt", "-o", "taken.txt"], d);
    assert_eq!(o.status.code(), Some(4), "{}", stderr(&o));
    assert!(stderr(&o).contains("--force"));
    assert_eq!(std::fs::read(d.join("taken.txt")).unwrap(), b"precious\n");
    let o = vastmul(&["mul", "a.txt", "a.txt", "-o", "a.txt", "--force"], d);
    assert_eq!(o.status.code(), Some(4), "{}", stderr(&o));
    assert_eq!(std::fs::read(d.join("a.txt")).unwrap(), b"99\n");
    let o = vastmul(&["mul", "a.txt", "a.txt", "-o", "taken.txt", "--force"], d);
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(std::fs::read(d.join("taken.txt")).unwrap(), b"9801\n");
}

#[test]
fn demo_runs_and_verifies() {
    let t = tempfile::tempdir().unwrap();
    let dir = t.path().join("demo");
    let args = [
        "demo",
        "--digits",
        "2000000",
        "--memory",
        "16MiB",
        "--dir",
        dir.to_str().unwrap(),
    ];
    let o = vastmul(&args, t.path());
    assert!(o.status.success(), "{}", stderr(&o));
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(
        text.contains("plan: out of core under a 16.0 MiB"),
        "{text}"
    );
    assert!(text.contains("self-check"), "{text}");
    assert!(text.contains("modulo 5 primes"), "{text}");
    assert!(text.trim_end().ends_with("OK"), "{text}");
    let product = std::fs::read(dir.join("ledger-product.txt")).unwrap();
    assert!(product.len() >= 3_999_999 && product.len() <= 4_000_001);
    // The product's leading digits agree with the operands' (the product of
    // the two 16-digit prefixes, to within its rounding).
    let prefix = |name: &str| -> f64 {
        let text = std::fs::read(dir.join(name)).unwrap();
        std::str::from_utf8(&text[..16]).unwrap().parse().unwrap()
    };
    let lead = prefix("ledger-east.txt") * prefix("ledger-west.txt");
    let digits = format!("{lead:.0}");
    let shown = std::str::from_utf8(&product[..6]).unwrap();
    assert_eq!(
        shown,
        &digits[..6],
        "product {shown}... vs prefixes {digits}"
    );
    // No scratch or state is left beside the files.
    let names: Vec<String> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    assert_eq!(names.len(), 4, "{names:?}");
    // a second run into the same directory refuses to replace the files
    let o = vastmul(&args, t.path());
    assert_eq!(o.status.code(), Some(4), "{}", stderr(&o));
}

#[test]
fn check_passes_on_a_product_and_fails_on_a_changed_digit() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    write(d, "a.txt", b"-123456789012345678901234567890\n");
    write(d, "b.txt", b"98765432109876543210\n");
    let o = vastmul(&["mul", "a.txt", "b.txt", "-o", "c.txt"], d);
    assert!(o.status.success(), "{}", stderr(&o));
    let o = vastmul(&["check", "a.txt", "b.txt", "c.txt"], d);
    assert!(o.status.success(), "{}", stderr(&o));
    let mut c = std::fs::read(d.join("c.txt")).unwrap();
    let i = c.len() / 2;
    c[i] = if c[i] == b'1' { b'2' } else { b'1' };
    write(d, "bad.txt", &c);
    let o = vastmul(&["check", "a.txt", "b.txt", "bad.txt"], d);
    assert_eq!(o.status.code(), Some(6), "{}", stderr(&o));
    // the sign is checked too
    let positive = String::from_utf8(std::fs::read(d.join("c.txt")).unwrap())
        .unwrap()
        .replace('-', "");
    write(d, "pos.txt", positive.as_bytes());
    let o = vastmul(&["check", "a.txt", "b.txt", "pos.txt"], d);
    assert_eq!(o.status.code(), Some(6), "{}", stderr(&o));
}

/// A reader that closes the pipe before vastmul has printed everything
/// (`vastmul plan A B | head -1`) ends it quietly, by SIGPIPE, never with a
/// panic on stderr.
#[test]
fn a_closed_stdout_pipe_ends_quietly() {
    use std::os::unix::process::ExitStatusExt;
    use std::process::Stdio;
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "a.txt", digits(5000, 1).as_bytes());
    write(dir.path(), "b.txt", digits(4000, 2).as_bytes());
    let mut child = Command::new(env!("CARGO_BIN_EXE_vastmul"))
        .args(["plan", "a.txt", "b.txt"])
        .current_dir(dir.path())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("run vastmul");
    // Close the read end before the plan is printed.
    drop(child.stdout.take());
    let o = child.wait_with_output().unwrap();
    let err = stderr(&o);
    assert!(!err.contains("panicked"), "stderr: {err}");
    assert!(
        o.status.success() || o.status.signal() == Some(libc::SIGPIPE),
        "status {:?}, stderr: {err}",
        o.status
    );
}
