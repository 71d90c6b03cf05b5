//! `vastmul check A B C`: verifies `C = A * B` from the files alone by
//! residues modulo the Mersenne prime 2^61 - 1, streaming each file once in
//! released windows (so files larger than RAM are fine) and in parallel.
//!
//! Residues do not depend on the radix, so a decimal product can be checked
//! against hexadecimal operands. With one 61-bit modulus a wrong product
//! passes only if the error is a multiple of 2^61 - 1.

use crate::engine::LimbSource;
use crate::format::{Format, Operand};
use crate::residue::{mul_m61, residue_m61, MERSENNE_61};
use crate::{Error, Result};
use serde::Serialize;
use std::path::Path;

/// The outcome of a check.
#[derive(Clone, Debug, Serialize)]
pub struct CheckReport {
    /// The modulus, 2^61 - 1.
    pub modulus: u64,
    /// Signed residues of A, B and C in `[0, modulus)`.
    pub residues: [u64; 3],
    /// True when `res(A) * res(B) = res(C)`.
    pub passed: bool,
}

/// Reads an operand once, releasing its pages behind the read.
struct Streamed<'a>(&'a Operand);

impl LimbSource for Streamed<'_> {
    fn fill_limbs(&self, first: usize, out: &mut [u64]) {
        self.0.read_limbs(first, out);
        self.0.release_limbs(first, out.len());
    }
}

/// The residue of an operand with its sign: `-x` maps to `q - x`.
fn signed_residue(op: &Operand) -> u64 {
    let r = residue_m61(&Streamed(op), op.limb_count(), op.radix());
    if op.is_negative() && r != 0 {
        MERSENNE_61 - r
    } else {
        r
    }
}

/// Checks `c = a * b` by residues; a mismatch is an [`Error::Verify`].
pub fn check_files(a: &Path, b: &Path, c: &Path, format: Option<Format>) -> Result<CheckReport> {
    let mut residues = [0u64; 3];
    for (r, path) in residues.iter_mut().zip([a, b, c]) {
        *r = signed_residue(&Operand::open(path, format)?);
    }
    let passed = mul_m61(residues[0], residues[1]) == residues[2];
    let report = CheckReport {
        modulus: MERSENNE_61,
        residues,
        passed,
    };
    if !passed {
        return Err(Error::Verify {
            what: format!(
                "{} is not {} x {}: residues modulo 2^61-1 are {:#x} x {:#x} != {:#x}",
                c.display(),
                a.display(),
                b.display(),
                residues[0],
                residues[1],
                residues[2]
            ),
        });
    }
    Ok(report)
}
