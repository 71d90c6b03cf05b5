//! The NTT primes and their roots of unity.
//!
//! Three primes just below 2^62, each with a large power of two (and 3 and
//! 5) dividing `p - 1`, so transforms of length up to 2^40 exist modulo all
//! three. Their product `P` is about 2^186.
//!
//! ## Exactness bound
//! A product coefficient is `c_k = sum a_i * b_(k-i)` over at most
//! `m = min(len a, len b)` terms, each below `(2^64 - 1)^2` (binary limbs; the
//! decimal bound `(10^19 - 1)^2` is smaller). The CRT recovers `c_k` exactly
//! when `c_k < P`, so it suffices that `m * (2^64 - 1)^2 < P`. Since
//! `P > 2^185.99` this holds for every `m <= 2^57`; the transform length is
//! capped at [`MAX_TRANSFORM_LEN`] = 2^40 (the largest power of two dividing
//! every `p - 1`), far inside it. [`coefficient_bound_holds`] checks the
//! inequality with exact integer arithmetic, and a compile-time assertion
//! checks it at the largest accepted length.

use super::Modulus;

/// One NTT prime with the generator of its multiplicative group.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct NttPrime {
    /// Arithmetic constants of the prime.
    pub modulus: Modulus,
    /// The exponent of the largest power of two dividing `p - 1`.
    pub two_adicity: u32,
    /// A generator of the multiplicative group modulo `p`.
    pub generator: u64,
}

/// The primes, in the order the CRT combines them.
pub const PRIMES: [NttPrime; 3] = [
    // 2^62 - 2^46 + 1; p - 1 = 2^46 * 3 * 5 * 17 * 257
    NttPrime {
        modulus: Modulus::new(0x3fff_c000_0000_0001),
        two_adicity: 46,
        generator: find_generator(0x3fff_c000_0000_0001),
    },
    // p - 1 = 2^42 * 3^5 * 5 * 863
    NttPrime {
        modulus: Modulus::new(0x3fff_8400_0000_0001),
        two_adicity: 42,
        generator: find_generator(0x3fff_8400_0000_0001),
    },
    // p - 1 = 2^40 * 3 * 5 * 279607
    NttPrime {
        modulus: Modulus::new(0x3fff_3900_0000_0001),
        two_adicity: 40,
        generator: find_generator(0x3fff_3900_0000_0001),
    },
];

/// The longest transform the primes support: `2^40` points.
pub const MAX_TRANSFORM_LEN: u64 = 1 << 40;

/// The number of primes a product uses.
pub const PRIME_COUNT: usize = PRIMES.len();

impl NttPrime {
    /// A primitive `n`-th root of unity for any `n` dividing `p - 1`:
    /// `g^((p-1)/n)` with `g` the generator, so that the roots of all
    /// lengths are powers of one another (`root(n)^k = root(n / k)`).
    pub const fn root_of_unity_any(&self, n: u64) -> u64 {
        assert!(n > 0 && (self.modulus.p - 1).is_multiple_of(n));
        self.modulus.pow(self.generator, (self.modulus.p - 1) / n)
    }

    /// A primitive `n`-th root of unity, `n` a power of two up to `2^two_adicity`.
    pub const fn root_of_unity(&self, n: u64) -> u64 {
        assert!(n.is_power_of_two() && n.trailing_zeros() <= self.two_adicity);
        self.modulus.pow(self.generator, (self.modulus.p - 1) / n)
    }
}

/// The distinct prime factors of `n` by trial division; `n`'s odd part must be
/// small, as it is for the NTT primes (below 2^22).
const fn prime_factors(mut n: u64) -> ([u64; 16], usize) {
    let mut out = [0u64; 16];
    let mut count = 0;
    let mut d = 2;
    while d * d <= n {
        if n.is_multiple_of(d) {
            out[count] = d;
            count += 1;
            while n.is_multiple_of(d) {
                n /= d;
            }
        }
        d += if d == 2 { 1 } else { 2 };
    }
    if n > 1 {
        out[count] = n;
        count += 1;
    }
    (out, count)
}

/// The smallest generator of the multiplicative group modulo the prime `p`:
/// `g` generates iff `g^((p-1)/q) != 1` for every prime `q | p - 1`.
const fn find_generator(p: u64) -> u64 {
    let m = Modulus::new(p);
    let (factors, count) = prime_factors(p - 1);
    let mut g = 2;
    loop {
        let mut ok = true;
        let mut i = 0;
        while i < count {
            if m.pow(g, (p - 1) / factors[i]) == 1 {
                ok = false;
                break;
            }
            i += 1;
        }
        if ok {
            return g;
        }
        g += 1;
    }
}

/// `P`, the product of the primes, as little-endian 64-bit words.
pub const fn prime_product() -> [u64; 3] {
    let p0 = PRIMES[0].modulus.p as u128;
    let p1 = PRIMES[1].modulus.p as u128;
    let p2 = PRIMES[2].modulus.p as u128;
    let p01 = p0 * p1; // < 2^124
    let lo = (p01 as u64) as u128 * p2;
    let hi = (p01 >> 64) * p2;
    let w0 = lo as u64;
    let mid = (lo >> 64) + (hi as u64) as u128;
    let w1 = mid as u64;
    let w2 = ((hi >> 64) + (mid >> 64)) as u64;
    [w0, w1, w2]
}

/// True when `terms * max_limb^2 < P`: a convolution with at most `terms`
/// products per coefficient of limbs up to `max_limb` is exact after the CRT.
pub const fn coefficient_bound_holds(terms: u64, max_limb: u64) -> bool {
    let sq = max_limb as u128 * max_limb as u128;
    // terms * sq as a 192-bit number (terms < 2^64, sq < 2^128)
    let lo = (sq as u64) as u128 * terms as u128;
    let hi = (sq >> 64) * terms as u128;
    let w0 = lo as u64;
    let mid = (lo >> 64) + (hi as u64) as u128;
    let w1 = mid as u64;
    let w2 = ((hi >> 64) + (mid >> 64)) as u64;
    let p = prime_product();
    // lexicographic comparison from the top word
    if w2 != p[2] {
        return w2 < p[2];
    }
    if w1 != p[1] {
        return w1 < p[1];
    }
    w0 < p[0]
}

const _: () = assert!(coefficient_bound_holds(MAX_TRANSFORM_LEN, u64::MAX));
const _: () = assert!(PRIMES[0].two_adicity >= 40 && PRIMES[1].two_adicity >= 40);
const _: () = assert!(PRIMES[2].two_adicity >= 40);

#[cfg(test)]
mod tests {
    use super::*;

    /// Deterministic Miller-Rabin for 64-bit n: these 12 bases suffice below
    /// 3.3 * 10^24 (a fact of the trade).
    fn is_prime(n: u64) -> bool {
        if n < 2 {
            return false;
        }
        let bases = [2u64, 3, 5, 7, 11, 13, 17, 19, 23, 29, 31, 37];
        for &b in &bases {
            if n.is_multiple_of(b) {
                return n == b;
            }
        }
        let mulm = |a: u64, b: u64| ((a as u128 * b as u128) % n as u128) as u64;
        let powm = |mut b: u64, mut e: u64| {
            let mut r = 1u64;
            while e > 0 {
                if e & 1 == 1 {
                    r = mulm(r, b);
                }
                b = mulm(b, b);
                e >>= 1;
            }
            r
        };
        let s = (n - 1).trailing_zeros();
        let d = (n - 1) >> s;
        'outer: for &a in &bases {
            let mut x = powm(a, d);
            if x == 1 || x == n - 1 {
                continue;
            }
            for _ in 1..s {
                x = mulm(x, x);
                if x == n - 1 {
                    continue 'outer;
                }
            }
            return false;
        }
        true
    }

    #[test]
    fn primes_are_prime_with_claimed_two_adicity() {
        for pr in PRIMES {
            let p = pr.modulus.p;
            assert!(is_prime(p), "{p:#x}");
            assert_eq!((p - 1).trailing_zeros(), pr.two_adicity);
            assert_eq!((p - 1) % 15, 0, "3 and 5 divide p - 1");
        }
        // the test itself can fail: a known composite and a known prime
        assert!(!is_prime(3_215_031_751)); // strong pseudoprime to 2, 3, 5, 7
        assert!(is_prime((1u64 << 61) - 1)); // Mersenne prime M61
    }

    #[test]
    fn roots_have_exact_order() {
        for pr in PRIMES {
            let m = pr.modulus;
            for k in [1u32, 2, 10, 23, 40] {
                let w = pr.root_of_unity(1 << k);
                assert_eq!(m.pow(w, 1 << k), 1);
                assert_eq!(m.pow(w, 1 << (k - 1)), m.p - 1, "primitive");
            }
        }
    }

    #[test]
    fn exactness_bound_is_tight_where_claimed() {
        assert!(coefficient_bound_holds(1 << 57, u64::MAX));
        assert!(!coefficient_bound_holds(1 << 58, u64::MAX));
        assert!(coefficient_bound_holds(
            1 << 59,
            super::super::super::radix::DEC_BASE - 1
        ));
        // log2 P is just below 186
        let p = prime_product();
        assert_eq!(64 - p[2].leading_zeros(), 186 - 128);
    }
}
