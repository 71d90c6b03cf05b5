//! Word-sized modular arithmetic for primes below 2^62.
//!
//! Two multiplications serve the transforms:
//! - Shoup's precomputed-quotient product `x * w mod p` for a fixed `w`
//!   (twiddles, constants): two multiplies and a subtraction, lazy output in
//!   `[0, 2p)`, valid for any `x < 2^64`.
//! - Montgomery's product `a * b * 2^-64 mod p` for two variable operands
//!   (pointwise products, generated twiddle vectors), fully reduced output,
//!   valid while `a * b < p * 2^64`.
//!
//! Keeping `p < 2^62` makes `4p < 2^64`, so values may lie anywhere in
//! `[0, 4p)` between reductions (the lazy butterflies of the NTT).

pub mod primes;

/// A prime modulus below 2^62 with the constants its products need.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Modulus {
    /// The prime.
    pub p: u64,
    /// `2p`, the bound of lazily reduced values.
    pub two_p: u64,
    /// `p^-1 mod 2^64`, for Montgomery reduction.
    pub p_inv: u64,
    /// `2^64 mod p`: the Montgomery form of 1.
    pub mont_one: u64,
    /// `2^128 mod p`: converts a value into Montgomery form.
    pub mont_r2: u64,
    /// Shoup quotient of 1, reducing any word to `[0, 2p)`.
    pub one_shoup: u64,
}

impl Modulus {
    /// Builds the constants for the odd prime `p < 2^62`.
    pub const fn new(p: u64) -> Self {
        assert!(p % 2 == 1 && p < (1u64 << 62) && p > 2);
        // Newton iteration doubles the correct low bits of the inverse each
        // step; p is its own inverse modulo 8 (3 bits), so 5 steps reach 96.
        let mut inv = p;
        let mut i = 0;
        while i < 5 {
            inv = inv.wrapping_mul(2u64.wrapping_sub(p.wrapping_mul(inv)));
            i += 1;
        }
        let mont_one = ((1u128 << 64) % p as u128) as u64;
        let mont_r2 = ((mont_one as u128 * mont_one as u128) % p as u128) as u64;
        Modulus {
            p,
            two_p: 2 * p,
            p_inv: inv,
            mont_one,
            mont_r2,
            one_shoup: shoup_quotient(1, p),
        }
    }

    /// `a * b mod p` through a 128-bit remainder. Slow; for setup only.
    pub const fn mul(&self, a: u64, b: u64) -> u64 {
        ((a as u128 * b as u128) % self.p as u128) as u64
    }

    /// `a + b mod p` for reduced inputs.
    #[inline(always)]
    pub fn add(&self, a: u64, b: u64) -> u64 {
        let s = a + b;
        if s >= self.p {
            s - self.p
        } else {
            s
        }
    }

    /// `a - b mod p` for reduced inputs.
    #[inline(always)]
    pub fn sub(&self, a: u64, b: u64) -> u64 {
        if a >= b {
            a - b
        } else {
            a + self.p - b
        }
    }

    /// `base^exp mod p`.
    pub const fn pow(&self, base: u64, mut exp: u64) -> u64 {
        let mut result = 1 % self.p;
        let mut b = base % self.p;
        while exp > 0 {
            if exp & 1 == 1 {
                result = self.mul(result, b);
            }
            b = self.mul(b, b);
            exp >>= 1;
        }
        result
    }

    /// The inverse of a non-zero `a` modulo the prime (Fermat).
    pub const fn inv(&self, a: u64) -> u64 {
        self.pow(a, self.p - 2)
    }

    /// Montgomery product `a * b * 2^-64 mod p`, fully reduced.
    /// Requires `a * b < p * 2^64`, which holds when one factor is below `p`
    /// and the other below `4p`.
    #[inline(always)]
    pub fn mont_mul(&self, a: u64, b: u64) -> u64 {
        let t = a as u128 * b as u128;
        let lo = t as u64;
        let hi = (t >> 64) as u64;
        let m = lo.wrapping_mul(self.p_inv);
        let mp_hi = ((m as u128 * self.p as u128) >> 64) as u64;
        // t - m*p is a multiple of 2^64 in (-p*2^64, p*2^64): the low words
        // cancel exactly, so only the high words matter.
        let (r, borrow) = hi.overflowing_sub(mp_hi);
        if borrow {
            r.wrapping_add(self.p)
        } else {
            r
        }
    }

    /// The Montgomery form `a * 2^64 mod p` of a reduced `a`.
    #[inline(always)]
    pub fn to_mont(&self, a: u64) -> u64 {
        self.mont_mul(a, self.mont_r2)
    }

    /// Reduces any word to `[0, 2p)`.
    #[inline(always)]
    pub fn reduce_lazy(&self, x: u64) -> u64 {
        shoup_mul_lazy(x, 1, self.one_shoup, self.p)
    }

    /// Reduces a value in `[0, 4p)` to `[0, p)`.
    #[inline(always)]
    pub fn reduce_4p(&self, x: u64) -> u64 {
        let x = if x >= self.two_p { x - self.two_p } else { x };
        if x >= self.p {
            x - self.p
        } else {
            x
        }
    }

    /// Reduces a value in `[0, 2p)` to `[0, p)`.
    #[inline(always)]
    pub fn reduce_2p(&self, x: u64) -> u64 {
        if x >= self.p {
            x - self.p
        } else {
            x
        }
    }
}

/// Shoup's precomputed quotient `floor(w * 2^64 / p)` for a fixed `w < p`.
pub const fn shoup_quotient(w: u64, p: u64) -> u64 {
    (((w as u128) << 64) / p as u128) as u64
}

/// `x * w mod p` in `[0, 2p)` for any `x < 2^64`, given `w < p` and its
/// Shoup quotient.
#[inline(always)]
pub fn shoup_mul_lazy(x: u64, w: u64, w_shoup: u64, p: u64) -> u64 {
    let q = ((x as u128 * w_shoup as u128) >> 64) as u64;
    x.wrapping_mul(w).wrapping_sub(q.wrapping_mul(p))
}

/// A fixed multiplier with its Shoup quotient.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct ShoupConst {
    /// The multiplier, reduced.
    pub w: u64,
    /// `floor(w * 2^64 / p)`.
    pub q: u64,
}

impl ShoupConst {
    /// Precomputes the quotient of `w` for modulus `p`.
    pub const fn new(w: u64, p: u64) -> Self {
        ShoupConst {
            w,
            q: shoup_quotient(w, p),
        }
    }

    /// `x * w mod p` in `[0, 2p)`.
    #[inline(always)]
    pub fn mul_lazy(self, x: u64, p: u64) -> u64 {
        shoup_mul_lazy(x, self.w, self.q, p)
    }

    /// `x * w mod p` in `[0, p)`.
    #[inline(always)]
    pub fn mul(self, x: u64, p: u64) -> u64 {
        let r = self.mul_lazy(x, p);
        if r >= p {
            r - p
        } else {
            r
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::arith::primes::PRIMES;

    fn oracle_mul(a: u64, b: u64, p: u64) -> u64 {
        ((a as u128 * b as u128) % p as u128) as u64
    }

    fn samples(p: u64) -> Vec<u64> {
        let mut v = vec![0, 1, 2, p - 1, p - 2, p / 2, p / 3 + 7];
        let mut x = 0x9e37_79b9_7f4a_7c15u64;
        for _ in 0..200 {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            v.push(x % p);
        }
        v
    }

    #[test]
    fn montgomery_matches_u128_oracle() {
        for m in PRIMES.iter().map(|pr| pr.modulus) {
            let inv_r = m.inv(m.mont_one);
            for &a in &samples(m.p) {
                for &b in samples(m.p).iter().take(20) {
                    let expect = oracle_mul(oracle_mul(a, b, m.p), inv_r, m.p);
                    assert_eq!(m.mont_mul(a, b), expect);
                    // one factor may be lazy, up to 4p
                    let b4 = b + 3 * m.p;
                    assert_eq!(m.mont_mul(a, b4), expect);
                }
                assert_eq!(m.mont_mul(m.to_mont(a), 1), a);
            }
        }
    }

    #[test]
    fn shoup_matches_u128_oracle_for_any_word() {
        for m in PRIMES.iter().map(|pr| pr.modulus) {
            for &w in samples(m.p).iter().take(30) {
                let c = ShoupConst::new(w, m.p);
                for x in [0, 1, m.p - 1, m.p, 4 * m.p - 1, u64::MAX, u64::MAX / 3] {
                    let r = c.mul_lazy(x, m.p);
                    assert!(r < 2 * m.p);
                    assert_eq!(r % m.p, oracle_mul(x % m.p, w, m.p));
                }
            }
            assert_eq!(m.reduce_lazy(u64::MAX) % m.p, u64::MAX % m.p);
        }
    }

    #[test]
    fn inverse_and_pow() {
        for m in PRIMES.iter().map(|pr| pr.modulus) {
            for &a in samples(m.p).iter().skip(1).take(50) {
                if a == 0 {
                    continue;
                }
                assert_eq!(m.mul(a, m.inv(a)), 1);
            }
            assert_eq!(m.pow(3, m.p - 1), 1);
            assert_eq!(m.p.wrapping_mul(m.p_inv), 1);
        }
    }
}
