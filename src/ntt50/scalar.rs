//! The portable path: 64-bit integer code that runs everywhere and is the
//! reference the vector paths are tested against.
//!
//! Twiddle products use Shoup's method in base 2^52, exactly as the IFMA
//! path does, so the two paths leave the same lazy values; the AVX2 path
//! may leave other representatives in the same ranges.

use super::{
    check_shape, montgomery_scale, quarters, reduce_p, Modulus50, MulConst, PowerChain, Radix3,
    Table, Twiddles, MASK52,
};

/// `x * w mod p` in `[0, 2p)` for `x < 2^52`, given `q = shoup52(w)`.
///
/// The quotient estimate `floor(x q / 2^52)` is at most one below the true
/// quotient, so the remainder lies in `[0, 2p)`; it is computed modulo
/// 2^64, which is exact for a value that small. (The IFMA path computes it
/// modulo 2^52 and gets the same value.)
#[inline(always)]
pub fn mul_shoup(x: u64, w: u64, q: u64, m: &Modulus50) -> u64 {
    let est = ((x as u128 * q as u128) >> 52) as u64;
    x.wrapping_mul(w).wrapping_sub(est.wrapping_mul(m.p))
}

/// Montgomery's product in base 2^52, `a * b * 2^-52 mod p` in `[0, 2p)`,
/// for `a * b < 2^52 p` (both below `2p` suffices as `4p < 2^52`).
#[inline(always)]
pub fn mul_montgomery(a: u64, b: u64, m: &Modulus50) -> u64 {
    let t = a as u128 * b as u128;
    let k = (t as u64).wrapping_mul(m.neg_p_inv) & MASK52;
    ((t + k as u128 * m.p as u128) >> 52) as u64
}

/// A twiddle and its base-2^52 Shoup quotient.
type Tw = (u64, u64);

/// Decimation-in-frequency butterfly `(x + y, (x - y) w)`: `[0, 2p)` in
/// and out.
#[inline(always)]
fn dif(x: &mut u64, y: &mut u64, (w, q): Tw, m: &Modulus50) {
    let (u, v) = (*x, *y);
    let s = u + v;
    *x = if s >= m.two_p { s - m.two_p } else { s };
    *y = mul_shoup(u + m.two_p - v, w, q, m);
}

/// Decimation-in-time butterfly `(x + y w, x - y w)`: `[0, 4p)` in and out.
#[inline(always)]
fn dit(x: &mut u64, y: &mut u64, (w, q): Tw, m: &Modulus50) {
    let u = if *x >= m.two_p { *x - m.two_p } else { *x };
    let v = mul_shoup(*y, w, q, m);
    *x = u + v;
    *y = u + m.two_p - v;
}

/// The twiddles `start .. start + len` of a table, cut once per stage so
/// that the butterfly loops index within known bounds.
#[derive(Clone, Copy)]
struct Run<'a> {
    w: &'a [u64],
    q: &'a [u64],
}

impl<'a> Run<'a> {
    fn new(t: &'a Table, start: usize, len: usize) -> Self {
        Run {
            w: &t.w[start..start + len],
            q: &t.q[start..start + len],
        }
    }

    #[inline(always)]
    fn get(&self, j: usize) -> Tw {
        (self.w[j], self.q[j])
    }
}

/// Forward transform in place: `[0, 2p)` in natural order to `[0, 2p)` in
/// bit-reversed order.
#[inline(never)]
pub fn forward(a: &mut [u64], tw: &Twiddles) {
    check_shape(a, 1, tw);
    // A constant lane count lets the compiler drop the lane loops.
    forward_impl(a, 1, tw)
}

/// Inverse transform in place: `[0, 4p)` in bit-reversed order to
/// `[0, 4p)` in natural order, times the length.
#[inline(never)]
pub fn inverse(a: &mut [u64], tw: &Twiddles) {
    check_shape(a, 1, tw);
    inverse_impl(a, 1, tw)
}

/// [`forward`] on `lanes` interleaved vectors of length `tw.len()`.
#[inline(never)]
pub fn forward_lanes(a: &mut [u64], lanes: usize, tw: &Twiddles) {
    check_shape(a, lanes, tw);
    forward_impl(a, lanes, tw)
}

/// [`inverse`] on `lanes` interleaved vectors of length `tw.len()`.
#[inline(never)]
pub fn inverse_lanes(a: &mut [u64], lanes: usize, tw: &Twiddles) {
    check_shape(a, lanes, tw);
    inverse_impl(a, lanes, tw)
}

/// `a[i] = a[i] * b[i] * scale mod p`: `[0, 2p)` in and out.
pub fn pointwise(a: &mut [u64], b: &[u64], scale: u64, m: &Modulus50) {
    assert_eq!(a.len(), b.len(), "pointwise operands differ in length");
    let s = montgomery_scale(scale, m);
    for (x, &y) in a.iter_mut().zip(b) {
        *x = mul_shoup(mul_montgomery(*x, y, m), s.w, s.q, m);
    }
}

/// `2^32 mod p` with its Shoup quotient: a word `h 2^32 + l` is congruent
/// to `h (2^32 mod p) + l`, a product of two values below 2^52 plus a value
/// below `p`, which is how every path reduces a whole word.
pub(crate) fn word_split(m: &Modulus50) -> super::MulConst {
    super::MulConst::new((1u64 << 32) % m.p, m)
}

/// `dst[i]` = the digit of limb `src[i]` modulo p, into `[0, 2p)`:
/// `src[i]` plus 1 where bit 0 of `flags[i]` is set (a carry in), plus
/// `neg_base` where bit 1 is (a base given away, `neg_base` being
/// `p - (base mod p)`). Operand limbs on their way into a forward
/// transform, read, reduced and balanced in one pass.
pub fn digits_into(src: &[u64], flags: &[u8], neg_base: u64, dst: &mut [u64], m: &Modulus50) {
    super::check_digits(src, flags, neg_base, dst, m);
    let c = word_split(m);
    for ((d, &x), &f) in dst.iter_mut().zip(src).zip(flags) {
        *d = digit(x, f, neg_base, c, m);
    }
}

/// One digit of [`digits_into`], for the vector paths' partial vectors too.
#[inline(always)]
pub(crate) fn digit(x: u64, f: u8, neg_base: u64, c: super::MulConst, m: &Modulus50) -> u64 {
    // below 2p + 2^32 < 3p
    let r = mul_shoup(x >> 32, c.w, c.q, m) + (x & 0xffff_ffff);
    let r = reduce_2p(r, m);
    // [0, 2p) + 1 + neg_base < 3p + 1: one subtraction of 2p at most
    let borrow = ((f >> 1) & 1) as u64 * neg_base;
    reduce_2p(r + (f & 1) as u64 + borrow, m)
}

/// `[0, 4p)` to `[0, 2p)`.
#[inline(always)]
fn reduce_2p(x: u64, m: &Modulus50) -> u64 {
    if x >= m.two_p {
        x - m.two_p
    } else {
        x
    }
}

/// The radix-3 sums of [`Radix3`] with cube root `omega`: `a, b, c` in
/// `[0, 2p)` to `a + b + c` in `[0, 2p)`, `(a - c) + omega (b - c)` in
/// `[0, 4p)` and `(a - b) - omega (b - c)` in `(0, 4p)`.
#[inline(always)]
pub(crate) fn radix3_sums(a: u64, b: u64, c: u64, omega: MulConst, m: &Modulus50) -> [u64; 3] {
    let y0 = reduce_2p(reduce_2p(a + b, m) + c, m);
    let t = mul_shoup(b + m.two_p - c, omega.w, omega.q, m);
    let e1 = reduce_2p(a + m.two_p - c, m);
    let e2 = reduce_2p(a + m.two_p - b, m);
    [y0, e1 + t, e2 + m.two_p - t]
}

/// The thirds of a buffer of length `3m`.
pub(crate) fn thirds(a: &mut [u64]) -> [&mut [u64]; 3] {
    let third = a.len() / 3;
    let (x, rest) = a.split_at_mut(third);
    let (y, z) = rest.split_at_mut(third);
    [x, y, z]
}

/// The forward radix-3 step for positions `from..` of the thirds (all of
/// them on this path; the vector paths hand it their tails).
pub(crate) fn radix3_forward_from(a: &mut [u64], t: &Radix3, from: usize) {
    let m = t.sub.modulus();
    let [x, y, z] = thirds(a);
    for j in from..x.len() {
        let [s0, s1, s2] = radix3_sums(x[j], y[j], z[j], t.omega, m);
        x[j] = s0;
        y[j] = mul_shoup(s1, t.fwd1.w[j], t.fwd1.q[j], m);
        z[j] = mul_shoup(s2, t.fwd2.w[j], t.fwd2.q[j], m);
    }
}

/// The inverse radix-3 step for positions `from..` of the thirds.
pub(crate) fn radix3_inverse_from(a: &mut [u64], t: &Radix3, from: usize) {
    let m = t.sub.modulus();
    let [x, y, z] = thirds(a);
    for j in from..x.len() {
        let z0 = reduce_2p(x[j], m);
        let z1 = mul_shoup(y[j], t.inv1.w[j], t.inv1.q[j], m);
        let z2 = mul_shoup(z[j], t.inv2.w[j], t.inv2.q[j], m);
        [x[j], y[j], z[j]] = radix3_sums(z0, z1, z2, t.omega_inv, m);
    }
}

/// The radix-3 step of a forward transform of length `3m`: `[0, 2p)` in
/// and out.
pub fn radix3_forward(a: &mut [u64], t: &Radix3) {
    assert_eq!(a.len(), 3 * t.sub.len(), "buffer is not 3m long");
    radix3_forward_from(a, t, 0);
}

/// The radix-3 step of an inverse transform of length `3m`, after its
/// sub-transforms: `[0, 4p)` in and out, times 3.
pub fn radix3_inverse(a: &mut [u64], t: &Radix3) {
    assert_eq!(a.len(), 3 * t.sub.len(), "buffer is not 3m long");
    radix3_inverse_from(a, t, 0);
}

/// Independent power chains in [`twiddle_powers`]: enough that the
/// multiply latency of one chain overlaps the others.
const CHAINS: usize = 8;

/// `row[j] = row[j] * step^j mod p`: `[0, 4p)` in, `[0, 2p)` out.
///
/// Each element takes a Montgomery product with its power held in
/// Montgomery form (`x < 4p` and a power below `p` keep the product below
/// `2^52 p`, which leaves `[0, 2p)`); each chain then advances by
/// `step^CHAINS`, a fixed multiplier with a Shoup quotient.
pub fn twiddle_powers(row: &mut [u64], step: u64, m: &Modulus50) {
    let chain = PowerChain::<CHAINS>::new(step, m);
    let (s, mut pw) = (chain.stride, chain.mont);
    let (blocks, rest) = row.as_chunks_mut::<CHAINS>();
    for block in blocks {
        for (x, w) in block.iter_mut().zip(pw.iter_mut()) {
            *x = mul_montgomery(*x, *w, m);
            *w = reduce_p(mul_shoup(*w, s.w, s.q, m), m);
        }
    }
    for (x, w) in rest.iter_mut().zip(pw) {
        *x = mul_montgomery(*x, w, m);
    }
}

// The transforms fuse pairs of radix-2 stages into radix-4 steps: the four
// values of two stages stay in registers, halving the loads and stores,
// with the same twiddles (and products) as the radix-2 stages they replace.
// Inlined into each public function so that one lane is a constant.

#[inline(always)]
fn forward_impl(a: &mut [u64], lanes: usize, tw: &Twiddles) {
    let (m, t, n) = (tw.modulus(), &tw.fwd, tw.len());
    let mut half = n / 2;
    if n.trailing_zeros() % 2 == 1 {
        // An odd number of stages: one radix-2 stage first.
        radix2_stage(a, lanes, Run::new(t, half, half), |x, y, w| dif(x, y, w, m));
        half /= 2;
    }
    while half >= 2 {
        // stages `half` (= 2q) and `q`, on blocks of 4q
        let q = half / 2;
        let runs = [
            Run::new(t, 2 * q, q),
            Run::new(t, 3 * q, q),
            Run::new(t, q, q),
        ];
        radix4_step(a, lanes, runs, |[v0, v1, v2, v3], [wa, wb, w2]| {
            dif(v0, v2, wa, m);
            dif(v1, v3, wb, m);
            dif(v0, v1, w2, m);
            dif(v2, v3, w2, m);
        });
        half /= 4;
    }
}

#[inline(always)]
fn inverse_impl(a: &mut [u64], lanes: usize, tw: &Twiddles) {
    let (m, t, n) = (tw.modulus(), &tw.inv, tw.len());
    let mut q = 1;
    while 4 * q <= n {
        // stages `q` and `2q`, on blocks of 4q
        let runs = [
            Run::new(t, q, q),
            Run::new(t, 2 * q, q),
            Run::new(t, 3 * q, q),
        ];
        radix4_step(a, lanes, runs, |[v0, v1, v2, v3], [w1, wa, wb]| {
            dit(v0, v1, w1, m);
            dit(v2, v3, w1, m);
            dit(v0, v2, wa, m);
            dit(v1, v3, wb, m);
        });
        q *= 4;
    }
    if q < n {
        // An odd number of stages: the last one is radix-2, with half = q.
        radix2_stage(a, lanes, Run::new(t, q, q), |x, y, w| dit(x, y, w, m));
    }
}

/// One radix-2 stage with halves `run.len()` apart: `bf(x, y, w)` gets
/// each pair and its twiddle.
#[inline(always)]
fn radix2_stage(a: &mut [u64], lanes: usize, run: Run, bf: impl Fn(&mut u64, &mut u64, Tw)) {
    let half = run.w.len();
    for block in a.chunks_exact_mut(2 * half * lanes) {
        let (lo, hi) = block.split_at_mut(half * lanes);
        for (j, (xs, ys)) in lo
            .chunks_exact_mut(lanes)
            .zip(hi.chunks_exact_mut(lanes))
            .enumerate()
        {
            let w = run.get(j);
            for (x, y) in xs.iter_mut().zip(ys.iter_mut()) {
                bf(x, y, w);
            }
        }
    }
}

/// One radix-4 step over blocks of `4q` (`q` the runs' length):
/// `bf(values, twiddles)` gets the four values `q` apart (in registers,
/// written back after) and entry `j` of each run.
#[inline(always)]
fn radix4_step(a: &mut [u64], lanes: usize, runs: [Run; 3], bf: impl Fn([&mut u64; 4], [Tw; 3])) {
    let q = runs[0].w.len();
    for block in a.chunks_exact_mut(4 * q * lanes) {
        let [b0, b1, b2, b3] = quarters(block, q * lanes);
        for j in 0..q {
            let tws = runs.map(|r| r.get(j));
            let r = j * lanes..(j + 1) * lanes;
            for (((x0, x1), x2), x3) in b0[r.clone()]
                .iter_mut()
                .zip(b1[r.clone()].iter_mut())
                .zip(b2[r.clone()].iter_mut())
                .zip(b3[r].iter_mut())
            {
                let mut v = [*x0, *x1, *x2, *x3];
                let [v0, v1, v2, v3] = &mut v;
                bf([v0, v1, v2, v3], tws);
                (*x0, *x1, *x2, *x3) = (v[0], v[1], v[2], v[3]);
            }
        }
    }
}
