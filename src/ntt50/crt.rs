//! Chinese remainder reconstruction of a convolution coefficient from its
//! residues modulo the four primes of [`super::primes::PRIMES`], in
//! Garner's mixed-radix form.
//!
//! With `x_i` the residue modulo `p_i` and `P_i = p_0 ... p_(i-1)`, the
//! mixed-radix digits are
//! `y_i = (x_i - y_0 - P_1 y_1 - ... - P_(i-1) y_(i-1)) / P_i mod p_i`,
//! each in `[0, p_i)`, and the value is `y_0 + P_1 y_1 + P_2 y_2 + P_3 y_3`,
//! the unique integer in `[0, P_4)` with those residues. Every constant
//! (`P_j / P_i mod p_i`, the scales' inverses) is derived from the primes at
//! construction. The transform leaves each residue multiplied by a known
//! scale (the inverse transform's length); its inverse is folded into the
//! constant that multiplies `x_i`, so no scaling pass is needed.
//!
//! # Why 192 bits hold a coefficient
//! A product coefficient is a sum of at most `m = min(len a, len b)` limb
//! products, each at most `(2^64 - 1)^2`, so it is below
//! `m (2^64 - 1)^2 < 2^64 * 2^128 = 2^192` for any `m` that fits a word.
//! [`super::primes`] shows the same bound is below `P_4` (just under 2^200),
//! so the reconstruction is exact and its top word, bits 192 and up, is
//! zero. A non-zero top word means the residues do not come from such a
//! coefficient (corrupted data); [`Crt50::combine`] debug-asserts against
//! it and [`Crt50::coefficients`] asserts once per call.

use super::primes::PRIMES;
use super::scalar::mul_shoup;
use super::{reduce_p, Modulus50, MulConst, MASK52};

/// The number of primes combined.
const K: usize = PRIMES.len();

/// Garner constants for residues that carry a known scale per prime.
#[derive(Clone, Debug)]
pub struct Crt50 {
    /// The primes' constants, in [`PRIMES`] order.
    m: [Modulus50; K],
    /// `s[i] = scale_i^-1 / P_i mod p_i`: turns a scaled residue into the
    /// first term of `y_i`.
    s: [MulConst; K],
    /// `c[i][j] = P_j / P_i mod p_i` for `j < i`: the weight with which
    /// `y_j` is taken off `y_i`.
    c: [[MulConst; K]; K],
    /// Whether values are signed ([`Crt50::signed_values`]).
    signed: bool,
}

impl Crt50 {
    /// Constants for residues `x_i * scale[i] mod p_i` (each scale non-zero
    /// modulo its prime). For the output of an inverse transform of length
    /// `n` with unscaled pointwise products, `scale[i] = n`; see
    /// [`Crt50::for_transform_len`].
    pub fn new(scale: [u64; K]) -> Self {
        let m = PRIMES.map(|pr| pr.modulus);
        let zero = MulConst::new(0, &m[0]);
        let mut s = [zero; K];
        let mut c = [[zero; K]; K];
        for i in 0..K {
            let mi = &m[i];
            assert!(
                !scale[i].is_multiple_of(mi.p),
                "scale {} is 0 modulo {}",
                scale[i],
                mi.p
            );
            // prefix[j] = P_j mod p_i, for j <= i
            let mut prefix = [1 % mi.p; K + 1];
            for j in 0..i {
                prefix[j + 1] = mi.mul(prefix[j], m[j].p % mi.p);
            }
            let inv_pi = mi.inv(prefix[i]);
            s[i] = MulConst::new(mi.mul(mi.inv(scale[i] % mi.p), inv_pi), mi);
            for j in 0..i {
                c[i][j] = MulConst::new(mi.mul(prefix[j], inv_pi), mi);
            }
        }
        Crt50 {
            m,
            s,
            c,
            signed: false,
        }
    }

    /// The same constants, for signed values: [`Crt50::coefficients_checked`]
    /// then gives the value `v` in `[0, P)` as `v - P` when
    /// `v > (P - 1) / 2` (`P` the product of the primes combined), in
    /// 192-bit two's complement. A signed value that does not fit 192 bits
    /// is reported as corrupted, as an unsigned one of 2^192 or more is.
    pub fn signed_values(mut self) -> Self {
        self.signed = true;
        self
    }

    /// Constants for the residues an inverse transform of length `n`
    /// leaves when nothing else scaled them: each is `n` times the value.
    pub fn for_transform_len(n: u64) -> Self {
        Crt50::new([n; K])
    }

    /// The mixed-radix digits `y_i` in `[0, p_i)` of scaled, lazily reduced
    /// residues (each below 2^52, which covers `[0, 4p)`).
    #[inline(always)]
    fn digits(&self, r: [u64; K]) -> [u64; K] {
        let mut y = [0u64; K];
        for i in 0..K {
            let (m, s) = (&self.m[i], &self.s[i]);
            debug_assert!(r[i] <= MASK52, "residue {} exceeds 52 bits", r[i]);
            // Every term stays in [0, 2p): a Shoup product leaves [0, 2p),
            // and a difference is lifted by 2p and brought back down, so no
            // intermediate needs a division.
            let mut acc = mul_shoup(r[i], s.w, s.q, m);
            for (&yj, c) in y[..i].iter().zip(&self.c[i]) {
                let t = acc + m.two_p - mul_shoup(yj, c.w, c.q, m);
                acc = if t >= m.two_p { t - m.two_p } else { t };
            }
            y[i] = reduce_p(acc, m);
        }
        y
    }

    /// The integer in `[0, p_0 p_1 p_2 p_3)` with the given scaled, lazily
    /// reduced residues (each below 2^52), as four little-endian words.
    #[inline(always)]
    pub fn combine_wide(&self, r: [u64; K]) -> [u64; 4] {
        self.value_of_digits(self.digits(r))
    }

    /// The integer with mixed-radix digits `y` (each `y_i < p_i`).
    #[inline(always)]
    fn value_of_digits(&self, y: [u64; K]) -> [u64; 4] {
        let p = self.m.map(|m| m.p as u128);
        // Horner from the top digit: y3 p2 + y2 < 2^100 fits a u128, then
        // one word at a time as the value widens past it.
        let a = y[3] as u128 * p[2] + y[2] as u128;
        let (b, b_hi) = mul_add_2(a, p[1], y[1]);
        let lo = (b as u64) as u128 * p[0] + y[0] as u128;
        let mid = (b >> 64) * p[0] + (lo >> 64);
        let hi = b_hi as u128 * p[0] + (mid >> 64);
        [lo as u64, mid as u64, hi as u64, (hi >> 64) as u64]
    }

    /// The value with mixed-radix digits `y` (each `y_i < p_i`, those from
    /// `count` on zero) in signed form, as four words of two's complement:
    /// `v - P` when `v > (P - 1) / 2`, `P` the product of the first `count`
    /// primes. The top digit tells the sign, except when it is exactly
    /// `(p_top - 1) / 2` (once in `p_top` values), which goes the long way;
    /// otherwise that digit is taken signed (`y_top - p_top`, which is what
    /// subtracting `P` does to it) and Horner's rule runs modulo 2^256,
    /// where two's complement products by the positive primes are exact.
    #[inline(always)]
    fn signed_value_of_digits(&self, y: [u64; K], count: usize, modulus: &[u64; 4]) -> [u64; 4] {
        let top = count - 1;
        let p_top = self.m[top].p;
        let half = (p_top - 1) / 2;
        if y[top] == half {
            return to_signed(self.value_of_digits(y), modulus);
        }
        // Arithmetic, not a branch: the sign is a coin toss per coefficient.
        let above = (half as i64 - y[top] as i64) >> 63;
        let t = y[top] as i64 - (p_top as i64 & above);
        // |t p + y| < 2^100
        let a = t as i128 * self.m[top - 1].p as i128 + y[top - 1] as i128;
        // times the next prime, plus its digit: below 2^150 in magnitude
        let p = self.m[top - 2].p as i128;
        let lo = (a as u64) as u128 * p as u128 + y[top - 2] as u128;
        let hi = (a >> 64) * p + (lo >> 64) as i128;
        let mut v = [lo as u64, hi as u64, (hi >> 64) as u64, (hi >> 127) as u64];
        for i in (0..top - 2).rev() {
            v = mul_add_mod_2_256(v, self.m[i].p, y[i]);
        }
        v
    }

    /// The coefficient with the given scaled, lazily reduced residues (each
    /// below 2^52, which covers `[0, 4p)`), as three little-endian words.
    /// The value must be below 2^192, which every product coefficient is
    /// (module notes); debug builds assert it.
    #[inline(always)]
    pub fn combine(&self, r: [u64; K]) -> [u64; 3] {
        let [w0, w1, w2, w3] = self.combine_wide(r);
        debug_assert_eq!(w3, 0, "coefficient exceeds 192 bits");
        [w0, w1, w2]
    }

    /// [`Crt50::combine`] for every position: `out[k]` from
    /// `residues[i][k]`, on the scalar digits. Panics if the lengths
    /// differ, or if any residue has bits above 52 or any value is 2^192 or
    /// more (see [`Crt50::coefficients_checked`] for the form that reports
    /// them instead).
    pub fn coefficients(&self, residues: [&[u64]; K], out: &mut [[u64; 3]]) {
        assert!(
            self.coefficients_checked(super::Kernel::Scalar, &residues, out),
            "coefficient exceeds 192 bits: the residues are not those of a product"
        );
    }
}

/// The type of the vector paths' digit functions.
#[cfg(target_arch = "x86_64")]
type GarnerFn =
    fn([&[u64]; K], [&mut [u64]; K], &[Modulus50; K], &[MulConst; K], &[[MulConst; K]; K]);

/// Positions combined per call of a kernel's digit function: its buffers
/// stay in L1.
const DIGIT_BLOCK: usize = 256;

impl Crt50 {
    /// The coefficients with residues `residues[i][k]`, as
    /// [`Crt50::coefficients`], the mixed-radix digits computed by `kernel`
    /// (the IFMA and AVX2 paths vectorise them).
    /// Residues are taken modulo 2^52.
    ///
    /// With three residue slices the values are those below the product of
    /// the first three primes: Garner's first three digits depend on the
    /// first three residues alone, and the fourth digit is zero (its slot
    /// holds zeros and its digit is dropped).
    ///
    /// Returns false, with `out` filled anyway, when any residue had bits
    /// above 52 or any value reached 2^192: residues that no product
    /// leaves, so corrupted data. Never panics on such data.
    pub fn coefficients_checked(
        &self,
        kernel: super::Kernel,
        residues: &[&[u64]],
        out: &mut [[u64; 3]],
    ) -> bool {
        let n = out.len();
        assert!(
            (3..=K).contains(&residues.len()),
            "three or four residue slices"
        );
        assert!(
            residues.iter().all(|r| r.len() == n),
            "residue slices and output differ in length"
        );
        let three = residues.len() == 3;
        let modulus = super::primes::product_of_first(residues.len());
        let mut bad = 0u64;
        // The fourth slot stays zero for three residues.
        let mut r = [[0u64; DIGIT_BLOCK]; K];
        let mut y = [[0u64; DIGIT_BLOCK]; K];
        for first in (0..n).step_by(DIGIT_BLOCK) {
            let len = DIGIT_BLOCK.min(n - first);
            // Whether every residue is below 4p, as a transform leaves
            // them, taken on the way (the AVX2 digits need it).
            let mut below_4p = true;
            for ((ri, src), m) in r.iter_mut().zip(residues).zip(&self.m) {
                let four_p = 4 * m.p;
                for (d, &x) in ri[..len].iter_mut().zip(&src[first..first + len]) {
                    bad |= x;
                    below_4p &= x < four_p;
                    *d = x & MASK52;
                }
            }
            self.digits_block(kernel, &r, &mut y, len, below_4p);
            if three {
                y[3][..len].fill(0);
            }
            let count = residues.len();
            for (k, o) in out[first..first + len].iter_mut().enumerate() {
                let digits = [y[0][k], y[1][k], y[2][k], y[3][k]];
                let [w0, w1, w2, w3] = if self.signed {
                    self.signed_value_of_digits(digits, count, &modulus)
                } else {
                    self.value_of_digits(digits)
                };
                // The top word must be the sign extension of the 192 bits
                // (zero for unsigned values).
                let sign = if self.signed {
                    ((w2 as i64) >> 63) as u64
                } else {
                    0
                };
                bad |= ((w3 != sign) as u64) << 52;
                *o = [w0, w1, w2];
            }
        }
        bad >> 52 == 0
    }

    /// The digits of the first `len` positions of `r` into `y`.
    fn digits_block(
        &self,
        kernel: super::Kernel,
        r: &[[u64; DIGIT_BLOCK]; K],
        y: &mut [[u64; DIGIT_BLOCK]; K],
        len: usize,
        below_4p: bool,
    ) {
        #[cfg(target_arch = "x86_64")]
        {
            // The AVX2 products are exact for residues below 4p only, which
            // is all a transform leaves; anything larger (corrupt data) goes
            // through the scalar digits, which take any value below 2^52.
            let vector: Option<GarnerFn> = match kernel {
                super::Kernel::Ifma => Some(super::ifma::garner_digits),
                super::Kernel::Avx2 if below_4p => Some(super::avx2::garner_digits),
                _ => None,
            };
            if let Some(f) = vector {
                let [y0, y1, y2, y3] = y;
                f(
                    [&r[0][..len], &r[1][..len], &r[2][..len], &r[3][..len]],
                    [
                        &mut y0[..len],
                        &mut y1[..len],
                        &mut y2[..len],
                        &mut y3[..len],
                    ],
                    &self.m,
                    &self.s,
                    &self.c,
                );
                return;
            }
        }
        let _ = (kernel, below_4p);
        for k in 0..len {
            let d = self.digits([r[0][k], r[1][k], r[2][k], r[3][k]]);
            for (yi, di) in y.iter_mut().zip(d) {
                yi[k] = di;
            }
        }
    }
}

/// `v` in `[0, modulus)` as the signed value `v - modulus` when it exceeds
/// `(modulus - 1) / 2` (`modulus` odd), in 256-bit two's complement;
/// without branches, as the signs of coefficients are unpredictable.
#[inline(always)]
fn to_signed(v: [u64; 4], modulus: &[u64; 4]) -> [u64; 4] {
    // v > (modulus - 1) / 2  <=>  2v >= modulus + 1  <=>  2v > modulus,
    // and 2v < 2^201 fits 256 bits.
    let twice = [
        v[0] << 1,
        v[1] << 1 | v[0] >> 63,
        v[2] << 1 | v[1] >> 63,
        v[3] << 1 | v[2] >> 63,
    ];
    // modulus - 2v borrows exactly when 2v > modulus
    let mut borrow = false;
    for i in 0..4 {
        let (d, b1) = modulus[i].overflowing_sub(twice[i]);
        let (_, b2) = d.overflowing_sub(borrow as u64);
        borrow = b1 | b2;
    }
    let mask = (borrow as u64).wrapping_neg();
    let mut out = [0u64; 4];
    let mut borrow = false;
    for i in 0..4 {
        let (d, b1) = v[i].overflowing_sub(modulus[i] & mask);
        let (d, b2) = d.overflowing_sub(borrow as u64);
        out[i] = d;
        borrow = b1 | b2;
    }
    out
}

/// `v * p + y` modulo 2^256, on four little-endian words.
#[inline(always)]
fn mul_add_mod_2_256(v: [u64; 4], p: u64, y: u64) -> [u64; 4] {
    let mut out = [0u64; 4];
    let mut carry = y as u128;
    for (o, &w) in out.iter_mut().zip(&v) {
        let t = w as u128 * p as u128 + carry;
        *o = t as u64;
        carry = t >> 64;
    }
    out
}

/// `a * b + c` for `a < 2^100`, `b, c < 2^64`, as a low u128 and a high
/// word (the result is below 2^164).
#[inline(always)]
fn mul_add_2(a: u128, b: u128, c: u64) -> (u128, u64) {
    let lo = (a as u64) as u128 * b + c as u128;
    let hi = (a >> 64) * b + (lo >> 64);
    (
        ((hi as u64) as u128) << 64 | (lo as u64) as u128,
        (hi >> 64) as u64,
    )
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::ntt50::primes::{prime_product, MAX_TRANSFORM_LEN};
    use crate::ntt50::{Kernel, Twiddles};
    use crate::test_oracles::{schoolbook_convolution, seeded_words};
    use num_bigint::BigUint;

    fn big(words: &[u64]) -> BigUint {
        let bytes: Vec<u8> = words.iter().flat_map(|w| w.to_le_bytes()).collect();
        BigUint::from_bytes_le(&bytes)
    }

    fn residue(v: &BigUint, p: u64) -> u64 {
        (v % BigUint::from(p))
            .to_u64_digits()
            .first()
            .copied()
            .unwrap_or(0)
    }

    /// The residues of `v` as the transform leaves them: times the scale,
    /// then lifted by `lift[i]` multiples of `p_i` (at most 3, so below
    /// `4p_i`).
    fn scaled_residues(v: &BigUint, scale: [u64; K], lift: [u64; K]) -> [u64; K] {
        core::array::from_fn(|i| {
            let m = PRIMES[i].modulus;
            m.mul(residue(v, m.p), scale[i]) + lift[i] * m.p
        })
    }

    /// Scales used throughout: a transform length, 1, `p - 1` (every prime's
    /// own), and seeded words.
    fn scales() -> Vec<[u64; K]> {
        let w = seeded_words(4, 77);
        vec![
            [1 << 20; K],
            [1; K],
            PRIMES.map(|pr| pr.modulus.p - 1),
            [w[0], w[1], w[2], w[3]],
            [3 << 31, 1 << 32, 5, u64::MAX],
        ]
    }

    /// The values that matter: 0, the neighbours of every partial prime
    /// product (where Garner's digits carry), of the largest coefficient a
    /// transform of maximal length can hold, and of 2^192.
    fn special_values() -> Vec<BigUint> {
        let one = BigUint::from(1u32);
        let max_limb_sq = BigUint::from(u64::MAX) * BigUint::from(u64::MAX);
        let mut centres = vec![
            &max_limb_sq * BigUint::from(MAX_TRANSFORM_LEN),
            max_limb_sq,
            one.clone() << 128usize,
            one.clone() << 64usize,
        ];
        let mut prefix = one.clone();
        for pr in &PRIMES[..K - 1] {
            prefix *= BigUint::from(pr.modulus.p);
            centres.push(prefix.clone());
            centres.push(BigUint::from(pr.modulus.p));
        }
        let mut values = vec![BigUint::from(0u32), one.clone()];
        for c in centres {
            values.push(&c - &one);
            values.push(&c + &one);
            values.push(c);
        }
        let top = one.clone() << 192usize;
        values.push(&top - &one);
        values.push(&top - BigUint::from(2u32));
        values
    }

    /// Seeded values below 2^192 of every size from 1 to 192 bits.
    fn random_values(count: usize, seed: u64) -> Vec<BigUint> {
        let w = seeded_words(3 * count, seed);
        (0..count)
            .map(|k| big(&w[3 * k..3 * k + 3]) >> (k % 192))
            .collect()
    }

    #[test]
    fn combine_recovers_coefficients_below_2_to_192() {
        let mut values = special_values();
        values.extend(random_values(2000, 5));
        let lifts: [[u64; K]; 3] = [[0; K], [3; K], [1, 2, 3, 0]];
        for scale in scales() {
            let crt = Crt50::new(scale);
            for (n, v) in values.iter().enumerate() {
                let r = scaled_residues(v, scale, lifts[n % 3]);
                let got = crt.combine(r);
                assert_eq!(big(&got), *v, "scale {scale:?} residues {r:?}");
                assert_eq!(big(&crt.combine_wide(r)), *v);
            }
        }
    }

    /// Residues at the very top of their range, `4p_i - 1`, alone and
    /// together, with `combine_wide` over the whole range `[0, P)`: the
    /// sums inside the digits reach their largest there.
    #[test]
    fn residues_at_the_top_of_their_ranges() {
        let p_all = big(&prime_product());
        let p_big = PRIMES.map(|pr| BigUint::from(pr.modulus.p));
        for scale in scales() {
            let crt = Crt50::new(scale);
            for mask in 0u32..16 {
                // residue i is 4p_i - 1 where bit i is set, else 0 or 2p_i
                let r: [u64; K] = core::array::from_fn(|i| {
                    let p = PRIMES[i].modulus.p;
                    if mask >> i & 1 == 1 {
                        4 * p - 1
                    } else {
                        (mask as u64 % 2) * 2 * p
                    }
                });
                // the value by the textbook CRT over big integers
                let mut v = BigUint::from(0u32);
                for i in 0..K {
                    let m = PRIMES[i].modulus;
                    let x = m.mul(r[i] % m.p, m.inv(scale[i] % m.p));
                    let others = &p_all / &p_big[i];
                    let inv = m.inv(residue(&others, m.p));
                    v += others * BigUint::from(m.mul(x, inv));
                }
                v %= &p_all;
                assert_eq!(big(&crt.combine_wide(r)), v, "mask {mask:b}");
            }
            // and values just below P, whose residues are all lifted by 3p
            let one = BigUint::from(1u32);
            for v in [&p_all - &one, &p_all - BigUint::from(2u32)] {
                let r = scaled_residues(&v, scale, [3; K]);
                assert_eq!(big(&crt.combine_wide(r)), v);
            }
        }
    }

    #[test]
    fn coefficients_match_combine_and_num_bigint() {
        let scale = [1 << 12; K];
        let crt = Crt50::for_transform_len(1 << 12);
        let mut values = special_values();
        values.extend(random_values(500, 9));
        let rs: Vec<[u64; K]> = values
            .iter()
            .enumerate()
            .map(|(n, v)| scaled_residues(v, scale, [n as u64 % 4; K]))
            .collect();
        let cols: [Vec<u64>; K] = core::array::from_fn(|i| rs.iter().map(|r| r[i]).collect());
        let mut out = vec![[0u64; 3]; values.len()];
        crt.coefficients([&cols[0], &cols[1], &cols[2], &cols[3]], &mut out);
        for (o, v) in out.iter().zip(&values) {
            assert_eq!(big(o), *v);
        }
    }

    #[test]
    #[should_panic(expected = "coefficient exceeds 192 bits")]
    fn coefficients_refuse_2_to_192() {
        let crt = Crt50::new([1; K]);
        let v = BigUint::from(1u32) << 192usize;
        let r = scaled_residues(&v, [1; K], [0; K]);
        let cols = r.map(|x| vec![0, x]);
        let mut out = vec![[0u64; 3]; 2];
        crt.coefficients([&cols[0], &cols[1], &cols[2], &cols[3]], &mut out);
    }

    #[test]
    #[should_panic(expected = "differ in length")]
    fn coefficients_refuse_mismatched_lengths() {
        let crt = Crt50::new([1; K]);
        let (a, b) = (vec![0u64; 3], vec![0u64; 2]);
        let mut out = vec![[0u64; 3]; 3];
        crt.coefficients([&a, &a, &b, &a], &mut out);
    }

    #[test]
    #[should_panic(expected = "is 0 modulo")]
    fn a_scale_divisible_by_a_prime_is_refused() {
        Crt50::new([1, 1, PRIMES[2].modulus.p, 1]);
    }

    /// Whole products through the transforms of every path this CPU runs:
    /// four primes, unscaled pointwise products, the length folded into
    /// the CRT, against the schoolbook product; all-maximal limbs give the
    /// largest coefficients.
    #[test]
    fn transforms_and_crt_give_exact_products() {
        let n = 256usize;
        let crt = Crt50::for_transform_len(n as u64);
        let operands = [
            (seeded_words(100, 1), seeded_words(156, 2)),
            (vec![u64::MAX; 128], vec![u64::MAX; 128]),
            (vec![u64::MAX; 1], seeded_words(200, 3)),
        ];
        for k in Kernel::ALL.into_iter().filter(|k| k.is_supported()) {
            for (a, b) in &operands {
                let res: Vec<Vec<u64>> = PRIMES
                    .iter()
                    .map(|pr| {
                        let (m, tw) = (pr.modulus, Twiddles::new(pr, n));
                        let lift = |x: &[u64]| {
                            let mut v: Vec<u64> = x.iter().map(|w| w % m.p).collect();
                            v.resize(n, 0);
                            v
                        };
                        let (mut fa, mut fb) = (lift(a), lift(b));
                        k.forward(&mut fa, &tw);
                        k.forward(&mut fb, &tw);
                        k.pointwise(&mut fa, &fb, 1, &m);
                        k.inverse(&mut fa, &tw);
                        fa
                    })
                    .collect();
                let mut out = vec![[0u64; 3]; n];
                crt.coefficients([&res[0], &res[1], &res[2], &res[3]], &mut out);
                let mut want = schoolbook_convolution(a, b);
                want.resize(n, [0; 3]);
                assert_eq!(out, want, "{k:?} {}x{}", a.len(), b.len());
            }
        }
    }

    /// The checked block form on every path against num-bigint: the
    /// special and random values with every lift, in blocks that end on
    /// and off the vector width and the digit block; then residues no
    /// product leaves (a bit above 52, a value of 2^192 or more) make it
    /// report false rather than panic.
    #[test]
    fn checked_coefficients_match_the_reference_on_every_path() {
        let mut values = special_values();
        values.retain(|v| v.bits() <= 192);
        values.extend(random_values(700, 91));
        let scale = [1 << 20; K];
        let crt = Crt50::new(scale);
        let res: Vec<[u64; K]> = values
            .iter()
            .enumerate()
            .map(|(k, v)| scaled_residues(v, scale, [(k % 4) as u64; K]))
            .collect();
        let cols: [Vec<u64>; K] = core::array::from_fn(|i| res.iter().map(|r| r[i]).collect());
        for kernel in Kernel::ALL.into_iter().filter(|k| k.is_supported()) {
            for len in [0usize, 1, 7, 8, 9, 255, 256, 257, values.len()] {
                let mut out = vec![[0u64; 3]; len];
                let r = [
                    &cols[0][..len],
                    &cols[1][..len],
                    &cols[2][..len],
                    &cols[3][..len],
                ];
                assert!(
                    crt.coefficients_checked(kernel, &r, &mut out),
                    "{kernel:?} {len}"
                );
                for (k, o) in out.iter().enumerate() {
                    assert_eq!(big(o), values[k], "{kernel:?} len {len} value {k}");
                }
            }
            // A residue with a bit above 52, anywhere in a block.
            for at in [0usize, 5, 300] {
                let mut bad = cols.clone();
                bad[at % K][at] |= 1 << 60;
                let r = [&bad[0][..], &bad[1][..], &bad[2][..], &bad[3][..]];
                let mut out = vec![[0u64; 3]; values.len()];
                assert!(
                    !crt.coefficients_checked(kernel, &r, &mut out),
                    "{kernel:?} bit at {at}"
                );
            }
            // Residues of a value of 2^192 and more.
            let big_value = (BigUint::from(1u32) << 192usize) + BigUint::from(12345u32);
            let r1 = scaled_residues(&big_value, scale, [0; K]);
            let r = [&r1[0..1], &r1[1..2], &r1[2..3], &r1[3..4]];
            let mut out = vec![[0u64; 3]; 1];
            assert!(
                !crt.coefficients_checked(kernel, &r, &mut out),
                "{kernel:?} 2^192"
            );
        }
    }

    /// Three residues: every value below the product of the first three
    /// primes (its neighbours at each partial product, the largest
    /// coefficient three primes may hold, `P_3 - 1`, and seeded values) comes
    /// back exactly on every path, from residues lifted anywhere in
    /// `[0, 4p)`.
    #[test]
    fn three_residues_recover_values_below_three_primes() {
        use crate::ntt50::primes::{product_of_first, MAX_EXACT_TERMS_THREE};
        let p3 = big(&product_of_first(3));
        let one = BigUint::from(1u32);
        let max_limb_sq = BigUint::from(u64::MAX) * BigUint::from(u64::MAX);
        let mut values = vec![
            BigUint::from(0u32),
            one.clone(),
            &p3 - &one,
            &p3 - BigUint::from(2u32),
            &max_limb_sq * BigUint::from(MAX_EXACT_TERMS_THREE as u64),
            BigUint::from(PRIMES[0].modulus.p),
            BigUint::from(PRIMES[0].modulus.p) * BigUint::from(PRIMES[1].modulus.p) - &one,
        ];
        values.extend(random_values(500, 93).into_iter().map(|v| v % &p3));
        let scale = [3 << 20; K];
        let crt = Crt50::new(scale);
        let res: Vec<[u64; K]> = values
            .iter()
            .enumerate()
            .map(|(k, v)| scaled_residues(v, scale, [(k % 4) as u64; K]))
            .collect();
        let cols: Vec<Vec<u64>> = (0..3).map(|i| res.iter().map(|r| r[i]).collect()).collect();
        for kernel in Kernel::ALL.into_iter().filter(|k| k.is_supported()) {
            let r: Vec<&[u64]> = cols.iter().map(|c| &c[..]).collect();
            let mut out = vec![[0u64; 3]; values.len()];
            assert!(crt.coefficients_checked(kernel, &r, &mut out), "{kernel:?}");
            for (k, o) in out.iter().enumerate() {
                assert_eq!(big(o), values[k], "{kernel:?} value {k}");
            }
        }
    }

    /// The signed form read off the top digit equals the long way (value,
    /// then a 256-bit comparison with half the modulus) for three and four
    /// primes: top digits on both sides of half and at it, lower digits at
    /// their ends and random.
    #[test]
    fn signed_digits_match_the_long_way() {
        use crate::ntt50::primes::product_of_first;
        let crt = Crt50::new([1; K]);
        let mut rng = crate::rng::Rng::new(17);
        for count in [3usize, 4] {
            let modulus = product_of_first(count);
            let p = |i: usize| crt.m[i].p;
            let half = (p(count - 1) - 1) / 2;
            let tops = [0, 1, half - 1, half, half + 1, p(count - 1) - 1];
            for &top in &tops {
                for round in 0..200 {
                    let mut y = [0u64; K];
                    for (i, d) in y.iter_mut().enumerate().take(count - 1) {
                        *d = match round % 4 {
                            0 => 0,
                            1 => p(i) - 1,
                            2 => (p(i) - 1) / 2,
                            _ => rng.below(p(i)),
                        };
                    }
                    y[count - 1] = top;
                    let want = to_signed(crt.value_of_digits(y), &modulus);
                    assert_eq!(
                        crt.signed_value_of_digits(y, count, &modulus),
                        want,
                        "count {count} digits {y:?}"
                    );
                }
            }
        }
    }
}
