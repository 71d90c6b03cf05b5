//! The AVX2 path: four lanes of doubles, products exact through FMA.
//!
//! Words below 2^52 convert to doubles and back with two instructions each
//! (OR the bits into the mantissa of 2^52, subtract 2^52), so the data stays
//! `u64` in memory and the arithmetic runs in doubles, where every value is
//! an exact integer.
//!
//! A product `x * w mod p` with a fixed `w` (twiddles, the pointwise
//! scale) and `|x| < 2^51`: `h = fl(x w)` and `l = x w - h` (exact, from
//! one FMA) split the product; `c = round(x fl(w/p) - 1)` is within one of
//! `x w / p - 1`, because the relative errors of `fl(w/p)` and of the FMA
//! cost less than a half in absolute terms below 2^51; so `x w - c p` lies
//! in `(0, 2p)`. It is computed as `(h - c p) + l`: the FMA `h - c p`
//! rounds nothing, since its exact value is an integer below 2^53, and the
//! final sum of two such integers is exact too. The pointwise product of
//! two variables estimates its quotient from `fl(fl(a b) / p)` instead,
//! leaving `(-2p, 2p)`, which the fixed-scale product then maps into
//! `(0, 2p)`.
//!
//! The butterflies keep the scalar path's ranges but not its
//! representatives: the inverse centres `y - 2p` before multiplying, and
//! the products leave `(0, 2p)` rather than the scalar path's `[0, 2p)`.
//! Vectors shorter than 16 use the scalar path; the two stages within
//! 4-element blocks run on transposed 4x4 tiles.

use super::{
    check_shape, quarters, require, scalar, Kernel, Modulus50, MulConst, PowerChain, Radix3, Table,
    Twiddles,
};
use core::arch::x86_64::*;

type D = __m256d;

/// Lanes per vector.
const W: usize = 4;

/// The shortest single vector the vector code takes: one 4x4 tile.
const MIN_VECTOR_LEN: usize = W * W;

/// 2^52: adding it to an integer below 2^52 puts the integer in the
/// mantissa bits.
const TWO_52: f64 = 4_503_599_627_370_496.0;

/// Round to nearest, without raising the inexact flag.
const ROUND_NEAREST: i32 = _MM_FROUND_TO_NEAREST_INT | _MM_FROUND_NO_EXC;

/// Forward transform in place: `[0, 2p)` in natural order to `[0, 2p)` in
/// bit-reversed order. Panics if the CPU lacks AVX2 or FMA.
pub fn forward(a: &mut [u64], tw: &Twiddles) {
    check_shape(a, 1, tw);
    require(Kernel::Avx2);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    unsafe { forward_single(a, tw) }
}

/// Inverse transform in place: `[0, 4p)` in bit-reversed order to
/// `[0, 4p)` in natural order, times the length. Panics if the CPU lacks
/// AVX2 or FMA.
pub fn inverse(a: &mut [u64], tw: &Twiddles) {
    check_shape(a, 1, tw);
    require(Kernel::Avx2);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    unsafe { inverse_single(a, tw) }
}

/// [`forward`] on `lanes` interleaved vectors of length `tw.len()`.
pub fn forward_lanes(a: &mut [u64], lanes: usize, tw: &Twiddles) {
    check_shape(a, lanes, tw);
    require(Kernel::Avx2);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    unsafe { forward_interleaved(a, lanes, tw) }
}

/// [`inverse`] on `lanes` interleaved vectors of length `tw.len()`.
pub fn inverse_lanes(a: &mut [u64], lanes: usize, tw: &Twiddles) {
    check_shape(a, lanes, tw);
    require(Kernel::Avx2);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    unsafe { inverse_interleaved(a, lanes, tw) }
}

/// `a[i] = a[i] * b[i] * scale mod p`: `[0, 2p)` in and out.
pub fn pointwise(a: &mut [u64], b: &[u64], scale: u64, m: &Modulus50) {
    assert_eq!(a.len(), b.len(), "pointwise operands differ in length");
    require(Kernel::Avx2);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    unsafe { pointwise_all(a, b, scale, m) }
}

/// [`scalar::digits_into`], four limbs at a time. Panics if the CPU lacks
/// AVX2 or FMA, or the lengths differ.
pub fn digits_into(src: &[u64], flags: &[u8], neg_base: u64, dst: &mut [u64], m: &Modulus50) {
    super::check_digits(src, flags, neg_base, dst, m);
    require(Kernel::Avx2);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    unsafe { digits_all(src, flags, neg_base, dst, m) }
}

/// The radix-3 step of a forward transform of length `3m`: `[0, 2p)` in
/// and out. Panics if the CPU lacks AVX2 or FMA.
pub fn radix3_forward(a: &mut [u64], t: &Radix3) {
    assert_eq!(a.len(), 3 * t.sub.len(), "buffer is not 3m long");
    require(Kernel::Avx2);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    let done = unsafe { radix3_vectors::<FORWARD, true, true>(a, t) };
    scalar::radix3_forward_from(a, t, done);
}

/// The radix-3 step of an inverse transform of length `3m`, after its
/// sub-transforms: `[0, 4p)` in and out, times 3. Panics if the CPU lacks
/// AVX2 or FMA.
pub fn radix3_inverse(a: &mut [u64], t: &Radix3) {
    assert_eq!(a.len(), 3 * t.sub.len(), "buffer is not 3m long");
    require(Kernel::Avx2);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    let done = unsafe { radix3_vectors::<INVERSE, true, true>(a, t) };
    scalar::radix3_inverse_from(a, t, done);
}

/// Garner's mixed-radix digits of four residue streams, four positions at
/// a time in doubles, the same values as [`super::crt::Crt50`]'s scalar
/// digits: `r[i]` in `[0, 4p_i)` (what the inverse transform leaves),
/// `y[i]` filled with digits in `[0, p_i)`; `s` and `c` are the Garner
/// constants (`c[i][j]` for `j < i`). Panics if the CPU lacks AVX2 or FMA,
/// or the slices differ in length.
pub(crate) fn garner_digits(
    r: [&[u64]; 4],
    y: [&mut [u64]; 4],
    m: &[Modulus50; 4],
    s: &[MulConst; 4],
    c: &[[MulConst; 4]; 4],
) {
    let n = r[0].len();
    assert!(r.iter().all(|x| x.len() == n) && y.iter().all(|x| x.len() == n));
    require(Kernel::Avx2);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    unsafe { garner_all(r, y, m, s, c) }
}

/// `row[j] = row[j] * step^j mod p`: `[0, 4p)` in, `[0, 2p)` out. Panics
/// if the CPU lacks AVX2 or FMA.
pub fn twiddle_powers(row: &mut [u64], step: u64, m: &Modulus50) {
    require(Kernel::Avx2);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    unsafe { twiddle_all(row, step, m) }
}

/// Whether [`row_product`] takes rows of this table: lengths `2^k` or
/// `3 * 2^k` whose power-of-two transforms are vector ones.
pub(crate) fn fuses_row(tw: &Twiddles) -> bool {
    match &tw.three {
        None => tw.len() >= MIN_VECTOR_LEN,
        Some(t3) => t3.sub.len() >= MIN_VECTOR_LEN,
    }
}

/// [`super::Kernel::row_product`] on one row that [`fuses_row`] accepts,
/// in doubles from the first twiddle to the last: words are
/// converted only as the rows come in and as the result goes out. Panics
/// if the CPU lacks AVX2 or FMA, or the row does not fit the table.
pub(crate) fn row_product(
    a: &mut [u64],
    b: &mut [u64],
    with_b: bool,
    (step_fwd, step_inv): (u64, u64),
    tw: &Twiddles,
) {
    assert!(
        a.len() == tw.len() && b.len() == tw.len(),
        "row is not the table's length"
    );
    assert!(fuses_row(tw), "row not fused");
    require(Kernel::Avx2);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    unsafe { row_product_doubles(a, b, with_b, (step_fwd, step_inv), tw) }
}

/// The modulus' constants, broadcast.
#[derive(Clone, Copy)]
struct Consts {
    p: D,
    two_p: D,
    inv_p: D,
    one: D,
    two_52: D,
}

/// A fixed multiplier and `w / p`, per lane.
#[derive(Clone, Copy)]
struct Tw {
    w: D,
    wq: D,
}

#[inline]
#[target_feature(enable = "avx2,fma")]
fn consts(m: &Modulus50) -> Consts {
    Consts {
        p: _mm256_set1_pd(m.p_f64),
        two_p: _mm256_set1_pd(2.0 * m.p_f64),
        inv_p: _mm256_set1_pd(m.inv_p_f64),
        one: _mm256_set1_pd(1.0),
        two_52: _mm256_set1_pd(TWO_52),
    }
}

#[inline]
#[target_feature(enable = "avx2,fma")]
fn splat_tw(c: MulConst) -> Tw {
    Tw {
        w: _mm256_set1_pd(c.wf),
        wq: _mm256_set1_pd(c.wq),
    }
}

/// `s` as whole vectors; panics on a partial one at the end. Loops over
/// these index arrays of known length, so no load needs a bounds check.
#[inline(always)]
fn vectors<T>(s: &[T]) -> &[[T; W]] {
    let (v, rest) = s.as_chunks::<W>();
    assert!(rest.is_empty(), "not a whole number of vectors");
    v
}

/// [`vectors`], mutable.
#[inline(always)]
fn vectors_mut(s: &mut [u64]) -> &mut [[u64; W]] {
    let (v, rest) = s.as_chunks_mut::<W>();
    assert!(rest.is_empty(), "not a whole number of vectors");
    v
}

/// Consecutive twiddles `start .. start + len` of a table as whole
/// vectors, cut once per stage.
#[derive(Clone, Copy)]
struct Run<'a> {
    w: &'a [[f64; W]],
    wq: &'a [[f64; W]],
}

impl<'a> Run<'a> {
    fn new(t: &'a Table, start: usize, len: usize) -> Self {
        Run {
            w: vectors(&t.wf[start..start + len]),
            wq: vectors(&t.wq[start..start + len]),
        }
    }
}

/// Vector `j` of a run of twiddles.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn load_tw(r: &Run, j: usize) -> Tw {
    let (w, wq) = (&r.w[j], &r.wq[j]);
    // SAFETY: both arrays are W initialised doubles; loads are unaligned.
    unsafe {
        Tw {
            w: _mm256_loadu_pd(w.as_ptr()),
            wq: _mm256_loadu_pd(wq.as_ptr()),
        }
    }
}

/// Integers in `[0, 2^52)` to doubles.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn to_f64(x: __m256i, k: Consts) -> D {
    let biased = _mm256_or_si256(x, _mm256_castpd_si256(k.two_52));
    _mm256_sub_pd(_mm256_castsi256_pd(biased), k.two_52)
}

/// Doubles holding integers in `[0, 2^52)` to integers.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn to_u64(x: D, k: Consts) -> __m256i {
    let biased = _mm256_castpd_si256(_mm256_add_pd(x, k.two_52));
    _mm256_xor_si256(biased, _mm256_castpd_si256(k.two_52))
}

/// Four words as doubles.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn load(s: &[u64; W], k: Consts) -> D {
    // SAFETY: `s` is W initialised words; the load is unaligned.
    let x = unsafe { _mm256_loadu_si256(s.as_ptr().cast()) };
    to_f64(x, k)
}

/// Four doubles as words.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn store(s: &mut [u64; W], v: D, k: Consts) {
    // SAFETY: `s` is W writable words; the store is unaligned.
    unsafe { _mm256_storeu_si256(s.as_mut_ptr().cast(), to_u64(v, k)) }
}

/// All-ones in the lanes below `min(len, 4)`.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn part_mask(len: usize) -> __m256i {
    let len = _mm256_set1_epi64x(len.min(W) as i64);
    _mm256_cmpgt_epi64(len, _mm256_setr_epi64x(0, 1, 2, 3))
}

/// The first `min(len, 4)` words of `s` as doubles, zeros elsewhere.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn load_part(s: &[u64], k: Consts) -> D {
    let mask = part_mask(s.len());
    // SAFETY: the mask enables only lanes below `s.len()`; masked-off
    // lanes are neither read nor able to fault.
    let x = unsafe { _mm256_maskload_epi64(s.as_ptr().cast(), mask) };
    to_f64(x, k)
}

/// Writes the first `min(len, 4)` lanes of `v` to `s` as words.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn store_part(s: &mut [u64], v: D, k: Consts) {
    let mask = part_mask(s.len());
    // SAFETY: the mask enables only lanes below `s.len()`; masked-off
    // lanes are neither written nor able to fault.
    unsafe { _mm256_maskstore_epi64(s.as_mut_ptr().cast(), mask, to_u64(v, k)) }
}

/// Four slots as doubles: words when `WORDS`, else the bits of doubles an
/// earlier stage of the same transform stored there.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn load_in<const WORDS: bool>(s: &[u64; W], k: Consts) -> D {
    if WORDS {
        load(s, k)
    } else {
        // SAFETY: `s` is W initialised words, read as the doubles whose
        // bits they hold; the load is unaligned.
        unsafe { _mm256_loadu_pd(s.as_ptr().cast()) }
    }
}

/// Four doubles into slots: as words when `WORDS`, else as their bits, for
/// a later stage's [`load_in`].
#[inline]
#[target_feature(enable = "avx2,fma")]
fn store_out<const WORDS: bool>(s: &mut [u64; W], v: D, k: Consts) {
    if WORDS {
        store(s, v, k)
    } else {
        // SAFETY: `s` is W writable words; the store is unaligned.
        unsafe { _mm256_storeu_pd(s.as_mut_ptr().cast(), v) }
    }
}

/// [`load_in`] of the first `min(len, 4)` slots, zeros elsewhere.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn load_part_in<const WORDS: bool>(s: &[u64], k: Consts) -> D {
    if WORDS {
        load_part(s, k)
    } else {
        let mask = part_mask(s.len());
        // SAFETY: the mask enables only lanes below `s.len()`; masked-off
        // lanes are neither read nor able to fault.
        unsafe { _mm256_maskload_pd(s.as_ptr().cast(), mask) }
    }
}

/// [`store_out`] of the first `min(len, 4)` lanes.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn store_part_out<const WORDS: bool>(s: &mut [u64], v: D, k: Consts) {
    if WORDS {
        store_part(s, v, k)
    } else {
        let mask = part_mask(s.len());
        // SAFETY: the mask enables only lanes below `s.len()`; masked-off
        // lanes are neither written nor able to fault.
        unsafe { _mm256_maskstore_pd(s.as_mut_ptr().cast(), mask, v) }
    }
}

/// Calls a stage with its direction and the forms it reads and writes,
/// chosen at run time among the four compiled loops: words in for the
/// transform's first stage, words out for its last, doubles between.
macro_rules! staged {
    ($f:ident::<$dir:ident>($($arg:expr),*), $words_in:expr, $words_out:expr) => {
        match ($words_in, $words_out) {
            (true, true) => $f::<$dir, true, true>($($arg),*),
            (true, false) => $f::<$dir, true, false>($($arg),*),
            (false, true) => $f::<$dir, false, true>($($arg),*),
            (false, false) => $f::<$dir, false, false>($($arg),*),
        }
    };
}

/// `x * w mod p` in `(0, 2p)` for an integer `|x| < 2^51` (module notes).
#[inline]
#[target_feature(enable = "avx2,fma")]
fn mul_fixed(x: D, t: Tw, k: Consts) -> D {
    let h = _mm256_mul_pd(x, t.w);
    let l = _mm256_fmsub_pd(x, t.w, h);
    let c = _mm256_round_pd::<ROUND_NEAREST>(_mm256_fmsub_pd(x, t.wq, k.one));
    _mm256_add_pd(_mm256_fnmadd_pd(c, k.p, h), l)
}

/// `a * b mod p` in `(-2p, 2p)` for integers `a, b` in `[0, 2p)`.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn mul_var(a: D, b: D, k: Consts) -> D {
    let h = _mm256_mul_pd(a, b);
    let l = _mm256_fmsub_pd(a, b, h);
    let c = _mm256_round_pd::<ROUND_NEAREST>(_mm256_mul_pd(h, k.inv_p));
    _mm256_add_pd(_mm256_fnmadd_pd(c, k.p, h), l)
}

/// `x` less `2p` where that stays non-negative: `[0, 4p)` to `[0, 2p)`.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn reduce_2p(x: D, k: Consts) -> D {
    let t = _mm256_sub_pd(x, k.two_p);
    _mm256_blendv_pd(t, x, t)
}

/// Decimation-in-frequency butterfly: `[0, 2p)` in and out.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn dif(x: D, y: D, t: Tw, k: Consts) -> (D, D) {
    let s = reduce_2p(_mm256_add_pd(x, y), k);
    (s, mul_fixed(_mm256_sub_pd(x, y), t, k))
}

/// Decimation-in-time butterfly: `[0, 4p)` in and out.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn dit(x: D, y: D, t: Tw, k: Consts) -> (D, D) {
    let u = reduce_2p(x, k);
    let v = mul_fixed(_mm256_sub_pd(y, k.two_p), t, k);
    let sum = _mm256_add_pd(u, v);
    (sum, _mm256_sub_pd(_mm256_add_pd(u, k.two_p), v))
}

// The direction is a const parameter, so that each direction compiles to
// its own loop with no test of it inside.

/// The const parameter of the forward direction.
const FORWARD: bool = true;
/// The const parameter of the inverse direction.
const INVERSE: bool = false;

/// The twiddle entries of a radix-4 step at quarter size `q`, offset `j`,
/// in the order [`dif4`] / [`dit4`] take them.
#[inline(always)]
fn radix4_entries(forward: bool, q: usize, j: usize) -> [usize; 3] {
    if forward {
        [2 * q + j, 3 * q + j, q + j]
    } else {
        [q + j, 2 * q + j, 3 * q + j]
    }
}

#[inline]
#[target_feature(enable = "avx2,fma")]
fn step2<const FWD: bool>(x: D, y: D, t: Tw, k: Consts) -> (D, D) {
    if FWD {
        dif(x, y, t, k)
    } else {
        dit(x, y, t, k)
    }
}

/// Two forward stages on four values `q` apart: `ta`, `tb` for the outer
/// stage's two pairs, `t2` for the inner stage.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn dif4(v: [D; 4], [ta, tb, t2]: [Tw; 3], k: Consts) -> [D; 4] {
    let (v0, v2) = dif(v[0], v[2], ta, k);
    let (v1, v3) = dif(v[1], v[3], tb, k);
    let (v0, v1) = dif(v0, v1, t2, k);
    let (v2, v3) = dif(v2, v3, t2, k);
    [v0, v1, v2, v3]
}

/// Two inverse stages on four values `q` apart: `t1` for the inner stage,
/// `ta`, `tb` for the outer stage's two pairs.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn dit4(v: [D; 4], [t1, ta, tb]: [Tw; 3], k: Consts) -> [D; 4] {
    let (v0, v1) = dit(v[0], v[1], t1, k);
    let (v2, v3) = dit(v[2], v[3], t1, k);
    let (v0, v2) = dit(v0, v2, ta, k);
    let (v1, v3) = dit(v1, v3, tb, k);
    [v0, v1, v2, v3]
}

#[inline]
#[target_feature(enable = "avx2,fma")]
fn step4<const FWD: bool>(v: [D; 4], t: [Tw; 3], k: Consts) -> [D; 4] {
    if FWD {
        dif4(v, t, k)
    } else {
        dit4(v, t, k)
    }
}

/// A radix-4 step of a single vector, `q >= 4`: consecutive butterflies
/// take consecutive twiddles.
#[target_feature(enable = "avx2,fma")]
fn radix4_single<const FWD: bool, const IN_WORDS: bool, const OUT_WORDS: bool>(
    a: &mut [u64],
    q: usize,
    t: &Table,
    k: Consts,
) {
    let runs = radix4_entries(FWD, q, 0).map(|i| Run::new(t, i, q));
    for block in a.chunks_exact_mut(4 * q) {
        let [b0, b1, b2, b3] = quarters(block, q).map(vectors_mut);
        for j in 0..b0.len() {
            let tws = runs.map(|r| load_tw(&r, j));
            let v = [
                load_in::<IN_WORDS>(&b0[j], k),
                load_in::<IN_WORDS>(&b1[j], k),
                load_in::<IN_WORDS>(&b2[j], k),
                load_in::<IN_WORDS>(&b3[j], k),
            ];
            let [v0, v1, v2, v3] = step4::<FWD>(v, tws, k);
            store_out::<OUT_WORDS>(&mut b0[j], v0, k);
            store_out::<OUT_WORDS>(&mut b1[j], v1, k);
            store_out::<OUT_WORDS>(&mut b2[j], v2, k);
            store_out::<OUT_WORDS>(&mut b3[j], v3, k);
        }
    }
}

/// A radix-2 stage of a single vector with halves `half >= 4` apart.
#[target_feature(enable = "avx2,fma")]
fn radix2_single<const FWD: bool, const IN_WORDS: bool, const OUT_WORDS: bool>(
    a: &mut [u64],
    half: usize,
    t: &Table,
    k: Consts,
) {
    let run = Run::new(t, half, half);
    for block in a.chunks_exact_mut(2 * half) {
        let (lo, hi) = block.split_at_mut(half);
        let (lo, hi) = (vectors_mut(lo), vectors_mut(hi));
        for j in 0..lo.len() {
            let (x, y) = step2::<FWD>(
                load_in::<IN_WORDS>(&lo[j], k),
                load_in::<IN_WORDS>(&hi[j], k),
                load_tw(&run, j),
                k,
            );
            store_out::<OUT_WORDS>(&mut lo[j], x, k);
            store_out::<OUT_WORDS>(&mut hi[j], y, k);
        }
    }
}

/// Transposes a 4x4 tile held as four rows.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn transpose(r: [D; 4]) -> [D; 4] {
    // rows 2i and 2i+1 interleaved: columns {0, 2}, then columns {1, 3}
    let t0 = _mm256_unpacklo_pd(r[0], r[1]);
    let t1 = _mm256_unpackhi_pd(r[0], r[1]);
    let t2 = _mm256_unpacklo_pd(r[2], r[3]);
    let t3 = _mm256_unpackhi_pd(r[2], r[3]);
    [
        _mm256_permute2f128_pd::<0x20>(t0, t2),
        _mm256_permute2f128_pd::<0x20>(t1, t3),
        _mm256_permute2f128_pd::<0x31>(t0, t2),
        _mm256_permute2f128_pd::<0x31>(t1, t3),
    ]
}

/// The stages 2 and 1 of every 4-element block, on transposed 4x4 tiles,
/// in the order the direction runs them.
#[target_feature(enable = "avx2,fma")]
fn tiles<const FWD: bool, const IN_WORDS: bool, const OUT_WORDS: bool>(
    a: &mut [u64],
    t: &Table,
    k: Consts,
) {
    let (t1, t2, t3) = (splat_tw(t.get(1)), splat_tw(t.get(2)), splat_tw(t.get(3)));
    for tile in vectors_mut(a).as_chunks_mut::<W>().0 {
        let [c0, c1, c2, c3] = transpose([0, 1, 2, 3].map(|i| load_in::<IN_WORDS>(&tile[i], k)));
        // forward: columns c and c + 2 with twiddles 2 + c, then c and c + 1
        let tws = if FWD { [t2, t3, t1] } else { [t1, t2, t3] };
        let [c0, c1, c2, c3] = step4::<FWD>([c0, c1, c2, c3], tws, k);
        let rows = transpose([c0, c1, c2, c3]);
        for (row, r) in tile.iter_mut().zip(rows) {
            store_out::<OUT_WORDS>(row, r, k);
        }
    }
}

#[target_feature(enable = "avx2,fma")]
fn forward_single(a: &mut [u64], tw: &Twiddles) {
    forward_forms(a, tw, true, true)
}

/// [`forward_single`], reading words or doubles and writing words or
/// doubles as `words_in` and `words_out` say. Lengths below
/// [`MIN_VECTOR_LEN`] take the scalar path and words only.
#[target_feature(enable = "avx2,fma")]
fn forward_forms(a: &mut [u64], tw: &Twiddles, words_in: bool, words_out: bool) {
    let n = tw.len();
    if n < MIN_VECTOR_LEN {
        assert!(words_in && words_out, "short transforms take words");
        return scalar::forward(a, tw);
    }
    let (k, t) = (consts(tw.modulus()), &tw.fwd);
    // Stages n/2 .. 4 in vectors of consecutive butterflies, then the
    // tiles; n >= 16 makes at least one radix-4 step come before them.
    let mut half = n / 2;
    let mut first = true;
    if n.trailing_zeros() % 2 == 1 {
        // an odd count of them (log2 n - 2): one radix-2 stage first
        staged!(radix2_single::<FORWARD>(a, half, t, k), words_in, false);
        half /= 2;
        first = false;
    }
    while half >= 2 * W {
        let words = first && words_in;
        staged!(radix4_single::<FORWARD>(a, half / 2, t, k), words, false);
        half /= 4;
        first = false;
    }
    staged!(tiles::<FORWARD>(a, t, k), first && words_in, words_out);
}

#[target_feature(enable = "avx2,fma")]
fn inverse_single(a: &mut [u64], tw: &Twiddles) {
    inverse_forms(a, tw, true, true)
}

/// [`inverse_single`] with the forms of [`forward_forms`].
#[target_feature(enable = "avx2,fma")]
fn inverse_forms(a: &mut [u64], tw: &Twiddles, words_in: bool, words_out: bool) {
    let n = tw.len();
    if n < MIN_VECTOR_LEN {
        assert!(words_in && words_out, "short transforms take words");
        return scalar::inverse(a, tw);
    }
    let (k, t) = (consts(tw.modulus()), &tw.inv);
    // A radix-2 stage ends the transform when log2 n is odd; else the
    // last radix-4 step does (n >= 16 makes at least one follow the tiles).
    let ends_radix2 = n.trailing_zeros() % 2 == 1;
    staged!(tiles::<INVERSE>(a, t, k), words_in, false);
    let mut q = W;
    while 2 * q <= n / 2 {
        let last = !ends_radix2 && 8 * q > n / 2;
        staged!(
            radix4_single::<INVERSE>(a, q, t, k),
            false,
            last && words_out
        );
        q *= 4;
    }
    if q == n / 2 {
        staged!(radix2_single::<INVERSE>(a, q, t, k), false, words_out);
    }
}

/// Four rows of lanes through one radix-4 step with broadcast twiddles,
/// four lanes at a time, the last group masked.
#[target_feature(enable = "avx2,fma")]
fn radix4_row<const FWD: bool, const IN_WORDS: bool, const OUT_WORDS: bool>(
    rows: [&mut [u64]; 4],
    tws: [Tw; 3],
    k: Consts,
) {
    let [(x0, r0), (x1, r1), (x2, r2), (x3, r3)] = rows.map(|r| r.as_chunks_mut::<W>());
    for j in 0..x0.len() {
        let v = [
            load_in::<IN_WORDS>(&x0[j], k),
            load_in::<IN_WORDS>(&x1[j], k),
            load_in::<IN_WORDS>(&x2[j], k),
            load_in::<IN_WORDS>(&x3[j], k),
        ];
        let [v0, v1, v2, v3] = step4::<FWD>(v, tws, k);
        store_out::<OUT_WORDS>(&mut x0[j], v0, k);
        store_out::<OUT_WORDS>(&mut x1[j], v1, k);
        store_out::<OUT_WORDS>(&mut x2[j], v2, k);
        store_out::<OUT_WORDS>(&mut x3[j], v3, k);
    }
    if !r0.is_empty() {
        let (x0, x1, x2, x3) = (r0, r1, r2, r3);
        let v = [
            load_part_in::<IN_WORDS>(x0, k),
            load_part_in::<IN_WORDS>(x1, k),
            load_part_in::<IN_WORDS>(x2, k),
            load_part_in::<IN_WORDS>(x3, k),
        ];
        let [v0, v1, v2, v3] = step4::<FWD>(v, tws, k);
        store_part_out::<OUT_WORDS>(x0, v0, k);
        store_part_out::<OUT_WORDS>(x1, v1, k);
        store_part_out::<OUT_WORDS>(x2, v2, k);
        store_part_out::<OUT_WORDS>(x3, v3, k);
    }
}

/// Two rows of lanes through one radix-2 butterfly with a broadcast
/// twiddle, the last group masked.
#[target_feature(enable = "avx2,fma")]
fn radix2_row<const FWD: bool, const IN_WORDS: bool, const OUT_WORDS: bool>(
    xs: &mut [u64],
    ys: &mut [u64],
    t: Tw,
    k: Consts,
) {
    let ((xv, xs), (yv, ys)) = (xs.as_chunks_mut::<W>(), ys.as_chunks_mut::<W>());
    for j in 0..xv.len() {
        let (x, y) = step2::<FWD>(
            load_in::<IN_WORDS>(&xv[j], k),
            load_in::<IN_WORDS>(&yv[j], k),
            t,
            k,
        );
        store_out::<OUT_WORDS>(&mut xv[j], x, k);
        store_out::<OUT_WORDS>(&mut yv[j], y, k);
    }
    if !xs.is_empty() {
        let (x, y) = step2::<FWD>(
            load_part_in::<IN_WORDS>(xs, k),
            load_part_in::<IN_WORDS>(ys, k),
            t,
            k,
        );
        store_part_out::<OUT_WORDS>(xs, x, k);
        store_part_out::<OUT_WORDS>(ys, y, k);
    }
}

#[target_feature(enable = "avx2,fma")]
fn radix4_lanes<const FWD: bool, const IN_WORDS: bool, const OUT_WORDS: bool>(
    a: &mut [u64],
    lanes: usize,
    q: usize,
    t: &Table,
    k: Consts,
) {
    for block in a.chunks_exact_mut(4 * q * lanes) {
        let [b0, b1, b2, b3] = quarters(block, q * lanes);
        for j in 0..q {
            let tws = radix4_entries(FWD, q, j).map(|i| splat_tw(t.get(i)));
            let r = j * lanes..(j + 1) * lanes;
            let rows = [
                &mut b0[r.clone()],
                &mut b1[r.clone()],
                &mut b2[r.clone()],
                &mut b3[r],
            ];
            radix4_row::<FWD, IN_WORDS, OUT_WORDS>(rows, tws, k);
        }
    }
}

#[target_feature(enable = "avx2,fma")]
fn radix2_lanes<const FWD: bool, const IN_WORDS: bool, const OUT_WORDS: bool>(
    a: &mut [u64],
    lanes: usize,
    half: usize,
    t: &Table,
    k: Consts,
) {
    for block in a.chunks_exact_mut(2 * half * lanes) {
        let (lo, hi) = block.split_at_mut(half * lanes);
        for (j, (xs, ys)) in lo
            .chunks_exact_mut(lanes)
            .zip(hi.chunks_exact_mut(lanes))
            .enumerate()
        {
            radix2_row::<FWD, IN_WORDS, OUT_WORDS>(xs, ys, splat_tw(t.get(half + j)), k);
        }
    }
}

#[target_feature(enable = "avx2,fma")]
fn forward_interleaved(a: &mut [u64], lanes: usize, tw: &Twiddles) {
    if lanes == 1 {
        return forward_single(a, tw);
    }
    let (k, t, n) = (consts(tw.modulus()), &tw.fwd, tw.len());
    let mut half = n / 2;
    let mut first = true;
    if n.trailing_zeros() % 2 == 1 {
        // the only stage when n = 2
        staged!(radix2_lanes::<FORWARD>(a, lanes, half, t, k), true, n == 2);
        half /= 2;
        first = false;
    }
    while half >= 2 {
        let last = half < 8;
        staged!(
            radix4_lanes::<FORWARD>(a, lanes, half / 2, t, k),
            first,
            last
        );
        half /= 4;
        first = false;
    }
}

#[target_feature(enable = "avx2,fma")]
fn inverse_interleaved(a: &mut [u64], lanes: usize, tw: &Twiddles) {
    if lanes == 1 {
        return inverse_single(a, tw);
    }
    let (k, t, n) = (consts(tw.modulus()), &tw.inv, tw.len());
    let ends_radix2 = n.trailing_zeros() % 2 == 1;
    let mut q = 1;
    while 4 * q <= n {
        let last = !ends_radix2 && 16 * q > n;
        staged!(radix4_lanes::<INVERSE>(a, lanes, q, t, k), q == 1, last);
        q *= 4;
    }
    if q < n {
        staged!(radix2_lanes::<INVERSE>(a, lanes, q, t, k), q == 1, true);
    }
}

#[target_feature(enable = "avx2,fma")]
fn pointwise_all(a: &mut [u64], b: &[u64], scale: u64, m: &Modulus50) {
    pointwise_forms::<true>(a, b, scale, m)
}

/// [`pointwise_all`] on words, or on the doubles of a fused row step.
#[target_feature(enable = "avx2,fma")]
fn pointwise_forms<const WORDS: bool>(a: &mut [u64], b: &[u64], scale: u64, m: &Modulus50) {
    let (k, s) = (consts(m), splat_tw(MulConst::new(scale, m)));
    let ((xs, x), (ys, y)) = (a.as_chunks_mut::<W>(), b.as_chunks::<W>());
    for (xv, yv) in xs.iter_mut().zip(ys) {
        let v = mul_var(load_in::<WORDS>(xv, k), load_in::<WORDS>(yv, k), k);
        store_out::<WORDS>(xv, mul_fixed(v, s, k), k);
    }
    if !x.is_empty() {
        let v = mul_var(load_part_in::<WORDS>(x, k), load_part_in::<WORDS>(y, k), k);
        store_part_out::<WORDS>(x, mul_fixed(v, s, k), k);
    }
}

/// One vector of words reduced like the scalar path, in doubles: the high
/// half times `2^32 mod p` (`(0, 2p)`, both halves being exact doubles)
/// plus the low half (below `p`), brought below `2p`.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn reduce_word_vector(x: __m256i, c: Tw, k: Consts) -> D {
    let hi = to_f64(_mm256_srli_epi64::<32>(x), k);
    let lo = to_f64(_mm256_and_si256(x, _mm256_set1_epi64x(0xffff_ffff)), k);
    reduce_2p(_mm256_add_pd(mul_fixed(hi, c, k), lo), k)
}

#[target_feature(enable = "avx2,fma")]
fn digits_all(src: &[u64], flags: &[u8], neg_base: u64, dst: &mut [u64], m: &Modulus50) {
    let (k, c) = (consts(m), splat_tw(scalar::word_split(m)));
    let nb = _mm256_set1_epi64x(neg_base as i64);
    let (one, two) = (_mm256_set1_epi64x(1), _mm256_set1_epi64x(2));
    let two_p = _mm256_set1_epi64x(m.two_p as i64);
    let below_two_p = _mm256_set1_epi64x(m.two_p as i64 - 1);
    let (xs, x_rest) = src.as_chunks::<W>();
    let (fs, f_rest) = flags.as_chunks::<W>();
    let (ds, d_rest) = dst.as_chunks_mut::<W>();
    for ((x, f), d) in xs.iter().zip(fs).zip(ds.iter_mut()) {
        // SAFETY: `x` is W initialised words; the load is unaligned.
        let v = unsafe { _mm256_loadu_si256(x.as_ptr().cast()) };
        let r = to_u64(reduce_word_vector(v, c, k), k);
        let f = _mm256_cvtepu8_epi64(_mm_cvtsi32_si128(i32::from_le_bytes(*f)));
        let carry = _mm256_and_si256(f, one);
        let borrow = _mm256_and_si256(_mm256_cmpeq_epi64(_mm256_and_si256(f, two), two), nb);
        // below 3p + 1 < 2^52: a signed compare is exact
        let s = _mm256_add_epi64(_mm256_add_epi64(r, carry), borrow);
        let over = _mm256_cmpgt_epi64(s, below_two_p);
        let s = _mm256_sub_epi64(s, _mm256_and_si256(over, two_p));
        // SAFETY: `d` is W writable words; the store is unaligned.
        unsafe { _mm256_storeu_si256(d.as_mut_ptr().cast(), s) }
    }
    let c = scalar::word_split(m);
    for ((d, &x), &f) in d_rest.iter_mut().zip(x_rest).zip(f_rest) {
        *d = scalar::digit(x, f, neg_base, c, m);
    }
}

/// `x * w` for `x` in `[0, 4p)`: centred to `[-2p, 2p)` first, the range
/// [`mul_fixed`] is exact for; result in `(0, 2p)`.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn mul_fixed_4p(x: D, t: Tw, k: Consts) -> D {
    mul_fixed(_mm256_sub_pd(x, k.two_p), t, k)
}

/// The radix-3 sums of [`scalar::radix3_sums`] in doubles, four positions
/// at once: `b - c` lies in `(-2p, 2p)`, inside [`mul_fixed`]'s range.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn radix3_sums(a: D, b: D, c: D, omega: Tw, k: Consts) -> [D; 3] {
    let y0 = reduce_2p(_mm256_add_pd(reduce_2p(_mm256_add_pd(a, b), k), c), k);
    let t = mul_fixed(_mm256_sub_pd(b, c), omega, k);
    let e1 = reduce_2p(_mm256_sub_pd(_mm256_add_pd(a, k.two_p), c), k);
    let e2 = reduce_2p(_mm256_sub_pd(_mm256_add_pd(a, k.two_p), b), k);
    [
        y0,
        _mm256_add_pd(e1, t),
        _mm256_sub_pd(_mm256_add_pd(e2, k.two_p), t),
    ]
}

/// The radix-3 step over the whole vectors of the thirds; returns the
/// position where the scalar tail begins.
#[target_feature(enable = "avx2,fma")]
fn radix3_vectors<const FWD: bool, const IN_WORDS: bool, const OUT_WORDS: bool>(
    a: &mut [u64],
    t: &Radix3,
) -> usize {
    let k = consts(t.sub.modulus());
    let third = t.sub.len();
    let full = third / W * W;
    let [x, y, z] = scalar::thirds(a);
    let (x, y, z) = (
        vectors_mut(&mut x[..full]),
        vectors_mut(&mut y[..full]),
        vectors_mut(&mut z[..full]),
    );
    let (t1, t2, omega) = if FWD {
        (&t.fwd1, &t.fwd2, t.omega)
    } else {
        (&t.inv1, &t.inv2, t.omega_inv)
    };
    let (r1, r2) = (Run::new(t1, 0, full), Run::new(t2, 0, full));
    let omega = splat_tw(omega);
    for v in 0..full / W {
        let (a, b, c) = (
            load_in::<IN_WORDS>(&x[v], k),
            load_in::<IN_WORDS>(&y[v], k),
            load_in::<IN_WORDS>(&z[v], k),
        );
        let (w1, w2) = (load_tw(&r1, v), load_tw(&r2, v));
        let out = if FWD {
            let [s0, s1, s2] = radix3_sums(a, b, c, omega, k);
            [s0, mul_fixed_4p(s1, w1, k), mul_fixed_4p(s2, w2, k)]
        } else {
            let z0 = reduce_2p(a, k);
            let (z1, z2) = (mul_fixed_4p(b, w1, k), mul_fixed_4p(c, w2, k));
            radix3_sums(z0, z1, z2, omega, k)
        };
        store_out::<OUT_WORDS>(&mut x[v], out[0], k);
        store_out::<OUT_WORDS>(&mut y[v], out[1], k);
        store_out::<OUT_WORDS>(&mut z[v], out[2], k);
    }
    full
}

/// The digits of one vector of positions (see [`garner_digits`]): the
/// residue centred to `[-2p, 2p)` and each digit below `p < 2^50` stay
/// inside [`mul_fixed`]'s range; every term lies in `(0, 2p_i)`, a
/// difference is lifted by `2p_i` and brought back below it, and the digit
/// finally below `p_i`.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn garner_vector(x: [D; 4], k: &[Consts; 4], s: &[Tw; 4], c: &[[Tw; 4]; 4]) -> [D; 4] {
    let mut y = [_mm256_setzero_pd(); 4];
    for i in 0..4 {
        let mut acc = mul_fixed(_mm256_sub_pd(x[i], k[i].two_p), s[i], k[i]);
        for j in 0..i {
            let t = mul_fixed(y[j], c[i][j], k[i]);
            acc = reduce_2p(_mm256_sub_pd(_mm256_add_pd(acc, k[i].two_p), t), k[i]);
        }
        let less = _mm256_sub_pd(acc, k[i].p);
        y[i] = _mm256_blendv_pd(less, acc, less);
    }
    y
}

#[target_feature(enable = "avx2,fma")]
fn garner_all(
    r: [&[u64]; 4],
    y: [&mut [u64]; 4],
    m: &[Modulus50; 4],
    s: &[MulConst; 4],
    c: &[[MulConst; 4]; 4],
) {
    let k = [consts(&m[0]), consts(&m[1]), consts(&m[2]), consts(&m[3])];
    let sv = [
        splat_tw(s[0]),
        splat_tw(s[1]),
        splat_tw(s[2]),
        splat_tw(s[3]),
    ];
    let mut cv = [[splat_tw(s[0]); 4]; 4];
    for i in 0..4 {
        for j in 0..i {
            cv[i][j] = splat_tw(c[i][j]);
        }
    }
    let n = r[0].len();
    let [y0, y1, y2, y3] = y;
    let full = n / W * W;
    for at in (0..full).step_by(W).map(|i| i..i + W) {
        let x = [
            load(r[0][at.clone()].try_into().unwrap(), k[0]),
            load(r[1][at.clone()].try_into().unwrap(), k[1]),
            load(r[2][at.clone()].try_into().unwrap(), k[2]),
            load(r[3][at.clone()].try_into().unwrap(), k[3]),
        ];
        let d = garner_vector(x, &k, &sv, &cv);
        store((&mut y0[at.clone()]).try_into().unwrap(), d[0], k[0]);
        store((&mut y1[at.clone()]).try_into().unwrap(), d[1], k[1]);
        store((&mut y2[at.clone()]).try_into().unwrap(), d[2], k[2]);
        store((&mut y3[at]).try_into().unwrap(), d[3], k[3]);
    }
    if full < n {
        let x = [
            load_part(&r[0][full..], k[0]),
            load_part(&r[1][full..], k[1]),
            load_part(&r[2][full..], k[2]),
            load_part(&r[3][full..], k[3]),
        ];
        let d = garner_vector(x, &k, &sv, &cv);
        store_part(&mut y0[full..], d[0], k[0]);
        store_part(&mut y1[full..], d[1], k[1]);
        store_part(&mut y2[full..], d[2], k[2]);
        store_part(&mut y3[full..], d[3], k[3]);
    }
}

/// Vectors of powers advanced independently in [`twiddle_all`], so that
/// the latency of one chain's product overlaps the others'.
const CHAIN_VECTORS: usize = 4;

/// `x * step^j` for one vector: `x` in `[0, 4p)`, the power `w` in
/// `[0, 2p)`; result in `[0, 2p)`.
///
/// Centring `x` to `[-2p, 2p)` keeps `|x w| < 4p^2`, the bound
/// [`mul_var`]'s quotient estimate is proved for (its rounding steps are
/// symmetric in sign), so the product lies in `(-2p, 2p)`; adding `2p` and
/// one conditional subtraction bring it to `[0, 2p)`.
#[inline]
#[target_feature(enable = "avx2,fma")]
fn mul_power(x: D, w: D, k: Consts) -> D {
    let r = mul_var(_mm256_sub_pd(x, k.two_p), w, k);
    reduce_2p(_mm256_add_pd(r, k.two_p), k)
}

/// The row twiddle with plain powers as doubles: each chain advances by
/// `step^16` through [`mul_fixed`], which keeps the powers in `(0, 2p)`
/// (the first ones are below `p`).
#[target_feature(enable = "avx2,fma")]
fn twiddle_all(row: &mut [u64], step: u64, m: &Modulus50) {
    twiddle_forms::<true, true>(row, step, m)
}

/// [`twiddle_all`] reading and writing words or doubles.
#[target_feature(enable = "avx2,fma")]
fn twiddle_forms<const IN_WORDS: bool, const OUT_WORDS: bool>(
    row: &mut [u64],
    step: u64,
    m: &Modulus50,
) {
    const SPAN: usize = CHAIN_VECTORS * W;
    let k = consts(m);
    let chain = PowerChain::<SPAN>::new(step, m);
    let stride = splat_tw(chain.stride);
    let plain = chain.plain(m).map(|x| x as f64);
    let first = plain.as_chunks::<W>().0;
    let mut pw: [D; CHAIN_VECTORS] = core::array::from_fn(|i| {
        _mm256_setr_pd(first[i][0], first[i][1], first[i][2], first[i][3])
    });
    let (blocks, rest) = row.as_chunks_mut::<SPAN>();
    for block in blocks {
        for (v, w) in block.as_chunks_mut::<W>().0.iter_mut().zip(pw.iter_mut()) {
            store_out::<OUT_WORDS>(v, mul_power(load_in::<IN_WORDS>(v, k), *w, k), k);
            *w = mul_fixed(*w, stride, k);
        }
    }
    // Fewer than SPAN left: whole vectors take the chains in order, and a
    // partial one the chain after them.
    let (vs, tail) = rest.as_chunks_mut::<W>();
    let whole = vs.len();
    for (v, w) in vs.iter_mut().zip(pw) {
        store_out::<OUT_WORDS>(v, mul_power(load_in::<IN_WORDS>(v, k), w, k), k);
    }
    if !tail.is_empty() {
        store_part_out::<OUT_WORDS>(
            tail,
            mul_power(load_part_in::<IN_WORDS>(tail, k), pw[whole], k),
            k,
        );
    }
}

#[target_feature(enable = "avx2,fma")]
fn row_product_doubles(
    a: &mut [u64],
    b: &mut [u64],
    with_b: bool,
    (step_fwd, step_inv): (u64, u64),
    tw: &Twiddles,
) {
    let m = tw.modulus();
    twiddle_forms::<true, false>(a, step_fwd, m);
    forward_doubles(a, tw);
    if with_b {
        twiddle_forms::<true, false>(b, step_fwd, m);
        forward_doubles(b, tw);
    } else {
        b.copy_from_slice(a);
    }
    // The CRT divides out the transform length.
    pointwise_forms::<false>(a, b, 1, m);
    inverse_doubles(a, tw);
    twiddle_forms::<false, true>(a, step_inv, m);
}

/// The forward transform of a row [`fuses_row`] accepts, doubles in and
/// out: the radix-3 step first where the length has one (every third then
/// a whole number of vectors).
#[target_feature(enable = "avx2,fma")]
fn forward_doubles(a: &mut [u64], tw: &Twiddles) {
    match &tw.three {
        None => forward_forms(a, tw, false, false),
        Some(t3) => {
            let done = radix3_vectors::<FORWARD, false, false>(a, t3);
            assert_eq!(done, t3.sub.len(), "a radix-3 tail in doubles");
            for part in a.chunks_exact_mut(t3.sub.len()) {
                forward_forms(part, &t3.sub, false, false);
            }
        }
    }
}

/// [`forward_doubles`]' inverse: the radix-3 step last.
#[target_feature(enable = "avx2,fma")]
fn inverse_doubles(a: &mut [u64], tw: &Twiddles) {
    match &tw.three {
        None => inverse_forms(a, tw, false, false),
        Some(t3) => {
            for part in a.chunks_exact_mut(t3.sub.len()) {
                inverse_forms(part, &t3.sub, false, false);
            }
            let done = radix3_vectors::<INVERSE, false, false>(a, t3);
            assert_eq!(done, t3.sub.len(), "a radix-3 tail in doubles");
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The tile transpose on a tile of distinct words, against index
    /// arithmetic.
    #[test]
    fn transpose_moves_row_i_column_j_to_row_j_column_i() {
        if !Kernel::Avx2.is_supported() {
            println!("skipped: avx2 not supported on this CPU");
            return;
        }
        let tile: Vec<u64> = (0..16).collect();
        let mut out = vec![0u64; 16];
        // SAFETY: AVX2 and FMA support was checked above.
        unsafe { transpose_roundtrip(&tile, &mut out) };
        for i in 0..4 {
            for j in 0..4 {
                assert_eq!(out[j * 4 + i], tile[i * 4 + j], "row {i} column {j}");
            }
        }
    }

    /// Applies `f` to four lanes of doubles.
    #[target_feature(enable = "avx2,fma")]
    fn lanes4(x: [f64; 4], y: [f64; 4], f: impl Fn(D, D) -> D) -> [f64; 4] {
        let mut out = [0.0; 4];
        // SAFETY: each array holds four doubles; the accesses are unaligned.
        unsafe {
            let v = f(_mm256_loadu_pd(x.as_ptr()), _mm256_loadu_pd(y.as_ptr()));
            _mm256_storeu_pd(out.as_mut_ptr(), v);
        }
        out
    }

    /// Integer doubles from words in `[lo, hi)`, with both ends mixed in.
    fn samples(count: usize, lo: i64, hi: i64, seed: u64) -> Vec<f64> {
        let span = (hi - lo) as u64;
        let mut v: Vec<f64> = crate::test_oracles::seeded_words(count, seed)
            .iter()
            .map(|x| (lo + (x % span) as i64) as f64)
            .collect();
        v[..4].copy_from_slice(&[lo as f64, (hi - 1) as f64, lo as f64, (hi - 1) as f64]);
        v
    }

    /// The products' contracts on 2^16 samples per prime, taken from the
    /// whole input ranges including their ends: `mul_fixed` maps
    /// `[-2p, 2p]` into `(0, 2p)` and `mul_var` maps `[0, 2p)^2` into
    /// `(-2p, 2p)`, both congruent to the product.
    #[test]
    fn fp_products_keep_their_ranges_and_residues() {
        if !Kernel::Avx2.is_supported() {
            println!("skipped: avx2 not supported on this CPU");
            return;
        }
        for pr in &crate::ntt50::primes::PRIMES {
            let m = pr.modulus;
            let (p, pi) = (m.p, m.p as i64);
            let xs = samples(1 << 16, -2 * pi, 2 * pi + 1, p);
            let ws = samples(1 << 16, 0, pi, p + 1);
            let (as_, bs) = (
                samples(1 << 16, 0, 2 * pi, p + 2),
                samples(1 << 16, 0, 2 * pi, p + 3),
            );
            let residue = |v: f64| (v as i64).rem_euclid(pi) as u64;
            for i in (0..xs.len()).step_by(4) {
                let c = MulConst::new(ws[i] as u64, &m);
                let quad = |v: &[f64]| -> [f64; 4] { v[i..i + 4].try_into().unwrap() };
                let (x, a, b) = (quad(&xs), quad(&as_), quad(&bs));
                // SAFETY: AVX2 and FMA support was checked above.
                let (fixed, var) = unsafe {
                    let k = consts(&m);
                    (
                        lanes4(x, x, |x, _| mul_fixed(x, splat_tw(c), k)),
                        lanes4(a, b, |a, b| mul_var(a, b, k)),
                    )
                };
                for l in 0..4 {
                    let r = fixed[l];
                    assert!(r > 0.0 && r < 2.0 * p as f64, "mul_fixed({}) = {r}", x[l]);
                    assert_eq!(residue(r), m.mul(residue(x[l]), c.w));
                    let v = var[l];
                    assert!(v.abs() < 2.0 * p as f64, "mul_var = {v}");
                    assert_eq!(residue(v), m.mul(a[l] as u64, b[l] as u64));
                }
            }
        }
    }

    #[target_feature(enable = "avx2,fma")]
    fn transpose_roundtrip(tile: &[u64], out: &mut [u64]) {
        let m = Modulus50::new(17);
        let k = consts(&m);
        let rows = vectors(tile);
        let cols = transpose([0, 1, 2, 3].map(|i| load(&rows[i], k)));
        for (row, c) in vectors_mut(out).iter_mut().zip(cols) {
            store(row, c, k);
        }
    }
}
