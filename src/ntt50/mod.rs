//! Number-theoretic transforms modulo primes below 2^50, in three kernel
//! paths with one interface: portable scalar code ([`scalar`]), AVX2 with
//! double-precision FMA ([`avx2`]) and AVX-512 IFMA ([`ifma`]).
//!
//! Primes below 2^50 are what makes the vector paths possible: lazily
//! reduced values (below `4p < 2^52`) fit both the 52-bit multiplier
//! inputs of IFMA and the 53-bit mantissa of a double. The transforms
//! themselves follow [`crate::ntt`]: a radix-2 decimation in frequency
//! (natural order in, bit-reversed out) for the forward transform, the
//! matching decimation in time (bit-reversed in, natural out, scaled by the
//! length) for the inverse, pairs of stages fused into radix-4 steps, and a
//! "lanes" form for `lanes` interleaved vectors (element `i` of lane `l` at
//! `i * lanes + l`).
//!
//! # Value ranges
//! Every path takes and returns the same lazy ranges, so paths can be mixed
//! on one buffer and compared after a final reduction modulo `p`:
//!
//! | function | input | output |
//! |----------|-------|--------|
//! | `forward`, `forward_lanes` | `[0, 2p)` | `[0, 2p)`, bit-reversed |
//! | `inverse`, `inverse_lanes` | `[0, 4p)`, bit-reversed | `[0, 4p)`, natural, times `n` |
//! | `pointwise` | `a`, `b` in `[0, 2p)` | `a * b * scale` in `[0, 2p)` |
//! | `twiddle_powers` | `[0, 4p)` | `a[j] * step^j` in `[0, 2p)` |
//!
//! The forward output feeds `pointwise`, whose output feeds the inverse,
//! with no reduction pass in between. `twiddle_powers` accepts the wider
//! of the two transform output ranges, so it can follow either direction,
//! and its output suits the input of either.
//!
//! [`crt`] turns the four residues of a coefficient, as the inverse leaves
//! them, back into the integer.
//!
//! # Choosing a path
//! [`Kernel::detect`] picks the best path the CPU supports (detected once
//! per process); [`Kernel::from_env`] lets the `VASTMUL_KERNEL` environment
//! variable force a lower one, for comparisons and for ruling a path out
//! when chasing a wrong result.

pub mod crt;
pub mod primes;
pub mod scalar;

#[cfg(target_arch = "x86_64")]
pub mod avx2;
#[cfg(target_arch = "x86_64")]
pub mod ifma;

use primes::Prime50;
use std::sync::OnceLock;

/// The low 52 bits: the width of an IFMA multiplier input and of its
/// half-products.
pub const MASK52: u64 = (1 << 52) - 1;

/// The environment variable [`Kernel::from_env`] reads.
pub const KERNEL_ENV: &str = "VASTMUL_KERNEL";

/// A prime modulus below 2^50 with the constants all three paths need.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Modulus50 {
    /// The prime.
    pub p: u64,
    /// `2p`, the bound of values between forward butterflies.
    pub two_p: u64,
    /// `2^52 - p`: adding `q * (2^52 - p)` subtracts `q * p` modulo 2^52,
    /// which lets IFMA fold a subtraction into a multiply-add.
    pub neg_p: u64,
    /// `-p^-1 mod 2^52`, for Montgomery reduction in base 2^52.
    pub neg_p_inv: u64,
    /// `2^52 mod p`, which undoes the Montgomery factor `2^-52`.
    pub r52: u64,
    /// `p` as a double (exact).
    pub p_f64: f64,
    /// `1 / p` rounded to a double, for quotient estimates.
    pub inv_p_f64: f64,
}

impl Modulus50 {
    /// Builds the constants for an odd prime `p < 2^50`.
    pub const fn new(p: u64) -> Self {
        assert!(p % 2 == 1 && p > 2 && p < 1 << 50);
        // Newton's iteration doubles the correct low bits of the inverse;
        // p is its own inverse modulo 8 (3 bits), so 5 steps reach 96 > 52.
        let mut inv = p;
        let mut i = 0;
        while i < 5 {
            inv = inv.wrapping_mul(2u64.wrapping_sub(p.wrapping_mul(inv)));
            i += 1;
        }
        Modulus50 {
            p,
            two_p: 2 * p,
            neg_p: (1 << 52) - p,
            neg_p_inv: inv.wrapping_neg() & MASK52,
            r52: ((1u128 << 52) % p as u128) as u64,
            p_f64: p as f64,
            inv_p_f64: 1.0 / p as f64,
        }
    }

    /// `a * b mod p` through a 128-bit remainder. Slow; for setup only.
    pub const fn mul(&self, a: u64, b: u64) -> u64 {
        ((a as u128 * b as u128) % self.p as u128) as u64
    }

    /// `base^exp mod p`.
    pub const fn pow(&self, base: u64, mut exp: u64) -> u64 {
        let mut result = 1 % self.p;
        let mut b = base % self.p;
        while exp > 0 {
            if exp & 1 == 1 {
                result = self.mul(result, b);
            }
            b = self.mul(b, b);
            exp >>= 1;
        }
        result
    }

    /// The inverse of a non-zero `a` modulo the prime (Fermat).
    pub const fn inv(&self, a: u64) -> u64 {
        self.pow(a, self.p - 2)
    }
}

/// Shoup's precomputed quotient in base 2^52, `floor(w * 2^52 / p)`, for a
/// fixed `w < p`.
pub const fn shoup52(w: u64, p: u64) -> u64 {
    (((w as u128) << 52) / p as u128) as u64
}

/// A fixed multiplier `w` in the forms the three paths multiply by.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct MulConst {
    /// The multiplier, reduced.
    pub w: u64,
    /// [`shoup52`] of `w`.
    pub q: u64,
    /// `w` as a double.
    pub wf: f64,
    /// `w / p` rounded to a double.
    pub wq: f64,
}

impl MulConst {
    /// The forms of `w mod p`.
    pub fn new(w: u64, m: &Modulus50) -> Self {
        let w = w % m.p;
        MulConst {
            w,
            q: shoup52(w, m.p),
            wf: w as f64,
            wq: w as f64 / m.p_f64,
        }
    }
}

/// The twiddles of every stage of one direction, structure-of-arrays so a
/// vector path loads consecutive twiddles with one instruction.
///
/// Heap layout: entry `h + j` (for `j < h`) belongs to the butterflies `h`
/// apart, as `w_(2h)^j` (forward) or `w_(2h)^-j` (inverse).
#[derive(Clone, Debug)]
pub(crate) struct Table {
    /// The twiddles, reduced.
    pub(crate) w: Vec<u64>,
    /// Their Shoup quotients in base 2^52 (scalar and IFMA paths).
    pub(crate) q: Vec<u64>,
    /// The twiddles as doubles (AVX2 path).
    pub(crate) wf: Vec<f64>,
    /// `w / p` rounded to doubles (AVX2 path).
    pub(crate) wq: Vec<f64>,
}

impl Table {
    /// Entries `h + j` for every stage `h < len`, from `w_(2h) = root(2h)`.
    fn new(len: usize, m: &Modulus50, root: impl Fn(u64) -> u64) -> Self {
        let size = len.max(2);
        let mut consts = vec![MulConst::new(0, m); size];
        let mut half = 1;
        while half < len {
            let w = root(2 * half as u64);
            let mut x = 1u64;
            for c in &mut consts[half..2 * half] {
                *c = MulConst::new(x, m);
                x = m.mul(x, w);
            }
            half *= 2;
        }
        Table {
            w: consts.iter().map(|c| c.w).collect(),
            q: consts.iter().map(|c| c.q).collect(),
            wf: consts.iter().map(|c| c.wf).collect(),
            wq: consts.iter().map(|c| c.wq).collect(),
        }
    }

    /// The powers `base^j` for `j < len`, in order (not heap layout).
    fn powers(len: usize, base: u64, m: &Modulus50) -> Self {
        let mut x = 1u64;
        let consts: Vec<MulConst> = (0..len)
            .map(|_| {
                let c = MulConst::new(x, m);
                x = m.mul(x, base);
                c
            })
            .collect();
        Table {
            w: consts.iter().map(|c| c.w).collect(),
            q: consts.iter().map(|c| c.q).collect(),
            wf: consts.iter().map(|c| c.wf).collect(),
            wq: consts.iter().map(|c| c.wq).collect(),
        }
    }

    /// Entry `i` in all its forms.
    #[inline(always)]
    pub(crate) fn get(&self, i: usize) -> MulConst {
        MulConst {
            w: self.w[i],
            q: self.q[i],
            wf: self.wf[i],
            wq: self.wq[i],
        }
    }
}

/// Forward and inverse twiddles of one transform length for one prime,
/// shared by all three paths: each table holds every form a path
/// multiplies by, so one value serves whichever path runs.
///
/// A length `3 * 2^k` carries a radix-3 step ([`Radix3`]) in front of three
/// power-of-two transforms; only [`Kernel::forward`] and [`Kernel::inverse`]
/// take such tables (the paths' own functions and the lanes forms take
/// powers of two).
#[derive(Clone, Debug)]
pub struct Twiddles {
    len: usize,
    modulus: Modulus50,
    /// Forward twiddles.
    pub(crate) fwd: Table,
    /// Inverse twiddles.
    pub(crate) inv: Table,
    /// The radix-3 step of a length `3 * 2^k`.
    pub(crate) three: Option<Box<Radix3>>,
}

/// The radix-3 step of a transform of length `n = 3m`, as in
/// [`crate::ntt::Radix3`]: with `w = g^((p-1)/n)` and `omega = w^m` a
/// primitive cube root of unity, the thirds `a, b, c` of the input become
/// `y_r[j] = w^(jr) (a_j + omega^r b_j + omega^(2r) c_j)`, and the
/// length-`m` transform of `y_r` (root `w^3`, from the same generator)
/// holds the outputs `X[3k + r]`. Since `omega^2 = -1 - omega`, the sums
/// take one product: `y_1 = (a - c) + omega (b - c)` and
/// `y_2 = (a - b) - omega (b - c)`. The inverse multiplies by `w^(-jr)`
/// first and runs the same sums with `omega^-1`, leaving three times the
/// thirds.
#[derive(Clone, Debug)]
pub struct Radix3 {
    /// Tables of the three length-`m` transforms.
    pub(crate) sub: Twiddles,
    /// `omega` and its inverse.
    pub(crate) omega: MulConst,
    pub(crate) omega_inv: MulConst,
    /// `w^j`, `w^(2j)`, `w^(-j)` and `w^(-2j)` for `j < m`.
    pub(crate) fwd1: Table,
    pub(crate) fwd2: Table,
    pub(crate) inv1: Table,
    pub(crate) inv2: Table,
}

/// True for the lengths [`Twiddles::new`] takes: `2^k` and `3 * 2^k` (the
/// latter from 3 on), within the primes' limit.
pub fn supported_len(len: usize) -> bool {
    let odd = len >> len.trailing_zeros();
    len > 0 && (odd == 1 || odd == 3) && len as u64 <= primes::MAX_TRANSFORM_LEN
}

impl Twiddles {
    /// Tables for transforms of length `len` (`2^k`, or `3 * 2^k`, within
    /// the prime's limit) modulo `prime`.
    pub fn new(prime: &Prime50, len: usize) -> Self {
        assert!(supported_len(len), "transform length {len}");
        let m = prime.modulus;
        if !len.is_power_of_two() {
            return Twiddles::with_radix3(prime, len);
        }
        let fwd = Table::new(len, &m, |n| prime.root_of_unity(n));
        let inv = Table::new(len, &m, |n| m.inv(prime.root_of_unity(n)));
        Twiddles {
            len,
            modulus: m,
            fwd,
            inv,
            three: None,
        }
    }

    fn with_radix3(prime: &Prime50, len: usize) -> Self {
        let m = prime.modulus;
        let third = len / 3;
        let w = prime.root_of_unity_any(len as u64);
        let wi = m.inv(w);
        let omega = m.pow(w, third as u64);
        let three = Radix3 {
            sub: Twiddles::new(prime, third),
            omega: MulConst::new(omega, &m),
            omega_inv: MulConst::new(m.inv(omega), &m),
            fwd1: Table::powers(third, w, &m),
            fwd2: Table::powers(third, m.mul(w, w), &m),
            inv1: Table::powers(third, wi, &m),
            inv2: Table::powers(third, m.mul(wi, wi), &m),
        };
        let empty = Table::powers(0, 1, &m);
        Twiddles {
            len,
            modulus: m,
            fwd: empty.clone(),
            inv: empty,
            three: Some(Box::new(three)),
        }
    }

    /// The transform length these tables serve.
    pub fn len(&self) -> usize {
        self.len
    }

    /// Always false: a transform has at least one point. Present because
    /// a type with `len` is expected to have it.
    pub fn is_empty(&self) -> bool {
        self.len == 0
    }

    /// The modulus the tables were built for.
    pub fn modulus(&self) -> &Modulus50 {
        &self.modulus
    }
}

/// Panics unless `a` holds `lanes` vectors of the tables' length: the
/// vector paths rely on it before any load.
pub(crate) fn check_shape(a: &[u64], lanes: usize, tw: &Twiddles) {
    assert!(
        tw.three.is_none(),
        "a length of 3 * 2^k goes through Kernel::forward or Kernel::inverse"
    );
    assert!(lanes >= 1, "at least one lane");
    assert_eq!(a.len(), tw.len * lanes, "buffer is not lanes * length");
}

/// Splits a block of `4q` elements into its four quarters.
#[inline(always)]
pub(crate) fn quarters(block: &mut [u64], q: usize) -> [&mut [u64]; 4] {
    let (b01, b23) = block.split_at_mut(2 * q);
    let (b0, b1) = b01.split_at_mut(q);
    let (b2, b3) = b23.split_at_mut(q);
    [b0, b1, b2, b3]
}

/// The multiplier `pointwise` applies after a Montgomery product in base
/// 2^52: `scale * 2^52`, which cancels the product's `2^-52`.
pub(crate) fn montgomery_scale(scale: u64, m: &Modulus50) -> MulConst {
    MulConst::new(m.mul(scale % m.p, m.r52), m)
}

/// The first `N` powers of a row twiddle's step and the multiplier that
/// advances them by `N` positions: the row kernels run `N` independent
/// chains of products, so the latency of one product is hidden behind the
/// others rather than paid once per element.
#[derive(Clone, Copy, Debug)]
pub(crate) struct PowerChain<const N: usize> {
    /// `step^j * 2^52 mod p` for `j < N`, in `[0, p)`: the Montgomery form,
    /// so that a Montgomery product by it yields `x * step^j` with no
    /// quotient to precompute for a multiplier that changes every step.
    pub(crate) mont: [u64; N],
    /// `step^N`, a fixed multiplier for the whole row (Shoup's quotient and
    /// the double forms included). Multiplying a Montgomery form by a plain
    /// value keeps it a Montgomery form.
    pub(crate) stride: MulConst,
}

impl<const N: usize> PowerChain<N> {
    /// The chains for `step` (any word; reduced modulo `p`). Costs two
    /// 128-bit divisions and `N + 1` Montgomery products, so short rows
    /// are not dominated by setup.
    pub(crate) fn new(step: u64, m: &Modulus50) -> Self {
        let step_mont = m.mul(step % m.p, m.r52);
        let mut mont = [0u64; N];
        // r52 is 1 in Montgomery form
        let mut x = m.r52;
        for slot in &mut mont {
            *slot = x;
            x = reduce_p(scalar::mul_montgomery(x, step_mont, m), m);
        }
        // A Montgomery product by 1 strips the factor 2^52.
        let plain = reduce_p(scalar::mul_montgomery(x, 1, m), m);
        PowerChain {
            mont,
            stride: MulConst::new(plain, m),
        }
    }

    /// The powers `step^j mod p` themselves, in `[0, p)`, for a path that
    /// multiplies by plain values.
    #[cfg_attr(not(target_arch = "x86_64"), allow(dead_code))]
    pub(crate) fn plain(&self, m: &Modulus50) -> [u64; N] {
        self.mont
            .map(|x| reduce_p(scalar::mul_montgomery(x, 1, m), m))
    }
}

/// `[0, 2p)` to `[0, p)`.
#[inline(always)]
pub(crate) fn reduce_p(x: u64, m: &Modulus50) -> u64 {
    if x >= m.p {
        x - m.p
    } else {
        x
    }
}

/// A kernel path. All paths compute the same functions over the same value
/// ranges (see the module documentation); they differ in speed and in the
/// lazy representative they leave, never in the value modulo `p`.
#[derive(
    Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash, serde::Serialize, serde::Deserialize,
)]
#[serde(rename_all = "lowercase")]
pub enum Kernel {
    /// Portable 64-bit integer code.
    Scalar,
    /// 4 lanes of doubles with FMA (AVX2 and FMA).
    Avx2,
    /// 8 lanes of 52-bit integer multiply-adds (AVX-512F, VL and IFMA).
    Ifma,
}

/// Why [`Kernel::from_env`] refused a choice.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
pub enum KernelChoiceError {
    /// The value names no path.
    #[error("{KERNEL_ENV}={0:?} names no kernel; use scalar, avx2 or ifma")]
    Unknown(String),
    /// The path exists but this CPU cannot run it.
    #[error("{KERNEL_ENV} asks for the {} kernel, which this CPU does not support", .0.name())]
    Unsupported(Kernel),
}

/// What the CPU offers, probed once: feature detection is cheap but not
/// free, and the answer cannot change while the process runs.
#[derive(Clone, Copy, Debug)]
struct Features {
    avx2_fma: bool,
    ifma: bool,
}

fn features() -> Features {
    static FEATURES: OnceLock<Features> = OnceLock::new();
    *FEATURES.get_or_init(probe)
}

#[cfg(target_arch = "x86_64")]
fn probe() -> Features {
    Features {
        avx2_fma: is_x86_feature_detected!("avx2") && is_x86_feature_detected!("fma"),
        ifma: is_x86_feature_detected!("avx512f")
            && is_x86_feature_detected!("avx512ifma")
            && is_x86_feature_detected!("avx512vl"),
    }
}

#[cfg(not(target_arch = "x86_64"))]
fn probe() -> Features {
    Features {
        avx2_fma: false,
        ifma: false,
    }
}

impl Kernel {
    /// Every path, slowest first.
    pub const ALL: [Kernel; 3] = [Kernel::Scalar, Kernel::Avx2, Kernel::Ifma];

    /// The name [`Kernel::from_env`] accepts for this path.
    pub fn name(self) -> &'static str {
        match self {
            Kernel::Scalar => "scalar",
            Kernel::Avx2 => "avx2",
            Kernel::Ifma => "ifma",
        }
    }

    /// True when this CPU can run the path.
    pub fn is_supported(self) -> bool {
        let f = features();
        match self {
            Kernel::Scalar => true,
            Kernel::Avx2 => f.avx2_fma,
            Kernel::Ifma => f.ifma,
        }
    }

    /// The fastest path this CPU supports.
    pub fn detect() -> Kernel {
        *Kernel::ALL
            .iter()
            .rev()
            .find(|k| k.is_supported())
            .unwrap_or(&Kernel::Scalar)
    }

    /// [`Kernel::detect`], unless [`KERNEL_ENV`] names a path to use
    /// instead (one this CPU supports).
    pub fn from_env() -> Result<Kernel, KernelChoiceError> {
        let value = std::env::var(KERNEL_ENV).ok();
        Kernel::from_choice(value.as_deref())
    }

    /// The path a value of [`KERNEL_ENV`] selects: none or an empty value
    /// means [`Kernel::detect`]; a path the CPU lacks is an error rather
    /// than a silent fallback, so a forced comparison never measures the
    /// wrong path.
    pub fn from_choice(choice: Option<&str>) -> Result<Kernel, KernelChoiceError> {
        let name = match choice.map(str::trim) {
            None | Some("") => return Ok(Kernel::detect()),
            Some(name) => name,
        };
        let kernel = Kernel::ALL
            .into_iter()
            .find(|k| k.name().eq_ignore_ascii_case(name))
            .ok_or_else(|| KernelChoiceError::Unknown(name.to_string()))?;
        if kernel.is_supported() {
            Ok(kernel)
        } else {
            Err(KernelChoiceError::Unsupported(kernel))
        }
    }

    /// Forward transform in place: `[0, 2p)` in natural order to `[0, 2p)`
    /// in bit-reversed order. Panics if the path is unsupported.
    pub fn forward(self, a: &mut [u64], tw: &Twiddles) {
        if let Some(t3) = &tw.three {
            assert_eq!(a.len(), tw.len, "buffer is not the transform's length");
            self.radix3_forward(a, t3);
            for part in a.chunks_exact_mut(t3.sub.len) {
                self.forward(part, &t3.sub);
            }
            return;
        }
        match self {
            Kernel::Scalar => scalar::forward(a, tw),
            #[cfg(target_arch = "x86_64")]
            Kernel::Avx2 => avx2::forward(a, tw),
            #[cfg(target_arch = "x86_64")]
            Kernel::Ifma => ifma::forward(a, tw),
            #[cfg(not(target_arch = "x86_64"))]
            _ => unsupported(self),
        }
    }

    /// Inverse transform in place: `[0, 4p)` in bit-reversed order to
    /// `[0, 4p)` in natural order, times the length. Panics if the path is
    /// unsupported.
    pub fn inverse(self, a: &mut [u64], tw: &Twiddles) {
        if let Some(t3) = &tw.three {
            assert_eq!(a.len(), tw.len, "buffer is not the transform's length");
            for part in a.chunks_exact_mut(t3.sub.len) {
                self.inverse(part, &t3.sub);
            }
            self.radix3_inverse(a, t3);
            return;
        }
        match self {
            Kernel::Scalar => scalar::inverse(a, tw),
            #[cfg(target_arch = "x86_64")]
            Kernel::Avx2 => avx2::inverse(a, tw),
            #[cfg(target_arch = "x86_64")]
            Kernel::Ifma => ifma::inverse(a, tw),
            #[cfg(not(target_arch = "x86_64"))]
            _ => unsupported(self),
        }
    }

    /// [`Kernel::forward`] on `lanes` interleaved vectors.
    pub fn forward_lanes(self, a: &mut [u64], lanes: usize, tw: &Twiddles) {
        match self {
            Kernel::Scalar => scalar::forward_lanes(a, lanes, tw),
            #[cfg(target_arch = "x86_64")]
            Kernel::Avx2 => avx2::forward_lanes(a, lanes, tw),
            #[cfg(target_arch = "x86_64")]
            Kernel::Ifma => ifma::forward_lanes(a, lanes, tw),
            #[cfg(not(target_arch = "x86_64"))]
            _ => unsupported(self),
        }
    }

    /// [`Kernel::inverse`] on `lanes` interleaved vectors.
    pub fn inverse_lanes(self, a: &mut [u64], lanes: usize, tw: &Twiddles) {
        match self {
            Kernel::Scalar => scalar::inverse_lanes(a, lanes, tw),
            #[cfg(target_arch = "x86_64")]
            Kernel::Avx2 => avx2::inverse_lanes(a, lanes, tw),
            #[cfg(target_arch = "x86_64")]
            Kernel::Ifma => ifma::inverse_lanes(a, lanes, tw),
            #[cfg(not(target_arch = "x86_64"))]
            _ => unsupported(self),
        }
    }

    /// `a[i] = a[i] * b[i] * scale mod p`, inputs in `[0, 2p)`, output in
    /// `[0, 2p)`. Elementwise, so the same call serves any lane layout.
    pub fn pointwise(self, a: &mut [u64], b: &[u64], scale: u64, m: &Modulus50) {
        match self {
            Kernel::Scalar => scalar::pointwise(a, b, scale, m),
            #[cfg(target_arch = "x86_64")]
            Kernel::Avx2 => avx2::pointwise(a, b, scale, m),
            #[cfg(target_arch = "x86_64")]
            Kernel::Ifma => ifma::pointwise(a, b, scale, m),
            #[cfg(not(target_arch = "x86_64"))]
            _ => unsupported(self),
        }
    }

    /// The four-step row twiddle: `row[j] = row[j] * step^j mod p`, input
    /// in `[0, 4p)` (what the inverse leaves, and so also what the forward
    /// leaves), output in `[0, 2p)` (what the forward takes). `step` is any
    /// word, reduced modulo `p`; `step^0 = 1` even when `step = 0`. The
    /// powers are generated as the row is swept, so no table as long as
    /// the data is needed. Panics if the path is unsupported.
    pub fn twiddle_powers(self, row: &mut [u64], step: u64, m: &Modulus50) {
        match self {
            Kernel::Scalar => scalar::twiddle_powers(row, step, m),
            #[cfg(target_arch = "x86_64")]
            Kernel::Avx2 => avx2::twiddle_powers(row, step, m),
            #[cfg(target_arch = "x86_64")]
            Kernel::Ifma => ifma::twiddle_powers(row, step, m),
            #[cfg(not(target_arch = "x86_64"))]
            _ => unsupported(self),
        }
    }

    /// The four-step row step on one row of `tw.len()` words: `a` (and
    /// `b` when `with_b`) times `step_fwd^j` and forward-transformed; then
    /// `a` times `b` pointwise (`a` squared when not `with_b`),
    /// inverse-transformed and times `step_inv^j`. Inputs in `[0, 4p)`;
    /// the result, in `a`, in `[0, 2p)` and times the row's length; `b` is
    /// scratch afterwards. The AVX2 path keeps the whole step in doubles
    /// where the row's power-of-two transforms are at least 16 long.
    /// Panics if the path is unsupported or a row's length differs from
    /// the table's.
    pub fn row_product(
        self,
        a: &mut [u64],
        b: &mut [u64],
        with_b: bool,
        (step_fwd, step_inv): (u64, u64),
        tw: &Twiddles,
    ) {
        assert!(
            a.len() == tw.len && b.len() == tw.len,
            "row is not the table's length"
        );
        #[cfg(target_arch = "x86_64")]
        if self == Kernel::Avx2 && avx2::fuses_row(tw) {
            return avx2::row_product(a, b, with_b, (step_fwd, step_inv), tw);
        }
        let m = tw.modulus();
        self.twiddle_powers(a, step_fwd, m);
        self.forward(a, tw);
        if with_b {
            self.twiddle_powers(b, step_fwd, m);
            self.forward(b, tw);
        } else {
            b.copy_from_slice(a);
        }
        self.pointwise(a, b, 1, m);
        self.inverse(a, tw);
        self.twiddle_powers(a, step_inv, m);
    }
}

impl Kernel {
    /// The radix-3 step of a forward transform of length `3m` (`a` holds
    /// all of it): `[0, 2p)` in, `[0, 2p)` out.
    fn radix3_forward(self, a: &mut [u64], t: &Radix3) {
        match self {
            Kernel::Scalar => scalar::radix3_forward(a, t),
            #[cfg(target_arch = "x86_64")]
            Kernel::Avx2 => avx2::radix3_forward(a, t),
            #[cfg(target_arch = "x86_64")]
            Kernel::Ifma => ifma::radix3_forward(a, t),
            #[cfg(not(target_arch = "x86_64"))]
            _ => unsupported(self),
        }
    }

    /// The radix-3 step of an inverse transform, after the three inverse
    /// sub-transforms: `[0, 4p)` in, `[0, 4p)` out, times 3.
    fn radix3_inverse(self, a: &mut [u64], t: &Radix3) {
        match self {
            Kernel::Scalar => scalar::radix3_inverse(a, t),
            #[cfg(target_arch = "x86_64")]
            Kernel::Avx2 => avx2::radix3_inverse(a, t),
            #[cfg(target_arch = "x86_64")]
            Kernel::Ifma => ifma::radix3_inverse(a, t),
            #[cfg(not(target_arch = "x86_64"))]
            _ => unsupported(self),
        }
    }

    /// `dst[i]` = the digit of limb `src[i]` modulo p, into `[0, 2p)`:
    /// `src[i]`, plus 1 where bit 0 of `flags[i]` is set, plus `neg_base`
    /// (`p - (base mod p)`, below p) where bit 1 is. Operand limbs on their
    /// way into a forward transform, reduced and balanced in one pass.
    /// Panics if the path is unsupported or the lengths differ.
    pub fn digits_into(
        self,
        src: &[u64],
        flags: &[u8],
        neg_base: u64,
        dst: &mut [u64],
        m: &Modulus50,
    ) {
        match self {
            Kernel::Scalar => scalar::digits_into(src, flags, neg_base, dst, m),
            #[cfg(target_arch = "x86_64")]
            Kernel::Avx2 => avx2::digits_into(src, flags, neg_base, dst, m),
            #[cfg(target_arch = "x86_64")]
            Kernel::Ifma => ifma::digits_into(src, flags, neg_base, dst, m),
            #[cfg(not(target_arch = "x86_64"))]
            _ => unsupported(self),
        }
    }
}

/// The vector paths exist only on x86-64; a hand-built `Kernel` naming one
/// elsewhere is a caller's error.
#[cfg(not(target_arch = "x86_64"))]
fn unsupported(k: Kernel) -> ! {
    panic!("the {} kernel is not supported on this CPU", k.name())
}

/// Panics unless the CPU supports `k`: the vector paths' public functions
/// call this before entering code compiled for the path's features.
#[cfg(target_arch = "x86_64")]
pub(crate) fn require(k: Kernel) {
    assert!(
        k.is_supported(),
        "the {} kernel is not supported on this CPU",
        k.name()
    );
}

/// The type of every path's `forward` and `inverse`.
pub type TransformFn = fn(&mut [u64], &Twiddles);
/// The type of every path's `forward_lanes` and `inverse_lanes`.
pub type LanesFn = fn(&mut [u64], usize, &Twiddles);
/// The type of every path's `pointwise`.
pub type PointwiseFn = fn(&mut [u64], &[u64], u64, &Modulus50);
/// The type of every path's `digits_into`.
pub type DigitsIntoFn = fn(&[u64], &[u8], u64, &mut [u64], &Modulus50);
/// The type of every path's `twiddle_powers`.
pub type TwiddlePowersFn = fn(&mut [u64], u64, &Modulus50);

// The three paths are interchangeable: the same function types, checked by
// the compiler.
#[cfg(target_arch = "x86_64")]
const _: [TransformFn; 6] = [
    scalar::forward,
    avx2::forward,
    ifma::forward,
    scalar::inverse,
    avx2::inverse,
    ifma::inverse,
];
#[cfg(target_arch = "x86_64")]
const _: [LanesFn; 6] = [
    scalar::forward_lanes,
    avx2::forward_lanes,
    ifma::forward_lanes,
    scalar::inverse_lanes,
    avx2::inverse_lanes,
    ifma::inverse_lanes,
];
#[cfg(target_arch = "x86_64")]
const _: [PointwiseFn; 3] = [scalar::pointwise, avx2::pointwise, ifma::pointwise];
#[cfg(target_arch = "x86_64")]
const _: [TwiddlePowersFn; 3] = [
    scalar::twiddle_powers,
    avx2::twiddle_powers,
    ifma::twiddle_powers,
];

#[cfg(target_arch = "x86_64")]
const _: [DigitsIntoFn; 3] = [scalar::digits_into, avx2::digits_into, ifma::digits_into];

/// The shared preconditions of every path's `digits_into`.
fn check_digits(src: &[u64], flags: &[u8], neg_base: u64, dst: &[u64], m: &Modulus50) {
    assert!(
        src.len() == dst.len() && flags.len() == dst.len(),
        "digit buffers differ in length"
    );
    assert!(neg_base < m.p, "neg_base is not reduced below p");
}

#[cfg(test)]
mod tests;
