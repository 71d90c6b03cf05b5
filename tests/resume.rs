//! Checkpointed out-of-core runs, in process: runs stopped by injected I/O
//! faults resume and end with the exact product; damaged state (a flipped
//! byte in a completed scratch block, a truncated journal, a deleted
//! manifest, a scratch file from another run) is detected, reported and
//! recomputed; changed inputs and changed plans are refused.
//!
//! Expected products come from num-bigint, and every resumed run is also
//! compared byte for byte with an uninterrupted one.

mod common;

use common::{assert_product, Rng};
use std::path::{Path, PathBuf};
use std::sync::Arc;
use vastmul::engine::{Product, Timer};
use vastmul::faults::{FaultPlan, FaultySpace};
use vastmul::format::{write_operand, Format};
use vastmul::fourstep::Shape;
use vastmul::job::{multiply_files, MulOptions};
use vastmul::ooc::{step, OutOfCore};
use vastmul::packing::WordWidth;
use vastmul::plan::{plan, Algorithm, Force, Request};
use vastmul::scratch::FileSpace;
use vastmul::state::{Record, StateDir};
use vastmul::storage::Store;
use vastmul::Radix;

/// Decimal operand files of `la` and `lb` limbs in `dir`, and their limbs.
fn operands(dir: &Path, la: usize, lb: usize, seed: u64) -> (Vec<u64>, Vec<u64>) {
    let mut rng = Rng::new(seed);
    let a = rng.limbs(la, Radix::Decimal);
    let b = rng.limbs(lb, Radix::Decimal);
    for (name, x) in [("a.txt", &a), ("b.txt", &b)] {
        let mut f = std::fs::File::create(dir.join(name)).unwrap();
        write_operand(&mut f, Format::Decimal, Radix::Decimal, false, x).unwrap();
    }
    (a, b)
}

/// `mul a.txt b.txt -o out.txt --memory 16MiB` in `dir`.
fn options(dir: &Path, out: &str) -> MulOptions {
    MulOptions {
        threads: 2,
        memory: Some(16 << 20),
        ..MulOptions::new(dir.join("a.txt"), dir.join("b.txt"), dir.join(out))
    }
}

fn state_of(o: &MulOptions) -> StateDir {
    StateDir::for_output(o.output.parent().unwrap(), &o.output)
}

/// A 200 000 x 150 000-limb product out of core, computed once without
/// interruption; returns the directory, the reference bytes and the limbs.
struct Fixture {
    dir: tempfile::TempDir,
    reference: Vec<u8>,
}

fn fixture(seed: u64) -> Fixture {
    let dir = tempfile::tempdir().unwrap();
    let (a, b) = operands(dir.path(), 200_000, 150_000, seed);
    let o = options(dir.path(), "reference.txt");
    let r = multiply_files(&o).expect("uninterrupted run");
    assert!(matches!(r.plan.algorithm, Algorithm::OutOfCore { .. }));
    assert!(!state_of(&o).exists(), "state removed after success");
    let reference = std::fs::read(&o.output).unwrap();
    let c = vastmul::format::Operand::open(&o.output, None)
        .unwrap()
        .to_limbs();
    assert_product(&c, &a, &b, Radix::Decimal, "reference run");
    Fixture { dir, reference }
}

/// Runs with operation `n` failing; the run must fail and leave nothing at
/// the output path.
fn fail_at(o: &MulOptions, n: u64, persistent: bool) -> bool {
    let mut f = o.clone();
    f.faults = Some(FaultPlan::new(n, persistent));
    match multiply_files(&f) {
        Ok(_) => false,
        Err(e) => {
            assert!(
                !o.output.exists(),
                "fault {n}: a file at -o after a failure: {e}"
            );
            true
        }
    }
}

/// Operations of a full run with the given options (nothing failing).
fn count_operations(o: &MulOptions) -> u64 {
    let plan = FaultPlan::new(0, false);
    let mut f = o.clone();
    f.faults = Some(plan.clone());
    multiply_files(&f).unwrap();
    std::fs::remove_file(&o.output).unwrap();
    plan.operations()
}

#[test]
fn runs_stopped_by_faults_resume_to_the_exact_product() {
    let fx = fixture(11);
    let d = fx.dir.path();
    let o = options(d, "c.txt");
    let total = count_operations(&o);
    assert!(total > 100, "{total} operations");
    // Early, late and spread: every fault stops the run, the rerun without
    // faults resumes and must give the same bytes.
    let mut points: Vec<u64> = (1..=8).collect();
    points.extend((1..=24).map(|i| i * total / 25));
    points.push(total);
    for (i, &n) in points.iter().enumerate() {
        let persistent = i % 2 == 1;
        assert!(
            fail_at(&o, n, persistent),
            "operation {n} of {total} did not fail the run"
        );
        let r = multiply_files(&o).unwrap_or_else(|e| panic!("rerun after fault {n}: {e}"));
        if n >= total / 4 {
            assert!(
                r.resumed_at.is_some(),
                "fault {n}: the rerun did not resume"
            );
        }
        assert_eq!(std::fs::read(&o.output).unwrap(), fx.reference, "fault {n}");
        assert!(!state_of(&o).exists());
        std::fs::remove_file(&o.output).unwrap();
    }
}

/// Stops a run at about `fraction` of its scratch operations, leaving its
/// state behind.
fn interrupted(o: &MulOptions, fraction: f64) {
    let total = count_operations(o);
    assert!(fail_at(o, (total as f64 * fraction) as u64, true));
    assert!(state_of(o).exists());
}

fn rerun(o: &MulOptions, fx: &Fixture) -> vastmul::job::MulReport {
    let r = multiply_files(o).expect("rerun");
    assert_eq!(std::fs::read(&o.output).unwrap(), fx.reference);
    std::fs::remove_file(&o.output).unwrap();
    r
}

/// Where the block of `r` lives: its scratch file and a byte inside it.
/// The residue stores `a*` and `p` may hold packed words (`width`); the
/// carry store `s` always holds whole words.
fn block_location(r: &Record, shape: Shape, window: usize, width: WordWidth) -> (String, u64) {
    let column_block = |b: u64, w: WordWidth| w.bytes(b * shape.lanes as u64);
    let full = WordWidth::Full;
    match r.step {
        step::COLUMNS_A => (format!("a{}", r.part), column_block(r.block, width)),
        step::CARRY => ("s".into(), full.bytes(r.block * window as u64)),
        s => {
            let k = (s as usize - 1) / 3;
            if s == step::columns_b(k) {
                ("s".into(), column_block(r.block, full))
            } else if s == step::rows(k) {
                ("p".into(), width.bytes(r.block * shape.cols as u64))
            } else {
                (format!("a{k}"), column_block(r.block, width))
            }
        }
    }
}

#[test]
fn a_flipped_byte_in_a_completed_block_is_found_and_redone() {
    let fx = fixture(12);
    let o = options(fx.dir.path(), "c.txt");
    let p = vastmul::job::plan_files(&o.a, &o.b, None, 2, o.memory).unwrap();
    let Algorithm::OutOfCore { shape, window } = p.algorithm else {
        panic!("{:?}", p.algorithm)
    };
    let width = vastmul::plan::residue_width(p.prime_set, shape);
    let mut steps = std::collections::BTreeSet::new();
    for fraction in [0.05, 0.2, 0.35, 0.5, 0.65, 0.8, 0.9, 0.97] {
        interrupted(&o, fraction);
        // The last journaled block: one the remaining work still reads.
        let (_, load) = state_of(&o).journal().unwrap();
        let last = *load.records.last().expect("some block done");
        steps.insert(last.step);
        let (file, offset) = block_location(&last, shape, window, width);
        let path = state_of(&o).file(&file);
        let mut bytes = std::fs::read(&path).unwrap();
        bytes[offset as usize + 3] ^= 0x40;
        std::fs::write(&path, &bytes).unwrap();
        let r = rerun(&o, &fx);
        assert!(r.resumed_at.is_some());
        assert!(
            !r.resume_notes.is_empty(),
            "one byte flipped in {file} (step {} block {}) at {fraction}: not reported",
            last.step,
            last.block
        );
    }
    assert!(steps.len() >= 4, "the stops covered steps {steps:?}");
}

#[test]
fn truncated_journal_deleted_manifest_and_foreign_scratch() {
    let fx = fixture(13);
    let o = options(fx.dir.path(), "c.txt");

    // A journal cut in the middle of a record.
    interrupted(&o, 0.5);
    let j = state_of(&o).file("journal");
    let len = std::fs::metadata(&j).unwrap().len();
    let f = std::fs::OpenOptions::new().write(true).open(&j).unwrap();
    f.set_len(len / 2 + 7).unwrap();
    let r = rerun(&o, &fx);
    assert!(
        r.resume_notes.iter().any(|n| n.contains("journal")),
        "{:?}",
        r.resume_notes
    );

    // A deleted manifest: the state cannot be trusted and is discarded.
    interrupted(&o, 0.5);
    std::fs::remove_file(state_of(&o).file("manifest.json")).unwrap();
    let r = rerun(&o, &fx);
    assert!(r.resumed_at.is_none());
    assert!(r.resume_notes.iter().any(|n| n.contains("discarded")));

    // A scratch file from a different run (another pair's residues).
    let other = tempfile::tempdir().unwrap();
    operands(other.path(), 200_000, 150_000, 99);
    let oo = options(other.path(), "c.txt");
    interrupted(&oo, 0.7);
    interrupted(&o, 0.7);
    std::fs::copy(state_of(&oo).file("a0"), state_of(&o).file("a0")).unwrap();
    let r = rerun(&o, &fx);
    assert!(!r.resume_notes.is_empty(), "foreign a0 not reported");
}

#[test]
fn changed_inputs_and_plans_are_refused_and_restart_discards() {
    let fx = fixture(14);
    let d = fx.dir.path();
    let o = options(d, "c.txt");
    interrupted(&o, 0.4);
    // Same size, one digit changed.
    let a = d.join("a.txt");
    let mut bytes = std::fs::read(&a).unwrap();
    let saved = bytes.clone();
    bytes[1000] = if bytes[1000] == b'7' { b'8' } else { b'7' };
    std::fs::write(&a, &bytes).unwrap();
    let e = multiply_files(&o).unwrap_err().to_string();
    assert!(e.contains("changed since the interrupted run"), "{e}");
    assert!(e.contains("--restart"), "{e}");
    assert!(!o.output.exists());
    std::fs::write(&a, &saved).unwrap();
    // Another budget gives another plan.
    let mut other = o.clone();
    other.memory = Some(20 << 20);
    let e = multiply_files(&other).unwrap_err().to_string();
    assert!(e.contains("different plan"), "{e}");
    // --restart discards the state and starts over.
    other.restart = true;
    let r = multiply_files(&other).unwrap();
    assert!(r.resumed_at.is_none());
    assert_eq!(std::fs::read(&o.output).unwrap(), fx.reference);
    // --keep-state keeps it after success.
    std::fs::remove_file(&o.output).unwrap();
    let mut keep = o.clone();
    keep.keep_state = true;
    multiply_files(&keep).unwrap();
    assert!(state_of(&o).exists());
}

/// A tiny out-of-core plan (128-point transform, 2 column blocks, 8 rows,
/// carry windows of 16 limbs), so that every single I/O operation of the
/// run can be failed in turn.
fn tiny_plan(la: usize, lb: usize) -> (vastmul::plan::Plan, Shape, usize) {
    let mut p = plan(&Request::in_memory(
        la,
        lb,
        Radix::Binary,
        false,
        1,
        Force::Ntt,
    ))
    .unwrap();
    let shape = Shape {
        rows: 8,
        cols: 16,
        lanes: 8,
    };
    p.algorithm = Algorithm::OutOfCore { shape, window: 16 };
    (p, shape, 16)
}

fn run_tiny(
    p: &vastmul::plan::Plan,
    shape: Shape,
    window: usize,
    state: &Path,
    faults: Option<Arc<FaultPlan>>,
    a: &[u64],
    b: &[u64],
) -> vastmul::Result<Vec<u64>> {
    std::fs::create_dir_all(state).unwrap();
    let dir = StateDir::for_output(state, Path::new("tiny"));
    std::fs::create_dir_all(dir.path()).unwrap();
    let (journal, load) = dir.journal()?;
    let files = FileSpace::kept(dir.path());
    let faulty;
    let space: &dyn vastmul::ooc::Space = match faults {
        Some(plan) => {
            faulty = FaultySpace {
                inner: &files,
                plan,
            };
            &faulty
        }
        None => &files,
    };
    let (run, _) = OutOfCore::open(p, (shape, window), space, Some(&journal), &load.records)?;
    match run.run(a, b, &mut Timer::default())? {
        Product::Disk {
            store,
            len,
            mut discarding,
        } => {
            // A failure while the other stores are given back fails the
            // run, as in `multiply_files`.
            discarding.wait()?;
            let mut v = vec![0u64; len];
            store.read(0, &mut v)?;
            Ok(v)
        }
        Product::Ram(_) | Product::Streamed(_) => unreachable!(),
    }
}

#[test]
fn every_single_io_operation_of_a_small_run_can_fail() {
    let mut rng = Rng::new(5);
    let a = rng.limbs(60, Radix::Binary);
    let b = rng.limbs(50, Radix::Binary);
    let (p, shape, window) = tiny_plan(60, 50);
    let counter = FaultPlan::new(0, false);
    let t = tempfile::tempdir().unwrap();
    let c = run_tiny(
        &p,
        shape,
        window,
        &t.path().join("count"),
        Some(counter.clone()),
        &a,
        &b,
    )
    .unwrap();
    assert_product(&c, &a, &b, Radix::Binary, "tiny plan");
    let total = counter.operations();
    assert!(total > 50, "{total}");
    for n in 1..=total {
        for persistent in [false, true] {
            let state: PathBuf = t.path().join(format!("run-{n}-{persistent}"));
            let failed = run_tiny(
                &p,
                shape,
                window,
                &state,
                Some(FaultPlan::new(n, persistent)),
                &a,
                &b,
            );
            assert!(failed.is_err(), "operation {n} of {total} did not fail");
            let c = run_tiny(&p, shape, window, &state, None, &a, &b)
                .unwrap_or_else(|e| panic!("resume after fault {n}: {e}"));
            assert_product(
                &c,
                &a,
                &b,
                Radix::Binary,
                &format!("after fault {n} ({persistent})"),
            );
            std::fs::remove_dir_all(&state).unwrap();
        }
    }
}
