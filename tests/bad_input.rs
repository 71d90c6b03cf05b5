//! A battery of bad invocations of the binary. Every one must end with its
//! documented exit code, a message that names what is at fault (the file,
//! the byte offset, the option) and says how to fix it, no panic, and the
//! directory it ran in exactly as it was: no partial product at `-o`, no
//! temporary, scratch or state file, no manifest.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

// The table in README.md, spelled out rather than taken from the library,
// so that a changed constant fails here instead of silently agreeing.
const USAGE: i32 = 2;
const INPUT: i32 = 3;
const OUTPUT: i32 = 4;
const RESOURCES: i32 = 5;
const VERIFY: i32 = 6;

#[test]
fn exit_codes_are_the_documented_ones() {
    use vastmul::error::exit;
    assert_eq!(
        [
            exit::USAGE,
            exit::INPUT,
            exit::OUTPUT,
            exit::RESOURCES,
            exit::VERIFY
        ],
        [USAGE, INPUT, OUTPUT, RESOURCES, VERIFY]
    );
}

fn run(dir: &Path, args: &[&str]) -> Output {
    run_with(dir, args, &[])
}

/// [`run`] with the environment variables `env` set.
fn run_with(dir: &Path, args: &[&str], env: &[(&str, &str)]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_vastmul"))
        .args(args)
        .current_dir(dir)
        // Without it a panic prints its "RUST_BACKTRACE" note, which the
        // checks below look for.
        .env_remove("RUST_BACKTRACE")
        .envs(env.iter().copied())
        .output()
        .expect("run vastmul")
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// Runs a setup command that must succeed.
fn ok(dir: &Path, args: &[&str]) {
    let o = run(dir, args);
    assert!(o.status.success(), "{args:?}: {}", stderr(&o));
}

fn write(dir: &Path, name: &str, bytes: &[u8]) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, bytes).unwrap();
    p
}

/// What a directory tree holds: every entry (hidden ones included) with
/// its kind, length and content hash, so that any file created, removed or
/// changed by a failed run shows up as a difference.
fn snapshot(root: &Path) -> BTreeMap<PathBuf, String> {
    fn walk(root: &Path, dir: &Path, out: &mut BTreeMap<PathBuf, String>) {
        for e in std::fs::read_dir(dir).unwrap() {
            let path = e.unwrap().path();
            let rel = path.strip_prefix(root).unwrap().to_path_buf();
            let meta = std::fs::symlink_metadata(&path).unwrap();
            let what = if meta.file_type().is_symlink() {
                format!("link to {:?}", std::fs::read_link(&path).unwrap())
            } else if meta.is_dir() {
                walk(root, &path, out);
                "directory".to_string()
            } else {
                match std::fs::read(&path) {
                    Ok(b) => format!("{} bytes, {}", b.len(), blake3::hash(&b)),
                    // Unreadable to us (the chmod 000 case, unprivileged).
                    Err(_) => format!("{} bytes, unreadable", meta.len()),
                }
            };
            out.insert(rel, what);
        }
    }
    let mut out = BTreeMap::new();
    walk(root, root, &mut out);
    out
}

/// The path after `-o`/`--output`, resolved against `dir`.
fn output_arg(dir: &Path, args: &[&str]) -> Option<PathBuf> {
    let i = args.iter().position(|a| *a == "-o" || *a == "--output")?;
    args.get(i + 1).map(|o| dir.join(o))
}

/// The state of `dir` before a run: its tree, and whether the `-o` path
/// named anything.
struct Before {
    tree: BTreeMap<PathBuf, String>,
    output_existed: bool,
}

fn before(dir: &Path, args: &[&str]) -> Before {
    Before {
        tree: snapshot(dir),
        output_existed: output_arg(dir, args).is_some_and(|o| std::fs::symlink_metadata(o).is_ok()),
    }
}

/// Checks a refused run: the exit code, each fragment in the message, a
/// fix, no panic, and nothing changed under `dir`.
fn check_refusal(
    dir: &Path,
    args: &[&str],
    o: &Output,
    before: &Before,
    code: i32,
    fragments: &[&str],
) -> String {
    let err = stderr(o);
    assert_eq!(o.status.code(), Some(code), "{args:?}: {err}");
    for f in fragments {
        assert!(err.contains(f), "{args:?}: missing {f:?} in: {err}");
    }
    assert!(!err.contains("panicked at"), "{args:?}: {err}");
    assert!(!err.contains("RUST_BACKTRACE"), "{args:?}: {err}");
    // Progress lines may come before the error; the error is one line on.
    if err.lines().any(|l| l.starts_with("vastmul: error: ")) {
        let fix = err
            .lines()
            .find_map(|l| l.strip_prefix("  fix: "))
            .unwrap_or_else(|| panic!("{args:?}: no fix line in: {err}"));
        assert!(fix.trim().len() >= 10, "{args:?}: empty fix in: {err}");
    } else {
        // The argument parser's own errors: they say what was wrong (the
        // fragments) and where to look.
        assert!(err.starts_with("error: "), "{args:?}: {err}");
        assert!(err.contains("try '--help'"), "{args:?}: {err}");
    }
    if let Some(out) = output_arg(dir, args).filter(|_| !before.output_existed) {
        assert!(
            std::fs::symlink_metadata(&out).is_err(),
            "{args:?}: partial output at {}",
            out.display()
        );
    }
    // An output that existed keeps its content: the snapshot hashes it.
    let after = snapshot(dir);
    assert_eq!(after, before.tree, "{args:?} changed the directory: {err}");
    err
}

/// Runs a bad invocation in `dir` and checks the refusal; returns stderr.
fn refused(dir: &Path, args: &[&str], code: i32, fragments: &[&str]) -> String {
    let b = before(dir, args);
    let o = run(dir, args);
    check_refusal(dir, args, &o, &b, code, fragments)
}

/// A tmpfs mounted for one test (`ro` for a read-only one), unmounted when
/// dropped; `None` where mounting is not permitted.
struct Mount(PathBuf);

impl Mount {
    fn tmpfs(dir: &Path, options: &str) -> Option<Mount> {
        std::fs::create_dir_all(dir).ok()?;
        let ok = Command::new("mount")
            .args(["-t", "tmpfs", "-o", options, "tmpfs"])
            .arg(dir)
            .output()
            .is_ok_and(|o| o.status.success());
        ok.then(|| Mount(dir.to_path_buf()))
    }
}

impl Drop for Mount {
    fn drop(&mut self) {
        let _ = Command::new("umount").arg(&self.0).status();
    }
}

#[test]
fn input_files_that_cannot_be_read() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    write(d, "a.txt", b"12345\n");
    std::fs::create_dir(d.join("adir")).unwrap();
    std::os::unix::fs::symlink("loop2", d.join("loop1")).unwrap();
    std::os::unix::fs::symlink("loop1", d.join("loop2")).unwrap();
    std::os::unix::fs::symlink("gone.txt", d.join("dangling")).unwrap();

    refused(
        d,
        &["mul", "a.txt", "missing.txt", "-o", "c.txt"],
        INPUT,
        &["missing.txt: no such file", "check the path"],
    );
    refused(
        d,
        &["mul", "a.txt", "adir", "-o", "c.txt"],
        INPUT,
        &["adir: is a directory", "path of a file"],
    );
    refused(
        d,
        &["mul", "loop1", "a.txt", "-o", "c.txt"],
        INPUT,
        &["loop1: cannot read the file", "symbolic links"],
    );
    refused(
        d,
        &["mul", "dangling", "a.txt", "-o", "c.txt"],
        INPUT,
        &["dangling: is a symbolic link to gone.txt, which does not exist"],
    );
    refused(
        d,
        &["info", "missing.txt"],
        INPUT,
        &["missing.txt: no such file"],
    );
    refused(
        d,
        &["check", "a.txt", "a.txt", "nothere.txt"],
        INPUT,
        &["nothere.txt: no such file"],
    );
    refused(
        d,
        &["plan", "adir", "a.txt"],
        INPUT,
        &["adir: is a directory"],
    );
}

#[test]
fn an_unreadable_input_is_refused_even_when_tests_run_as_root() {
    use std::os::unix::fs::PermissionsExt;
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    write(d, "a.txt", b"12345\n");
    let locked = write(d, "locked.txt", b"678\n");
    std::fs::set_permissions(&locked, std::fs::Permissions::from_mode(0o000)).unwrap();
    let args = ["mul", "a.txt", "locked.txt", "-o", "c.txt"];
    let fragments = ["locked.txt: permission denied", "chmod"];
    if std::fs::File::open(&locked).is_err() {
        refused(d, &args, INPUT, &fragments);
        return;
    }
    // Permission bits do not stop a privileged user. Run the binary as an
    // unprivileged one instead, if this machine lets us, after checking
    // that this user can run it and read the other operand, so that the
    // refusal can only come from the mode of locked.txt.
    std::fs::set_permissions(d, std::fs::Permissions::from_mode(0o755)).unwrap();
    let as_nobody = |args: &[&str]| {
        Command::new("setpriv")
            .args(["--reuid=65534", "--regid=65534", "--clear-groups", "--"])
            .arg(env!("CARGO_BIN_EXE_vastmul"))
            .args(args)
            .current_dir(d)
            .env_remove("RUST_BACKTRACE")
            .output()
    };
    let probe = as_nobody(&["info", "a.txt"]);
    if !probe.is_ok_and(|o| o.status.success()) {
        println!("skipped: running as root, and cannot run as an unprivileged user here");
        return;
    }
    let b = before(d, &args);
    let o = as_nobody(&args).unwrap();
    check_refusal(d, &args, &o, &b, INPUT, &fragments);
}

#[test]
fn malformed_operands_name_the_file_and_byte() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    write(d, "a.txt", b"12345\n");
    write(d, "empty.txt", b"");
    let mut long = vec![b'7'; 5000];
    long[3210] = b'x';
    write(d, "late.txt", &long);
    long[3210] = b'%';
    write(d, "late_dec.txt", &long);
    write(d, "badhex.txt", b"-0x12fg4\n");
    write(d, "sign.txt", b"12-34\n");
    write(d, "hex.txt", b"0xff\n");
    write(d, "ff.txt", b"ff\n");

    refused(
        d,
        &["mul", "a.txt", "late.txt", "-o", "c.txt"],
        INPUT,
        &["late.txt", "('x')", "at byte offset 3210"],
    );
    refused(
        d,
        &[
            "mul",
            "late_dec.txt",
            "a.txt",
            "-o",
            "c.txt",
            "--in-format",
            "dec",
        ],
        INPUT,
        &[
            "late_dec.txt",
            "('%') is not a decimal digit",
            "at byte offset 3210",
        ],
    );
    refused(
        d,
        &["mul", "badhex.txt", "hex.txt", "-o", "c.txt"],
        INPUT,
        &[
            "badhex.txt",
            "('g') is not a hexadecimal digit",
            "at byte offset 6",
        ],
    );
    refused(
        d,
        &["mul", "a.txt", "sign.txt", "-o", "c.txt"],
        INPUT,
        &[
            "sign.txt",
            "'-' is only allowed as the first byte",
            "at byte offset 2",
        ],
    );
    refused(
        d,
        &["info", "empty.txt", "--in-format", "hex"],
        INPUT,
        &["empty.txt: file is empty", "zero is written 0"],
    );
    refused(
        d,
        &["check", "a.txt", "a.txt", "empty.txt"],
        INPUT,
        &["empty.txt: file is empty"],
    );
    // Decimal times hexadecimal: the second file is named, with both radixes.
    refused(
        d,
        &["mul", "hex.txt", "a.txt", "-o", "c.txt"],
        INPUT,
        &[
            "a.txt: radix 10^19",
            "hex.txt's radix 2^64",
            "both operands",
        ],
    );
    // A named format that the content does not match.
    refused(
        d,
        &[
            "mul",
            "ff.txt",
            "ff.txt",
            "-o",
            "c.txt",
            "--in-format",
            "dec",
        ],
        INPUT,
        &[
            "ff.txt",
            "is not a decimal digit",
            "at byte offset 0",
            "--in-format hex",
        ],
    );
    refused(
        d,
        &[
            "mul",
            "a.txt",
            "a.txt",
            "-o",
            "c.txt",
            "--in-format",
            "limbs",
        ],
        INPUT,
        &["a.txt", "not a multiple of 8", "at byte offset 0"],
    );
    refused(
        d,
        &[
            "mul",
            "a.txt",
            "a.txt",
            "-o",
            "c.txt",
            "--in-format",
            "container",
        ],
        INPUT,
        &["a.txt", "magic", "at byte offset 0"],
    );
}

#[test]
fn outputs_that_cannot_be_written() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    write(d, "a.txt", b"99\n");
    write(d, "taken.txt", b"precious\n");
    std::fs::create_dir(d.join("sub")).unwrap();
    std::fs::hard_link(d.join("a.txt"), d.join("hard.txt")).unwrap();
    std::os::unix::fs::symlink("a.txt", d.join("soft.txt")).unwrap();
    let abs = d.join("a.txt");
    let abs = abs.to_str().unwrap();

    refused(
        d,
        &["mul", "a.txt", "a.txt", "-o", "nodir/c.txt"],
        OUTPUT,
        &["nodir/c.txt", "directory nodir does not exist", "create"],
    );
    refused(
        d,
        &["mul", "a.txt", "a.txt", "-o", "taken.txt"],
        OUTPUT,
        &["taken.txt: exists", "--force"],
    );
    refused(
        d,
        &["mul", "a.txt", "a.txt", "-o", "sub"],
        OUTPUT,
        &["sub: is a directory", "file path"],
    );
    refused(
        d,
        &["mul", "a.txt", "a.txt", "-o", "."],
        OUTPUT,
        &[".: does not name a file"],
    );
    // An input as the output, under every spelling of its path; --force
    // must not make a difference.
    for spelling in [
        "a.txt",
        "sub/../a.txt",
        "./a.txt",
        abs,
        "hard.txt",
        "soft.txt",
    ] {
        refused(
            d,
            &["mul", "a.txt", "a.txt", "-o", spelling, "--force"],
            OUTPUT,
            &[
                spelling,
                "is the same file as the input a.txt",
                "inputs are never overwritten",
            ],
        );
    }
    let Some(_ro) = Mount::tmpfs(&d.join("ro"), "ro,size=1m") else {
        println!("skipped the read-only output case: cannot mount a tmpfs here");
        return;
    };
    let err = refused(
        d,
        &["mul", "a.txt", "a.txt", "-o", "ro/c.txt"],
        OUTPUT,
        &["ro/c.txt: cannot create files in ro", "read-only"],
    );
    // The temporary name is an internal detail; the user asked for ro/c.txt.
    assert!(!err.contains("vastmul-partial"), "{err}");
}

#[test]
fn budgets_and_disks_too_small() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    ok(
        d,
        &["gen", "--digits", "1000000", "--seed", "5", "-o", "big.txt"],
    );
    refused(
        d,
        &[
            "mul", "big.txt", "big.txt", "-o", "c.txt", "--memory", "1MiB",
        ],
        RESOURCES,
        &["1.0 MiB", "the smallest plan needs", "--memory"],
    );
    let Some(tiny) = Mount::tmpfs(&d.join("tiny"), "size=1m") else {
        println!("skipped: cannot mount a tmpfs here (needs root and mount permission)");
        return;
    };
    // Under 10 MiB with two threads this pair is planned out of core, with
    // 5 MiB of scratch: five times what the tiny disk holds.
    refused(
        d,
        &[
            "mul",
            "big.txt",
            "big.txt",
            "-o",
            "c.txt",
            "--memory",
            "10MiB",
            "--threads",
            "2",
            "--scratch",
            "tiny",
        ],
        RESOURCES,
        &["tiny: scratch space needed", "available", "--scratch DIR"],
    );
    // In RAM, but the product (2 MB of digits) does not fit where it goes.
    refused(
        d,
        &["mul", "big.txt", "big.txt", "-o", "tiny/c.txt"],
        RESOURCES,
        &["tiny: the product needs", "available", "-o"],
    );
    assert_eq!(std::fs::read_dir(&tiny.0).unwrap().count(), 0);
}

#[test]
fn bad_command_lines() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    write(d, "a.txt", b"12345\n");
    write(d, "h.txt", b"0x1f\n");
    write(d, "file.txt", b"not a directory\n");
    let mul = |extra: &[&'static str]| {
        let mut v = vec!["mul", "a.txt", "a.txt", "-o", "c.txt"];
        v.extend_from_slice(extra);
        v
    };

    refused(
        d,
        &mul(&["--memory", "4 GB"]),
        USAGE,
        &["\"4 GB\"", "a space separates", "512MiB"],
    );
    refused(
        d,
        &mul(&["--memory", "12XB"]),
        USAGE,
        &["\"12XB\"", "unknown unit \"XB\"", "GiB"],
    );
    refused(
        d,
        &["plan", "a.txt", "a.txt", "--memory", "0"],
        USAGE,
        &["\"0\"", "must be positive"],
    );
    refused(
        d,
        &["check", "a.txt", "a.txt", "a.txt", "--threads", "0"],
        USAGE,
        &["--threads 0", "omit --threads"],
    );
    refused(
        d,
        &["gen", "--digits", "10", "-o", "g.txt", "--threads", "0"],
        USAGE,
        &["--threads 0"],
    );
    // A negative count is a bad value, not an option to be quoted.
    refused(
        d,
        &["gen", "--digits", "10", "-o", "g.txt", "--threads", "-1"],
        USAGE,
        &["invalid value '-1' for '--threads"],
    );
    refused(
        d,
        &["gen", "--digits", "0", "-o", "g.txt"],
        USAGE,
        &["--digits 0", "--digits 1 or more"],
    );
    refused(
        d,
        &mul(&["--scratch", "nowhere"]),
        USAGE,
        &["scratch directory nowhere does not exist", "--scratch"],
    );
    refused(
        d,
        &mul(&["--scratch", "file.txt"]),
        USAGE,
        &["file.txt", "not a directory"],
    );
    refused(
        d,
        &mul(&["--out-format", "limbs"]),
        USAGE,
        &["--out-format limbs", "radix 10^19", "--out-format dec"],
    );
    refused(
        d,
        &[
            "mul",
            "h.txt",
            "h.txt",
            "-o",
            "c.txt",
            "--out-format",
            "dec",
        ],
        USAGE,
        &["--out-format decimal", "radix 2^64", "--out-format hex"],
    );
    refused(
        d,
        &["check", "--file", "--square", "a.txt", "a.txt"],
        USAGE,
        &["'--file' cannot be used with '--square'"],
    );
    refused(
        d,
        &["check", "a.txt", "a.txt"],
        USAGE,
        &["check needs three files: A B C", "--square A C"],
    );
    refused(
        d,
        &["check", "--square", "a.txt", "a.txt", "a.txt"],
        USAGE,
        &["check --square needs two files", "drop --square"],
    );
    refused(
        d,
        &["check", "--file", "a.txt", "a.txt"],
        USAGE,
        &["check --file needs one file"],
    );
    refused(
        d,
        &["frobnicate", "a.txt"],
        USAGE,
        &["unrecognized subcommand 'frobnicate'"],
    );
    refused(
        d,
        &mul(&["--frob"]),
        USAGE,
        &["unexpected argument '--frob'"],
    );
    refused(
        d,
        &mul(&["--in-format", "octal"]),
        USAGE,
        &[
            "'octal'",
            "--in-format",
            "possible values: dec, hex, limbs, container",
        ],
    );
    refused(
        d,
        &["mul", "a.txt", "a.txt"],
        USAGE,
        &["required arguments were not provided", "--output"],
    );
}

#[test]
fn verification_failures() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    write(d, "a.txt", b"-123456789012345678901234567890\n");
    write(d, "b.txt", b"98765432109876543210\n");
    ok(d, &["mul", "a.txt", "b.txt", "-o", "c.txt"]);
    let good = std::fs::read(d.join("c.txt")).unwrap();
    let manifest = std::fs::read(d.join("c.txt.vastmul.json")).unwrap();
    let mut damaged = good.clone();
    let i = damaged.len() / 2;
    damaged[i] = if damaged[i] == b'3' { b'4' } else { b'3' };
    write(d, "damaged.txt", &damaged);
    // A product damaged after it was written, beside its own manifest.
    write(d, "rotted.txt", &damaged);
    write(d, "rotted.txt.vastmul.json", &manifest);
    // The right product beside another product's manifest.
    ok(d, &["mul", "b.txt", "b.txt", "-o", "other.txt"]);
    write(d, "stale.txt", &good);
    std::fs::copy(
        d.join("other.txt.vastmul.json"),
        d.join("stale.txt.vastmul.json"),
    )
    .unwrap();

    refused(
        d,
        &["check", "a.txt", "b.txt", "damaged.txt"],
        VERIFY,
        &[
            "damaged.txt is not a.txt x b.txt",
            "residues differ",
            "seed",
            "recompute",
        ],
    );
    refused(
        d,
        &["check", "--square", "a.txt", "c.txt"],
        VERIFY,
        &["c.txt is not the square of a.txt", "right files"],
    );
    refused(
        d,
        &["check", "--file", "rotted.txt"],
        VERIFY,
        &[
            "rotted.txt does not match its manifest rotted.txt.vastmul.json",
            "BLAKE3",
            "restore it from a copy",
        ],
    );
    refused(
        d,
        &["check", "a.txt", "b.txt", "stale.txt"],
        VERIFY,
        &["stale.txt.vastmul.json records other residues", "restore"],
    );
    refused(
        d,
        &["check", "--file", "a.txt"],
        INPUT,
        &["a.txt: no manifest beside it", "vastmul check A B C"],
    );
}

/// A kernel path that does not exist, or that the CPU lacks, is refused
/// before any work (exit 2, naming the variable and its values), never
/// replaced by another path silently.
#[test]
fn an_unknown_or_unsupported_kernel_is_refused() {
    let t = tempfile::tempdir().unwrap();
    let dir = t.path();
    ok(
        dir,
        &["gen", "--digits", "5000", "--seed", "1", "-o", "a.txt"],
    );
    ok(
        dir,
        &["gen", "--digits", "5000", "--seed", "2", "-o", "b.txt"],
    );
    let args = ["mul", "a.txt", "b.txt", "-o", "c.txt"];
    let refuse = |value: &str, fragments: &[&str]| {
        let b = before(dir, &args);
        let o = run_with(dir, &args, &[("VASTMUL_KERNEL", value)]);
        check_refusal(dir, &args, &o, &b, 2, fragments);
    };
    refuse(
        "sse9",
        &["VASTMUL_KERNEL", "ifma, avx2, scalar or wide", "unset"],
    );
    for (k, name) in [
        (vastmul::ntt50::Kernel::Avx2, "avx2"),
        (vastmul::ntt50::Kernel::Ifma, "ifma"),
    ] {
        if k.is_supported() {
            println!("{name} is supported here: its refusal is not testable");
        } else {
            refuse(name, &["VASTMUL_KERNEL", "does not support"]);
        }
    }
}
