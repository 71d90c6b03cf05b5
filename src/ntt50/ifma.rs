//! The AVX-512 IFMA path: eight 64-bit lanes, products through the 52-bit
//! multiply-adds `vpmadd52luq` / `vpmadd52huq`.
//!
//! A twiddle product is Shoup's method in base 2^52: the high half of
//! `x * floor(w 2^52 / p)` estimates the quotient, and the remainder
//! `x w - est p` is formed modulo 2^52 by two low-half multiply-adds (the
//! second multiplies by `2^52 - p`, so it subtracts), then masked to 52
//! bits. Conditional subtractions are unsigned minimums (`x - 2p` wraps
//! above `x` exactly when `x < 2p`). The butterflies are those of the
//! scalar path, value for value.
//!
//! Single vectors of length 64 and more run their large stages with
//! consecutive twiddles in vector registers; the three stages within
//! 8-element blocks run on 8x8 tiles transposed so that those stages
//! become lane-wise too. Shorter vectors use the scalar path. The lanes
//! form vectorises across lanes with broadcast twiddles, masking the last
//! partial group of lanes.
//!
//! Every function compiled for the IFMA features is reached only through a
//! public function that first checks, at run time, that the CPU has them.

use super::{
    check_shape, montgomery_scale, quarters, require, scalar, Kernel, Modulus50, MulConst,
    PowerChain, Radix3, Table, Twiddles, MASK52,
};
use core::arch::x86_64::*;

type V = __m512i;

/// Lanes per vector.
const W: usize = 8;

/// The shortest single vector the vector code takes: one 8x8 tile.
const MIN_VECTOR_LEN: usize = W * W;

/// Forward transform in place: `[0, 2p)` in natural order to `[0, 2p)` in
/// bit-reversed order. Panics if the CPU lacks IFMA.
pub fn forward(a: &mut [u64], tw: &Twiddles) {
    check_shape(a, 1, tw);
    require(Kernel::Ifma);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    unsafe { forward_single(a, tw) }
}

/// Inverse transform in place: `[0, 4p)` in bit-reversed order to
/// `[0, 4p)` in natural order, times the length. Panics if the CPU lacks
/// IFMA.
pub fn inverse(a: &mut [u64], tw: &Twiddles) {
    check_shape(a, 1, tw);
    require(Kernel::Ifma);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    unsafe { inverse_single(a, tw) }
}

/// [`forward`] on `lanes` interleaved vectors of length `tw.len()`.
pub fn forward_lanes(a: &mut [u64], lanes: usize, tw: &Twiddles) {
    check_shape(a, lanes, tw);
    require(Kernel::Ifma);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    unsafe { forward_interleaved(a, lanes, tw) }
}

/// [`inverse`] on `lanes` interleaved vectors of length `tw.len()`.
pub fn inverse_lanes(a: &mut [u64], lanes: usize, tw: &Twiddles) {
    check_shape(a, lanes, tw);
    require(Kernel::Ifma);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    unsafe { inverse_interleaved(a, lanes, tw) }
}

/// `a[i] = a[i] * b[i] * scale mod p`: `[0, 2p)` in and out.
pub fn pointwise(a: &mut [u64], b: &[u64], scale: u64, m: &Modulus50) {
    assert_eq!(a.len(), b.len(), "pointwise operands differ in length");
    require(Kernel::Ifma);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    unsafe { pointwise_all(a, b, scale, m) }
}

/// [`scalar::digits_into`], eight limbs at a time. Panics if the CPU lacks
/// IFMA, or the lengths differ.
pub fn digits_into(src: &[u64], flags: &[u8], neg_base: u64, dst: &mut [u64], m: &Modulus50) {
    super::check_digits(src, flags, neg_base, dst, m);
    require(Kernel::Ifma);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    unsafe { digits_all(src, flags, neg_base, dst, m) }
}

/// Garner's mixed-radix digits of four residue streams, eight positions at
/// a time, value for value as [`super::crt::Crt50`]'s scalar digits: `r[i]`
/// below 2^52, `y[i]` filled with digits in `[0, p_i)`; `s` and `c` are the
/// Garner constants (`c[i][j]` for `j < i`). Panics if the CPU lacks IFMA or
/// the slices differ in length.
pub(crate) fn garner_digits(
    r: [&[u64]; 4],
    y: [&mut [u64]; 4],
    m: &[Modulus50; 4],
    s: &[MulConst; 4],
    c: &[[MulConst; 4]; 4],
) {
    let n = r[0].len();
    assert!(r.iter().all(|x| x.len() == n) && y.iter().all(|x| x.len() == n));
    require(Kernel::Ifma);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    unsafe { garner_all(r, y, m, s, c) }
}

/// The radix-3 step of a forward transform of length `3m`: `[0, 2p)` in
/// and out. Panics if the CPU lacks IFMA.
pub fn radix3_forward(a: &mut [u64], t: &Radix3) {
    assert_eq!(a.len(), 3 * t.sub.len(), "buffer is not 3m long");
    require(Kernel::Ifma);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    let done = unsafe { radix3_vectors::<FORWARD>(a, t) };
    scalar::radix3_forward_from(a, t, done);
}

/// The radix-3 step of an inverse transform of length `3m`, after its
/// sub-transforms: `[0, 4p)` in and out, times 3. Panics if the CPU lacks
/// IFMA.
pub fn radix3_inverse(a: &mut [u64], t: &Radix3) {
    assert_eq!(a.len(), 3 * t.sub.len(), "buffer is not 3m long");
    require(Kernel::Ifma);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    let done = unsafe { radix3_vectors::<INVERSE>(a, t) };
    scalar::radix3_inverse_from(a, t, done);
}

/// `row[j] = row[j] * step^j mod p`: `[0, 4p)` in, `[0, 2p)` out. Panics
/// if the CPU lacks IFMA.
pub fn twiddle_powers(row: &mut [u64], step: u64, m: &Modulus50) {
    require(Kernel::Ifma);
    // SAFETY: `require` checked that the CPU has every feature the callee
    // is compiled for.
    unsafe { twiddle_all(row, step, m) }
}

/// The modulus' constants, broadcast.
#[derive(Clone, Copy)]
struct Consts {
    p: V,
    two_p: V,
    neg_p: V,
    neg_p_inv: V,
    mask: V,
}

/// A twiddle and its base-2^52 Shoup quotient, per lane.
#[derive(Clone, Copy)]
struct Tw {
    w: V,
    q: V,
}

#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn splat(x: u64) -> V {
    _mm512_set1_epi64(x as i64)
}

#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn consts(m: &Modulus50) -> Consts {
    Consts {
        p: splat(m.p),
        two_p: splat(m.two_p),
        neg_p: splat(m.neg_p),
        neg_p_inv: splat(m.neg_p_inv),
        mask: splat(MASK52),
    }
}

#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn splat_tw(c: MulConst) -> Tw {
    Tw {
        w: splat(c.w),
        q: splat(c.q),
    }
}

/// `s` as whole vectors; panics on a partial one at the end. Loops over
/// these index arrays of known length, so no load needs a bounds check.
#[inline(always)]
fn vectors(s: &[u64]) -> &[[u64; W]] {
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
    w: &'a [[u64; W]],
    q: &'a [[u64; W]],
}

impl<'a> Run<'a> {
    fn new(t: &'a Table, start: usize, len: usize) -> Self {
        Run {
            w: vectors(&t.w[start..start + len]),
            q: vectors(&t.q[start..start + len]),
        }
    }
}

/// Vector `j` of a run of twiddles.
#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn load_tw(r: &Run, j: usize) -> Tw {
    Tw {
        w: load(&r.w[j]),
        q: load(&r.q[j]),
    }
}

#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn load(s: &[u64; W]) -> V {
    // SAFETY: `s` is W initialised words; the load is unaligned.
    unsafe { _mm512_loadu_si512(s.as_ptr().cast()) }
}

#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn store(s: &mut [u64; W], v: V) {
    // SAFETY: `s` is W writable words; the store is unaligned.
    unsafe { _mm512_storeu_si512(s.as_mut_ptr().cast(), v) }
}

/// The mask of the first `min(len, 8)` lanes.
#[inline]
fn part_mask(len: usize) -> __mmask8 {
    if len >= W {
        0xff
    } else {
        ((1u16 << len) - 1) as __mmask8
    }
}

/// The first `min(len, 8)` words of `s`, zeros in the other lanes.
#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn load_part(s: &[u64]) -> V {
    let k = part_mask(s.len());
    // SAFETY: the mask enables only lanes below `s.len()`; masked-off
    // lanes are neither read nor able to fault.
    unsafe { _mm512_maskz_loadu_epi64(k, s.as_ptr().cast()) }
}

/// Writes the first `min(len, 8)` lanes of `v` to `s`.
#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn store_part(s: &mut [u64], v: V) {
    let k = part_mask(s.len());
    // SAFETY: the mask enables only lanes below `s.len()`; masked-off
    // lanes are neither written nor able to fault.
    unsafe { _mm512_mask_storeu_epi64(s.as_mut_ptr().cast(), k, v) }
}

/// `x * w mod p` in `[0, 2p)` for `x < 2^52` (see the module notes).
#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn mul_shoup(x: V, t: Tw, k: Consts) -> V {
    let zero = _mm512_setzero_si512();
    let est = _mm512_madd52hi_epu64(zero, x, t.q);
    let lo = _mm512_madd52lo_epu64(zero, x, t.w);
    let r = _mm512_madd52lo_epu64(lo, est, k.neg_p);
    _mm512_and_si512(r, k.mask)
}

/// Montgomery's product in base 2^52, `a b 2^-52 mod p` in `[0, 2p)`, for
/// `a, b < 2p`.
#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn mul_montgomery(a: V, b: V, k: Consts) -> V {
    let zero = _mm512_setzero_si512();
    let lo = _mm512_madd52lo_epu64(zero, a, b);
    let hi = _mm512_madd52hi_epu64(zero, a, b);
    let f = _mm512_and_si512(_mm512_madd52lo_epu64(zero, lo, k.neg_p_inv), k.mask);
    let hi = _mm512_madd52hi_epu64(hi, f, k.p);
    // lo + lo52(f p) is 0 or 2^52: it carries exactly when lo is non-zero.
    let carries = _mm512_test_epi64_mask(lo, lo);
    _mm512_mask_add_epi64(hi, carries, hi, splat(1))
}

/// `x` less `2p` where that stays non-negative: `[0, 4p)` to `[0, 2p)`.
#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn reduce_2p(x: V, k: Consts) -> V {
    _mm512_min_epu64(x, _mm512_sub_epi64(x, k.two_p))
}

/// Decimation-in-frequency butterfly: `[0, 2p)` in and out.
#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn dif(x: V, y: V, t: Tw, k: Consts) -> (V, V) {
    let s = reduce_2p(_mm512_add_epi64(x, y), k);
    let d = _mm512_sub_epi64(_mm512_add_epi64(x, k.two_p), y);
    (s, mul_shoup(d, t, k))
}

/// Decimation-in-time butterfly: `[0, 4p)` in and out.
#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn dit(x: V, y: V, t: Tw, k: Consts) -> (V, V) {
    let u = reduce_2p(x, k);
    let v = mul_shoup(y, t, k);
    let sum = _mm512_add_epi64(u, v);
    (sum, _mm512_sub_epi64(_mm512_add_epi64(u, k.two_p), v))
}

/// Two forward stages on four values `q` apart: `ta`, `tb` for the outer
/// stage's two pairs, `t2` for the inner stage.
#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn dif4(v: [V; 4], [ta, tb, t2]: [Tw; 3], k: Consts) -> [V; 4] {
    let (v0, v2) = dif(v[0], v[2], ta, k);
    let (v1, v3) = dif(v[1], v[3], tb, k);
    let (v0, v1) = dif(v0, v1, t2, k);
    let (v2, v3) = dif(v2, v3, t2, k);
    [v0, v1, v2, v3]
}

/// Two inverse stages on four values `q` apart: `t1` for the inner stage,
/// `ta`, `tb` for the outer stage's two pairs.
#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn dit4(v: [V; 4], [t1, ta, tb]: [Tw; 3], k: Consts) -> [V; 4] {
    let (v0, v1) = dit(v[0], v[1], t1, k);
    let (v2, v3) = dit(v[2], v[3], t1, k);
    let (v0, v2) = dit(v0, v2, ta, k);
    let (v1, v3) = dit(v1, v3, tb, k);
    [v0, v1, v2, v3]
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
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn step4<const FWD: bool>(v: [V; 4], t: [Tw; 3], k: Consts) -> [V; 4] {
    if FWD {
        dif4(v, t, k)
    } else {
        dit4(v, t, k)
    }
}

#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn step2<const FWD: bool>(x: V, y: V, t: Tw, k: Consts) -> (V, V) {
    if FWD {
        dif(x, y, t, k)
    } else {
        dit(x, y, t, k)
    }
}

/// A radix-4 step of a single vector, `q >= 8`: consecutive butterflies
/// take consecutive twiddles, loaded eight at a time.
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn radix4_single<const FWD: bool>(a: &mut [u64], q: usize, t: &Table, k: Consts) {
    let runs = radix4_entries(FWD, q, 0).map(|i| Run::new(t, i, q));
    for block in a.chunks_exact_mut(4 * q) {
        let [b0, b1, b2, b3] = quarters(block, q).map(vectors_mut);
        for j in 0..b0.len() {
            let tws = runs.map(|r| load_tw(&r, j));
            let v = [load(&b0[j]), load(&b1[j]), load(&b2[j]), load(&b3[j])];
            let [v0, v1, v2, v3] = step4::<FWD>(v, tws, k);
            store(&mut b0[j], v0);
            store(&mut b1[j], v1);
            store(&mut b2[j], v2);
            store(&mut b3[j], v3);
        }
    }
}

/// A radix-2 stage of a single vector with halves `half >= 8` apart.
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn radix2_single<const FWD: bool>(a: &mut [u64], half: usize, t: &Table, k: Consts) {
    let run = Run::new(t, half, half);
    for block in a.chunks_exact_mut(2 * half) {
        let (lo, hi) = block.split_at_mut(half);
        let (lo, hi) = (vectors_mut(lo), vectors_mut(hi));
        for j in 0..lo.len() {
            let (x, y) = step2::<FWD>(load(&lo[j]), load(&hi[j]), load_tw(&run, j), k);
            store(&mut lo[j], x);
            store(&mut hi[j], y);
        }
    }
}

/// Transposes an 8x8 tile of words held as eight rows.
#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn transpose(r: [V; 8]) -> [V; 8] {
    // rows 2i and 2i+1 interleaved: even columns, then odd columns
    let t = [
        _mm512_unpacklo_epi64(r[0], r[1]),
        _mm512_unpackhi_epi64(r[0], r[1]),
        _mm512_unpacklo_epi64(r[2], r[3]),
        _mm512_unpackhi_epi64(r[2], r[3]),
        _mm512_unpacklo_epi64(r[4], r[5]),
        _mm512_unpackhi_epi64(r[4], r[5]),
        _mm512_unpacklo_epi64(r[6], r[7]),
        _mm512_unpackhi_epi64(r[6], r[7]),
    ];
    // 2x2 blocks of four rows: columns {c, c + 4} of rows 0-3 (or 4-7)
    let lo = _mm512_set_epi64(13, 12, 5, 4, 9, 8, 1, 0);
    let hi = _mm512_set_epi64(15, 14, 7, 6, 11, 10, 3, 2);
    let u = [
        _mm512_permutex2var_epi64(t[0], lo, t[2]),
        _mm512_permutex2var_epi64(t[1], lo, t[3]),
        _mm512_permutex2var_epi64(t[0], hi, t[2]),
        _mm512_permutex2var_epi64(t[1], hi, t[3]),
        _mm512_permutex2var_epi64(t[4], lo, t[6]),
        _mm512_permutex2var_epi64(t[5], lo, t[7]),
        _mm512_permutex2var_epi64(t[4], hi, t[6]),
        _mm512_permutex2var_epi64(t[5], hi, t[7]),
    ];
    // 4x4 blocks: the low halves give columns 0-3, the high halves 4-7
    [
        _mm512_shuffle_i64x2::<0x44>(u[0], u[4]),
        _mm512_shuffle_i64x2::<0x44>(u[1], u[5]),
        _mm512_shuffle_i64x2::<0x44>(u[2], u[6]),
        _mm512_shuffle_i64x2::<0x44>(u[3], u[7]),
        _mm512_shuffle_i64x2::<0xee>(u[0], u[4]),
        _mm512_shuffle_i64x2::<0xee>(u[1], u[5]),
        _mm512_shuffle_i64x2::<0xee>(u[2], u[6]),
        _mm512_shuffle_i64x2::<0xee>(u[3], u[7]),
    ]
}

#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn load_tile(s: &[[u64; W]; W]) -> [V; W] {
    core::array::from_fn(|i| load(&s[i]))
}

#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn store_tile(s: &mut [[u64; W]; W], v: [V; W]) {
    for (row, x) in s.iter_mut().zip(v) {
        store(row, x);
    }
}

/// The butterflies `h` apart inside 8-element blocks, once the tile is
/// transposed: column `c` pairs with `c + h`, twiddle entry `h + c % h`.
#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn tile_stage<const FWD: bool>(v: &mut [V; 8], h: usize, tws: &[Tw; 8], k: Consts) {
    for c in (0..W).filter(|c| c & h == 0) {
        (v[c], v[c + h]) = step2::<FWD>(v[c], v[c + h], tws[h + c % h], k);
    }
}

/// The forward stages 4, 2 and 1 of every 8-element block, on 8x8 tiles.
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn forward_tiles(a: &mut [u64], t: &Table, k: Consts) {
    let tws: [Tw; 8] = core::array::from_fn(|i| splat_tw(t.get(i.max(1))));
    for tile in vectors_mut(a).as_chunks_mut::<W>().0 {
        let mut v = transpose(load_tile(tile));
        for h in [4, 2, 1] {
            tile_stage::<FORWARD>(&mut v, h, &tws, k);
        }
        store_tile(tile, transpose(v));
    }
}

/// The inverse stages 1, 2 and 4 of every 8-element block, on 8x8 tiles.
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn inverse_tiles(a: &mut [u64], t: &Table, k: Consts) {
    let tws: [Tw; 8] = core::array::from_fn(|i| splat_tw(t.get(i.max(1))));
    for tile in vectors_mut(a).as_chunks_mut::<W>().0 {
        let mut v = transpose(load_tile(tile));
        for h in [1, 2, 4] {
            tile_stage::<INVERSE>(&mut v, h, &tws, k);
        }
        store_tile(tile, transpose(v));
    }
}

#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn forward_single(a: &mut [u64], tw: &Twiddles) {
    let n = tw.len();
    if n < MIN_VECTOR_LEN {
        return scalar::forward(a, tw);
    }
    let (k, t) = (consts(tw.modulus()), &tw.fwd);
    // stages n/2 .. 8 in vectors of consecutive butterflies
    let mut half = n / 2;
    if n.trailing_zeros().is_multiple_of(2) {
        // an odd count of them (log2 n - 3): one radix-2 stage first
        radix2_single::<FORWARD>(a, half, t, k);
        half /= 2;
    }
    while half >= 2 * W {
        radix4_single::<FORWARD>(a, half / 2, t, k);
        half /= 4;
    }
    forward_tiles(a, t, k);
}

#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn inverse_single(a: &mut [u64], tw: &Twiddles) {
    let n = tw.len();
    if n < MIN_VECTOR_LEN {
        return scalar::inverse(a, tw);
    }
    let (k, t) = (consts(tw.modulus()), &tw.inv);
    inverse_tiles(a, t, k);
    let mut q = W;
    while 2 * q <= n / 2 {
        radix4_single::<INVERSE>(a, q, t, k);
        q *= 4;
    }
    if q == n / 2 {
        radix2_single::<INVERSE>(a, q, t, k);
    }
}

/// Four rows of lanes through one radix-4 step with broadcast twiddles,
/// eight lanes at a time, the last group masked.
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn radix4_row<const FWD: bool>(rows: [&mut [u64]; 4], tws: [Tw; 3], k: Consts) {
    let [(x0, r0), (x1, r1), (x2, r2), (x3, r3)] = rows.map(|r| r.as_chunks_mut::<W>());
    for j in 0..x0.len() {
        let v = [load(&x0[j]), load(&x1[j]), load(&x2[j]), load(&x3[j])];
        let [v0, v1, v2, v3] = step4::<FWD>(v, tws, k);
        store(&mut x0[j], v0);
        store(&mut x1[j], v1);
        store(&mut x2[j], v2);
        store(&mut x3[j], v3);
    }
    if !r0.is_empty() {
        let (x0, x1, x2, x3) = (r0, r1, r2, r3);
        let v = [load_part(x0), load_part(x1), load_part(x2), load_part(x3)];
        let [v0, v1, v2, v3] = step4::<FWD>(v, tws, k);
        store_part(x0, v0);
        store_part(x1, v1);
        store_part(x2, v2);
        store_part(x3, v3);
    }
}

/// Two rows of lanes through one radix-2 butterfly with a broadcast
/// twiddle, the last group masked.
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn radix2_row<const FWD: bool>(xs: &mut [u64], ys: &mut [u64], t: Tw, k: Consts) {
    let ((xv, xs), (yv, ys)) = (xs.as_chunks_mut::<W>(), ys.as_chunks_mut::<W>());
    for j in 0..xv.len() {
        let (x, y) = step2::<FWD>(load(&xv[j]), load(&yv[j]), t, k);
        store(&mut xv[j], x);
        store(&mut yv[j], y);
    }
    if !xs.is_empty() {
        let (x, y) = step2::<FWD>(load_part(xs), load_part(ys), t, k);
        store_part(xs, x);
        store_part(ys, y);
    }
}

#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn radix4_lanes<const FWD: bool>(a: &mut [u64], lanes: usize, q: usize, t: &Table, k: Consts) {
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
            radix4_row::<FWD>(rows, tws, k);
        }
    }
}

#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn radix2_lanes<const FWD: bool>(a: &mut [u64], lanes: usize, half: usize, t: &Table, k: Consts) {
    for block in a.chunks_exact_mut(2 * half * lanes) {
        let (lo, hi) = block.split_at_mut(half * lanes);
        for (j, (xs, ys)) in lo
            .chunks_exact_mut(lanes)
            .zip(hi.chunks_exact_mut(lanes))
            .enumerate()
        {
            radix2_row::<FWD>(xs, ys, splat_tw(t.get(half + j)), k);
        }
    }
}

#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn forward_interleaved(a: &mut [u64], lanes: usize, tw: &Twiddles) {
    if lanes == 1 {
        return forward_single(a, tw);
    }
    let (k, t, n) = (consts(tw.modulus()), &tw.fwd, tw.len());
    let mut half = n / 2;
    if n.trailing_zeros() % 2 == 1 {
        radix2_lanes::<FORWARD>(a, lanes, half, t, k);
        half /= 2;
    }
    while half >= 2 {
        radix4_lanes::<FORWARD>(a, lanes, half / 2, t, k);
        half /= 4;
    }
}

#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn inverse_interleaved(a: &mut [u64], lanes: usize, tw: &Twiddles) {
    if lanes == 1 {
        return inverse_single(a, tw);
    }
    let (k, t, n) = (consts(tw.modulus()), &tw.inv, tw.len());
    let mut q = 1;
    while 4 * q <= n {
        radix4_lanes::<INVERSE>(a, lanes, q, t, k);
        q *= 4;
    }
    if q < n {
        radix2_lanes::<INVERSE>(a, lanes, q, t, k);
    }
}

/// `a * b * scale` in `[0, 2p)`: a Montgomery product, then the scale with
/// the Montgomery factor folded in.
#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn mul_scaled(a: V, b: V, s: Tw, k: Consts) -> V {
    mul_shoup(mul_montgomery(a, b, k), s, k)
}

#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn pointwise_all(a: &mut [u64], b: &[u64], scale: u64, m: &Modulus50) {
    let (k, s) = (consts(m), splat_tw(montgomery_scale(scale, m)));
    let ((xs, x), (ys, y)) = (a.as_chunks_mut::<W>(), b.as_chunks::<W>());
    for (xv, yv) in xs.iter_mut().zip(ys) {
        store(xv, mul_scaled(load(xv), load(yv), s, k));
    }
    if !x.is_empty() {
        store_part(x, mul_scaled(load_part(x), load_part(y), s, k));
    }
}

/// One vector of words reduced as the scalar path does it: the high half
/// times `2^32 mod p` (a Shoup product, `[0, 2p)`) plus the low half (below
/// `p`), brought below `2p`.
#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn reduce_word_vector(x: V, c: Tw, k: Consts) -> V {
    let hi = _mm512_srli_epi64::<32>(x);
    let lo = _mm512_and_si512(x, splat(0xffff_ffff));
    reduce_2p(_mm512_add_epi64(mul_shoup(hi, c, k), lo), k)
}

#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn digits_all(src: &[u64], flags: &[u8], neg_base: u64, dst: &mut [u64], m: &Modulus50) {
    let (k, c) = (consts(m), splat_tw(scalar::word_split(m)));
    let (nb, one, two) = (splat(neg_base), splat(1), splat(2));
    let (xs, x_rest) = src.as_chunks::<W>();
    let (fs, f_rest) = flags.as_chunks::<W>();
    let (ds, d_rest) = dst.as_chunks_mut::<W>();
    for ((x, f), d) in xs.iter().zip(fs).zip(ds.iter_mut()) {
        let r = reduce_word_vector(load(x), c, k);
        // SAFETY: `f` is W = 8 initialised bytes, what the load reads.
        let f = _mm512_cvtepu8_epi64(unsafe { _mm_loadl_epi64(f.as_ptr().cast()) });
        let s = _mm512_add_epi64(r, _mm512_and_si512(f, one));
        let s = _mm512_mask_add_epi64(s, _mm512_test_epi64_mask(f, two), s, nb);
        // [0, 2p) + 1 + neg_base < 3p + 1: one subtraction of 2p at most
        store(d, reduce_2p(s, k));
    }
    let c = scalar::word_split(m);
    for ((d, &x), &f) in d_rest.iter_mut().zip(x_rest).zip(f_rest) {
        *d = scalar::digit(x, f, neg_base, c, m);
    }
}

/// The digits of one vector of positions (see [`garner_digits`]): each
/// term stays in `[0, 2p_i)`, a difference lifted by `2p_i` and brought
/// back below it.
#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn garner_vector(x: [V; 4], k: &[Consts; 4], s: &[Tw; 4], c: &[[Tw; 4]; 4]) -> [V; 4] {
    let mut y = [_mm512_setzero_si512(); 4];
    for i in 0..4 {
        let mut acc = mul_shoup(x[i], s[i], k[i]);
        for j in 0..i {
            let t = mul_shoup(y[j], c[i][j], k[i]);
            acc = reduce_2p(_mm512_sub_epi64(_mm512_add_epi64(acc, k[i].two_p), t), k[i]);
        }
        y[i] = reduce_p(acc, k[i]);
    }
    y
}

#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
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
            load(r[0][at.clone()].try_into().unwrap()),
            load(r[1][at.clone()].try_into().unwrap()),
            load(r[2][at.clone()].try_into().unwrap()),
            load(r[3][at.clone()].try_into().unwrap()),
        ];
        let d = garner_vector(x, &k, &sv, &cv);
        store((&mut y0[at.clone()]).try_into().unwrap(), d[0]);
        store((&mut y1[at.clone()]).try_into().unwrap(), d[1]);
        store((&mut y2[at.clone()]).try_into().unwrap(), d[2]);
        store((&mut y3[at]).try_into().unwrap(), d[3]);
    }
    if full < n {
        let x = [
            load_part(&r[0][full..]),
            load_part(&r[1][full..]),
            load_part(&r[2][full..]),
            load_part(&r[3][full..]),
        ];
        let d = garner_vector(x, &k, &sv, &cv);
        store_part(&mut y0[full..], d[0]);
        store_part(&mut y1[full..], d[1]);
        store_part(&mut y2[full..], d[2]);
        store_part(&mut y3[full..], d[3]);
    }
}

/// The radix-3 sums of [`scalar::radix3_sums`], eight positions at once.
#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn radix3_sums(a: V, b: V, c: V, omega: Tw, k: Consts) -> [V; 3] {
    let y0 = reduce_2p(_mm512_add_epi64(reduce_2p(_mm512_add_epi64(a, b), k), c), k);
    let t = mul_shoup(_mm512_sub_epi64(_mm512_add_epi64(b, k.two_p), c), omega, k);
    let e1 = reduce_2p(_mm512_sub_epi64(_mm512_add_epi64(a, k.two_p), c), k);
    let e2 = reduce_2p(_mm512_sub_epi64(_mm512_add_epi64(a, k.two_p), b), k);
    [
        y0,
        _mm512_add_epi64(e1, t),
        _mm512_sub_epi64(_mm512_add_epi64(e2, k.two_p), t),
    ]
}

/// The radix-3 step over the whole vectors of the thirds; returns the
/// position where the scalar tail begins.
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn radix3_vectors<const FWD: bool>(a: &mut [u64], t: &Radix3) -> usize {
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
        let (a, b, c) = (load(&x[v]), load(&y[v]), load(&z[v]));
        let (w1, w2) = (load_tw(&r1, v), load_tw(&r2, v));
        let out = if FWD {
            let [s0, s1, s2] = radix3_sums(a, b, c, omega, k);
            [s0, mul_shoup(s1, w1, k), mul_shoup(s2, w2, k)]
        } else {
            let z0 = reduce_2p(a, k);
            radix3_sums(z0, mul_shoup(b, w1, k), mul_shoup(c, w2, k), omega, k)
        };
        store(&mut x[v], out[0]);
        store(&mut y[v], out[1]);
        store(&mut z[v], out[2]);
    }
    full
}

/// Vectors of powers advanced independently in [`twiddle_all`]: one
/// chain's Shoup product takes about three multiply-add latencies, which
/// four chains cover.
const CHAIN_VECTORS: usize = 4;

/// `x` less `p` where that stays non-negative: `[0, 2p)` to `[0, p)`.
#[inline]
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn reduce_p(x: V, k: Consts) -> V {
    _mm512_min_epu64(x, _mm512_sub_epi64(x, k.p))
}

/// The row twiddle as the scalar path computes it, value for value: a
/// Montgomery product by each power (Montgomery form, below `p`, so with
/// `x < 4p` the product stays below `2^52 p` and lands in `[0, 2p)`), the
/// powers advanced by a Shoup product with `step^32`.
#[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
fn twiddle_all(row: &mut [u64], step: u64, m: &Modulus50) {
    const SPAN: usize = CHAIN_VECTORS * W;
    let k = consts(m);
    let chain = PowerChain::<SPAN>::new(step, m);
    let stride = splat_tw(chain.stride);
    let first = chain.mont.as_chunks::<W>().0;
    let mut pw: [V; CHAIN_VECTORS] = core::array::from_fn(|i| load(&first[i]));
    let (blocks, rest) = row.as_chunks_mut::<SPAN>();
    for block in blocks {
        for (v, w) in block.as_chunks_mut::<W>().0.iter_mut().zip(pw.iter_mut()) {
            store(v, mul_montgomery(load(v), *w, k));
            *w = reduce_p(mul_shoup(*w, stride, k), k);
        }
    }
    // Fewer than SPAN left: whole vectors take the chains in order, and a
    // partial one the chain after them.
    let (vs, tail) = rest.as_chunks_mut::<W>();
    let whole = vs.len();
    for (v, w) in vs.iter_mut().zip(pw) {
        store(v, mul_montgomery(load(v), w, k));
    }
    if !tail.is_empty() {
        store_part(tail, mul_montgomery(load_part(tail), pw[whole], k));
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The tile transpose on a tile of distinct words, against index
    /// arithmetic.
    #[test]
    fn transpose_moves_row_i_column_j_to_row_j_column_i() {
        if !Kernel::Ifma.is_supported() {
            println!("skipped: ifma not supported on this CPU");
            return;
        }
        let tile: Vec<u64> = (0..64).collect();
        let mut out = vec![0u64; 64];
        // SAFETY: IFMA support was checked above.
        unsafe { transpose_roundtrip(&tile, &mut out) };
        for i in 0..8 {
            for j in 0..8 {
                assert_eq!(out[j * 8 + i], tile[i * 8 + j], "row {i} column {j}");
            }
        }
    }

    #[target_feature(enable = "avx512f,avx512ifma,avx512vl")]
    fn transpose_roundtrip(tile: &[u64], out: &mut [u64]) {
        let tile = vectors(tile).as_chunks::<W>().0;
        store_tile(
            &mut vectors_mut(out).as_chunks_mut::<W>().0[0],
            transpose(load_tile(&tile[0])),
        );
    }
}
