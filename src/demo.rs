//! `vastmul demo`: the main job end to end on seeded data of our own.
//!
//! The scenario: an orbit-survey team keeps two long decimal "ledger"
//! integers, `ledger-east.txt` and `ledger-west.txt`, and needs their exact
//! product on disk, computed on a machine whose memory it may not take.
//! The demo generates both from fixed seeds, multiplies them file to file
//! under a small memory budget (so the transform goes to scratch files and
//! the run keeps resumable state), and checks the product by residues
//! modulo five primes recomputed from the three files.

use crate::job::{multiply_files, MulOptions, MulReport};
use crate::radix::Radix;
use crate::{Error, Result};
use std::path::{Path, PathBuf};
use std::time::Instant;

/// Digits of each demo operand by default: large enough that the product
/// must leave RAM under [`DEFAULT_MEMORY`], small enough to take well under a
/// minute on two cores.
pub const DEFAULT_DIGITS: u64 = 100_000_000;

/// The demo's memory budget by default.
pub const DEFAULT_MEMORY: u64 = 64 << 20;

/// What the demo is asked to do.
#[derive(Clone, Debug)]
pub struct DemoOptions {
    /// Directory for the files (created if missing).
    pub dir: PathBuf,
    /// Digits of each operand.
    pub digits: u64,
    /// Memory budget of the multiplication.
    pub memory: u64,
    /// Worker threads.
    pub threads: usize,
    /// Replace demo files an earlier run left in `dir`.
    pub force: bool,
}

/// What the demo did.
#[derive(Debug)]
pub struct DemoReport {
    /// The generated operands and the product.
    pub files: [PathBuf; 3],
    /// Digits of each operand.
    pub digits: u64,
    /// Seconds to generate both operands.
    pub gen_seconds: f64,
    /// The multiplication's report.
    pub mul: MulReport,
    /// Seconds the multiplication took, end to end.
    pub mul_seconds: f64,
    /// The residue check of the product against its factors.
    pub check: crate::check::CheckReport,
    /// Seconds the check took.
    pub check_seconds: f64,
}

/// Runs the demo.
pub fn run(o: &DemoOptions) -> Result<DemoReport> {
    let dir = &o.dir;
    std::fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))?;
    let a = dir.join("ledger-east.txt");
    let b = dir.join("ledger-west.txt");
    let c = dir.join("ledger-product.txt");
    let t = Instant::now();
    crate::progress::phase("generate the operands", || -> Result<()> {
        crate::gen::generate(&a, o.digits, 2026, Radix::Decimal, o.force)?;
        crate::gen::generate(&b, o.digits, 1202, Radix::Decimal, o.force)
    })?;
    let gen_seconds = t.elapsed().as_secs_f64();
    // The report's peak memory is the multiplication's, not the generator's.
    crate::usage::reset_peak_rss();
    let t = Instant::now();
    let mul = multiply_files(&MulOptions {
        force: o.force,
        threads: o.threads,
        memory: Some(o.memory),
        ..MulOptions::new(&a, &b, &c)
    })?;
    let mul_seconds = t.elapsed().as_secs_f64();
    // A mismatch is an error: the demo fails loudly.
    let t = Instant::now();
    let check = crate::progress::phase("check the product", || {
        crate::check::check_files(&a, &b, &c, None)
    })?;
    let check_seconds = t.elapsed().as_secs_f64();
    Ok(DemoReport {
        files: [a, b, c],
        digits: o.digits,
        gen_seconds,
        mul,
        mul_seconds,
        check,
        check_seconds,
    })
}

/// The report as the lines the demo prints.
pub fn describe(r: &DemoReport) -> Vec<String> {
    use crate::plan::Algorithm;
    use crate::size::show_size;
    let m = &r.mul;
    let plan = &m.plan;
    let name = |p: &Path| {
        p.file_name()
            .unwrap_or_default()
            .to_string_lossy()
            .into_owned()
    };
    let mut out = vec![format!(
        "  generated {} and {}: {} decimal digits each, seeded, in {:.1} s",
        name(&r.files[0]),
        name(&r.files[1]),
        r.digits,
        r.gen_seconds
    )];
    out.push(match plan.algorithm {
        Algorithm::OutOfCore { shape, .. } => format!(
            "  plan: out of core under a {} memory budget: an NTT of length {} ({}) \
             ({} x {}), {} of scratch files, {} passes",
            show_size(plan.memory_budget),
            shape.len(),
            plan.prime_set.describe(),
            shape.rows,
            shape.cols,
            show_size(plan.scratch_bytes),
            plan.passes.len()
        ),
        ref other => format!(
            "  plan: {other:?} in RAM ({} needed, budget {}): give more digits for an out-of-core run",
            show_size(plan.ram_bytes),
            show_size(plan.memory_budget)
        ),
    });
    for p in &m.passes {
        let moved = p.read_bytes + p.write_bytes;
        let rate = if p.seconds > 0.0 && moved > 0 {
            format!(", {:.0} MB/s", moved as f64 / p.seconds / 1e6)
        } else {
            String::new()
        };
        out.push(format!("    {:<40} {:>7.2} s{rate}", p.name, p.seconds));
    }
    out.push(format!(
        "  multiplied in {:.1} s on {} thread(s); peak memory {} for a product of {}",
        r.mul_seconds,
        plan.threads,
        m.peak_rss_bytes.map_or("unknown".into(), show_size),
        show_size(m.product.bytes)
    ));
    if let Some(sc) = &m.self_check {
        out.push(format!(
            "  self-check before the product was renamed into place: modulo 2^61 - 1, \
             {:#x} x {:#x} = {:#x}: passed",
            sc.residues[0], sc.residues[1], sc.residues[2]
        ));
    }
    out.push(format!(
        "  product: {} ({} digits, BLAKE3 {}...), manifest {}",
        name(&r.files[2]),
        m.product.digits,
        &m.product.blake3[..16],
        name(&m.manifest)
    ));
    out.push(format!(
        "  check from the files alone: east x west = product modulo {} primes (seed {}) in {:.1} s: OK",
        r.check.moduli.len(),
        r.check.seed,
        r.check_seconds
    ));
    out
}
