//! Residues of operands modulo the Mersenne prime `q = 2^61 - 1`, taken from
//! the limbs in their own radix (`value = sum limb_i * base^i`). Because
//! each limb is weighted by its position, swapped or shifted blocks change
//! the residue, unlike a digit sum.

use crate::engine::LimbSource;
use crate::radix::{Radix, DEC_BASE};
use rayon::prelude::*;

/// The modulus, `2^61 - 1`, a Mersenne prime.
pub const MERSENNE_61: u64 = (1 << 61) - 1;

#[inline(always)]
fn reduce(x: u128) -> u64 {
    // 2^61 = 1 (mod q): fold the high bits onto the low ones twice.
    let folded = (x as u64 & MERSENNE_61) as u128 + (x >> 61);
    let r = (folded as u64 & MERSENNE_61) + (folded >> 61) as u64;
    if r >= MERSENNE_61 {
        r - MERSENNE_61
    } else {
        r
    }
}

fn mul(a: u64, b: u64) -> u64 {
    reduce(a as u128 * b as u128)
}

fn pow(mut b: u64, mut e: u64) -> u64 {
    let mut r = 1;
    while e > 0 {
        if e & 1 == 1 {
            r = mul(r, b);
        }
        b = mul(b, b);
        e >>= 1;
    }
    r
}

/// `base mod q` for a radix.
fn base(radix: Radix) -> u64 {
    match radix {
        Radix::Binary => reduce(1u128 << 64),
        Radix::Decimal => DEC_BASE % MERSENNE_61,
    }
}

/// The residue modulo 2^61 - 1 of the magnitude whose `len` limbs `src`
/// supplies, computed in parallel chunks combined by powers of the base.
pub fn residue_m61<S: LimbSource + ?Sized>(src: &S, len: usize, radix: Radix) -> u64 {
    const CHUNK: usize = 1 << 16;
    let b = base(radix);
    let chunks = len.div_ceil(CHUNK);
    let shift = pow(b, CHUNK as u64);
    // Residue of each chunk on its own (Horner from its top limb).
    let parts: Vec<u64> = (0..chunks)
        .into_par_iter()
        .map(|c| {
            let first = c * CHUNK;
            let mut buf = vec![0u64; CHUNK.min(len - first)];
            src.fill_limbs(first, &mut buf);
            buf.iter().rev().fold(0u64, |r, &limb| {
                reduce(r as u128 * b as u128 + limb as u128)
            })
        })
        .collect();
    parts.iter().rev().fold(0u64, |r, &part| {
        reduce(r as u128 * shift as u128 + part as u128)
    })
}

/// `a * b mod q`, for comparing the residues of a product with its factors.
pub fn mul_m61(a: u64, b: u64) -> u64 {
    mul(a, b)
}

#[cfg(test)]
mod tests {
    use super::*;
    use num_bigint::BigUint;

    #[test]
    fn matches_big_integer_remainder_in_both_radixes() {
        let limbs: Vec<u64> = (0..200_000u64)
            .map(|i| i.wrapping_mul(0x9e37_79b9_7f4a_7c15) % DEC_BASE)
            .collect();
        let q = BigUint::from(MERSENNE_61);
        let bin = BigUint::from_slice(
            &limbs
                .iter()
                .flat_map(|w| [*w as u32, (w >> 32) as u32])
                .collect::<Vec<_>>(),
        );
        assert_eq!(
            BigUint::from(residue_m61(limbs.as_slice(), limbs.len(), Radix::Binary)),
            &bin % &q
        );
        let small = &limbs[..50];
        let dec = small.iter().rev().fold(BigUint::from(0u32), |acc, &l| {
            acc * BigUint::from(DEC_BASE) + BigUint::from(l)
        });
        assert_eq!(
            BigUint::from(residue_m61(small, small.len(), Radix::Decimal)),
            dec % &q
        );
    }

    #[test]
    fn swapped_limbs_change_the_residue() {
        let a = [5u64, 7, 11];
        let b = [7u64, 5, 11];
        assert_ne!(
            residue_m61(&a[..], 3, Radix::Binary),
            residue_m61(&b[..], 3, Radix::Binary)
        );
    }
}
