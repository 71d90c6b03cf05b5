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
///
/// A length `3 * 2^k` carries a radix-3 step in front of three power-of-two
/// transforms of length `2^k` (see [`Radix3`]).
#[derive(Clone, Debug)]
pub struct Twiddles {
    len: usize,
    fwd: Vec<ShoupConst>,
    inv: Vec<ShoupConst>,
    three: Option<Box<Radix3>>,
}

/// The radix-3 step of a transform of length `n = 3m`: with `w` the
/// primitive `n`-th root `g^((p-1)/n)` and `omega = w^m` a primitive cube
/// root of unity, the forward step maps the thirds `a, b, c` of the input
/// to `y_r[j] = w^(jr) (a_j + omega^r b_j + omega^(2r) c_j)` for `r < 3`,
/// and the length-`m` transform of `y_r` (root `w^3`) holds the outputs
/// `X[3k + r]`, `k` bit-reversed. Since the roots all come from the same
/// generator, `w` is also the root the four-step decomposition assumes for
/// its rows.
#[derive(Clone, Debug)]
pub struct Radix3 {
    /// Tables of the three length-`m` transforms.
    sub: Twiddles,
    /// `omega` and its inverse.
    omega: ShoupConst,
    omega_inv: ShoupConst,
    /// `w^j` and `w^(2j)` for `j < m`, and their inverses.
    fwd1: Vec<ShoupConst>,
    fwd2: Vec<ShoupConst>,
    inv1: Vec<ShoupConst>,
    inv2: Vec<ShoupConst>,
}

/// True for the transform lengths the kernels accept: `2^k` and `3 * 2^k`.
pub fn supported_len(len: usize) -> bool {
    len.is_power_of_two() || (len.is_multiple_of(3) && (len / 3).is_power_of_two())
}

impl Twiddles {
    /// Tables for transforms of length `len` (`2^k` or `3 * 2^k`) modulo
    /// `prime`.
    pub fn new(prime: &NttPrime, len: usize) -> Self {
        assert!(supported_len(len), "transform length {len}");
        if !len.is_power_of_two() {
            return Self::with_radix3(prime, len);
        }
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
        Twiddles {
            len,
            fwd,
            inv,
            three: None,
        }
    }

    fn with_radix3(prime: &NttPrime, len: usize) -> Self {
        let md = prime.modulus;
        let third = len / 3;
        let w = prime.root_of_unity_any(len as u64);
        let wi = md.inv(w);
        let omega = md.pow(w, third as u64);
        let table = |base: u64| -> Vec<ShoupConst> {
            let mut x = 1u64;
            (0..third)
                .map(|_| {
                    let c = ShoupConst::new(x, md.p);
                    x = md.mul(x, base);
                    c
                })
                .collect()
        };
        let three = Radix3 {
            sub: Twiddles::new(prime, third),
            omega: ShoupConst::new(omega, md.p),
            omega_inv: ShoupConst::new(md.inv(omega), md.p),
            fwd1: table(w),
            fwd2: table(md.mul(w, w)),
            inv1: table(wi),
            inv2: table(md.mul(wi, wi)),
        };
        Twiddles {
            len,
            fwd: Vec::new(),
            inv: Vec::new(),
            three: Some(Box::new(three)),
        }
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

/// Decimation-in-frequency butterfly: `(x + y, (x - y) w)`, `[0, 2p)` kept.
#[inline(always)]
fn dif(x: &mut u64, y: &mut u64, w: ShoupConst, p: u64, two_p: u64) {
    let (u, v) = (*x, *y);
    let s = u + v;
    *x = if s >= two_p { s - two_p } else { s };
    *y = w.mul_lazy(u + two_p - v, p);
}

/// Decimation-in-time butterfly: `(x + y w, x - y w)`, `[0, 4p)` kept.
#[inline(always)]
fn dit(x: &mut u64, y: &mut u64, w: ShoupConst, p: u64, two_p: u64) {
    let u = if *x >= two_p { *x - two_p } else { *x };
    let t = w.mul_lazy(*y, p);
    *x = u + t;
    *y = u + two_p - t;
}

/// Splits a block of `4q` elements into its four quarters.
#[inline(always)]
fn quarters(block: &mut [u64], q: usize) -> [&mut [u64]; 4] {
    let (b01, b23) = block.split_at_mut(2 * q);
    let (b0, b1) = b01.split_at_mut(q);
    let (b2, b3) = b23.split_at_mut(q);
    [b0, b1, b2, b3]
}

// The transforms fuse pairs of radix-2 stages into radix-4 steps: the four
// values of two stages stay in registers, halving the loads and stores,
// with the same twiddles (and products) as the radix-2 stages they replace.

/// Forward transform in place: input in `[0, 2p)`, natural order; output in
/// `[0, 2p)`, bit-reversed order.
///
/// For a length `3m` the output holds `X[3k + r]` at `r * m + bitrev(k)`.
#[inline(never)]
pub fn forward(a: &mut [u64], tw: &Twiddles, m: &Modulus) {
    match &tw.three {
        // A constant lane count lets the compiler drop the lane loops.
        None => forward_impl(a, 1, tw, m),
        Some(t3) => {
            radix3_forward(a, t3, m);
            for part in a.chunks_exact_mut(t3.sub.len) {
                forward_impl(part, 1, &t3.sub, m);
            }
        }
    }
}

/// Inverse transform in place: input in `[0, 4p)`, bit-reversed order;
/// output in `[0, 4p)`, natural order, multiplied by the length.
#[inline(never)]
pub fn inverse(a: &mut [u64], tw: &Twiddles, m: &Modulus) {
    match &tw.three {
        None => inverse_impl(a, 1, tw, m),
        Some(t3) => {
            for part in a.chunks_exact_mut(t3.sub.len) {
                inverse_impl(part, 1, &t3.sub, m);
            }
            radix3_inverse(a, t3, m);
        }
    }
}

/// The forward radix-3 step: inputs in `[0, 2p)`, outputs in `[0, 2p)`.
///
/// With `a, b, c` reduced below `p` and `u = omega (b - c)`, and since
/// `omega^2 = -1 - omega`: `a + omega b + omega^2 c = (a - c) + u` and
/// `a + omega^2 b + omega c = (a - b) - u`. Every intermediate stays
/// below `4p < 2^64`.
fn radix3_forward(x: &mut [u64], t: &Radix3, md: &Modulus) {
    let p = md.p;
    let third = t.sub.len;
    let (xa, rest) = x.split_at_mut(third);
    let (xb, xc) = rest.split_at_mut(third);
    for j in 0..third {
        let a = md.reduce_2p(xa[j]);
        let b = md.reduce_2p(xb[j]);
        let c = md.reduce_2p(xc[j]);
        let u = t.omega.mul_lazy(b + p - c, p);
        let s = a + b + c;
        xa[j] = if s >= md.two_p { s - md.two_p } else { s };
        xb[j] = t.fwd1[j].mul_lazy(a + p - c + u, p);
        xc[j] = t.fwd2[j].mul_lazy(a + p - b + md.two_p - u, p);
    }
}

/// The inverse radix-3 step, undoing [`radix3_forward`] times 3: inputs in
/// `[0, 4p)`, outputs in `[0, 4p)`. With `y0` and the untwisted `t1, t2`
/// below `p`, and `v = omega^-1 (t1 - t2)`: `3a = y0 + t1 + t2`,
/// `3b = (y0 - t2) + v`, `3c = (y0 - t1) - v`, all below `4p`.
fn radix3_inverse(x: &mut [u64], t: &Radix3, md: &Modulus) {
    let p = md.p;
    let third = t.sub.len;
    let (xa, rest) = x.split_at_mut(third);
    let (xb, xc) = rest.split_at_mut(third);
    for j in 0..third {
        let y0 = md.reduce_4p(xa[j]);
        let t1 = t.inv1[j].mul(xb[j], p);
        let t2 = t.inv2[j].mul(xc[j], p);
        let v = t.omega_inv.mul_lazy(t1 + p - t2, p);
        xa[j] = y0 + t1 + t2;
        xb[j] = y0 + p - t2 + v;
        xc[j] = y0 + p - t1 + md.two_p - v;
    }
}

/// [`forward`] on `lanes` interleaved vectors of length `tw.len()`.
#[inline(never)]
pub fn forward_lanes(a: &mut [u64], lanes: usize, tw: &Twiddles, m: &Modulus) {
    assert!(
        tw.three.is_none(),
        "the lanes forms serve power-of-two lengths"
    );
    forward_impl(a, lanes, tw, m)
}

#[inline(always)]
fn forward_impl(a: &mut [u64], lanes: usize, tw: &Twiddles, m: &Modulus) {
    debug_assert_eq!(a.len(), tw.len * lanes);
    let (p, two_p) = (m.p, m.two_p);
    let t = &tw.fwd;
    let mut half = tw.len / 2;
    if tw.len.trailing_zeros() % 2 == 1 {
        // An odd number of stages: one radix-2 stage first.
        for block in a.chunks_exact_mut(2 * half * lanes) {
            let (lo, hi) = block.split_at_mut(half * lanes);
            for ((xs, ys), &w) in lo
                .chunks_exact_mut(lanes)
                .zip(hi.chunks_exact_mut(lanes))
                .zip(&t[half..])
            {
                for (x, y) in xs.iter_mut().zip(ys.iter_mut()) {
                    dif(x, y, w, p, two_p);
                }
            }
        }
        half /= 2;
    }
    while half >= 2 {
        // stages `half` (= 2q) and `q`, on blocks of 4q
        let q = half / 2;
        let (t1a, t1b, t2) = (&t[2 * q..3 * q], &t[3 * q..4 * q], &t[q..2 * q]);
        for block in a.chunks_exact_mut(4 * q * lanes) {
            let [b0, b1, b2, b3] = quarters(block, q * lanes);
            for j in 0..q {
                let (wa, wb, w2) = (t1a[j], t1b[j], t2[j]);
                let r = j * lanes..(j + 1) * lanes;
                for (((x0, x1), x2), x3) in b0[r.clone()]
                    .iter_mut()
                    .zip(b1[r.clone()].iter_mut())
                    .zip(b2[r.clone()].iter_mut())
                    .zip(b3[r].iter_mut())
                {
                    let (mut v0, mut v1, mut v2, mut v3) = (*x0, *x1, *x2, *x3);
                    dif(&mut v0, &mut v2, wa, p, two_p);
                    dif(&mut v1, &mut v3, wb, p, two_p);
                    dif(&mut v0, &mut v1, w2, p, two_p);
                    dif(&mut v2, &mut v3, w2, p, two_p);
                    (*x0, *x1, *x2, *x3) = (v0, v1, v2, v3);
                }
            }
        }
        half /= 4;
    }
}

/// [`inverse`] on `lanes` interleaved vectors of length `tw.len()`.
#[inline(never)]
pub fn inverse_lanes(a: &mut [u64], lanes: usize, tw: &Twiddles, m: &Modulus) {
    assert!(
        tw.three.is_none(),
        "the lanes forms serve power-of-two lengths"
    );
    inverse_impl(a, lanes, tw, m)
}

#[inline(always)]
fn inverse_impl(a: &mut [u64], lanes: usize, tw: &Twiddles, m: &Modulus) {
    debug_assert_eq!(a.len(), tw.len * lanes);
    let (p, two_p) = (m.p, m.two_p);
    let t = &tw.inv;
    let mut q = 1;
    while 4 * q <= tw.len {
        // stages `q` and `2q`, on blocks of 4q
        let (t1, t2a, t2b) = (&t[q..2 * q], &t[2 * q..3 * q], &t[3 * q..4 * q]);
        for block in a.chunks_exact_mut(4 * q * lanes) {
            let [b0, b1, b2, b3] = quarters(block, q * lanes);
            for j in 0..q {
                let (w1, wa, wb) = (t1[j], t2a[j], t2b[j]);
                let r = j * lanes..(j + 1) * lanes;
                for (((x0, x1), x2), x3) in b0[r.clone()]
                    .iter_mut()
                    .zip(b1[r.clone()].iter_mut())
                    .zip(b2[r.clone()].iter_mut())
                    .zip(b3[r].iter_mut())
                {
                    let (mut v0, mut v1, mut v2, mut v3) = (*x0, *x1, *x2, *x3);
                    dit(&mut v0, &mut v1, w1, p, two_p);
                    dit(&mut v2, &mut v3, w1, p, two_p);
                    dit(&mut v0, &mut v2, wa, p, two_p);
                    dit(&mut v1, &mut v3, wb, p, two_p);
                    (*x0, *x1, *x2, *x3) = (v0, v1, v2, v3);
                }
            }
        }
        q *= 4;
    }
    if q < tw.len {
        // An odd number of stages: the last one is radix-2, with half = q.
        for block in a.chunks_exact_mut(2 * q * lanes) {
            let (lo, hi) = block.split_at_mut(q * lanes);
            for ((xs, ys), &w) in lo
                .chunks_exact_mut(lanes)
                .zip(hi.chunks_exact_mut(lanes))
                .zip(&t[q..])
            {
                for (x, y) in xs.iter_mut().zip(ys.iter_mut()) {
                    dit(x, y, w, p, two_p);
                }
            }
        }
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
    fn lengths_of_three_powers_of_two_match_the_naive_dft_and_invert() {
        for pr in &PRIMES {
            let m = pr.modulus;
            for log in 0..=9u32 {
                let third = 1usize << log;
                let n = 3 * third;
                let tw = Twiddles::new(pr, n);
                // Inputs up to the top of their allowed range, and garbage
                // beyond the data must not matter: none is passed.
                let input: Vec<u64> = seeded_words(n, 77 + log as u64)
                    .iter()
                    .enumerate()
                    .map(|(i, x)| {
                        if i % 5 == 0 {
                            2 * m.p - 1
                        } else {
                            x % (2 * m.p)
                        }
                    })
                    .collect();
                let reduced: Vec<u64> = input.iter().map(|x| x % m.p).collect();
                let expect = naive_dft(&reduced, pr.root_of_unity_any(n as u64), m.p);
                let mut a = input.clone();
                forward(&mut a, &tw, &m);
                for (k, e) in expect.iter().enumerate() {
                    let got = a[(k % 3) * third + bit_reverse(k / 3, log)];
                    assert!(got < 2 * m.p);
                    assert_eq!(got % m.p, *e, "n={n} k={k}");
                }
                // Inverse of values up to 4p: the input times n.
                let mut b: Vec<u64> = a
                    .iter()
                    .enumerate()
                    .map(|(i, &x)| if i % 7 == 0 { x % m.p + 3 * m.p } else { x })
                    .collect();
                let mut again: Vec<u64> = b.iter().map(|x| x % m.p).collect();
                inverse(&mut b, &tw, &m);
                inverse(&mut again, &tw, &m);
                for (x, y) in again.iter().zip(&b) {
                    assert!(*x < 4 * m.p && *y < 4 * m.p);
                    assert_eq!(x % m.p, y % m.p);
                }
                let mut round = input.clone();
                forward(&mut round, &tw, &m);
                inverse(&mut round, &tw, &m);
                for (x, r) in input.iter().zip(&round) {
                    assert!(*r < 4 * m.p);
                    assert_eq!(r % m.p, m.mul(x % m.p, n as u64 % m.p), "n={n}");
                }
            }
        }
    }

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
