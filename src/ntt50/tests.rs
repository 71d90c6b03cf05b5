//! The scalar path against the oracles (O(n^2) DFT, schoolbook
//! convolution, u128 products); the vector paths against the scalar path,
//! value for value after reduction, over the whole input ranges.

use super::primes::PRIMES;
use super::*;
use crate::test_oracles::{naive_dft, schoolbook_convolution, seeded_words};

/// Reverses the low `bits` bits of `i`.
fn bit_reverse(i: usize, bits: u32) -> usize {
    if bits == 0 {
        0
    } else {
        i.reverse_bits() >> (usize::BITS - bits)
    }
}

/// Words around the working region; a kernel that writes outside its
/// slice changes them.
const GUARD: usize = 19;
const GARBAGE: u64 = 0xdead_beef_0bad_f00d;

/// A buffer prefilled with garbage, the data written into its middle.
struct Guarded {
    buf: Vec<u64>,
    len: usize,
}

impl Guarded {
    fn new(data: &[u64]) -> Self {
        let mut buf = vec![GARBAGE; data.len() + 2 * GUARD];
        buf[GUARD..GUARD + data.len()].copy_from_slice(data);
        Guarded {
            buf,
            len: data.len(),
        }
    }

    fn data(&mut self) -> &mut [u64] {
        &mut self.buf[GUARD..GUARD + self.len]
    }

    /// The data, after checking that the guards are intact.
    fn finish(self) -> Vec<u64> {
        let (head, rest) = self.buf.split_at(GUARD);
        let (data, tail) = rest.split_at(self.len);
        assert!(
            head.iter().chain(tail).all(|&g| g == GARBAGE),
            "guard overwritten"
        );
        data.to_vec()
    }
}

/// `n` values in `[0, bound)`, with the extremes `bound - 1` and 0 mixed in
/// so that the lazy bounds are exercised.
fn seeded_below(n: usize, bound: u64, seed: u64) -> Vec<u64> {
    let mut v: Vec<u64> = seeded_words(n, seed).iter().map(|x| x % bound).collect();
    for (i, x) in v.iter_mut().enumerate() {
        match (i as u64 ^ seed) % 7 {
            0 => *x = bound - 1,
            3 => *x = 0,
            _ => {}
        }
    }
    v
}

/// Seeded inputs in `[0, bound)`, then the edge cases of the lazy bounds:
/// all at the top, all at the midpoint (`p` or `2p`, where a sum first
/// reaches the bound), and each of those alternating with zero.
fn inputs(n: usize, bound: u64, seed: u64) -> Vec<Vec<u64>> {
    let alternating = |x: u64| (0..n).map(|i| if i % 2 == 0 { x } else { 0 }).collect();
    vec![
        seeded_below(n, bound, seed),
        vec![bound - 1; n],
        vec![bound / 2; n],
        alternating(bound - 1),
        alternating(bound / 2),
    ]
}

/// Interleaves vectors: element `i` of lane `l` at `i * lanes + l`.
fn interleave(vectors: &[Vec<u64>]) -> Vec<u64> {
    let lanes = vectors.len();
    let mut out = vec![0; vectors[0].len() * lanes];
    for (l, v) in vectors.iter().enumerate() {
        for (i, &x) in v.iter().enumerate() {
            out[i * lanes + l] = x;
        }
    }
    out
}

/// Lane `l` of an interleaved buffer.
fn lane(a: &[u64], lanes: usize, l: usize) -> Vec<u64> {
    a.iter().skip(l).step_by(lanes).copied().collect()
}

/// `k`'s forward transform of `lanes` interleaved vectors in a guarded
/// copy of `data`; lane count 0 means one vector through the single-vector
/// function, 1 one vector through the lanes function.
fn run_forward(k: Kernel, data: &[u64], lanes: usize, tw: &Twiddles) -> Vec<u64> {
    let mut g = Guarded::new(data);
    match lanes {
        0 => k.forward(g.data(), tw),
        _ => k.forward_lanes(g.data(), lanes, tw),
    }
    g.finish()
}

/// [`run_forward`] for the inverse transform.
fn run_inverse(k: Kernel, data: &[u64], lanes: usize, tw: &Twiddles) -> Vec<u64> {
    let mut g = Guarded::new(data);
    match lanes {
        0 => k.inverse(g.data(), tw),
        _ => k.inverse_lanes(g.data(), lanes, tw),
    }
    g.finish()
}

/// Checks `got` against the natural-order `expect` read through the
/// bit-reversal, and its range.
fn assert_bit_reversed(got: &[u64], expect: &[u64], bound: u64, p: u64, what: &str) {
    let bits = got.len().trailing_zeros();
    for (k, e) in expect.iter().enumerate() {
        let x = got[bit_reverse(k, bits)];
        assert!(x < bound, "{what}: {x} out of range at {k}");
        assert_eq!(x % p, *e, "{what}: output {k}");
    }
}

#[test]
fn scalar_forward_matches_naive_dft() {
    for (pi, pr) in PRIMES.iter().enumerate() {
        let p = pr.modulus.p;
        let max_log = if pi == 0 { 12 } else { 8 };
        for log in 0..=max_log {
            let n = 1usize << log;
            let tw = Twiddles::new(pr, n);
            for (case, input) in inputs(n, 2 * p, 10 + log as u64).iter().enumerate() {
                let reduced: Vec<u64> = input.iter().map(|x| x % p).collect();
                let expect = naive_dft(&reduced, pr.root_of_unity(n as u64), p);
                let got = run_forward(Kernel::Scalar, input, 0, &tw);
                let what = format!("p{pi} n={n} case {case}");
                assert_bit_reversed(&got, &expect, 2 * p, p, &what);
            }
        }
    }
}

#[test]
fn scalar_inverse_matches_naive_dft_with_inverse_root() {
    for (pi, pr) in PRIMES.iter().enumerate() {
        let (m, p) = (pr.modulus, pr.modulus.p);
        let max_log = if pi == 0 { 12 } else { 8 };
        for log in 0..=max_log {
            let n = 1usize << log;
            let tw = Twiddles::new(pr, n);
            for (case, input) in inputs(n, 4 * p, 20 + log as u64).iter().enumerate() {
                // the input is in bit-reversed order
                let natural: Vec<u64> = (0..n).map(|k| input[bit_reverse(k, log)] % p).collect();
                let expect = naive_dft(&natural, m.inv(pr.root_of_unity(n as u64)), p);
                let got = run_inverse(Kernel::Scalar, input, 0, &tw);
                let what = format!("p{pi} n={n} case {case}");
                for (j, (x, e)) in got.iter().zip(&expect).enumerate() {
                    assert!(*x < 4 * p, "{what}: out of range at {j}");
                    assert_eq!(x % p, *e, "{what}: output {j}");
                }
            }
        }
    }
}

#[test]
fn scalar_lanes_match_naive_dft_per_lane() {
    let pr = &PRIMES[1];
    let (m, p) = (pr.modulus, pr.modulus.p);
    for lanes in [2usize, 3, 5, 8, 9, 16] {
        for log in 0..=8u32 {
            let n = 1usize << log;
            let tw = Twiddles::new(pr, n);
            let w = pr.root_of_unity(n as u64);
            let vectors: Vec<Vec<u64>> = (0..lanes)
                .map(|l| seeded_below(n, 2 * p, (lanes * 100 + l) as u64 + log as u64))
                .collect();
            let fwd = run_forward(Kernel::Scalar, &interleave(&vectors), lanes, &tw);
            let back = run_inverse(Kernel::Scalar, &fwd, lanes, &tw);
            for (l, v) in vectors.iter().enumerate() {
                let reduced: Vec<u64> = v.iter().map(|x| x % p).collect();
                let what = format!("lanes={lanes} lane {l} n={n}");
                let expect = naive_dft(&reduced, w, p);
                assert_bit_reversed(&lane(&fwd, lanes, l), &expect, 2 * p, p, &what);
                let n_mod = n as u64 % p;
                for (x, y) in lane(&back, lanes, l).iter().zip(&reduced) {
                    assert!(*x < 4 * p, "{what}: inverse out of range");
                    assert_eq!(x % p, m.mul(*y, n_mod), "{what}: inverse");
                }
            }
        }
    }
}

/// The cyclic convolution mod `p` of `lanes` pairs of half-length vectors
/// through `k`'s kernels (lane count 0: one pair through the single-vector
/// functions), against the schoolbook product.
fn check_convolution(k: Kernel, pr: &primes::Prime50, log: u32, api_lanes: usize) {
    let lanes = api_lanes.max(1);
    let (m, p) = (pr.modulus, pr.modulus.p);
    let n = 1usize << log;
    let tw = Twiddles::new(pr, n);
    let operand = |seed: u64| {
        let mut v = seeded_below(n / 2, p, seed);
        v.resize(n, 0);
        v
    };
    let xs: Vec<Vec<u64>> = (0..lanes).map(|l| operand(2 * l as u64 + 1)).collect();
    let ys: Vec<Vec<u64>> = (0..lanes).map(|l| operand(2 * l as u64 + 2)).collect();
    let mut a = run_forward(k, &interleave(&xs), api_lanes, &tw);
    let b = run_forward(k, &interleave(&ys), api_lanes, &tw);
    let mut g = Guarded::new(&a);
    k.pointwise(g.data(), &b, m.inv(n as u64), &m);
    a = run_inverse(k, &g.finish(), api_lanes, &tw);
    for l in 0..lanes {
        let expect = schoolbook_convolution(&xs[l][..n / 2], &ys[l][..n / 2]);
        let got = lane(&a, lanes, l);
        for (i, x) in got.iter().enumerate() {
            let want = expect.get(i).map_or(0, |c| {
                let hi = ((c[2] as u128) << 64 | c[1] as u128) % p as u128;
                (((hi << 64) | c[0] as u128) % p as u128) as u64
            });
            assert_eq!(
                x % p,
                want,
                "{k:?} n={n} lanes={api_lanes} lane {l} coefficient {i}"
            );
        }
    }
}

#[test]
fn scalar_convolution_round_trip_matches_schoolbook() {
    const LANES: [usize; 12] = [0, 3, 2, 5, 1, 8, 3, 16, 2, 4, 0, 0];
    for pr in &PRIMES {
        for log in 1..=12u32 {
            check_convolution(Kernel::Scalar, pr, log, LANES[log as usize - 1]);
        }
    }
}

/// Cyclic convolution of small known vectors: (1 + 2x + 3x^2)(4 + 5x)
/// = 4 + 13x + 22x^2 + 15x^3, worked by hand.
#[test]
fn scalar_convolution_of_small_known_vectors() {
    let pr = &PRIMES[2];
    let m = pr.modulus;
    let tw = Twiddles::new(pr, 4);
    let mut a = vec![1, 2, 3, 0];
    let mut b = vec![4, 5, 0, 0];
    scalar::forward(&mut a, &tw);
    scalar::forward(&mut b, &tw);
    scalar::pointwise(&mut a, &b, m.inv(4), &m);
    scalar::inverse(&mut a, &tw);
    let c: Vec<u64> = a.iter().map(|x| x % m.p).collect();
    assert_eq!(c, vec![4, 13, 22, 15]);
}

#[test]
fn scalar_pointwise_matches_u128_products() {
    for pr in &PRIMES {
        let m = pr.modulus;
        let p = m.p;
        for (len, seed) in [(0usize, 1u64), (1, 2), (7, 3), (333, 4)] {
            let a0 = seeded_below(len, 2 * p, seed);
            let b = seeded_below(len, 2 * p, seed + 50);
            for scale in [0, 1, p - 1, p + 5, u64::MAX, seeded_words(1, seed)[0]] {
                let mut a = a0.clone();
                scalar::pointwise(&mut a, &b, scale, &m);
                for i in 0..len {
                    let want = m.mul(m.mul(a0[i], b[i]), scale % p);
                    assert!(a[i] < 2 * p);
                    assert_eq!(a[i] % p, want, "scale {scale} at {i}");
                }
            }
        }
    }
}

#[test]
fn montgomery_constants_are_consistent() {
    for pr in &PRIMES {
        let m = pr.modulus;
        assert_eq!(
            m.p.wrapping_mul(m.neg_p_inv) & MASK52,
            MASK52,
            "p * -p^-1 = -1"
        );
        assert_eq!(m.r52, ((1u128 << 52) % m.p as u128) as u64);
        assert_eq!(m.neg_p + m.p, 1 << 52);
        assert_eq!(m.p_f64 as u64, m.p);
    }
}

/// Lane counts for the comparisons, fewer at the longest lengths; 0 is
/// the single-vector function.
fn lane_counts(log: u32) -> &'static [usize] {
    if log <= 10 {
        &[0, 1, 2, 3, 5, 7, 8, 9, 16, 17]
    } else {
        &[0, 1, 3, 16]
    }
}

/// Runs `f` on both `k` and the scalar path and compares the outputs
/// after reduction, and their range.
fn assert_same(k: Kernel, p: u64, bound: u64, what: &str, f: impl Fn(Kernel) -> Vec<u64>) {
    let want = f(Kernel::Scalar);
    let got = f(k);
    for (i, (x, y)) in got.iter().zip(&want).enumerate() {
        assert!(*x < bound, "{what}: {x} out of range at {i}");
        assert_eq!(x % p, y % p, "{what}: differs from scalar at {i}");
    }
    assert_eq!(got.len(), want.len());
}

/// Every transform of `k` against the scalar path on seeded inputs over the
/// whole input range and on the edge cases of [`inputs`].
fn transforms_match_scalar(k: Kernel) {
    for (pi, pr) in PRIMES.iter().enumerate() {
        let p = pr.modulus.p;
        for log in 0..=14u32 {
            let n = 1usize << log;
            let tw = Twiddles::new(pr, n);
            for &lanes in lane_counts(log) {
                let seed = (pi * 1000 + lanes * 20) as u64 + log as u64;
                let what = format!("{k:?} p{pi} n={n} lanes={lanes}");
                let len = n * lanes.max(1);
                for (case, x) in inputs(len, 2 * p, seed).iter().enumerate() {
                    assert_same(k, p, 2 * p, &format!("{what} forward case {case}"), |k| {
                        run_forward(k, x, lanes, &tw)
                    });
                }
                for (case, x) in inputs(len, 4 * p, seed + 7).iter().enumerate() {
                    assert_same(k, p, 4 * p, &format!("{what} inverse case {case}"), |k| {
                        run_inverse(k, x, lanes, &tw)
                    });
                }
            }
        }
    }
}

/// `k`'s pointwise product against the scalar path, over lengths that
/// leave every possible partial vector at the end.
fn pointwise_matches_scalar(k: Kernel) {
    for (pi, pr) in PRIMES.iter().enumerate() {
        let m = pr.modulus;
        let p = m.p;
        for len in (0..=40).chain([1000, 1003]) {
            let a = seeded_below(len, 2 * p, len as u64 + 1);
            let b = seeded_below(len, 2 * p, len as u64 + 99);
            for scale in [1, 0, p - 1, seeded_words(1, len as u64)[0]] {
                let what = format!("{k:?} p{pi} len={len} scale={scale}");
                assert_same(k, p, 2 * p, &what, |k| {
                    let mut g = Guarded::new(&a);
                    k.pointwise(g.data(), &b, scale, &m);
                    g.finish()
                });
            }
        }
        let top = vec![2 * p - 1; 37];
        assert_same(k, p, 2 * p, &format!("{k:?} p{pi} top"), |k| {
            let mut g = Guarded::new(&top);
            k.pointwise(g.data(), &top, p - 1, &m);
            g.finish()
        });
    }
}

/// True, after saying so, when this CPU cannot run `k`: its tests then
/// test nothing and must not pass silently.
fn skip(k: Kernel) -> bool {
    let skip = !k.is_supported();
    if skip {
        println!("skipped: {} not supported on this CPU", k.name());
    }
    skip
}

#[test]
fn ifma_transforms_match_scalar() {
    if !skip(Kernel::Ifma) {
        transforms_match_scalar(Kernel::Ifma);
    }
}

#[test]
fn ifma_pointwise_matches_scalar() {
    if !skip(Kernel::Ifma) {
        pointwise_matches_scalar(Kernel::Ifma);
    }
}

#[test]
fn ifma_convolution_round_trip_matches_schoolbook() {
    if !skip(Kernel::Ifma) {
        for (log, lanes) in [(6, 0), (7, 0), (9, 4), (10, 1), (11, 0)] {
            check_convolution(Kernel::Ifma, &PRIMES[3], log, lanes);
        }
    }
}

#[test]
fn avx2_transforms_match_scalar() {
    if !skip(Kernel::Avx2) {
        transforms_match_scalar(Kernel::Avx2);
    }
}

#[test]
fn avx2_pointwise_matches_scalar() {
    if !skip(Kernel::Avx2) {
        pointwise_matches_scalar(Kernel::Avx2);
    }
}

#[test]
fn avx2_convolution_round_trip_matches_schoolbook() {
    if !skip(Kernel::Avx2) {
        for (log, lanes) in [(4, 0), (5, 0), (9, 3), (10, 1), (11, 0)] {
            check_convolution(Kernel::Avx2, &PRIMES[3], log, lanes);
        }
    }
}

#[test]
fn choice_of_kernel_honours_names_and_support() {
    let best = Kernel::detect();
    assert!(best.is_supported());
    assert_eq!(Kernel::from_choice(None), Ok(best));
    assert_eq!(Kernel::from_choice(Some("")), Ok(best));
    assert_eq!(Kernel::from_choice(Some("Scalar ")), Ok(Kernel::Scalar));
    for k in Kernel::ALL {
        assert!(
            !k.is_supported() || k <= best,
            "{k:?} beats the detected path"
        );
        let want = if k.is_supported() {
            Ok(k)
        } else {
            Err(KernelChoiceError::Unsupported(k))
        };
        assert_eq!(Kernel::from_choice(Some(k.name())), want);
    }
    assert_eq!(
        Kernel::from_choice(Some("avx512")),
        Err(KernelChoiceError::Unknown("avx512".into()))
    );
    let msg = KernelChoiceError::Unsupported(Kernel::Ifma).to_string();
    assert!(
        msg.contains("VASTMUL_KERNEL") && msg.contains("ifma"),
        "{msg}"
    );
}

/// `row[j] * step^j mod p` through u128 arithmetic.
fn twiddle_reference(row: &[u64], step: u64, p: u64) -> Vec<u64> {
    let mul = |a: u64, b: u64| ((a as u128 * b as u128) % p as u128) as u64;
    let mut w = 1 % p;
    row.iter()
        .map(|&x| {
            let r = mul(x % p, w);
            w = mul(w, step % p);
            r
        })
        .collect()
}

/// `k`'s row twiddle against [`twiddle_reference`]: every length up to 80
/// (every partial vector and chain count) and some long ones, steps 0, 1,
/// `p - 1`, a root of unity, words past `p` and seeded ones, inputs over
/// the whole of `[0, 4p)` and its edges, guard words around the row.
fn twiddle_powers_match_u128(k: Kernel) {
    for (pi, pr) in PRIMES.iter().enumerate() {
        let m = pr.modulus;
        let p = m.p;
        for len in (0..=80).chain([127, 128, 129, 1000, 4099]) {
            let seed = (pi * 10_000 + len) as u64;
            let r = seeded_words(2, seed);
            let steps = [
                0,
                1,
                p - 1,
                pr.root_of_unity(1 << 20),
                p + 5,
                u64::MAX,
                r[0],
                r[1] % p,
            ];
            for (case, x) in inputs(len, 4 * p, seed).iter().enumerate() {
                for step in steps {
                    let mut g = Guarded::new(x);
                    k.twiddle_powers(g.data(), step, &m);
                    let got = g.finish();
                    let want = twiddle_reference(x, step, p);
                    for (j, (a, b)) in got.iter().zip(&want).enumerate() {
                        let what = format!("{k:?} p{pi} len={len} case {case} step={step} j={j}");
                        assert!(*a < 2 * p, "{what}: {a} out of range");
                        assert_eq!(a % p, *b, "{what}");
                    }
                }
            }
        }
    }
}

#[test]
fn scalar_twiddle_powers_match_u128() {
    twiddle_powers_match_u128(Kernel::Scalar);
}

#[test]
fn avx2_twiddle_powers_match_u128() {
    if !skip(Kernel::Avx2) {
        twiddle_powers_match_u128(Kernel::Avx2);
    }
}

#[test]
fn ifma_twiddle_powers_match_u128() {
    if !skip(Kernel::Ifma) {
        twiddle_powers_match_u128(Kernel::Ifma);
    }
}

/// A known case by hand: modulo the third prime, `3^j` for `j < 5` is
/// 1, 3, 9, 27, 81, so a row of ones becomes those (up to the lazy
/// representative, which any path may leave in `[0, 2p)`).
#[test]
fn twiddle_powers_of_three_by_hand() {
    let m = PRIMES[2].modulus;
    for k in Kernel::ALL.into_iter().filter(|k| k.is_supported()) {
        let mut row = vec![1u64; 5];
        k.twiddle_powers(&mut row, 3, &m);
        let got: Vec<u64> = row.iter().map(|x| x % m.p).collect();
        assert_eq!(got, [1, 3, 9, 27, 81], "{k:?}");
    }
}

/// `k`'s limb digits against `%` in u128: every length up to 40 (partial
/// vectors), words across the whole 64-bit range with the edges (0, `p`,
/// `2p`, `2^32`, `2^64 - 1` and their neighbours), every flag combination,
/// `neg_base` at 0, 1, `p - 1` and the binary and decimal bases' values,
/// guard words around the output.
fn digits_match_remainder(k: Kernel) {
    for (pi, pr) in PRIMES.iter().enumerate() {
        let p = pr.modulus.p;
        let edges = [
            0,
            1,
            p - 1,
            p,
            p + 1,
            2 * p - 1,
            2 * p,
            4 * p - 1,
            (1 << 32) - 1,
            1 << 32,
            (1 << 52) - 1,
            u64::MAX - 1,
            u64::MAX,
            u64::MAX / p * p,
            (u64::MAX / p - 1) * p - 1,
        ];
        let binary = p - ((1u128 << 64) % p as u128) as u64;
        let decimal = p - 10_000_000_000_000_000_000 % p;
        for neg_base in [0, 1, p - 1, binary, decimal] {
            for len in (0..=40).chain([1000, 4099]) {
                let seed = (pi * 1000 + len) as u64 ^ neg_base;
                let mut x = seeded_words(len, seed);
                for (i, v) in x.iter_mut().enumerate().step_by(3) {
                    *v = edges[i % edges.len()];
                }
                let flags: Vec<u8> = seeded_words(len, seed + 1)
                    .iter()
                    .map(|w| (w % 4) as u8)
                    .collect();
                let mut g = Guarded::new(&vec![GARBAGE; len]);
                k.digits_into(&x, &flags, neg_base, g.data(), &pr.modulus);
                for (j, got) in g.finish().iter().enumerate() {
                    let f = flags[j];
                    let want =
                        (x[j] as u128 + (f & 1) as u128 + (f >> 1) as u128 * neg_base as u128)
                            % p as u128;
                    let what = format!("{k:?} p{pi} len={len} j={j} x={} f={f}", x[j]);
                    assert!(*got < 2 * p, "{what}: {got} out of range");
                    assert_eq!((got % p) as u128, want, "{what}");
                }
            }
        }
    }
}

#[test]
fn scalar_digits_match_remainder() {
    digits_match_remainder(Kernel::Scalar);
}

#[test]
fn avx2_digits_match_remainder() {
    if !skip(Kernel::Avx2) {
        digits_match_remainder(Kernel::Avx2);
    }
}

#[test]
fn ifma_digits_match_remainder() {
    if !skip(Kernel::Ifma) {
        digits_match_remainder(Kernel::Ifma);
    }
}

/// `k`'s transforms of length `3 * 2^j` against the naive DFT with the
/// generator's root: the forward output holds `X[3i + r]` at
/// `r * m + bitrev(i)`; the inverse of that layout gives `3m` times the
/// input (also from the edges of the input ranges), with guard words.
fn radix3_transforms_match_naive_dft(k: Kernel) {
    for (pi, pr) in PRIMES.iter().enumerate() {
        let (md, p) = (pr.modulus, pr.modulus.p);
        let max_log = if pi == 0 { 9 } else { 6 };
        for log in 0..=max_log {
            let m = 1usize << log;
            let n = 3 * m;
            let tw = Twiddles::new(pr, n);
            let w = pr.root_of_unity_any(n as u64);
            for (case, input) in inputs(n, 2 * p, 30 + log as u64).iter().enumerate() {
                let what = format!("{k:?} p{pi} n={n} case {case}");
                let reduced: Vec<u64> = input.iter().map(|x| x % p).collect();
                let expect = naive_dft(&reduced, w, p);
                let got = run_forward(k, input, 0, &tw);
                for r in 0..3 {
                    for i in 0..m {
                        let x = got[r * m + bit_reverse(i, log)];
                        assert!(x < 2 * p, "{what}: {x} out of range");
                        assert_eq!(x % p, expect[3 * i + r], "{what}: X[{}]", 3 * i + r);
                    }
                }
                let back = run_inverse(k, &got, 0, &tw);
                let n_mod = n as u64 % p;
                for (j, (x, y)) in back.iter().zip(&reduced).enumerate() {
                    assert!(*x < 4 * p, "{what}: inverse out of range at {j}");
                    assert_eq!(x % p, md.mul(*y, n_mod), "{what}: inverse at {j}");
                }
            }
            // The inverse over the top of its input range.
            for (case, input) in inputs(n, 4 * p, 40 + log as u64).iter().enumerate() {
                let what = format!("{k:?} p{pi} n={n} inverse case {case}");
                let got = run_inverse(k, input, 0, &tw);
                let scalar = run_inverse(Kernel::Scalar, input, 0, &tw);
                for (j, (x, y)) in got.iter().zip(&scalar).enumerate() {
                    assert!(*x < 4 * p, "{what}: out of range at {j}");
                    assert_eq!(x % p, y % p, "{what}: against scalar at {j}");
                }
            }
        }
    }
}

#[test]
fn scalar_radix3_transforms_match_naive_dft() {
    radix3_transforms_match_naive_dft(Kernel::Scalar);
}

#[test]
fn avx2_radix3_transforms_match_naive_dft() {
    if !skip(Kernel::Avx2) {
        radix3_transforms_match_naive_dft(Kernel::Avx2);
    }
}

#[test]
fn ifma_radix3_transforms_match_naive_dft() {
    if !skip(Kernel::Ifma) {
        radix3_transforms_match_naive_dft(Kernel::Ifma);
    }
}

/// The paths' own functions take only powers of two: a table of length
/// `3 * 2^k` handed to them is refused, not misread.
#[test]
#[should_panic(expected = "Kernel::forward")]
fn lanes_refuse_a_radix3_table() {
    let tw = Twiddles::new(&PRIMES[0], 48);
    let mut a = vec![0u64; 48 * 2];
    Kernel::Scalar.forward_lanes(&mut a, 2, &tw);
}

/// `k`'s row step against the definition it computes: with
/// `step_inv = step^-1`, the result is `n` times the convolution of `a`
/// and `b` wrapped around with the factor `step^n`, that is
/// `n * (sum over i + j = l of a_i b_j + step^n * sum over i + j = l + n)`.
/// Lengths below, at and above the vector paths' shortest, powers of two
/// and `3 * 2^k`, inputs over all of `[0, 4p)` and its edges, squares, and
/// guard words around both rows.
fn row_product_matches_wrapped_convolution(k: Kernel) {
    for (pi, pr) in PRIMES.iter().enumerate().take(2) {
        let (m, p) = (pr.modulus, pr.modulus.p);
        let lens = (0..=9).map(|l| 1usize << l).chain((0..=7).map(|l| 3 << l));
        for n in lens {
            let tw = Twiddles::new(pr, n);
            let r = seeded_words(1, (pi * 100 + n) as u64)[0] % (p - 1) + 1;
            for step in [1, r, pr.root_of_unity_any(2 * n as u64)] {
                let step_inv = m.inv(step);
                let wrap = m.pow(step, n as u64);
                let xs = inputs(n, 4 * p, n as u64 + step);
                let ys = inputs(n, 4 * p, n as u64 + step + 1);
                for (case, (x, y)) in xs.iter().zip(&ys).enumerate() {
                    for with_b in [true, false] {
                        let y = if with_b { y } else { x };
                        let what = format!("{k:?} p{pi} n={n} step={step} case {case} b={with_b}");
                        let (mut ga, mut gb) = (Guarded::new(x), Guarded::new(y));
                        k.row_product(ga.data(), gb.data(), with_b, (step, step_inv), &tw);
                        let got = ga.finish();
                        gb.finish();
                        let mut want = vec![0u64; n];
                        for (i, &xi) in x.iter().enumerate() {
                            for (j, &yj) in y.iter().enumerate() {
                                let t = m.mul(xi % p, yj % p);
                                let (l, t) = if i + j < n {
                                    (i + j, t)
                                } else {
                                    (i + j - n, m.mul(t, wrap))
                                };
                                want[l] = (want[l] + t) % p;
                            }
                        }
                        for (l, (g, w)) in got.iter().zip(&want).enumerate() {
                            assert!(*g < 2 * p, "{what}: {g} out of range at {l}");
                            assert_eq!(g % p, m.mul(*w, n as u64 % p), "{what}: at {l}");
                        }
                    }
                }
            }
        }
    }
}

#[test]
fn scalar_row_product_matches_wrapped_convolution() {
    row_product_matches_wrapped_convolution(Kernel::Scalar);
}

#[test]
fn avx2_row_product_matches_wrapped_convolution() {
    if !skip(Kernel::Avx2) {
        row_product_matches_wrapped_convolution(Kernel::Avx2);
    }
}

#[test]
fn ifma_row_product_matches_wrapped_convolution() {
    if !skip(Kernel::Ifma) {
        row_product_matches_wrapped_convolution(Kernel::Ifma);
    }
}
