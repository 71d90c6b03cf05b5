//! The out-of-core path: budgets of a few MiB force scratch files on
//! 10^5..10^6-limb operands, and the products must match num-bigint
//! exactly, with no scratch file left behind.

mod common;

use common::{assert_product, journal_step, Rng};
use std::path::Path;
use vastmul::engine::{execute_to, Product};
use vastmul::plan::{plan, Algorithm, Force, Request};
use vastmul::storage::Store;
use vastmul::Radix;

/// Plans under `memory` bytes, asserts the plan is out of core, runs it with
/// scratch in `dir` and returns the product's limbs.
fn ooc_multiply(a: &[u64], b: &[u64], radix: Radix, memory: u64, dir: &Path) -> Vec<u64> {
    let mut req = Request::in_memory(
        a.len(),
        b.len(),
        radix,
        a == b,
        rayon::current_num_threads(),
        Force::Auto,
    );
    req.memory = memory;
    let p = plan(&req).expect("plan");
    assert!(
        matches!(p.algorithm, Algorithm::OutOfCore { .. }),
        "{:?}",
        p.algorithm
    );
    assert!(p.ram_bytes <= memory);
    let product = execute_to(&p, a, b, dir).expect("out-of-core product");
    let limbs = match &product {
        Product::Disk { store, len, .. } => {
            let mut v = vec![0u64; *len];
            store.read(0, &mut v).unwrap();
            v
        }
        Product::Ram(_) | Product::Streamed(_) => {
            panic!("an out-of-core plan returned a product in RAM")
        }
    };
    drop(product);
    let left: Vec<_> = std::fs::read_dir(dir).unwrap().collect();
    assert!(left.is_empty(), "scratch files left behind: {left:?}");
    limbs
}

#[test]
fn small_budgets_give_exact_products_in_both_radixes() {
    let dir = tempfile::tempdir().unwrap();
    let mut rng = Rng::new(0x00c0_ffee);
    for radix in [Radix::Binary, Radix::Decimal] {
        for (la, lb, mib) in [
            (100_000, 100_000, 10),
            (300_000, 250_000, 12),
            (1_000_000, 1_000_000, 24),
        ] {
            let a = rng.limbs(la, radix);
            let b = rng.limbs(lb, radix);
            let c = ooc_multiply(&a, &b, radix, mib << 20, dir.path());
            assert_product(
                &c,
                &a,
                &b,
                radix,
                &format!("{radix:?} {la}x{lb} under {mib} MiB"),
            );
        }
    }
}

#[test]
fn squares_and_unbalanced_pairs_out_of_core() {
    let dir = tempfile::tempdir().unwrap();
    let mut rng = Rng::new(77);
    for radix in [Radix::Binary, Radix::Decimal] {
        let a = rng.limbs(200_000, radix);
        let sq = ooc_multiply(&a, &a, radix, 10 << 20, dir.path());
        assert_product(&sq, &a, &a, radix, "square");
        // Unequal, but not enough for pieces (tests/pieces.rs has those).
        let short = rng.limbs(150_000, radix);
        let c = ooc_multiply(&a, &short, radix, 10 << 20, dir.path());
        assert_product(&c, &a, &short, radix, "unbalanced");
        // all maximal limbs: carries ripple through every window
        let max = vec![radix.max_limb(); 150_000];
        let c = ooc_multiply(&max, &max, radix, 10 << 20, dir.path());
        assert_product(&c, &max, &max, radix, "all maximal");
    }
}

#[test]
fn budget_below_the_smallest_plan_names_the_minimum() {
    let mut req = Request::in_memory(1_000_000, 1_000_000, Radix::Binary, false, 2, Force::Auto);
    req.memory = 1 << 20;
    let e = plan(&req).unwrap_err();
    let text = e.to_string();
    assert!(text.contains("smallest plan needs"), "{text}");
    assert!(text.contains("--memory"), "{text}");
    assert_eq!(e.exit_code(), vastmul::error::exit::RESOURCES);
}

/// Runs the binary in `dir`.
fn run_in(dir: &Path, args: &[&str]) -> std::process::Output {
    std::process::Command::new(env!("CARGO_BIN_EXE_vastmul"))
        .args(args)
        .current_dir(dir)
        .output()
        .unwrap()
}

/// Generates `a.txt` (3*10^6 digits) and `b.txt` (2*10^6 digits) in `dir`:
/// a pair whose in-memory plan needs 23 MiB, more than the 16 MiB the
/// tests give it.
fn write_two_operands(dir: &Path) {
    for (digits, seed, name) in [("3000000", "9", "a.txt"), ("2000000", "8", "b.txt")] {
        let o = run_in(
            dir,
            &["gen", "--digits", digits, "--seed", seed, "-o", name],
        );
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    }
}

#[test]
fn cli_out_of_core_matches_in_memory_and_checks_scratch() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    let run = |args: &[&str]| run_in(d, args);
    write_two_operands(d);
    let o = run(&["mul", "a.txt", "b.txt", "-o", "ram.txt"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    std::fs::create_dir(d.join("scr")).unwrap();
    let o = run(&[
        "mul",
        "a.txt",
        "b.txt",
        "-o",
        "disk.txt",
        "--memory",
        "16MiB",
        "--scratch",
        "scr",
        "--json",
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(String::from_utf8_lossy(&o.stdout).contains("out_of_core"));
    assert_eq!(
        std::fs::read(d.join("ram.txt")).unwrap(),
        std::fs::read(d.join("disk.txt")).unwrap()
    );
    assert_eq!(
        std::fs::read_dir(d.join("scr")).unwrap().count(),
        0,
        "scratch left behind"
    );
    // a missing scratch directory and an impossible budget: clear errors, no output
    let o = run(&[
        "mul",
        "a.txt",
        "b.txt",
        "-o",
        "x.txt",
        "--memory",
        "16MiB",
        "--scratch",
        "nowhere",
    ]);
    assert_eq!(
        o.status.code(),
        Some(2),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    assert!(String::from_utf8_lossy(&o.stderr).contains("nowhere"));
    let o = run(&["mul", "a.txt", "b.txt", "-o", "x.txt", "--memory", "1MiB"]);
    assert_eq!(
        o.status.code(),
        Some(5),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    assert!(!d.join("x.txt").exists());
    let o = run(&["mul", "a.txt", "b.txt", "-o", "x.txt", "--memory", "4 GB"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(!String::from_utf8_lossy(&o.stderr).contains("panicked"));
}

/// A small tmpfs mounted for one test, unmounted when dropped.
struct TinyDisk(std::path::PathBuf);

impl TinyDisk {
    fn mount(dir: &Path, size: &str) -> Option<TinyDisk> {
        std::fs::create_dir_all(dir).ok()?;
        let ok = std::process::Command::new("mount")
            .args(["-t", "tmpfs", "-o", &format!("size={size}"), "tmpfs"])
            .arg(dir)
            .status()
            .map(|s| s.success())
            .unwrap_or(false);
        ok.then(|| TinyDisk(dir.to_path_buf()))
    }
}

impl Drop for TinyDisk {
    fn drop(&mut self) {
        let _ = std::process::Command::new("umount").arg(&self.0).status();
    }
}

#[test]
fn a_disk_too_small_is_refused_before_any_work() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    let Some(disk) = TinyDisk::mount(&d.join("tiny"), "2m") else {
        println!("skipped: cannot mount a tmpfs here (needs root and mount permission)");
        return;
    };
    let run = |args: &[&str]| run_in(d, args);
    write_two_operands(d);
    // scratch on the tiny disk
    let o = run(&[
        "mul",
        "a.txt",
        "b.txt",
        "-o",
        "c.txt",
        "--memory",
        "16MiB",
        "--scratch",
        "tiny",
    ]);
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(5), "{err}");
    assert!(
        err.contains("tiny") && err.contains("needed") && err.contains("available"),
        "{err}"
    );
    assert!(!d.join("c.txt").exists());
    // the product itself on the tiny disk
    let o = run(&["mul", "a.txt", "a.txt", "-o", "tiny/c.txt"]);
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(5), "{err}");
    assert!(err.contains("the product needs"), "{err}");
    assert_eq!(
        std::fs::read_dir(&disk.0).unwrap().count(),
        0,
        "nothing left on the tiny disk"
    );
    assert!(!err.contains("panicked"));
}

#[test]
fn a_disk_that_fills_mid_run_keeps_the_state_and_the_rerun_completes() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    let Some(disk) = TinyDisk::mount(&d.join("tiny"), "40m") else {
        println!("skipped: cannot mount a tmpfs here (needs root and mount permission)");
        return;
    };
    write_two_operands(d);
    let o = run_in(d, &["mul", "a.txt", "b.txt", "-o", "ram.txt"]);
    assert!(o.status.success());
    // Scratch and product on the tiny disk; it fills during the last
    // prime's passes, before the product is written.
    let args = [
        "mul",
        "a.txt",
        "b.txt",
        "-o",
        "tiny/c.txt",
        "--memory",
        "16MiB",
    ];
    let planned = run_in(
        d,
        &["plan", "a.txt", "b.txt", "--memory", "16MiB", "--json"],
    );
    let planned: serde_json::Value = serde_json::from_slice(&planned.stdout).unwrap();
    let primes = planned["primes"]
        .as_array()
        .expect("primes in the plan")
        .len();
    let mut child = std::process::Command::new(env!("CARGO_BIN_EXE_vastmul"))
        .args(args)
        .current_dir(d)
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    let last_chain = vastmul::ooc::step::columns_b(primes - 1);
    while journal_step(&disk.0).is_none_or(|s| s < last_chain) {
        assert!(
            child.try_wait().unwrap().is_none(),
            "finished before the disk filled"
        );
        std::thread::sleep(std::time::Duration::from_millis(1));
    }
    // The run is held while the disk fills, so that the fill always comes
    // before the product's write however fast the passes are.
    // SAFETY: kill only sends signals to our own child's pid.
    unsafe {
        libc::kill(child.id() as i32, libc::SIGSTOP);
    }
    let filler = disk.0.join("filler");
    {
        use std::io::Write;
        let mut f = std::fs::File::create(&filler).unwrap();
        let block = vec![0u8; 1 << 16];
        while f.write_all(&block).is_ok() {}
    }
    // SAFETY: as above.
    unsafe {
        libc::kill(child.id() as i32, libc::SIGCONT);
    }
    let out = child.wait_with_output().unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(5), "{err}");
    assert!(
        err.contains("filled up") || err.contains("disk is full"),
        "{err}"
    );
    assert!(err.contains("kept in") && err.contains("resumes"), "{err}");
    assert!(!disk.0.join("c.txt").exists(), "a partial product at -o");
    // Free the space: the rerun verifies the saved state, skips every pass
    // and writes the product.
    std::fs::remove_file(&filler).unwrap();
    let o = run_in(d, &args);
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(o.status.success(), "{err}");
    assert!(
        err.contains("resuming from") && err.contains("write the product"),
        "{err}"
    );
    assert_eq!(
        std::fs::read(d.join("ram.txt")).unwrap(),
        std::fs::read(disk.0.join("c.txt")).unwrap()
    );
    let left: Vec<_> = std::fs::read_dir(&disk.0)
        .unwrap()
        .flatten()
        .map(|e| e.file_name())
        .collect();
    assert_eq!(
        left.len(),
        2,
        "only the product and its manifest are left: {left:?}"
    );
}

#[test]
fn missing_and_unwritable_scratch_directories_are_refused() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    write_two_operands(d);
    let o = run_in(
        d,
        &[
            "mul",
            "a.txt",
            "b.txt",
            "-o",
            "c.txt",
            "--memory",
            "16MiB",
            "--scratch",
            "nowhere",
        ],
    );
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{err}");
    assert!(
        err.contains("nowhere") && err.contains("does not exist"),
        "{err}"
    );
    assert!(!d.join("c.txt").exists());
    // A read-only file system: permission bits do not stop root, a
    // read-only mount does.
    let ro = d.join("ro");
    std::fs::create_dir_all(&ro).unwrap();
    let mounted = std::process::Command::new("mount")
        .args(["-t", "tmpfs", "-o", "ro,size=1m", "tmpfs"])
        .arg(&ro)
        .status()
        .is_ok_and(|s| s.success());
    if !mounted {
        println!("skipped the read-only case: cannot mount a tmpfs here (needs root)");
        return;
    }
    let _unmount = TinyDisk(ro.clone());
    let o = run_in(
        d,
        &[
            "mul",
            "a.txt",
            "b.txt",
            "-o",
            "c.txt",
            "--memory",
            "16MiB",
            "--scratch",
            "ro",
        ],
    );
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{err}");
    assert!(err.contains("not writable"), "{err}");
    assert!(!d.join("c.txt").exists());
}
