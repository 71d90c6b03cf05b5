//! The carry pass: exact 192-bit convolution coefficients to limbs in the
//! operands' radix, in parallel chunks with a sequential fix-up.

use crate::radix::{Radix, DEC_BASE};
use rayon::prelude::*;

/// A 192-bit number in two's complement, least significant word first.
/// Coefficients of plain limbs are non-negative and below 2^191; those of
/// balanced digits may be negative (see [`crate::fourstep`]). Carries
/// between limbs are signed likewise.
pub type U192 = [u64; 3];

/// The sign word of a 192-bit two's complement value: all ones when it is
/// negative, else zero.
#[inline(always)]
fn sign_of(x: U192) -> u64 {
    ((x[2] as i64) >> 63) as u64
}

/// `a + b` for 192-bit numbers, wrapping (two's complement); the callers'
/// sums stay far inside the signed range.
#[inline(always)]
pub fn add192(a: U192, b: U192) -> U192 {
    let (w0, c0) = a[0].overflowing_add(b[0]);
    let (w1, c1) = a[1].overflowing_add(b[1]);
    let (w1, c2) = w1.overflowing_add(c0 as u64);
    let w2 = a[2].wrapping_add(b[2]).wrapping_add(c1 as u64 + c2 as u64);
    [w0, w1, w2]
}

/// `floor((2^128 - 1) / d) - 2^64` for a normalized divisor (top bit set):
/// the reciprocal of the two-by-one division by an invariant integer
/// (Möller and Granlund, "Improved division by invariant integers", 2011).
const fn reciprocal(d: u64) -> u64 {
    assert!(d >> 63 == 1);
    (u128::MAX / d as u128 - (1u128 << 64)) as u64
}

const DEC_RECIPROCAL: u64 = reciprocal(DEC_BASE);

/// `(u1 * 2^64 + u0) / d` and the remainder, for `u1 < d`, `d` normalized.
#[inline(always)]
fn div_2by1(u1: u64, u0: u64, d: u64, v: u64) -> (u64, u64) {
    debug_assert!(u1 < d);
    let q = (v as u128 * u1 as u128).wrapping_add(((u1 as u128) << 64) | u0 as u128);
    let mut q1 = ((q >> 64) as u64).wrapping_add(1);
    let q0 = q as u64;
    let mut r = u0.wrapping_sub(q1.wrapping_mul(d));
    if r > q0 {
        q1 = q1.wrapping_sub(1);
        r = r.wrapping_add(d);
    }
    if r >= d {
        q1 += 1;
        r -= d;
    }
    (q1, r)
}

/// Splits `x` into `(floor(x / base), x mod base)` for the radix's limb
/// base, `x` signed (two's complement): the remainder is always a limb in
/// `[0, base)`, the quotient carries the sign.
#[inline(always)]
pub fn split_limb(x: U192, radix: Radix) -> (U192, u64) {
    let s = sign_of(x);
    match radix {
        Radix::Binary => ([x[1], x[2], s], x[0]),
        Radix::Decimal => {
            // For negative x, y = -x - 1 = !x is non-negative; with
            // y = q B + r, x = (-q - 1) B + (B - 1 - r) = !q B + (B - 1 - r).
            let y = [x[0] ^ s, x[1] ^ s, x[2] ^ s];
            debug_assert!(y[2] < DEC_BASE);
            let (q1, r1) = div_2by1(y[2], y[1], DEC_BASE, DEC_RECIPROCAL);
            let (q0, r0) = div_2by1(r1, y[0], DEC_BASE, DEC_RECIPROCAL);
            let r = if s == 0 { r0 } else { DEC_BASE - 1 - r0 };
            ([q0 ^ s, q1 ^ s, s], r)
        }
    }
}

/// Turns `coefficients` (`coeff(k)` for `k < count`) into the limbs of
/// their sum `sum c_k * base^k`, written to `out` (`out.len() >= count + 1`
/// words; the rest is zero-filled). Panics if the value does not fit `out`,
/// which would mean a wrong plan.
pub fn propagate<F>(count: usize, coeff: F, radix: Radix, out: &mut [u64])
where
    F: Fn(usize, &mut [U192]) + Sync,
{
    assert!(out.len() > count);
    let carry = propagate_block(coeff, radix, [0, 0, 0], &mut out[..count]);
    finish(out, count, carry, radix);
}

/// The limbs of `carry_in + sum_k coeff(k) base^k` for `k < digits.len()`:
/// the low `digits.len()` limbs go to `digits`, the rest is returned as the
/// carry out. Parallel in chunks, with a sequential fix-up; a product too
/// large for RAM runs it window by window, feeding each window's carry to
/// the next.
pub fn propagate_block<F>(coeff: F, radix: Radix, carry_in: U192, digits: &mut [u64]) -> U192
where
    F: Fn(usize, &mut [U192]) + Sync,
{
    let count = digits.len();
    // Chunks small enough that each task's buffers stay a few megabytes.
    let chunk = (count / (4 * rayon::current_num_threads()).max(1)).clamp(1 << 12, 1 << 16);
    if count <= chunk {
        let mut coeffs = vec![[0u64; 3]; count];
        coeff(0, &mut coeffs);
        let mut carry = carry_in;
        for (d, c) in digits.iter_mut().zip(&coeffs) {
            let (q, r) = split_limb(add192(*c, carry), radix);
            *d = r;
            carry = q;
        }
        return carry;
    }
    // First pass: each chunk with zero carry in, returning its carry out.
    // Each worker keeps its coefficient buffer: a fresh megabyte per chunk
    // would come from the system each time, and fault in page by page.
    let carries: Vec<U192> = digits
        .par_chunks_mut(chunk)
        .enumerate()
        .map_init(Vec::new, |coeffs, (ci, digits)| {
            let first = ci * chunk;
            coeffs.resize(digits.len(), [0u64; 3]);
            let coeffs = &mut coeffs[..digits.len()];
            coeff(first, coeffs);
            let mut carry = [0u64; 3];
            for (d, c) in digits.iter_mut().zip(coeffs.iter()) {
                let (q, r) = split_limb(add192(*c, carry), radix);
                *d = r;
                carry = q;
            }
            carry
        })
        .collect();
    // Fix-up: feed each chunk's carry into the next; ripples are short except
    // through runs of maximal limbs, and those are handled the same way.
    let mut carry = carry_in;
    for (ci, chunk_carry) in carries.iter().enumerate() {
        let start = ci * chunk;
        let end = (start + chunk).min(count);
        let mut k = start;
        while carry != [0, 0, 0] && k < end {
            let (q, r) = split_limb(add192([digits[k], 0, 0], carry), radix);
            digits[k] = r;
            carry = q;
            k += 1;
        }
        carry = add192(carry, *chunk_carry);
    }
    carry
}

/// Writes the final carry above the coefficients and zero-fills the rest.
fn finish(out: &mut [u64], count: usize, mut carry: U192, radix: Radix) {
    assert!(sign_of(carry) == 0, "negative carry out of the product");
    let mut k = count;
    while carry != [0, 0, 0] {
        assert!(k < out.len(), "product overflows its limb count");
        let (q, r) = split_limb(carry, radix);
        out[k] = r;
        carry = q;
        k += 1;
    }
    out[k..].fill(0);
}

/// The limbs of a final carry, least significant first (at most three).
pub fn carry_limbs(mut carry: U192, radix: Radix) -> Vec<u64> {
    assert!(sign_of(carry) == 0, "negative carry out of the product");
    let mut out = Vec::new();
    while carry != [0, 0, 0] {
        let (q, r) = split_limb(carry, radix);
        out.push(r);
        carry = q;
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn decimal_split_matches_u128_division() {
        let cases: [u128; 6] = [
            0,
            1,
            DEC_BASE as u128 - 1,
            DEC_BASE as u128,
            u128::MAX / 3,
            (DEC_BASE as u128) * (DEC_BASE as u128) - 1,
        ];
        for &x in &cases {
            let (q, r) = split_limb([x as u64, (x >> 64) as u64, 0], Radix::Decimal);
            let qq = x / DEC_BASE as u128;
            assert_eq!(r as u128, x % DEC_BASE as u128);
            assert_eq!(q, [qq as u64, (qq >> 64) as u64, 0]);
        }
        // with a third word: 2^128 * 5 + 12345
        let (q, r) = split_limb([12345, 0, 5], Radix::Decimal);
        let n = num_bigint::BigUint::from(5u32) << 128usize;
        let n = n + 12345u32;
        let base = num_bigint::BigUint::from(DEC_BASE);
        assert_eq!(num_bigint::BigUint::from(r), &n % &base);
        let qb = num_bigint::BigUint::from_slice(&[
            q[0] as u32,
            (q[0] >> 32) as u32,
            q[1] as u32,
            (q[1] >> 32) as u32,
        ]);
        assert_eq!(qb, n / base);
    }

    /// Signed values split as floor division does (remainder a limb, the
    /// quotient rounded down), compared with i128 arithmetic in both
    /// radixes, across zero and around multiples of the base.
    #[test]
    fn signed_split_is_floor_division() {
        for radix in [Radix::Binary, Radix::Decimal] {
            let base: i128 = match radix {
                Radix::Binary => 1 << 64,
                Radix::Decimal => DEC_BASE as i128,
            };
            let mut cases: Vec<i128> = vec![0, 1, -1, i128::MAX / 2, i128::MIN / 2];
            for k in [-3i128, -1, 1, 5] {
                for d in [-1i128, 0, 1] {
                    cases.push(k * base + d);
                }
            }
            for &x in &cases {
                let w = [x as u64, (x >> 64) as u64, (x >> 127) as u64];
                let (q, r) = split_limb(w, radix);
                assert_eq!(r as i128, x.rem_euclid(base), "{radix:?} {x}");
                let qq = x.div_euclid(base);
                assert_eq!(
                    q,
                    [qq as u64, (qq >> 64) as u64, (qq >> 127) as u64],
                    "{radix:?} {x}"
                );
            }
        }
    }

    /// Negative coefficients borrow from the limbs above them: the limbs of
    /// `sum c_k base^k` for `c_k` alternating `+v` and `-(v - 1)` equal the
    /// same sum taken in num-bigint.
    #[test]
    fn negative_coefficients_borrow_across_chunks() {
        use num_bigint::BigInt;
        for radix in [Radix::Binary, Radix::Decimal] {
            // odd, so that the top coefficient is positive, as a product's is
            let count = 20_001;
            let v: i128 = 1 << 100;
            let c = |k: usize| if k.is_multiple_of(2) { v } else { -(v - 1) };
            let mut out = vec![0u64; count + 4];
            propagate(
                count,
                |first, dst| {
                    for (i, d) in dst.iter_mut().enumerate() {
                        let x = c(first + i);
                        *d = [x as u64, (x >> 64) as u64, (x >> 127) as u64];
                    }
                },
                radix,
                &mut out,
            );
            let base = BigInt::from(match radix {
                Radix::Binary => 1i128 << 64,
                Radix::Decimal => DEC_BASE as i128,
            });
            let mut want = BigInt::from(0);
            for k in (0..count).rev() {
                want = want * &base + BigInt::from(c(k));
            }
            let mut got = BigInt::from(0);
            for &l in out.iter().rev() {
                got = got * &base + BigInt::from(l);
            }
            assert_eq!(got, want, "{radix:?}");
        }
    }

    #[test]
    fn propagation_through_long_runs_of_maximal_limbs() {
        // coefficients: base-1 everywhere, then one 1 at the bottom: carries
        // ripple across every chunk boundary.
        for radix in [Radix::Binary, Radix::Decimal] {
            let count = 50_000;
            let max = radix.max_limb();
            let mut out = vec![0u64; count + 2];
            propagate(count, |_, dst| dst.fill([max, 0, 0]), radix, &mut out);
            assert!(out[..count].iter().all(|&d| d == max));
            // then add 1 at position 0 via a second coefficient set
            let mut out2 = vec![0u64; count + 2];
            propagate(
                count,
                |first, dst| {
                    for (i, d) in dst.iter_mut().enumerate() {
                        *d = if first + i == 0 {
                            add192([max, 0, 0], [1, 0, 0])
                        } else {
                            [max, 0, 0]
                        };
                    }
                },
                radix,
                &mut out2,
            );
            assert!(out2[..count].iter().all(|&d| d == 0));
            assert_eq!(out2[count], 1);
        }
    }
}
