//! Residues of operands modulo several primes, taken from the limbs in their
//! own radix (`value = sum limb_i * base^i`), streaming and in parallel.
//!
//! Each chunk of limbs is reduced on its own by Horner's rule from its top
//! limb; the chunk residues are then combined with powers of the base. The
//! position of every limb enters its weight, so swapped or shifted blocks
//! change the residue, unlike a digit sum. Residues do not depend on the
//! radix: a decimal product can be checked against hexadecimal operands.
//!
//! # Moduli
//!
//! Three fixed primes ([`FIXED_MODULI`]): 2^61 - 1 and the two largest
//! primes below 2^62, checked by the tests with a deterministic
//! Miller-Rabin test and a scan of the gap above them. Others are drawn at
//! random from `[2^61, 2^62)` for each check, from a printed seed.
//!
//! # The chance of a false pass
//!
//! Let `C` be the true product and `C' != C` the file's value, both below
//! `2^L`. A modulus `p` passes `C'` exactly when `p` divides `D = C' - C`,
//! a non-zero integer with `|D| < 2^L`. Distinct primes `p >= 2^61` that
//! divide `D` multiply to at most `|D|`, so at most `L / 61` of them divide
//! it. The interval `[2^61, 2^62)` holds about `2^61 / ln(2^62) > 5 * 10^16`
//! primes (prime number theorem; the count is common knowledge of the
//! trade). A prime drawn uniformly from it therefore passes a wrong product
//! with probability at most `(L / 61) / (5 * 10^16)`, whatever the error;
//! `k` independent draws pass it with probability at most that to the power
//! `k`. For a product of 10^10 decimal digits (`L` about 3.3 * 10^10) one
//! draw gives at most 1.1 * 10^-8, two give 1.2 * 10^-16, three
//! 1.4 * 10^-24. The fixed primes add no probability bound against an
//! adversary (an error could be a multiple of them), but they catch any
//! error that is not a multiple of their product, which covers every
//! change confined to fewer than about 180 bits' worth of limbs.

use crate::arith::Modulus;
use crate::radix::{Radix, DEC_BASE};
use crate::storage::LimbSource;
use rayon::prelude::*;

/// The fixed moduli: 2^61 - 1 and the two largest primes below 2^62.
pub const FIXED_MODULI: [u64; 3] = [(1 << 61) - 1, (1 << 62) - 57, (1 << 62) - 87];

/// The Mersenne prime 2^61 - 1.
pub const MERSENNE_61: u64 = (1 << 61) - 1;

/// Limbs per parallel chunk.
const CHUNK: usize = 1 << 16;

/// One modulus with the constants Horner's rule needs.
#[derive(Clone, Copy, Debug)]
struct Horner {
    m: Modulus,
    /// `base * 2^64 mod p`: a Montgomery product with it multiplies by the
    /// base and leaves plain values plain.
    base_mont: u64,
}

impl Horner {
    fn new(p: u64, radix: Radix) -> Self {
        let m = Modulus::new(p);
        let base = match radix {
            Radix::Binary => ((1u128 << 64) % p as u128) as u64,
            Radix::Decimal => DEC_BASE % p,
        };
        Horner {
            m,
            base_mont: m.to_mont(base),
        }
    }

    /// `r * base + limb mod p` for `r < p`.
    #[inline(always)]
    fn step(&self, r: u64, limb: u64) -> u64 {
        // mont_mul(r, base * 2^64) = r * base, below p; the limb is reduced
        // to [0, 2p), so the sum stays below 3p < 2^64.
        let s = self.m.mont_mul(r, self.base_mont) + self.m.reduce_lazy(limb);
        self.m.reduce_2p(if s >= self.m.two_p {
            s - self.m.two_p
        } else {
            s
        })
    }
}

/// `x^e mod p`.
fn pow(m: &Modulus, x: u64, e: u64) -> u64 {
    m.pow(x, e)
}

/// The residues modulo each of `moduli` (odd primes below 2^62) of the
/// magnitude whose `len` limbs `src` supplies.
pub fn residues<S: LimbSource + ?Sized>(
    src: &S,
    len: usize,
    radix: Radix,
    moduli: &[u64],
) -> Vec<u64> {
    let h: Vec<Horner> = moduli.iter().map(|&p| Horner::new(p, radix)).collect();
    let chunks = len.div_ceil(CHUNK);
    // Residue of each chunk on its own, every modulus in the same sweep
    // (independent chains, so the multiplications overlap).
    let parts: Vec<Vec<u64>> = (0..chunks)
        .into_par_iter()
        .map_init(
            || vec![0u64; CHUNK],
            |buf, c| {
                let first = c * CHUNK;
                let buf = &mut buf[..CHUNK.min(len - first)];
                src.fill_limbs(first, buf);
                chunk_residues(&h, buf)
            },
        )
        .collect();
    h.iter()
        .enumerate()
        .map(|(i, hm)| {
            let base = hm.m.mont_mul(hm.base_mont, 1); // base mod p
            let shift = pow(&hm.m, base, CHUNK as u64);
            parts
                .iter()
                .rev()
                .fold(0u64, |r, part| hm.m.add(hm.m.mul(r, shift), part[i]))
        })
        .collect()
}

/// Horner's rule over `limbs` from the top, for every modulus: up to five
/// moduli at once in one sweep, so that their independent chains of
/// multiplications overlap in the pipeline.
fn chunk_residues(h: &[Horner], limbs: &[u64]) -> Vec<u64> {
    if let [one] = h {
        return vec![single_residue(one, limbs)];
    }
    let mut out = Vec::with_capacity(h.len());
    for group in h.chunks(5) {
        match group.len() {
            1 => out.extend(horner_group::<1>(group, limbs)),
            2 => out.extend(horner_group::<2>(group, limbs)),
            3 => out.extend(horner_group::<3>(group, limbs)),
            4 => out.extend(horner_group::<4>(group, limbs)),
            _ => out.extend(horner_group::<5>(group, limbs)),
        }
    }
    out
}

/// One modulus: the limbs are cut into four quarters reduced side by side
/// (four independent chains instead of one), then joined with powers of
/// the base.
fn single_residue(h: &Horner, limbs: &[u64]) -> u64 {
    let n = limbs.len();
    let q = n.div_ceil(4);
    if q < 16 {
        return limbs.iter().rev().fold(0u64, |r, &l| h.step(r, l));
    }
    let at = |j: usize, i: usize| limbs.get(j * q + i).copied().unwrap_or(0);
    let mut r = [0u64; 4];
    for i in (0..q).rev() {
        for (j, rj) in r.iter_mut().enumerate() {
            *rj = h.step(*rj, at(j, i));
        }
    }
    let base = h.m.mont_mul(h.base_mont, 1);
    let shift = pow(&h.m, base, q as u64);
    r.iter()
        .rev()
        .fold(0u64, |acc, &part| h.m.add(h.m.mul(acc, shift), part))
}

/// [`chunk_residues`] for exactly `N` moduli.
#[inline(always)]
fn horner_group<const N: usize>(h: &[Horner], limbs: &[u64]) -> [u64; N] {
    let h: &[Horner; N] = h.try_into().expect("a group of N moduli");
    let mut r = [0u64; N];
    for &l in limbs.iter().rev() {
        for i in 0..N {
            r[i] = h[i].step(r[i], l);
        }
    }
    r
}

/// One Horner step modulo 2^61 - 1: `r * base + limb` with `base_q` the
/// base modulo q (8 for 2^64, since 2^64 = 8 * 2^61). No division and, in
/// binary, no multiplication: 2^61 = 1 (mod q) turns reduction into a
/// shift and an add.
#[inline(always)]
fn m61_step(r: u64, limb: u64, base_q: u64) -> u64 {
    m61_fold(r as u128 * base_q as u128 + limb as u128)
}

/// [`m61_step`] in binary, where the base is 8 modulo q: a shift.
#[inline(always)]
fn m61_step8(r: u64, limb: u64) -> u64 {
    m61_fold(((r as u128) << 3) + limb as u128)
}

/// `s mod q` for `s < 2^125`: 2^61 = 1 (mod q), so fold the high bits onto
/// the low ones twice.
#[inline(always)]
fn m61_fold(s: u128) -> u64 {
    let folded = (s as u64 & MERSENNE_61) as u128 + (s >> 61);
    let f = (folded as u64 & MERSENNE_61) + (folded >> 61) as u64;
    if f >= MERSENNE_61 {
        f - MERSENNE_61
    } else {
        f
    }
}

/// The residue modulo 2^61 - 1 of the magnitude whose `len` limbs `src`
/// supplies: the fast path of the self-check in `mul` (four chains per
/// chunk, no Montgomery arithmetic).
pub fn residue_m61<S: LimbSource + ?Sized>(src: &S, len: usize, radix: Radix) -> u64 {
    let q = MERSENNE_61;
    let base_q = match radix {
        Radix::Binary => 8,
        Radix::Decimal => DEC_BASE % q,
    };
    let quarter = CHUNK / 4;
    let shift_quarter = m61_pow(base_q, quarter as u64);
    let shift_chunk = m61_pow(base_q, CHUNK as u64);
    let parts: Vec<u64> = (0..len.div_ceil(CHUNK))
        .into_par_iter()
        .map_init(
            || vec![0u64; CHUNK],
            |buf, c| {
                let first = c * CHUNK;
                let n = CHUNK.min(len - first);
                buf[n..].fill(0);
                src.fill_limbs(first, &mut buf[..n]);
                // Four quarters side by side; zeros past the end are
                // leading zeros of the top quarter and change nothing.
                let mut r = [0u64; 4];
                for i in (0..quarter).rev() {
                    for (j, rj) in r.iter_mut().enumerate() {
                        *rj = m61_step(*rj, buf[j * quarter + i], base_q);
                    }
                }
                r.iter()
                    .rev()
                    .fold(0u64, |acc, &part| m61_step(acc, part, shift_quarter))
            },
        )
        .collect();
    parts
        .iter()
        .rev()
        .fold(0u64, |acc, &part| m61_step(acc, part, shift_chunk))
}

/// A limb source that takes, on the way, the residue modulo 2^61 - 1 of
/// every limb read through it: the self-check of `mul` gets the factors'
/// residues from the pass that reads them anyway, without parsing the files
/// a second time. Each limb position must be read exactly once.
pub struct TapM61<'a, L: ?Sized> {
    inner: &'a L,
    base_q: u64,
    id: usize,
    slots: Vec<std::sync::atomic::AtomicU64>,
}

/// Identities of taps, so that a thread's cached weights belong to one.
static TAP_IDS: std::sync::atomic::AtomicUsize = std::sync::atomic::AtomicUsize::new(1);

thread_local! {
    /// (tap, last first limb, its weight, last stride, the stride's weight):
    /// successive reads of a column pass are one row apart, so most weights
    /// cost one multiplication.
    static WEIGHTS: std::cell::Cell<(usize, u64, u64, u64, u64)> =
        const { std::cell::Cell::new((0, 0, 0, 0, 0)) };
}

fn m61_mul(a: u64, b: u64) -> u64 {
    m61_step(a, 0, b)
}

fn m61_pow(mut b: u64, mut e: u64) -> u64 {
    let mut r = 1u64;
    while e > 0 {
        if e & 1 == 1 {
            r = m61_mul(r, b);
        }
        b = m61_mul(b, b);
        e >>= 1;
    }
    r
}

impl<'a, L: LimbSource + ?Sized> TapM61<'a, L> {
    /// A tap over `inner`, whose limbs are in `radix`.
    pub fn new(inner: &'a L, radix: Radix) -> Self {
        TapM61 {
            inner,
            base_q: match radix {
                Radix::Binary => 8,
                Radix::Decimal => DEC_BASE % MERSENNE_61,
            },
            id: TAP_IDS.fetch_add(1, std::sync::atomic::Ordering::Relaxed),
            slots: (0..64)
                .map(|_| std::sync::atomic::AtomicU64::new(0))
                .collect(),
        }
    }

    /// `base^first mod q`, from this thread's last weight when it can.
    fn weight(&self, first: u64) -> u64 {
        WEIGHTS.with(|c| {
            let (id, last, last_w, stride, stride_w) = c.get();
            let w = if id == self.id && first >= last {
                let delta = first - last;
                if delta == stride {
                    m61_mul(last_w, stride_w)
                } else {
                    let sw = m61_pow(self.base_q, delta);
                    c.set((id, last, last_w, delta, sw));
                    m61_mul(last_w, sw)
                }
            } else {
                m61_pow(self.base_q, first)
            };
            let (_, _, _, stride, stride_w) = c.get();
            let keep = if id == self.id {
                (stride, stride_w)
            } else {
                (0, 1)
            };
            c.set((self.id, first, w, keep.0, keep.1));
            w
        })
    }

    /// The residue of everything read so far.
    pub fn value(&self) -> u64 {
        self.slots.iter().fold(0u64, |acc, s| {
            let x = s.load(std::sync::atomic::Ordering::Relaxed);
            let t = acc + x;
            if t >= MERSENNE_61 {
                t - MERSENNE_61
            } else {
                t
            }
        })
    }
}

impl<L: LimbSource + ?Sized> LimbSource for TapM61<'_, L> {
    fn fill_limbs(&self, first: usize, out: &mut [u64]) {
        use std::sync::atomic::Ordering;
        self.inner.fill_limbs(first, out);
        let h = if self.base_q == 8 {
            // 2^64 = 8 (mod q): a shift instead of a multiplication.
            out.iter().rev().fold(0u64, |r, &l| m61_step8(r, l))
        } else {
            out.iter()
                .rev()
                .fold(0u64, |r, &l| m61_step(r, l, self.base_q))
        };
        if h == 0 {
            return;
        }
        let part = m61_mul(h, self.weight(first as u64));
        let slot = &self.slots[rayon::current_thread_index().unwrap_or(0) % self.slots.len()];
        let _ = slot.fetch_update(Ordering::Relaxed, Ordering::Relaxed, |a| {
            let t = a + part;
            Some(if t >= MERSENNE_61 { t - MERSENNE_61 } else { t })
        });
    }

    fn prefetch_limbs(&self, first: usize, n: usize) {
        self.inner.prefetch_limbs(first, n)
    }

    fn peek_limb(&self, i: usize) -> u64 {
        self.inner.peek_limb(i)
    }

    fn peek_limbs(&self, first: usize, out: &mut [u64]) {
        self.inner.peek_limbs(first, out)
    }
}

/// The residue of `limbs` (below 2^63, not fully reduced) modulo
/// `p = 2^K - C`, with `w = [base, base^2, base^3]` modulo `p`.
///
/// Horner's rule takes three limbs a step, `r w_3 + l_2 w_2 + l_1 w_1 +
/// l_0`: the three products are independent, so a step costs about one
/// multiplication a limb, and the sum (below `2^125 + 2^127 + 2^64 <
/// 2^128` for `r < 2^63`) is folded twice with `2^K = C (mod p)`: the
/// first fold leaves less than `2^(128 - K) C + 2^K < 2^74`, the second
/// less than `2^K + 2^22 < 2^63`. Four parts of the limbs run side by side
/// as independent chains.
#[inline(always)]
fn pseudo_mersenne_residue<const K: u32, const C: u64>(limbs: &[u64], w: [u64; 3]) -> u64 {
    #[inline(always)]
    fn fold<const K: u32, const C: u64>(s: u128) -> u128 {
        (s >> K) * C as u128 + (s & ((1u128 << K) - 1))
    }
    #[inline(always)]
    fn step<const K: u32, const C: u64>(r: u64, l: [u64; 3], w: [u64; 3]) -> u64 {
        let s = r as u128 * w[2] as u128
            + l[2] as u128 * w[1] as u128
            + l[1] as u128 * w[0] as u128
            + l[0] as u128;
        fold::<K, C>(fold::<K, C>(s)) as u64
    }
    const CHAINS: usize = 4;
    let p = (1u64 << K) - C;
    // Limbs above a multiple of 3 * CHAINS come first, one at a time.
    let whole = limbs.len() / (3 * CHAINS) * (3 * CHAINS);
    let mut r = [0u64; CHAINS];
    for &l in limbs[whole..].iter().rev() {
        r[CHAINS - 1] = fold::<K, C>(fold::<K, C>(
            r[CHAINS - 1] as u128 * w[0] as u128 + l as u128,
        )) as u64;
    }
    let part = whole / CHAINS;
    let parts: [&[u64]; CHAINS] = core::array::from_fn(|j| &limbs[j * part..(j + 1) * part]);
    for i in (0..part / 3).rev() {
        for (rj, pj) in r.iter_mut().zip(&parts) {
            let l = &pj[3 * i..3 * i + 3];
            *rj = step::<K, C>(*rj, [l[0], l[1], l[2]], w);
        }
    }
    let shift = Modulus::new(p).pow(w[0], part as u64);
    r.iter()
        .rev()
        .fold(0u64, |acc, &rj| (mul_mod(acc, shift, p) + rj % p) % p)
}

/// Accumulates the residues modulo [`FIXED_MODULI`] of a number whose
/// limbs arrive as windows in any order and from many threads (the product
/// as it is written): each window adds `base^first * value(window)`.
pub struct ResidueTap {
    /// `[base, base^2, base^3]` modulo each fixed modulus.
    w: [[u64; 3]; 3],
    acc: [std::sync::atomic::AtomicU64; 3],
}

// The tap's constant folds assume these forms.
const _: () = assert!(
    FIXED_MODULI[0] == (1 << 61) - 1
        && FIXED_MODULI[1] == (1 << 62) - 57
        && FIXED_MODULI[2] == (1 << 62) - 87
);

impl ResidueTap {
    /// A tap modulo each of [`FIXED_MODULI`] for limbs in `radix`.
    pub fn fixed(radix: Radix) -> Self {
        ResidueTap {
            w: FIXED_MODULI.map(|p| {
                let base = match radix {
                    Radix::Binary => ((1u128 << 64) % p as u128) as u64,
                    Radix::Decimal => DEC_BASE % p,
                };
                let b2 = mul_mod(base, base, p);
                [base, b2, mul_mod(b2, base, p)]
            }),
            acc: Default::default(),
        }
    }

    /// Adds the window of limbs `first..first + limbs.len()`.
    pub fn add(&self, first: usize, limbs: &[u64]) {
        use std::sync::atomic::Ordering;
        let parts = [
            pseudo_mersenne_residue::<61, 1>(limbs, self.w[0]),
            pseudo_mersenne_residue::<62, 57>(limbs, self.w[1]),
            pseudo_mersenne_residue::<62, 87>(limbs, self.w[2]),
        ];
        for (((&p, w), acc), part) in FIXED_MODULI.iter().zip(&self.w).zip(&self.acc).zip(parts) {
            let part = mul_mod(part, Modulus::new(p).pow(w[0], first as u64), p);
            let _ = acc.fetch_update(Ordering::Relaxed, Ordering::Relaxed, |a| {
                Some((a + part) % p)
            });
        }
    }
    /// The residues of everything added, in the order of [`FIXED_MODULI`].
    pub fn values(&self) -> [u64; 3] {
        self.acc
            .each_ref()
            .map(|a| a.load(std::sync::atomic::Ordering::Relaxed))
    }
}

/// The residue of a signed value from that of its magnitude.
pub fn signed(r: u64, negative: bool, p: u64) -> u64 {
    if negative && r != 0 {
        p - r
    } else {
        r
    }
}

/// `a * b mod p`.
pub fn mul_mod(a: u64, b: u64, p: u64) -> u64 {
    ((a as u128 * b as u128) % p as u128) as u64
}

/// Deterministic Miller-Rabin for 64-bit integers: the first twelve primes
/// as bases are enough below 3.3 * 10^24 (common practice).
pub fn is_prime(n: u64) -> bool {
    if n < 2 {
        return false;
    }
    const BASES: [u64; 12] = [2, 3, 5, 7, 11, 13, 17, 19, 23, 29, 31, 37];
    for p in BASES {
        if n.is_multiple_of(p) {
            return n == p;
        }
    }
    let s = (n - 1).trailing_zeros();
    let d = (n - 1) >> s;
    let powm = |mut b: u64, mut e: u64| {
        let mut r = 1u64;
        while e > 0 {
            if e & 1 == 1 {
                r = mul_mod(r, b, n);
            }
            b = mul_mod(b, b, n);
            e >>= 1;
        }
        r
    };
    'bases: for a in BASES {
        let mut x = powm(a, d);
        if x == 1 || x == n - 1 {
            continue;
        }
        for _ in 1..s {
            x = mul_mod(x, x, n);
            if x == n - 1 {
                continue 'bases;
            }
        }
        return false;
    }
    true
}

/// A seed from the clock and the process, for draws nobody asked to repeat.
pub fn fresh_seed() -> u64 {
    let t = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.as_nanos() as u64);
    t ^ (std::process::id() as u64).rotate_left(32)
}

/// `count` primes drawn uniformly from `[2^61, 2^62)`, reproducibly from
/// `seed`, distinct from each other and from the fixed moduli.
pub fn random_moduli(seed: u64, count: usize) -> Vec<u64> {
    let mut state = seed;
    let mut next = move || {
        // SplitMix64: a full-period generator; each seed gives one stream.
        state = state.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = state;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        z ^ (z >> 31)
    };
    let mut out: Vec<u64> = Vec::with_capacity(count);
    while out.len() < count {
        // Uniform over the interval's odd numbers; primes among them are
        // then uniform too.
        let candidate = (1u64 << 61) | (next() >> 3) | 1;
        if is_prime(candidate) && !out.contains(&candidate) && !FIXED_MODULI.contains(&candidate) {
            out.push(candidate);
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use num_bigint::BigUint;

    /// Horner's rule with plain 128-bit remainders: slow, but independent
    /// of the Montgomery arithmetic under test.
    fn reference(limbs: &[u64], radix: Radix, p: u64) -> u64 {
        let base = match radix {
            Radix::Binary => ((1u128 << 64) % p as u128) as u64,
            Radix::Decimal => DEC_BASE % p,
        };
        limbs.iter().rev().fold(0u64, |r, &l| {
            ((r as u128 * base as u128 + l as u128) % p as u128) as u64
        })
    }

    #[test]
    fn the_reference_matches_num_bigint() {
        let limbs: Vec<u64> = (1..300u64)
            .map(|i| i.wrapping_mul(0x9e37_79b9_7f4a_7c15))
            .collect();
        let v = BigUint::from_slice(
            &limbs
                .iter()
                .flat_map(|w| [*w as u32, (w >> 32) as u32])
                .collect::<Vec<_>>(),
        );
        for p in FIXED_MODULI {
            let r: u64 = (&v % BigUint::from(p)).try_into().unwrap();
            assert_eq!(reference(&limbs, Radix::Binary, p), r);
        }
    }

    #[test]
    fn matches_big_integer_remainders_in_both_radixes_across_chunks() {
        for radix in [Radix::Binary, Radix::Decimal] {
            for len in [0usize, 1, 2, CHUNK - 1, CHUNK, CHUNK + 1, 3 * CHUNK + 17] {
                let limbs: Vec<u64> = (0..len as u64)
                    .map(|i| i.wrapping_mul(0x9e37_79b9_7f4a_7c15) % radix.max_limb())
                    .collect();
                let mut moduli = FIXED_MODULI.to_vec();
                moduli.extend(random_moduli(len as u64, 2));
                let got = residues(limbs.as_slice(), len, radix, &moduli);
                for (&p, &r) in moduli.iter().zip(&got) {
                    assert_eq!(r, reference(&limbs, radix, p), "{radix:?} {len} mod {p}");
                }
                // one modulus alone takes the general path
                let one = residues(limbs.as_slice(), len, radix, &moduli[..1]);
                assert_eq!(one[0], got[0]);
            }
        }
    }

    #[test]
    fn single_modulus_quarters_and_the_tap_agree_with_the_reference() {
        let limbs: Vec<u64> = (0..5000u64)
            .map(|i| i.wrapping_mul(0x2545_f491_4f6c_dd1d))
            .collect();
        for len in [0usize, 1, 63, 64, 65, 1001, 5000] {
            let x = &limbs[..len];
            for p in FIXED_MODULI {
                let h = Horner::new(p, Radix::Binary);
                assert_eq!(
                    single_residue(&h, x),
                    reference(x, Radix::Binary, p),
                    "{len}"
                );
            }
            // windows out of order, as the product's writer delivers them
            let tap = ResidueTap::fixed(Radix::Binary);
            for w in (0..len).step_by(300).rev() {
                tap.add(w, &x[w..(w + 300).min(len)]);
            }
            let want = FIXED_MODULI.map(|p| reference(x, Radix::Binary, p));
            assert_eq!(tap.values(), want);
            // every fixed modulus in one sweep, both radixes, uneven windows
            for radix in [Radix::Binary, Radix::Decimal] {
                let x: Vec<u64> = x.iter().map(|&l| l % radix.max_limb()).collect();
                let tap = ResidueTap::fixed(radix);
                let mut w = 0;
                let mut step = 1;
                while w < len {
                    let e = (w + step).min(len);
                    tap.add(w, &x[w..e]);
                    w = e;
                    step = step * 3 + 1;
                }
                let want = FIXED_MODULI.map(|p| reference(&x, radix, p));
                assert_eq!(tap.values(), want, "{radix:?} {len}");
                // maximal limbs: the largest products the folds meet
                let max = vec![radix.max_limb(); len];
                let tap = ResidueTap::fixed(radix);
                tap.add(0, &max);
                let want = FIXED_MODULI.map(|p| reference(&max, radix, p));
                assert_eq!(tap.values(), want, "{radix:?} maximal {len}");
            }
        }
    }

    #[test]
    fn the_mersenne_fast_path_matches_the_reference() {
        for radix in [Radix::Binary, Radix::Decimal] {
            for len in [
                0usize,
                1,
                5,
                CHUNK / 4 + 3,
                CHUNK,
                CHUNK + 1,
                2 * CHUNK + 999,
            ] {
                let limbs: Vec<u64> = (0..len as u64)
                    .map(|i| i.wrapping_mul(0x9e37_79b9_7f4a_7c15) % radix.max_limb())
                    .collect();
                assert_eq!(
                    residue_m61(limbs.as_slice(), len, radix),
                    reference(&limbs, radix, MERSENNE_61),
                    "{radix:?} {len}"
                );
            }
            let max = vec![radix.max_limb(); 3000];
            assert_eq!(
                residue_m61(max.as_slice(), 3000, radix),
                reference(&max, radix, MERSENNE_61)
            );
        }
    }

    #[test]
    fn the_tap_sees_strided_and_out_of_order_reads() {
        for radix in [Radix::Binary, Radix::Decimal] {
            let limbs: Vec<u64> = (0..10_000u64)
                .map(|i| i.wrapping_mul(0x9e37_79b9_7f4a_7c15) % radix.max_limb())
                .collect();
            let tap = TapM61::new(limbs.as_slice(), radix);
            // Column-pass order: blocks of 16 columns, rows 625 apart,
            // blocks in parallel.
            let (rows, cols) = (16usize, 625usize);
            (0..cols.div_ceil(16)).into_par_iter().for_each(|block| {
                let mut seg = [0u64; 16];
                for r in 0..rows {
                    let c0 = block * 16;
                    let w = 16.min(cols - c0);
                    tap.fill_limbs(r * cols + c0, &mut seg[..w]);
                }
            });
            assert_eq!(
                tap.value(),
                reference(&limbs, radix, MERSENNE_61),
                "{radix:?}"
            );
        }
    }

    #[test]
    fn maximal_limbs_reduce_correctly() {
        for radix in [Radix::Binary, Radix::Decimal] {
            let limbs = vec![radix.max_limb(); 1000];
            let got = residues(limbs.as_slice(), 1000, radix, &FIXED_MODULI);
            for (&p, &r) in FIXED_MODULI.iter().zip(&got) {
                assert_eq!(r, reference(&limbs, radix, p));
            }
        }
    }

    #[test]
    fn fixed_moduli_are_the_primes_claimed() {
        assert!(FIXED_MODULI.iter().all(|&p| is_prime(p)));
        // 2^62 - 57 and 2^62 - 87 are the two largest primes below 2^62:
        // nothing between them and 2^62 is prime.
        let top = 1u64 << 62;
        let between: Vec<u64> = ((top - 87 + 1)..top).filter(|&n| is_prime(n)).collect();
        assert_eq!(between, vec![top - 57]);
    }

    #[test]
    fn miller_rabin_agrees_with_trial_division_and_known_cases() {
        let trial = |n: u64| {
            n >= 2
                && (2..)
                    .take_while(|d| d * d <= n)
                    .all(|d| !n.is_multiple_of(d))
        };
        for n in 0..20_000u64 {
            assert_eq!(is_prime(n), trial(n), "{n}");
        }
        // Carmichael numbers and a strong pseudoprime to bases 2, 3, 5, 7.
        for n in [561u64, 1105, 1729, 2465, 3215031751] {
            assert!(!is_prime(n), "{n}");
        }
        assert!(is_prime((1 << 61) - 1));
        assert!(!is_prime((1 << 61) + 1));
    }

    #[test]
    fn random_moduli_are_reproducible_distinct_primes_in_range() {
        let a = random_moduli(42, 4);
        assert_eq!(a, random_moduli(42, 4));
        assert_ne!(a, random_moduli(43, 4));
        for &p in &a {
            assert!(is_prime(p) && (1u64 << 61..1u64 << 62).contains(&p));
        }
        let mut d = a.clone();
        d.dedup();
        assert_eq!(d.len(), 4);
    }

    #[test]
    fn swapped_limbs_change_the_residue() {
        let a = [5u64, 7, 11];
        let b = [7u64, 5, 11];
        assert_ne!(
            residues(&a[..], 3, Radix::Binary, &FIXED_MODULI),
            residues(&b[..], 3, Radix::Binary, &FIXED_MODULI)
        );
    }
}
