//! `vastmul check A B C`: verifies `C = A * B` (or `C = A^2`) from the
//! files alone by residues modulo several primes, streaming each file once
//! in released windows (so files larger than RAM are fine) and in parallel.
//!
//! The moduli are the fixed ones of [`crate::residue::FIXED_MODULI`] and
//! `random` primes drawn from a seed that the report prints, so that anyone
//! can rerun exactly the same check. See [`crate::residue`] for the chance
//! that a wrong product passes.

use crate::format::{Format, Operand, Released};
use crate::progress::METER;
use crate::residue::{mul_mod, random_moduli, residues, signed, FIXED_MODULI};
use crate::storage::LimbSource;
use crate::{Error, Result};
use serde::Serialize;
use std::path::{Path, PathBuf};

/// What to check.
#[derive(Clone, Debug)]
pub struct CheckRequest {
    /// The first factor.
    pub a: PathBuf,
    /// The second factor, or `None` for a square of `a`.
    pub b: Option<PathBuf>,
    /// The product.
    pub c: PathBuf,
    /// Format of all files, or `None` to detect each one's.
    pub format: Option<Format>,
    /// Seed of the random moduli (`None`: drawn from the clock).
    pub seed: Option<u64>,
    /// How many random moduli.
    pub random: usize,
}

/// One modulus's verdict.
#[derive(Clone, Debug, Serialize)]
pub struct ModulusCheck {
    /// The prime.
    pub modulus: u64,
    /// `fixed` or `random`.
    pub kind: &'static str,
    /// Signed residues of A, B (A again for a square) and C.
    pub residues: [u64; 3],
    /// True when `res(A) * res(B) = res(C)`.
    pub passed: bool,
}

/// The outcome of a check.
#[derive(Clone, Debug, Serialize)]
pub struct CheckReport {
    /// The seed the random moduli came from (pass it as `--seed` to repeat
    /// the check exactly).
    pub seed: u64,
    /// A square was checked.
    pub square: bool,
    /// Every modulus, fixed ones first.
    pub moduli: Vec<ModulusCheck>,
    /// True when every modulus passed.
    pub passed: bool,
    /// Whether C's manifest agreed with the file (`None`: no manifest).
    pub manifest_agrees: Option<bool>,
}

/// A limb source that reports the limbs read to the progress meter, so that
/// a check of files of many gigabytes shows how far it is.
struct Counted<'a, S: ?Sized>(&'a S);

impl<S: LimbSource + ?Sized> LimbSource for Counted<'_, S> {
    fn fill_limbs(&self, first: usize, out: &mut [u64]) {
        self.0.fill_limbs(first, out);
        METER.advance(out.len() as u64);
    }

    fn prefetch_limbs(&self, first: usize, n: usize) {
        self.0.prefetch_limbs(first, n)
    }

    fn peek_limb(&self, i: usize) -> u64 {
        self.0.peek_limb(i)
    }

    fn peek_limbs(&self, first: usize, out: &mut [u64]) {
        self.0.peek_limbs(first, out)
    }
}

/// The signed residues of an operand file modulo each of `moduli`.
fn file_residues(path: &Path, format: Option<Format>, moduli: &[u64]) -> Result<Vec<u64>> {
    let op = crate::progress::phase(&format!("read and validate {}", path.display()), || {
        Operand::open(path, format)
    })?;
    METER.begin(&format!("residues of {}", path.display()));
    METER.add_units(op.limb_count() as u64, 0);
    let r = residues(
        &Counted(&Released(&op)),
        op.limb_count(),
        op.radix(),
        moduli,
    );
    METER.end();
    Ok(r.iter()
        .zip(moduli)
        .map(|(&x, &p)| signed(x, op.is_negative(), p))
        .collect())
}

/// Checks the product; a mismatch is an [`Error::Verify`] naming the
/// moduli that failed and the seed.
pub fn check(req: &CheckRequest) -> Result<CheckReport> {
    let seed = req.seed.unwrap_or_else(crate::residue::fresh_seed);
    let mut moduli = FIXED_MODULI.to_vec();
    moduli.extend(random_moduli(seed, req.random));
    let ra = file_residues(&req.a, req.format, &moduli)?;
    let rb = match &req.b {
        Some(b) => file_residues(b, req.format, &moduli)?,
        None => ra.clone(),
    };
    let rc = file_residues(&req.c, req.format, &moduli)?;
    let checks: Vec<ModulusCheck> = moduli
        .iter()
        .enumerate()
        .map(|(i, &p)| ModulusCheck {
            modulus: p,
            kind: if i < FIXED_MODULI.len() {
                "fixed"
            } else {
                "random"
            },
            residues: [ra[i], rb[i], rc[i]],
            passed: mul_mod(ra[i], rb[i], p) == rc[i],
        })
        .collect();
    let passed = checks.iter().all(|m| m.passed);
    // Cross-check C's residues modulo the fixed primes with its manifest.
    let manifest_agrees = crate::manifest::read_for(&req.c)?.map(|m| {
        m.residues.iter().all(|[p, r]| {
            moduli
                .iter()
                .position(|q| q == p)
                .is_some_and(|i| rc[i] == *r)
        })
    });
    let report = CheckReport {
        seed,
        square: req.b.is_none(),
        moduli: checks,
        passed,
        manifest_agrees,
    };
    if passed && manifest_agrees == Some(false) {
        let manifest = crate::manifest::path_for(&req.c);
        return Err(Error::verify(
            format!(
                "{} is the product, but its manifest {} records other residues: the manifest \
                 is stale or damaged",
                req.c.display(),
                manifest.display()
            ),
            format!(
                "the product itself is right: restore {} from a copy, or delete it (check \
                 --file then has nothing to check the product against)",
                manifest.display()
            ),
        ));
    }
    if !passed {
        let failed: Vec<String> = report
            .moduli
            .iter()
            .filter(|m| !m.passed)
            .map(|m| format!("{} ({})", m.modulus, m.kind))
            .collect();
        let what = match &req.b {
            Some(b) => format!("{} x {}", req.a.display(), b.display()),
            None => format!("the square of {}", req.a.display()),
        };
        return Err(Error::verify(
            format!(
                "{} is not {what}: the residues differ modulo {} of {} primes (seed {seed})",
                req.c.display(),
                failed.join(", "),
                report.moduli.len()
            ),
            format!(
                "check that these are the right files, in the order factors then product; if \
                 they are, {} is damaged: recompute it with vastmul mul, or restore it from a copy",
                req.c.display()
            ),
        ));
    }
    Ok(report)
}

/// [`check`] of `c = a * b` with the default of two random moduli.
pub fn check_files(a: &Path, b: &Path, c: &Path, format: Option<Format>) -> Result<CheckReport> {
    check(&CheckRequest {
        a: a.to_path_buf(),
        b: Some(b.to_path_buf()),
        c: c.to_path_buf(),
        format,
        seed: None,
        random: 2,
    })
}
