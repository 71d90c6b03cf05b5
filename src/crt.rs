//! Chinese remainder reconstruction of a convolution coefficient from its
//! residues modulo the three NTT primes (Garner's mixed-radix form).
//!
//! With `x_i` the residue modulo `p_i`:
//! `y0 = x0`, `y1 = (x1 - y0) / p0 mod p1`,
//! `y2 = (x2 - y0 - p0 y1) / (p0 p1) mod p2`, and the value is
//! `y0 + p0 y1 + p0 p1 y2 < p0 p1 p2`, exact for every coefficient the
//! planner admits (see `arith::primes`). The transform leaves each residue
//! multiplied by a known constant; its inverse is folded into the Garner
//! constants, so no separate scaling pass is needed.

use crate::arith::primes::PRIMES;
use crate::arith::ShoupConst;
use crate::carry::U192;

/// Garner constants for residues that carry a known scale per prime.
#[derive(Clone, Copy, Debug)]
pub struct Crt {
    /// Undoes the scale of residue 0.
    s0: ShoupConst,
    /// `scale1^-1 / p0 mod p1`.
    s1: ShoupConst,
    /// `p0^-1 mod p1`.
    inv_p0: ShoupConst,
    /// `scale2^-1 / (p0 p1) mod p2`.
    s2: ShoupConst,
    /// `(p0 p1)^-1 mod p2`.
    inv_p01: ShoupConst,
    /// `p0 (p0 p1)^-1 mod p2`.
    p0_inv_p01: ShoupConst,
}

impl Crt {
    /// Constants for residues `x_i * scale[i] mod p_i`.
    pub fn new(scale: [u64; 3]) -> Self {
        let [m0, m1, m2] = [PRIMES[0].modulus, PRIMES[1].modulus, PRIMES[2].modulus];
        let inv_p0 = m1.inv(m0.p % m1.p);
        let p01_mod_p2 = m2.mul(m0.p % m2.p, m1.p % m2.p);
        let inv_p01 = m2.inv(p01_mod_p2);
        Crt {
            s0: ShoupConst::new(m0.inv(scale[0]), m0.p),
            s1: ShoupConst::new(m1.mul(m1.inv(scale[1]), inv_p0), m1.p),
            inv_p0: ShoupConst::new(inv_p0, m1.p),
            s2: ShoupConst::new(m2.mul(m2.inv(scale[2]), inv_p01), m2.p),
            inv_p01: ShoupConst::new(inv_p01, m2.p),
            p0_inv_p01: ShoupConst::new(m2.mul(m0.p % m2.p, inv_p01), m2.p),
        }
    }

    /// The integer in `[0, p0 p1 p2)` with the given (scaled, lazily
    /// reduced: any word) residues.
    #[inline(always)]
    pub fn combine(&self, r: [u64; 3]) -> U192 {
        let [m0, m1, m2] = [PRIMES[0].modulus, PRIMES[1].modulus, PRIMES[2].modulus];
        let y0 = self.s0.mul(r[0], m0.p);
        let y1 = m1.sub(self.s1.mul(r[1], m1.p), self.inv_p0.mul(y0, m1.p));
        let t = m2.add(self.inv_p01.mul(y0, m2.p), self.p0_inv_p01.mul(y1, m2.p));
        let y2 = m2.sub(self.s2.mul(r[2], m2.p), t);
        let low = y0 as u128 + m0.p as u128 * y1 as u128; // < p0 p1 < 2^124
        let p01 = m0.p as u128 * m1.p as u128;
        let a = (p01 as u64) as u128 * y2 as u128;
        let b = (p01 >> 64) * y2 as u128;
        // low + a + b * 2^64
        let (s, c) = low.overflowing_add(a);
        let w0 = s as u64;
        let mid = (s >> 64) + (b as u64) as u128 + ((c as u128) << 64);
        let w1 = mid as u64;
        let w2 = ((mid >> 64) + (b >> 64)) as u64;
        [w0, w1, w2]
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use num_bigint::BigUint;

    fn to_big(x: U192) -> BigUint {
        let words: Vec<u32> = x
            .iter()
            .flat_map(|w| [*w as u32, (w >> 32) as u32])
            .collect();
        BigUint::from_slice(&words)
    }

    #[test]
    fn combine_recovers_values_below_the_prime_product() {
        let scale = [3u64, 1 << 40, 12345];
        let crt = Crt::new(scale);
        let p = crate::arith::primes::prime_product();
        let p_big = to_big(p);
        let one = BigUint::from(1u32);
        let mut values = vec![
            BigUint::from(0u32),
            one.clone(),
            &p_big - &one,
            BigUint::from(u64::MAX) * BigUint::from(u64::MAX) * BigUint::from(1u64 << 40),
        ];
        let mut x = 0x1234_5678_9abc_def1u64;
        for _ in 0..200 {
            x = x
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            let v = (BigUint::from(x) << 122usize) + BigUint::from(x.rotate_left(17));
            values.push(v % &p_big);
        }
        for v in values {
            let mut r = [0u64; 3];
            for i in 0..3 {
                let m = PRIMES[i].modulus;
                let res = (&v % BigUint::from(m.p)).to_u64_digits();
                let res = res.first().copied().unwrap_or(0);
                // scaled and pushed into the lazy range [0, 4p)
                r[i] = m.mul(res, scale[i]) + 2 * m.p;
            }
            assert_eq!(to_big(crt.combine(r)), v);
        }
    }
}
