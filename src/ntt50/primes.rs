//! Four NTT primes below 2^50 and the exactness bound of a convolution
//! modulo all four.
//!
//! ## The primes
//! They are the four largest primes `p < 2^50` with `p = 1 (mod 3 * 2^32)`,
//! found by stepping down from `2^50` in steps of [`SEARCH_STEP`]; the
//! tests repeat the search and recompute each generator (the smallest
//! one). Every `p - 1` is divisible by `2^32` (one by `2^38`) and by 3, so
//! all four support transforms of length up to [`MAX_TRANSFORM_LEN`] = 2^32
//! and of three times a power of two.
//!
//! ## Exactness bound
//! A product coefficient is `c_k = sum a_i * b_(k-i)` over at most
//! `m = min(len a, len b)` terms, each below `(2^64 - 1)^2` for base-2^64
//! limbs (the base-10^19 bound `(10^19 - 1)^2` is smaller). The CRT recovers
//! `c_k` from its four residues when `c_k < P`, the product of the primes,
//! so it suffices that `m * (2^64 - 1)^2 < P`. `P` is just below `2^200`,
//! and the largest `m` the inequality allows is
//! [`MAX_EXACT_TERMS`] `= 4_717_377_846_150_327_924_433`, about `2^71.998`
//! (for base-10^19 limbs about `2^73.77`). That exceeds any 64-bit length,
//! so the bound never binds: the transform length is capped by the roots
//! of unity alone, at [`MAX_TRANSFORM_LEN`] = 2^32 points (a product of up
//! to 2^32 limbs). [`coefficient_bound_holds`] checks the inequality with
//! exact integer arithmetic; compile-time assertions check it at the
//! largest accepted length and at every 64-bit term count.
//!
//! The first three primes alone (product `P_3` about 2^149.9995) are exact
//! for up to [`MAX_EXACT_TERMS_THREE`] terms of base-2^64 limbs (just below
//! 2^22) and 14_267_250 terms of base-10^19 limbs ([`bound_holds_for_first`]).
//! The engine feeds these primes balanced digits (each limb as a signed
//! digit of at most half the radix, see [`balanced_bound_holds_for_first`]),
//! which quarters the size of a coefficient's terms and so doubles those
//! limits: [`MAX_BALANCED_TERMS_THREE`] (about 2^23) binary and
//! [`MAX_BALANCED_TERMS_THREE_DECIMAL`] decimal limbs. The planner uses three
//! primes when the shorter operand allows it, which saves a quarter of the
//! transforms and of the memory.

use super::Modulus50;

/// One NTT prime below 2^50 with a generator of its multiplicative group.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Prime50 {
    /// Arithmetic constants of the prime.
    pub modulus: Modulus50,
    /// The exponent of the largest power of two dividing `p - 1`.
    pub two_adicity: u32,
    /// The smallest generator of the multiplicative group modulo `p`.
    pub generator: u64,
}

/// Every prime is `1 + k * SEARCH_STEP`: 3 and 2^32 divide `p - 1`.
pub const SEARCH_STEP: u64 = 3 << 32;

/// The primes, largest first (the order a CRT would combine them in).
pub const PRIMES: [Prime50; 4] = [
    // p - 1 = 2^32 * 3 * 23 * 29 * 131
    Prime50::new(0x0003_fff3_0000_0001, 32, 5),
    // p - 1 = 2^32 * 3^2 * 5^3 * 233
    Prime50::new(0x0003_ffed_0000_0001, 32, 7),
    // p - 1 = 2^38 * 3^2 * 5 * 7 * 13
    Prime50::new(0x0003_ffc0_0000_0001, 38, 11),
    // p - 1 = 2^32 * 3^2 * 13 * 2239
    Prime50::new(0x0003_ff4b_0000_0001, 32, 29),
];

/// The longest power-of-two transform all four primes support.
pub const MAX_TRANSFORM_LEN: u64 = 1 << 32;

/// The largest number of terms per coefficient for which a convolution of
/// base-2^64 limbs is exact: `floor((P - 1) / (2^64 - 1)^2)`.
pub const MAX_EXACT_TERMS: u128 = 4_717_377_846_150_327_924_433;

impl Prime50 {
    /// Bundles a prime with its two-adicity and generator.
    pub const fn new(p: u64, two_adicity: u32, generator: u64) -> Self {
        Prime50 {
            modulus: Modulus50::new(p),
            two_adicity,
            generator,
        }
    }

    /// A primitive `n`-th root of unity for any `n` dividing `p - 1`:
    /// `g^((p-1)/n)` with `g` the generator, so that the roots of all
    /// lengths are powers of one another (`root(n)^k = root(n / k)`).
    pub const fn root_of_unity_any(&self, n: u64) -> u64 {
        assert!(n > 0 && (self.modulus.p - 1).is_multiple_of(n));
        self.modulus.pow(self.generator, (self.modulus.p - 1) / n)
    }

    /// A primitive `n`-th root of unity, `n` a power of two up to
    /// `2^two_adicity`.
    pub const fn root_of_unity(&self, n: u64) -> u64 {
        assert!(n.is_power_of_two() && n.trailing_zeros() <= self.two_adicity);
        self.modulus.pow(self.generator, (self.modulus.p - 1) / n)
    }
}

/// `words * k` for a little-endian 256-bit number that stays below 2^256.
const fn mul_word(words: [u64; 4], k: u64) -> [u64; 4] {
    let mut out = [0u64; 4];
    let mut carry = 0u128;
    let mut i = 0;
    while i < 4 {
        let t = words[i] as u128 * k as u128 + carry;
        out[i] = t as u64;
        carry = t >> 64;
        i += 1;
    }
    assert!(carry == 0, "256-bit overflow");
    out
}

/// `a + b` for little-endian 256-bit numbers whose sum stays below 2^256.
const fn add_words(a: [u64; 4], b: [u64; 4]) -> [u64; 4] {
    let mut out = [0u64; 4];
    let mut carry = 0u128;
    let mut i = 0;
    while i < 4 {
        let t = a[i] as u128 + b[i] as u128 + carry;
        out[i] = t as u64;
        carry = t >> 64;
        i += 1;
    }
    assert!(carry == 0, "256-bit overflow");
    out
}

/// `a < b` for little-endian 256-bit numbers.
const fn less_than(a: [u64; 4], b: [u64; 4]) -> bool {
    let mut i = 4;
    while i > 0 {
        i -= 1;
        if a[i] != b[i] {
            return a[i] < b[i];
        }
    }
    false
}

/// `P`, the product of the four primes, as little-endian 64-bit words.
pub const fn prime_product() -> [u64; 4] {
    product_of_first(PRIMES.len())
}

/// The product of the first `count` primes, as little-endian 64-bit words.
pub const fn product_of_first(count: usize) -> [u64; 4] {
    assert!(count <= PRIMES.len());
    let mut acc = [1u64, 0, 0, 0];
    let mut i = 0;
    while i < count {
        acc = mul_word(acc, PRIMES[i].modulus.p);
        i += 1;
    }
    acc
}

/// The largest number of terms per coefficient for which a convolution of
/// base-2^64 limbs is exact modulo the first three primes alone:
/// `floor((P_3 - 1) / (2^64 - 1)^2)`, just below 2^22 (`P_3` is about
/// 2^149.9995). For base-10^19 limbs the limit is 14_267_250 terms.
pub const MAX_EXACT_TERMS_THREE: u128 = 4_192_768;

/// True when `terms * max_limb^2 < P`: a convolution with at most `terms`
/// products per coefficient of limbs up to `max_limb` is exact after the
/// CRT. `terms` must be below 2^128.
pub const fn coefficient_bound_holds(terms: u128, max_limb: u64) -> bool {
    bound_holds_for_first(PRIMES.len(), terms, max_limb)
}

/// [`coefficient_bound_holds`] for the product of the first `count` primes:
/// a convolution whose coefficients need only `count` residues.
pub const fn bound_holds_for_first(count: usize, terms: u128, max_limb: u64) -> bool {
    product_below_primes(count, terms, max_limb as u128 * max_limb as u128)
}

/// `terms * term < P_count`, exactly in 256 bits.
const fn product_below_primes(count: usize, terms: u128, term: u128) -> bool {
    let term_words = [term as u64, (term >> 64) as u64, 0, 0];
    // terms * term, split into terms' two words so each step multiplies by one
    let lo = mul_word(term_words, terms as u64);
    let hi = mul_word(term_words, (terms >> 64) as u64);
    let hi_shifted = [0, hi[0], hi[1], hi[2]];
    assert!(hi[3] == 0, "256-bit overflow");
    less_than(add_words(lo, hi_shifted), product_of_first(count))
}

/// The largest number of terms per coefficient for which a convolution of
/// base-2^64 limbs in balanced digits (module [`crate::fourstep`]'s digit
/// form) is exact modulo the first three primes: about 2^23, twice the
/// plain form's [`MAX_EXACT_TERMS_THREE`]. For base-10^19 limbs the limit
/// is [`MAX_BALANCED_TERMS_THREE_DECIMAL`].
pub const MAX_BALANCED_TERMS_THREE: u128 = 8_385_533;

/// [`MAX_BALANCED_TERMS_THREE`] for base-10^19 limbs.
pub const MAX_BALANCED_TERMS_THREE_DECIMAL: u128 = 28_534_498;

/// True when a convolution of balanced digits of limbs in base
/// `2 * half` (2^64: `half = 2^63`; 10^19: `half = 5 * 10^18`) with at most
/// `terms` products per coefficient is recovered exactly, as a signed
/// value, from its residues modulo the first `count` primes.
///
/// # Why
/// A balanced digit is `x_i + t_(i-1) - 2 half t_i` with
/// `t_i = [x_i >= half]`, so it lies in `[-half, half]`; the top digit
/// keeps its carry in and no carry out, so it lies in `[0, 2 half]`. A
/// coefficient `c_k = sum d_i e_(k-i)` has at most `m = terms` terms, of
/// which at most one involves the first operand's top digit and one the
/// second's (each at most `2 half^2` in size); the single term of two top
/// digits (`4 half^2`) stands alone in its coefficient. So
/// `|c_k| <= max(m + 2, 4) half^2 <= (m + 3) half^2`. The CRT leaves the
/// residue class of `c_k` as a value `v` in `[0, P)`; taking `v - P` for
/// `v > (P - 1) / 2` recovers every integer of size at most `(P - 1) / 2`,
/// so it suffices that `2 (m + 3) half^2 < P`, which this checks exactly.
pub const fn balanced_bound_holds_for_first(count: usize, terms: u128, half: u64) -> bool {
    product_below_primes(count, terms + 3, 2 * (half as u128 * half as u128))
}

const _: () = assert!(balanced_bound_holds_for_first(
    3,
    MAX_BALANCED_TERMS_THREE,
    1 << 63
));
const _: () = assert!(!balanced_bound_holds_for_first(
    3,
    MAX_BALANCED_TERMS_THREE + 1,
    1 << 63
));
const _: () = assert!(balanced_bound_holds_for_first(
    3,
    MAX_BALANCED_TERMS_THREE_DECIMAL,
    5_000_000_000_000_000_000
));
const _: () = assert!(!balanced_bound_holds_for_first(
    3,
    MAX_BALANCED_TERMS_THREE_DECIMAL + 1,
    5_000_000_000_000_000_000
));
// The four primes in balanced digits, at their longest transform.
const _: () = assert!(balanced_bound_holds_for_first(
    4,
    MAX_TRANSFORM_LEN as u128,
    1 << 63
));
// 2^28-bit operands (2^22 limbs) take three primes in balanced digits.
const _: () = assert!(balanced_bound_holds_for_first(3, 1 << 22, 1 << 63));

const _: () = assert!(bound_holds_for_first(3, MAX_EXACT_TERMS_THREE, u64::MAX));
const _: () = assert!(!bound_holds_for_first(
    3,
    MAX_EXACT_TERMS_THREE + 1,
    u64::MAX
));
const _: () = assert!(bound_holds_for_first(
    3,
    14_267_250,
    9_999_999_999_999_999_999
));
const _: () = assert!(!bound_holds_for_first(
    3,
    14_267_251,
    9_999_999_999_999_999_999
));

const _: () = assert!(coefficient_bound_holds(MAX_TRANSFORM_LEN as u128, u64::MAX));
const _: () = assert!(coefficient_bound_holds(u64::MAX as u128, u64::MAX));
const _: () = assert!(coefficient_bound_holds(MAX_EXACT_TERMS, u64::MAX));
const _: () = assert!(!coefficient_bound_holds(MAX_EXACT_TERMS + 1, u64::MAX));
const _: () = {
    let mut i = 0;
    while i < PRIMES.len() {
        let p = PRIMES[i].modulus.p;
        assert!(p < 1 << 50 && (p - 1).is_multiple_of(SEARCH_STEP));
        assert!(1 << PRIMES[i].two_adicity >= MAX_TRANSFORM_LEN);
        i += 1;
    }
};

#[cfg(test)]
mod tests {
    use super::*;
    use crate::radix::DEC_BASE;
    use crate::residue::is_prime;

    /// The search the constants came from: the `count` largest primes below
    /// 2^50 that are 1 modulo [`SEARCH_STEP`].
    fn search(count: usize) -> Vec<u64> {
        let mut k = ((1u64 << 50) - 2) / SEARCH_STEP;
        let mut found = Vec::new();
        while found.len() < count {
            let p = k * SEARCH_STEP + 1;
            if is_prime(p) {
                found.push(p);
            }
            k -= 1;
        }
        found
    }

    /// The distinct prime factors of `n` by trial division.
    fn prime_factors(mut n: u64) -> Vec<u64> {
        let mut out = Vec::new();
        let mut d = 2;
        while d * d <= n {
            if n.is_multiple_of(d) {
                out.push(d);
                while n.is_multiple_of(d) {
                    n /= d;
                }
            }
            d += 1;
        }
        if n > 1 {
            out.push(n);
        }
        out
    }

    /// `g` generates the group modulo `p` iff `g^((p-1)/q) != 1` for every
    /// prime `q` dividing `p - 1`.
    fn smallest_generator(p: u64) -> u64 {
        let m = Modulus50::new(p);
        let factors = prime_factors(p - 1);
        (2..)
            .find(|&g| factors.iter().all(|&q| m.pow(g, (p - 1) / q) != 1))
            .unwrap()
    }

    #[test]
    fn constants_are_what_the_search_finds() {
        let found = search(PRIMES.len());
        let have: Vec<u64> = PRIMES.iter().map(|pr| pr.modulus.p).collect();
        assert_eq!(have, found);
        for pr in PRIMES {
            let p = pr.modulus.p;
            assert_eq!((p - 1).trailing_zeros(), pr.two_adicity, "{p:#x}");
            assert_eq!(smallest_generator(p), pr.generator, "{p:#x}");
            assert_eq!((p - 1) % 3, 0);
        }
        // the helpers can fail: a composite and a prime with a known generator
        assert!(!is_prime(0x0003_fff3_0000_0001 + SEARCH_STEP));
        assert_eq!(smallest_generator(17), 3);
        assert_eq!(smallest_generator(7681), 17);
    }

    #[test]
    fn roots_have_exact_order() {
        for pr in PRIMES {
            let m = pr.modulus;
            for k in [1u32, 2, 12, 31, pr.two_adicity] {
                let w = pr.root_of_unity(1 << k);
                assert_eq!(m.pow(w, 1 << k), 1);
                assert_eq!(m.pow(w, 1 << (k - 1)), m.p - 1, "primitive");
            }
            // a cube root of unity exists because 3 divides p - 1
            let c = m.pow(pr.generator, (m.p - 1) / 3);
            assert_ne!(c, 1);
            assert_eq!(m.pow(c, 3), 1);
        }
    }

    #[test]
    fn exactness_bound_is_tight_where_claimed() {
        assert!(coefficient_bound_holds(1 << 71, u64::MAX));
        assert!(!coefficient_bound_holds(1 << 72, u64::MAX));
        assert!(coefficient_bound_holds(MAX_EXACT_TERMS, u64::MAX));
        assert!(!coefficient_bound_holds(MAX_EXACT_TERMS + 1, u64::MAX));
        assert!(coefficient_bound_holds(1 << 73, DEC_BASE - 1));
        assert!(!coefficient_bound_holds(1 << 74, DEC_BASE - 1));
        // P is just below 2^200: its top word has 200 - 192 = 8 bits
        let p = prime_product();
        assert_eq!(64 - p[3].leading_zeros(), 8);
        // P mod each prime is zero, computed word by word
        for pr in PRIMES {
            let q = pr.modulus.p as u128;
            let r = p
                .iter()
                .rev()
                .fold(0u128, |r, &w| ((r << 64) | w as u128) % q);
            assert_eq!(r, 0);
        }
    }
}
