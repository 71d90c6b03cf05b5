//! In-cache number-theoretic transforms of power-of-two length.
//!
//! The forward transform is a radix-2 decimation in frequency: natural order
//! in, bit-reversed order out. The inverse is the matching decimation in
//! time: bit-reversed in, natural out, scaled by the length. A convolution
//! multiplies pointwise in the bit-reversed order, so no permutation is ever
//! done.
//!
//! Butterflies are lazy (values stay below `2p` or `4p` between stages, with
//! `p < 2^62` so `4p < 2^64`) and twiddles use Shoup's precomputed
//! quotients, so a butterfly costs one Shoup product and a few adds.
//!
//! Every kernel exists in a single-vector form and a "lanes" form that
//! transforms `lanes` interleaved vectors at once (element `i` of lane `l` at
//! `i * lanes + l`), used for the column transforms of the four-step
//! decomposition: one twiddle load serves all lanes.
//!
//! Kernels take slices and return nothing: no I/O and no allocation.

use crate::arith::primes::NttPrime;
use crate::arith::{Modulus, ShoupConst};

/// Forward and inverse twiddles of one transform length for one prime.
///
/// Stage tables are stored heap-style: entry `m + j` (for `j < m`) is
/// `w_(2m)^j`, the twiddle of the butterfly stage whose halves are `m` apart.
#[derive(Clone, Debug)]
pub struct Twiddles {
    len: usize,
    fwd: Vec<ShoupConst>,
    inv: Vec<ShoupConst>,
}

impl Twiddles {
    /// Tables for transforms of length `len` (a power of two) modulo `prime`.
    pub fn new(prime: &NttPrime, len: usize) -> Self {
        assert!(len.is_power_of_two());
        let m = prime.modulus;
        let mut fwd = vec![ShoupConst::default(); len.max(1)];
        let mut inv = vec![ShoupConst::default(); len.max(1)];
        let mut half = 1;
        while half < len {
            let w = prime.root_of_unity(2 * half as u64);
            let wi = m.inv(w);
            let (mut x, mut xi) = (1u64, 1u64);
            for j in 0..half {
                fwd[half + j] = ShoupConst::new(x, m.p);
                inv[half + j] = ShoupConst::new(xi, m.p);
                x = m.mul(x, w);
                xi = m.mul(xi, wi);
            }
            half *= 2;
        }
        Twiddles { len, fwd, inv }
    }

    /// The transform length these tables serve.
    pub fn len(&self) -> usize {
        self.len
    }

    /// True for the trivial length-1 transform... never empty in practice.
    pub fn is_empty(&self) -> bool {
        self.len == 0
    }
}

/// Forward transform in place: input in `[0, 2p)`, natural order; output in
/// `[0, 2p)`, bit-reversed order.
#[inline(never)]
pub fn forward(a: &mut [u64], tw: &Twiddles, m: &Modulus) {
    debug_assert_eq!(a.len(), tw.len);
    let (p, two_p) = (m.p, m.two_p);
    let mut half = a.len() / 2;
    while half >= 2 {
        let stage = &tw.fwd[half + 1..2 * half];
        for block in a.chunks_exact_mut(2 * half) {
            let (lo, hi) = block.split_at_mut(half);
            // The first twiddle of every block is 1: no product needed.
            dif_unit(&mut lo[0], &mut hi[0], two_p);
            for ((x, y), w) in lo[1..].iter_mut().zip(hi[1..].iter_mut()).zip(stage) {
                let (u, v) = (*x, *y);
                let s = u + v;
                *x = if s >= two_p { s - two_p } else { s };
                *y = w.mul_lazy(u + two_p - v, p);
            }
        }
        half /= 2;
    }
    if a.len() >= 2 {
        for pair in a.chunks_exact_mut(2) {
            let (x, y) = pair.split_at_mut(1);
            dif_unit(&mut x[0], &mut y[0], two_p);
        }
    }
}

/// A decimation-in-frequency butterfly with twiddle 1, keeping `[0, 2p)`.
#[inline(always)]
fn dif_unit(x: &mut u64, y: &mut u64, two_p: u64) {
    let (u, v) = (*x, *y);
    let s = u + v;
    let d = u + two_p - v;
    *x = if s >= two_p { s - two_p } else { s };
    *y = if d >= two_p { d - two_p } else { d };
}

/// A decimation-in-time butterfly with twiddle 1: `[0, 4p)` in and out.
#[inline(always)]
fn dit_unit(x: &mut u64, y: &mut u64, two_p: u64) {
    let u = if *x >= two_p { *x - two_p } else { *x };
    let t = if *y >= two_p { *y - two_p } else { *y };
    *x = u + t;
    *y = u + two_p - t;
}

/// Inverse transform in place: input in `[0, 4p)`, bit-reversed order;
/// output in `[0, 4p)`, natural order, multiplied by the length.
#[inline(never)]
pub fn inverse(a: &mut [u64], tw: &Twiddles, m: &Modulus) {
    debug_assert_eq!(a.len(), tw.len);
    let (p, two_p) = (m.p, m.two_p);
    if a.len() >= 2 {
        for pair in a.chunks_exact_mut(2) {
            let (x, y) = pair.split_at_mut(1);
            dit_unit(&mut x[0], &mut y[0], two_p);
        }
    }
    let mut half = 2;
    while half < a.len() {
        let stage = &tw.inv[half + 1..2 * half];
        for block in a.chunks_exact_mut(2 * half) {
            let (lo, hi) = block.split_at_mut(half);
            dit_unit(&mut lo[0], &mut hi[0], two_p);
            for ((x, y), w) in lo[1..].iter_mut().zip(hi[1..].iter_mut()).zip(stage) {
                let u = if *x >= two_p { *x - two_p } else { *x };
                let t = w.mul_lazy(*y, p);
                *x = u + t;
                *y = u + two_p - t;
            }
        }
        half *= 2;
    }
}

/// [`forward`] on `lanes` interleaved vectors of length `tw.len()`.
#[inline(never)]
pub fn forward_lanes(a: &mut [u64], lanes: usize, tw: &Twiddles, m: &Modulus) {
    debug_assert_eq!(a.len(), tw.len * lanes);
    let (p, two_p) = (m.p, m.two_p);
    let mut half = tw.len / 2;
    while half >= 1 {
        let stage = &tw.fwd[half..2 * half];
        for block in a.chunks_exact_mut(2 * half * lanes) {
            let (lo, hi) = block.split_at_mut(half * lanes);
            for ((xs, ys), w) in lo
                .chunks_exact_mut(lanes)
                .zip(hi.chunks_exact_mut(lanes))
                .zip(stage)
            {
                for (x, y) in xs.iter_mut().zip(ys.iter_mut()) {
                    let (u, v) = (*x, *y);
                    let s = u + v;
                    *x = if s >= two_p { s - two_p } else { s };
                    *y = w.mul_lazy(u + two_p - v, p);
                }
            }
        }
        half /= 2;
    }
}

/// [`inverse`] on `lanes` interleaved vectors of length `tw.len()`.
#[inline(never)]
pub fn inverse_lanes(a: &mut [u64], lanes: usize, tw: &Twiddles, m: &Modulus) {
    debug_assert_eq!(a.len(), tw.len * lanes);
    let (p, two_p) = (m.p, m.two_p);
    let mut half = 1;
    while half < tw.len {
        let stage = &tw.inv[half..2 * half];
        for block in a.chunks_exact_mut(2 * half * lanes) {
            let (lo, hi) = block.split_at_mut(half * lanes);
            for ((xs, ys), w) in lo
                .chunks_exact_mut(lanes)
                .zip(hi.chunks_exact_mut(lanes))
                .zip(stage)
            {
                for (x, y) in xs.iter_mut().zip(ys.iter_mut()) {
                    let u = if *x >= two_p { *x - two_p } else { *x };
                    let t = w.mul_lazy(*y, p);
                    *x = u + t;
                    *y = u + two_p - t;
                }
            }
        }
        half *= 2;
    }
}

/// Reverses the low `bits` bits of `i`.
pub fn bit_reverse(i: usize, bits: u32) -> usize {
    if bits == 0 {
        0
    } else {
        i.reverse_bits() >> (usize::BITS - bits)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::arith::primes::PRIMES;
    use crate::test_oracles::{naive_dft, seeded_words};

    #[test]
    fn forward_matches_naive_dft_in_bit_reversed_order() {
        for pr in &PRIMES {
            let m = pr.modulus;
            for log in 0..=10u32 {
                let n = 1usize << log;
                let tw = Twiddles::new(pr, n);
                let input: Vec<u64> = seeded_words(n, log as u64 + 1)
                    .iter()
                    .map(|x| x % (2 * m.p))
                    .collect();
                let reduced: Vec<u64> = input.iter().map(|x| x % m.p).collect();
                let expect = naive_dft(&reduced, pr.root_of_unity(n as u64), m.p);
                let mut a = input.clone();
                forward(&mut a, &tw, &m);
                for (k, e) in expect.iter().enumerate() {
                    let got = a[bit_reverse(k, log)];
                    assert!(got < 2 * m.p);
                    assert_eq!(got % m.p, *e, "n={n} k={k}");
                }
            }
        }
    }

    #[test]
    fn inverse_after_forward_is_length_times_identity() {
        for pr in &PRIMES {
            let m = pr.modulus;
            for log in [0u32, 1, 2, 5, 9, 12] {
                let n = 1usize << log;
                let tw = Twiddles::new(pr, n);
                let input: Vec<u64> = seeded_words(n, 99 + log as u64)
                    .iter()
                    .map(|x| x % m.p)
                    .collect();
                let mut a = input.clone();
                forward(&mut a, &tw, &m);
                inverse(&mut a, &tw, &m);
                let n_mod = n as u64 % m.p;
                for (x, y) in a.iter().zip(&input) {
                    assert!(*x < 4 * m.p);
                    assert_eq!(x % m.p, m.mul(*y, n_mod));
                }
            }
        }
    }

    #[test]
    fn lanes_equal_single_vectors_even_on_garbage_prefilled_lanes() {
        let pr = &PRIMES[1];
        let m = pr.modulus;
        let n = 64;
        let lanes = 5;
        let tw = Twiddles::new(pr, n);
        let vectors: Vec<Vec<u64>> = (0..lanes)
            .map(|l| {
                seeded_words(n, 7 + l as u64)
                    .iter()
                    .map(|x| x % m.p)
                    .collect()
            })
            .collect();
        let mut inter = vec![u64::MAX; n * lanes];
        for (l, v) in vectors.iter().enumerate() {
            for (i, x) in v.iter().enumerate() {
                inter[i * lanes + l] = *x;
            }
        }
        forward_lanes(&mut inter, lanes, &tw, &m);
        for (l, v) in vectors.iter().enumerate() {
            let mut single = v.clone();
            forward(&mut single, &tw, &m);
            for i in 0..n {
                assert_eq!(inter[i * lanes + l] % m.p, single[i] % m.p);
            }
        }
        let mut back = inter.clone();
        inverse_lanes(&mut back, lanes, &tw, &m);
        for (l, v) in vectors.iter().enumerate() {
            for i in 0..n {
                assert_eq!(back[i * lanes + l] % m.p, m.mul(v[i], n as u64));
            }
        }
    }

    /// Cyclic convolution of small known vectors: (1 + 2x + 3x^2)(4 + 5x)
    /// = 4 + 13x + 22x^2 + 15x^3, worked by hand.
    #[test]
    fn convolution_of_small_known_vectors() {
        let pr = &PRIMES[0];
        let m = pr.modulus;
        let tw = Twiddles::new(pr, 4);
        let mut a = vec![1, 2, 3, 0];
        let mut b = vec![4, 5, 0, 0];
        forward(&mut a, &tw, &m);
        forward(&mut b, &tw, &m);
        let n_inv = m.inv(4);
        for (x, y) in a.iter_mut().zip(&b) {
            *x = m.mul(m.mul(*x % m.p, *y % m.p), n_inv);
        }
        inverse(&mut a, &tw, &m);
        let c: Vec<u64> = a.iter().map(|x| x % m.p).collect();
        assert_eq!(c, vec![4, 13, 22, 15]);
    }

    /// Published values: the sympy documentation's and tutorials' examples
    /// of `sympy.discrete.transforms.ntt`, which uses the primitive root of
    /// the prime: `ntt([1, 2, 3, 4, 0, 0, 0, 0], 17)` with root 3^2 gives
    /// [10, 16, 6, 11, 15, 13, 7, 15], and `ntt([15, 21, 13, 44], 769)` with
    /// root 11^192 gives [93, 114, 732, 659].
    #[test]
    fn published_small_prime_examples() {
        type Case = (u64, u64, u32, &'static [u64], &'static [u64]);
        let cases: [Case; 2] = [
            (
                17,
                3,
                4,
                &[1, 2, 3, 4, 0, 0, 0, 0],
                &[10, 16, 6, 11, 15, 13, 7, 15],
            ),
            (769, 11, 8, &[15, 21, 13, 44], &[93, 114, 732, 659]),
        ];
        for (p, g, two_adicity, input, expect) in cases {
            let prime = NttPrime {
                modulus: Modulus::new(p),
                two_adicity,
                generator: g,
            };
            let n = input.len();
            let tw = Twiddles::new(&prime, n);
            let mut a = input.to_vec();
            forward(&mut a, &tw, &prime.modulus);
            let bits = n.trailing_zeros();
            let natural: Vec<u64> = (0..n).map(|k| a[bit_reverse(k, bits)] % p).collect();
            assert_eq!(natural, expect, "modulo {p}");
        }
    }

    /// The transform of a unit impulse is all ones, and that of a constant
    /// vector is (n, 0, ..., 0): textbook identities (common practice).
    #[test]
    fn impulse_and_constant_transforms() {
        for pr in &PRIMES {
            let m = pr.modulus;
            let n = 256;
            let tw = Twiddles::new(pr, n);
            let mut imp = vec![0u64; n];
            imp[0] = 1;
            forward(&mut imp, &tw, &m);
            assert!(imp.iter().all(|&x| x % m.p == 1));
            let mut ones = vec![1u64; n];
            forward(&mut ones, &tw, &m);
            assert_eq!(ones[0] % m.p, n as u64);
            assert!(ones[1..].iter().all(|&x| x % m.p == 0));
        }
    }
}
