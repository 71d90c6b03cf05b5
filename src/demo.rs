//! `vastmul demo`: the main job end to end on seeded data of our own.
//!
//! The scenario: an orbit-survey team keeps two long decimal "ledger"
//! integers, `ledger-east.txt` and `ledger-west.txt`, and needs their exact
//! product on disk. The demo generates both from fixed seeds, multiplies
//! them file to file, and checks the product by residues modulo five primes
//! recomputed from the three files.

use crate::job::{multiply_files, MulOptions, MulReport};
use crate::plan::Force;
use crate::radix::Radix;
use crate::{Error, Result};
use std::path::{Path, PathBuf};
use std::time::Instant;

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
    /// The residue check of the product against its factors.
    pub check: crate::check::CheckReport,
}

/// Runs the demo in `dir` (created if missing) with operands of `digits`
/// decimal digits each.
/// Existing demo files in `dir` are replaced only with `force`.
pub fn run(dir: &Path, digits: u64, threads: usize, force: bool) -> Result<DemoReport> {
    std::fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))?;
    let a = dir.join("ledger-east.txt");
    let b = dir.join("ledger-west.txt");
    let c = dir.join("ledger-product.txt");
    let t = Instant::now();
    crate::gen::generate(&a, digits, 2026, Radix::Decimal, force)?;
    crate::gen::generate(&b, digits, 1202, Radix::Decimal, force)?;
    let gen_seconds = t.elapsed().as_secs_f64();
    let mul = multiply_files(&MulOptions {
        a: a.clone(),
        b: b.clone(),
        output: c.clone(),
        in_format: None,
        out_format: None,
        force,
        threads,
        algorithm: Force::Auto,
        memory: None,
        scratch: None,
        restart: false,
        keep_state: false,
        checkpoint: true,
        self_check: true,
        tamper: None,
        faults: None,
    })?;
    // A mismatch is an error: the demo fails loudly.
    let check = crate::check::check_files(&a, &b, &c, None)?;
    Ok(DemoReport {
        files: [a, b, c],
        digits,
        gen_seconds,
        mul,
        check,
    })
}
