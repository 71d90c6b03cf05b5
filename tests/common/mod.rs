//! Helpers shared by the integration tests: a seeded generator of limb
//! vectors, conversions between limb vectors and `num_bigint::BigUint`, and
//! product checks against num-bigint.
//!
//! The reference side never goes through vastmul: every expected value is
//! computed by num-bigint from the same limbs the engine was given.
//!
//! Decimal limbs are turned into a `BigUint` by divide and conquer with
//! cached powers `10^(19 * 2^j)`, so the cost is a few num-bigint
//! multiplications of the operand's size instead of the quadratic Horner
//! scheme; Horner is kept as the independent check of the fast conversion.

// Every test binary that declares `mod common;` compiles its own copy and
// uses only part of it.
#![allow(dead_code)]

use num_bigint::BigUint;
use std::sync::{Arc, Mutex};
use vastmul::plan::Force;
use vastmul::radix::DEC_BASE;
use vastmul::Radix;

/// SplitMix64: tiny, seedable, and every seed (including 0) gives a full
/// period stream, so tests can derive seeds from sizes without care.
#[derive(Clone, Debug)]
pub struct Rng(u64);

impl Rng {
    /// A generator whose whole stream is fixed by `seed`.
    pub fn new(seed: u64) -> Self {
        Rng(seed)
    }

    /// The next 64 uniformly distributed bits.
    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        z ^ (z >> 31)
    }

    /// Uniform in `0..n` (`n > 0`), by rejection so that no value is
    /// favoured: decimal limbs must cover `[0, 10^19)` evenly, and a plain
    /// `% n` would not.
    pub fn below(&mut self, n: u64) -> u64 {
        assert!(n > 0);
        let zone = u64::MAX - (u64::MAX % n + 1) % n;
        loop {
            let x = self.next_u64();
            if x <= zone {
                return x % n;
            }
        }
    }

    /// Uniform in `lo..=hi`.
    pub fn range(&mut self, lo: usize, hi: usize) -> usize {
        assert!(lo <= hi);
        lo + self.below((hi - lo) as u64 + 1) as usize
    }

    /// A length between `lo` and `hi` whose logarithm is uniform, so that
    /// small and large sizes are drawn equally often per octave.
    pub fn log_uniform(&mut self, lo: usize, hi: usize) -> usize {
        assert!(1 <= lo && lo <= hi);
        let (l, h) = ((lo as f64).ln(), ((hi + 1) as f64).ln());
        let u = self.next_u64() as f64 / (u64::MAX as f64 + 1.0);
        ((l + u * (h - l)).exp() as usize).clamp(lo, hi)
    }

    /// One limb, uniform over the radix's digit range.
    pub fn limb(&mut self, radix: Radix) -> u64 {
        match radix {
            Radix::Binary => self.next_u64(),
            Radix::Decimal => self.below(DEC_BASE),
        }
    }

    /// `len` uniform limbs with a non-zero top limb, so that the vector has
    /// exactly `len` significant limbs: the planner sees trimmed lengths,
    /// and threshold tests depend on that length being the intended one.
    pub fn limbs(&mut self, len: usize, radix: Radix) -> Vec<u64> {
        let mut v: Vec<u64> = (0..len).map(|_| self.limb(radix)).collect();
        if let Some(top) = v.last_mut() {
            while *top == 0 {
                *top = self.limb(radix);
            }
        }
        v
    }
}

/// Binary limbs (base 2^64, least significant first) to a `BigUint`, via
/// 32-bit digits, num-bigint's portable constructor.
pub fn binary_to_big(limbs: &[u64]) -> BigUint {
    let digits: Vec<u32> = limbs
        .iter()
        .flat_map(|&w| [w as u32, (w >> 32) as u32])
        .collect();
    BigUint::new(digits)
}

/// A `BigUint` to trimmed binary limbs (empty for zero).
pub fn big_to_binary(x: &BigUint) -> Vec<u64> {
    let mut v = x.to_u64_digits();
    trim(&mut v);
    v
}

/// Limbs below which the decimal conversions use the direct quadratic
/// method: the recursion's bookkeeping costs more than it saves there.
const DIRECT_LIMBS: usize = 32;

/// Limbs from which the divide-and-conquer conversion converts its two
/// halves on two threads: the million-limb checks would otherwise leave the
/// second core idle for tens of seconds.
const PARALLEL_LIMBS: usize = 1 << 16;

/// `10^(19 * 2^j)` for `j = 0, 1, ...`, computed once per test binary by
/// repeated squaring and shared by every test: the top powers of a
/// million-limb conversion take seconds to build.
static DEC_POWERS: Mutex<Vec<Arc<BigUint>>> = Mutex::new(Vec::new());

/// `10^(19 * 2^j)`, the value of a decimal limb vector `[0; 2^j] ++ [1]`.
pub fn decimal_power(j: u32) -> Arc<BigUint> {
    // A test that panicked while holding the lock left a valid prefix.
    let mut table = DEC_POWERS.lock().unwrap_or_else(|e| e.into_inner());
    if table.is_empty() {
        table.push(Arc::new(BigUint::from(DEC_BASE)));
    }
    while table.len() <= j as usize {
        let last = table.last().expect("non-empty").clone();
        table.push(Arc::new(&*last * &*last));
    }
    table[j as usize].clone()
}

/// Decimal limbs to a `BigUint` by Horner's rule: quadratic, and obviously
/// right, the reference the fast conversion is tested against.
pub fn decimal_to_big_horner(limbs: &[u64]) -> BigUint {
    let mut acc = BigUint::default();
    for &l in limbs.iter().rev() {
        acc = acc * DEC_BASE + l;
    }
    acc
}

/// Decimal limbs (base 10^19, least significant first) to a `BigUint` by
/// divide and conquer: `value = high * 10^(19 k) + low` with `k` the largest
/// power of two below the length, so every split uses a cached power.
pub fn decimal_to_big(limbs: &[u64]) -> BigUint {
    decimal_to_big_rec(limbs, 2)
}

fn decimal_to_big_rec(limbs: &[u64], threads_depth: u32) -> BigUint {
    if limbs.len() <= DIRECT_LIMBS {
        return decimal_to_big_horner(limbs);
    }
    let j = usize::BITS - 1 - (limbs.len() - 1).leading_zeros();
    let (low, high) = limbs.split_at(1usize << j);
    let (low, high) = if threads_depth > 0 && limbs.len() >= PARALLEL_LIMBS {
        std::thread::scope(|s| {
            let h = s.spawn(|| decimal_to_big_rec(high, threads_depth - 1));
            let l = decimal_to_big_rec(low, threads_depth - 1);
            (l, h.join().expect("conversion thread"))
        })
    } else {
        (decimal_to_big_rec(low, 0), decimal_to_big_rec(high, 0))
    };
    high * &*decimal_power(j) + low
}

/// A `BigUint` to trimmed decimal limbs by repeated division by 10^19:
/// quadratic, the reference for [`big_to_decimal`].
pub fn big_to_decimal_direct(x: &BigUint) -> Vec<u64> {
    let mut out = Vec::new();
    let mut x = x.clone();
    let zero = BigUint::default();
    while x != zero {
        let r = &x % DEC_BASE;
        out.push(r.iter_u64_digits().next().unwrap_or(0));
        x /= DEC_BASE;
    }
    out
}

/// A `BigUint` to trimmed decimal limbs by divide and conquer on the cached
/// powers. num-bigint divides in quadratic time, so this is for operands of
/// a few thousand limbs (building adversarial values, diagnosing a failed
/// comparison), not for million-limb products.
pub fn big_to_decimal(x: &BigUint) -> Vec<u64> {
    // Each decimal limb holds more than 63 bits, so this many limbs suffice.
    let need = (x.bits() / 63 + 1) as usize;
    let mut out = Vec::with_capacity(need.next_power_of_two());
    big_to_decimal_rec(x.clone(), need.next_power_of_two(), &mut out);
    trim(&mut out);
    out
}

/// Appends exactly `width` limbs of `x < 10^(19 width)`, `width` a power of
/// two.
fn big_to_decimal_rec(x: BigUint, width: usize, out: &mut Vec<u64>) {
    if width <= DIRECT_LIMBS {
        let mut limbs = big_to_decimal_direct(&x);
        assert!(limbs.len() <= width, "value wider than its slot");
        limbs.resize(width, 0);
        out.extend_from_slice(&limbs);
        return;
    }
    let half = width / 2;
    let p = decimal_power(half.trailing_zeros());
    let q = &x / &*p;
    let r = x - &q * &*p;
    big_to_decimal_rec(r, half, out);
    big_to_decimal_rec(q, half, out);
}

/// Limbs of the given radix to a `BigUint`.
pub fn to_big(limbs: &[u64], radix: Radix) -> BigUint {
    match radix {
        Radix::Binary => binary_to_big(limbs),
        Radix::Decimal => decimal_to_big(limbs),
    }
}

/// A `BigUint` to trimmed limbs of the given radix (decimal: moderate sizes
/// only, see [`big_to_decimal`]).
pub fn from_big(x: &BigUint, radix: Radix) -> Vec<u64> {
    match radix {
        Radix::Binary => big_to_binary(x),
        Radix::Decimal => big_to_decimal(x),
    }
}

/// Removes most significant zero limbs.
pub fn trim(v: &mut Vec<u64>) {
    while v.last() == Some(&0) {
        v.pop();
    }
}

/// `B^k` as limbs: `k` zero limbs and a one.
pub fn radix_power(k: usize) -> Vec<u64> {
    let mut v = vec![0u64; k + 1];
    v[k] = 1;
    v
}

/// `B^k - 1` as limbs: `k` maximal limbs.
pub fn radix_power_minus_one(k: usize, radix: Radix) -> Vec<u64> {
    vec![radix.max_limb(); k]
}

/// `B^k + 1` as limbs (`k >= 1`).
pub fn radix_power_plus_one(k: usize) -> Vec<u64> {
    let mut v = radix_power(k);
    v[0] += 1;
    v
}

/// Panics unless `got` is a well-formed product: no most significant zero
/// limb (the engine promises trimmed output) and every limb a digit of the
/// radix. For decimal this also makes the value comparison exact, since only
/// digits below 10^19 give each integer a unique limb vector.
pub fn assert_well_formed(got: &[u64], radix: Radix, what: &str) {
    assert_ne!(
        got.last(),
        Some(&0),
        "{what}: output has a leading zero limb"
    );
    if let Some(i) = got.iter().position(|&l| l > radix.max_limb()) {
        panic!(
            "{what}: limb {i} = {} exceeds the {} digit range",
            got[i],
            radix.name()
        );
    }
}

/// Panics with the first differing position (not a dump of a million
/// limbs) unless two limb vectors are equal.
pub fn assert_limbs_eq(got: &[u64], expected: &[u64], what: &str) {
    if got == expected {
        return;
    }
    let first = got
        .iter()
        .zip(expected)
        .position(|(g, e)| g != e)
        .unwrap_or(got.len().min(expected.len()));
    let show = |v: &[u64]| -> Vec<u64> { v.iter().skip(first).take(4).copied().collect() };
    panic!(
        "{what}: product differs from num-bigint: {} limbs vs {} expected, first difference at \
         limb {first}: got {:?}.. expected {:?}..",
        got.len(),
        expected.len(),
        show(got),
        show(expected)
    );
}

/// Decimal products up to this many limbs are diagnosed limb by limb on
/// failure; beyond it only the low limbs are compared one by one, since
/// converting the expected value back to decimal is quadratic in num-bigint.
const DIAGNOSE_LIMBS: usize = 20_000;

/// Panics unless `got` is the product `a * b` in `radix`, computed by
/// num-bigint. For decimal both sides are compared as `BigUint`s after
/// [`assert_well_formed`]; the reference product and the conversion of
/// `got` are independent and run on two threads.
pub fn assert_product(got: &[u64], a: &[u64], b: &[u64], radix: Radix, what: &str) {
    assert_well_formed(got, radix, what);
    match radix {
        Radix::Binary => {
            let expected = big_to_binary(&(binary_to_big(a) * binary_to_big(b)));
            assert_limbs_eq(got, &expected, what);
        }
        Radix::Decimal => {
            let (expected, value) = std::thread::scope(|s| {
                let e = s.spawn(|| {
                    let (x, y) = (decimal_to_big(a), decimal_to_big(b));
                    x * y
                });
                let v = decimal_to_big(got);
                (e.join().expect("reference thread"), v)
            });
            if value != expected {
                if got.len() <= DIAGNOSE_LIMBS {
                    assert_limbs_eq(got, &big_to_decimal(&expected), what);
                }
                // Localise the error at least roughly: is it in the low limbs?
                assert_low_limbs(got, a, b, Radix::Decimal, 4096, what);
                panic!(
                    "{what}: decimal product differs from num-bigint ({} limbs, {} bits; \
                     expected {} bits)",
                    got.len(),
                    value.bits(),
                    expected.bits()
                );
            }
        }
    }
}

/// Multiplies with the forced path and checks the result against
/// num-bigint.
pub fn check(a: &[u64], b: &[u64], radix: Radix, force: Force, what: &str) {
    let got = vastmul::engine::multiply_forced(a, b, radix, force);
    assert_product(
        &got,
        a,
        b,
        radix,
        &format!("{what} [{} {force:?}]", radix.name()),
    );
}

/// Multiplies with every forced path and checks each against num-bigint;
/// the reference product is computed once per radix.
pub fn check_all_paths(a: &[u64], b: &[u64], radix: Radix, what: &str) {
    let expected = to_big(a, radix) * to_big(b, radix);
    let expected_limbs = match radix {
        Radix::Binary => Some(big_to_binary(&expected)),
        Radix::Decimal if a.len() + b.len() <= DIAGNOSE_LIMBS => Some(big_to_decimal(&expected)),
        Radix::Decimal => None,
    };
    for force in [Force::Schoolbook, Force::Ntt, Force::Auto] {
        let ctx = format!("{what} [{} {force:?}]", radix.name());
        let got = vastmul::engine::multiply_forced(a, b, radix, force);
        assert_well_formed(&got, radix, &ctx);
        match &expected_limbs {
            Some(e) => assert_limbs_eq(&got, e, &ctx),
            None => assert!(
                decimal_to_big(&got) == expected,
                "{ctx}: decimal product differs from num-bigint"
            ),
        }
    }
}

/// The decimal limbs of a long operand, converted once in blocks of
/// `2^BLOCK_LOG` limbs, for checking its products with many short operands
/// in time linear in its length. Converting each million-limb product
/// whole would cost as much as a full million-limb multiplication in
/// num-bigint, once per short operand tried.
pub struct LongDecimal {
    blocks: Vec<BigUint>,
}

impl LongDecimal {
    const BLOCK_LOG: u32 = 7;

    /// Converts `a` block by block.
    pub fn new(a: &[u64]) -> Self {
        let m = 1usize << Self::BLOCK_LOG;
        LongDecimal {
            blocks: a.chunks(m).map(decimal_to_big).collect(),
        }
    }

    /// Where `got` first differs from `a * b` in decimal, or `None` if it
    /// does not. Block `i` of `got` must be `(carry + a_i * b) mod
    /// 10^(19 m)`, the quotient being the next carry, all computed by
    /// num-bigint; what is left above the last block must be the final
    /// carry. Linear in `a` for a short `b`. Digits are not range-checked
    /// here (see [`LongDecimal::assert_product`]).
    pub fn mismatch(&self, got: &[u64], b: &[u64]) -> Option<String> {
        let m = 1usize << Self::BLOCK_LOG;
        let bb = decimal_to_big(b);
        let modulus = decimal_power(Self::BLOCK_LOG);
        let mut carry = BigUint::default();
        for (i, ai) in self.blocks.iter().enumerate() {
            let r = carry + ai * &bb;
            let q = &r / &*modulus;
            let low = r - &q * &*modulus;
            let start = (i * m).min(got.len());
            let end = ((i + 1) * m).min(got.len());
            if decimal_to_big(&got[start..end]) != low {
                let mut expected = big_to_decimal(&low);
                expected.resize(m, 0);
                let mut g = got[start..end].to_vec();
                g.resize(m, 0);
                let j = (0..m).find(|&j| g[j] != expected[j]).unwrap_or(0);
                return Some(format!(
                    "limb {}: got {}, expected {}",
                    i * m + j,
                    g[j],
                    expected[j]
                ));
            }
            carry = q;
        }
        let top = (self.blocks.len() * m).min(got.len());
        (decimal_to_big(&got[top..]) != carry)
            .then(|| format!("the {} limbs from {top} up", got.len() - top))
    }

    /// Panics unless `got` is a well-formed decimal `a * b`.
    pub fn assert_product(&self, got: &[u64], b: &[u64], what: &str) {
        assert_well_formed(got, Radix::Decimal, what);
        if let Some(at) = self.mismatch(got, b) {
            panic!("{what}: product differs from num-bigint at {at}");
        }
    }
}

/// Residues modulo a fixed pseudo-random odd 4096-bit modulus coprime to 10,
/// computed by num-bigint in time linear in the length: the check for the
/// million-limb products beyond the two compared whole, each of which costs
/// tens of CPU-seconds in num-bigint. An error `e * B^k` with
/// `0 < e < 2^4000` is always caught, since the modulus shares no factor with
/// the radix; any other wrong product passes only if its error is a multiple
/// of the modulus.
pub struct Fingerprint {
    modulus: BigUint,
    /// `10^(19 * 2^STEP_LOG) mod modulus`.
    step: BigUint,
}

impl Fingerprint {
    const STEP_LOG: u32 = 6;

    /// The modulus drawn from `seed`.
    pub fn new(seed: u64) -> Self {
        let mut rng = Rng::new(seed);
        let mut words: Vec<u64> = (0..64).map(|_| rng.next_u64()).collect();
        words[0] |= 1;
        words[63] |= 1 << 63;
        let mut modulus = binary_to_big(&words);
        let zero = BigUint::default();
        while &modulus % 5u32 == zero {
            modulus += 2u32;
        }
        let step = &*decimal_power(Self::STEP_LOG) % &modulus;
        Fingerprint { modulus, step }
    }

    /// The value of `limbs` modulo the modulus. Decimal limbs are folded in
    /// from the top in blocks of 64 (Horner over blocks), so the cost is
    /// linear in the length.
    pub fn of(&self, limbs: &[u64], radix: Radix) -> BigUint {
        match radix {
            Radix::Binary => binary_to_big(limbs) % &self.modulus,
            Radix::Decimal => {
                let mut r = BigUint::default();
                for block in limbs.chunks(1 << Self::STEP_LOG).rev() {
                    r = (r * &self.step + decimal_to_big_horner(block)) % &self.modulus;
                }
                r
            }
        }
    }

    /// Whether `got` agrees with `a * b` modulo the modulus.
    pub fn agrees(&self, got: &[u64], a: &[u64], b: &[u64], radix: Radix) -> bool {
        let (fa, fb, fg) = std::thread::scope(|s| {
            let ha = s.spawn(|| self.of(a, radix));
            let fb = (!std::ptr::eq(a, b)).then(|| self.of(b, radix));
            let fg = self.of(got, radix);
            (ha.join().expect("fingerprint thread"), fb, fg)
        });
        let fb = fb.unwrap_or_else(|| fa.clone());
        fg == fa * fb % &self.modulus
    }

    /// Panics unless `got` is well formed and agrees with `a * b` modulo
    /// the modulus.
    pub fn assert_product(&self, got: &[u64], a: &[u64], b: &[u64], radix: Radix, what: &str) {
        assert_well_formed(got, radix, what);
        assert!(
            self.agrees(got, a, b, radix),
            "{what}: product ({} limbs) disagrees with num-bigint modulo the fingerprint modulus",
            got.len()
        );
    }
}

/// Panics unless the low `count` limbs of `got` are those of `a * b`: they
/// depend only on the low `count` limbs of each operand, so num-bigint can
/// check them exactly at a fraction of the product's size.
pub fn assert_low_limbs(got: &[u64], a: &[u64], b: &[u64], radix: Radix, count: usize, what: &str) {
    let low = |x: &[u64]| to_big(&x[..count.min(x.len())], radix);
    let mut expected = from_big(&(low(a) * low(b)), radix);
    expected.resize(count, 0);
    let mut g = got[..count.min(got.len())].to_vec();
    g.resize(count, 0);
    assert_limbs_eq(&g, &expected, &format!("{what}: low {count} limbs"));
}

/// The step of the last whole journal record in the state directory of an
/// out-of-core run whose scratch is `dir` (records are 80 bytes; the step is
/// the little-endian u16 at byte 4), for tests that act at a given pass.
pub fn journal_step(dir: &std::path::Path) -> Option<u16> {
    let state = std::fs::read_dir(dir).ok()?.flatten().find(|e| {
        e.file_name()
            .to_string_lossy()
            .starts_with(".vastmul-state-")
    })?;
    let bytes = std::fs::read(state.path().join("journal")).ok()?;
    let whole = bytes.len() / 80 * 80;
    (whole > 0).then(|| u16::from_le_bytes([bytes[whole - 76], bytes[whole - 75]]))
}
