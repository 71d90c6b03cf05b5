//! The executor: carries out a [`Plan`] on two operands given as limb
//! sources, and the convenience entry points on limb slices.

use crate::carry::{self, U192};
use crate::format::text::TextKind;
use crate::fourstep::{BlockLog, FourStep, Metered, NoLog, Shape};
use crate::ooc::OutOfCore;
use crate::pieces;
use crate::plan::{self, Algorithm, Force, Plan, Request};
use crate::primeset::PrimeSet;
use crate::radix::Radix;
use crate::schoolbook;
use crate::scratch::FileSpace;
pub use crate::storage::LimbSource;
use crate::storage::{Discarding, RamStore, Store, WordBuf};
pub use crate::streamed::StreamedProduct;
use crate::Result;
use rayon::prelude::*;
use std::path::Path;

/// Wall time of one pass, named as in [`Plan::passes`].
#[derive(Clone, Debug, serde::Serialize)]
pub struct PassTime {
    /// The pass, as the plan names it.
    pub name: String,
    /// Seconds it took.
    pub seconds: f64,
    /// Bytes it reads, as the plan counts them (0 outside the plan).
    pub read_bytes: u64,
    /// Bytes it writes, as the plan counts them.
    pub write_bytes: u64,
}

/// Collects pass times as the passes run.
#[derive(Default)]
pub struct Timer {
    /// The passes timed so far, in order.
    pub passes: Vec<PassTime>,
    /// Whether the passes report to the progress meter (the top-level job
    /// only: the products of pieces run nested in a pass of their own).
    pub report: bool,
}

impl Timer {
    /// A timer whose passes also report their progress.
    pub fn reporting() -> Self {
        Timer {
            passes: Vec::new(),
            report: true,
        }
    }

    /// Runs `f` as the pass `name`, recording its wall time.
    pub fn pass<T>(&mut self, name: impl Into<String>, f: impl FnOnce() -> Result<T>) -> Result<T> {
        let name = name.into();
        if self.report {
            crate::progress::METER.begin(&name);
        }
        let start = std::time::Instant::now();
        let r = f();
        if self.report {
            match r {
                Ok(_) => crate::progress::METER.end(),
                Err(_) => crate::progress::METER.abandon(),
            }
        }
        self.passes.push(PassTime {
            name,
            seconds: start.elapsed().as_secs_f64(),
            read_bytes: 0,
            write_bytes: 0,
        });
        r
    }

    /// The block log of a pass without checkpoints: metered when this
    /// timer reports.
    fn log(&self) -> &'static dyn BlockLog {
        static METERED: Metered<'static> = Metered(&NoLog);
        if self.report {
            &METERED
        } else {
            &NoLog
        }
    }
}

/// All `len` limbs of `src`, read in parallel chunks.
pub(crate) fn read_all<L: LimbSource + ?Sized>(src: &L, len: usize) -> Vec<u64> {
    let mut v = vec![0u64; len];
    read_into(src, 0, &mut v);
    v
}

/// Limbs `first..first + out.len()` of `src` into `out`, in parallel chunks.
pub(crate) fn read_into<L: LimbSource + ?Sized>(src: &L, first: usize, out: &mut [u64]) {
    const CHUNK: usize = plan::READ_CHUNK_LIMBS;
    out.par_chunks_mut(CHUNK)
        .enumerate()
        .for_each(|(i, chunk)| src.fill_limbs(first + i * CHUNK, chunk));
}

/// Carries out `plan` on `a` and `b` (ignored for a square) and returns the
/// product's limbs, most significant zero limbs removed (empty for zero).
pub fn execute<A, B>(plan: &Plan, a: &A, b: &B) -> Result<WordBuf>
where
    A: LimbSource + ?Sized,
    B: LimbSource + ?Sized,
{
    let (la, lb) = (plan.a_limbs, plan.b_limbs);
    let out = match plan.algorithm {
        Algorithm::Zero => WordBuf::zeroed(0),
        Algorithm::Schoolbook => {
            let av = read_all(a, la);
            let bv = if plan.square {
                av.clone()
            } else {
                read_all(b, lb)
            };
            let coeffs = schoolbook::convolution(&av, &bv);
            let mut out = WordBuf::zeroed(plan.product_limbs);
            carry::propagate(
                coeffs.len(),
                |first, dst: &mut [U192]| dst.copy_from_slice(&coeffs[first..first + dst.len()]),
                plan.radix,
                &mut out,
            );
            out
        }
        Algorithm::Ntt { shape, folded } => {
            ntt_product(plan, (shape, folded), a, b, &mut Timer::default())?
        }
        Algorithm::Pieces {
            product_on_disk: false,
            ..
        } => match execute_to(plan, a, b, Path::new("."))? {
            Product::Ram(w) => w,
            Product::Streamed(_) | Product::Disk { .. } => {
                unreachable!("the plan keeps the product in RAM")
            }
        },
        Algorithm::OutOfCore { .. } | Algorithm::Pieces { .. } => {
            return Err(crate::Error::usage(
                "a plan with scratch files needs a scratch directory",
                "call execute_to with one",
            ))
        }
    };
    Ok(trim(out))
}

/// The buffer without its most significant zero limbs.
fn trim(mut w: WordBuf) -> WordBuf {
    let len = w.iter().rposition(|&x| x != 0).map_or(0, |i| i + 1);
    w.truncate(len);
    w
}

/// The transform passes of both NTT paths: every prime's column
/// transforms of `a` from one read of it; then prime by prime the column
/// transform of `b` into `spare` (skipped for a square), the row pass with
/// the pointwise product, and the inverse columns. Afterwards `stores_a`
/// hold the residues of the convolution, checked to vanish past its end.
pub(crate) fn transform_passes<S, A, B>(
    fs: &FourStep,
    (la, lb, square): (usize, usize, bool),
    a: &A,
    b: &B,
    stores_a: &[S],
    spare: Option<&S>,
    timer: &mut Timer,
) -> Result<()>
where
    S: Store,
    A: LimbSource + ?Sized,
    B: LimbSource + ?Sized,
{
    let refs: Vec<&S> = stores_a.iter().collect();
    let log = timer.log();
    let primes: Vec<usize> = (0..stores_a.len()).collect();
    let logs = vec![log; stores_a.len()];
    timer.pass(plan::columns_of_a_name(stores_a.len()), || {
        fs.forward_columns(a, la, &primes, &refs, &logs)
    })?;
    let b_store = if square { None } else { spare };
    for (k, store) in stores_a.iter().enumerate() {
        if let Some(s) = b_store {
            timer.pass(format!("columns of B, prime {k}"), || {
                fs.forward_columns(b, lb, &[k], &[s], &[log])
            })?;
        }
        timer.pass(format!("rows and pointwise product, prime {k}"), || {
            fs.rows(k, store, b_store, store, log)
        })?;
        timer.pass(format!("inverse columns, prime {k}"), || {
            fs.inverse_columns(k, store, store, log)
        })?;
    }
    fs.check_zero_tail(&refs, la + lb - 1)
}

/// What the transform passes in RAM leave: the residues of the
/// convolution, one buffer per prime, and the store B used (none for a
/// square), free for the product's limbs.
struct Residues {
    fs: FourStep,
    residues: Vec<WordBuf>,
    spare: Option<RamStore>,
}

/// [`transform_passes`] over RAM stores, with `folded` coefficients past
/// the transform's length folded back ([`crate::wrap`]).
fn ntt_residues<A, B>(
    plan: &Plan,
    (shape, folded): (Shape, usize),
    a: &A,
    b: &B,
    timer: &mut Timer,
) -> Result<Residues>
where
    A: LimbSource + ?Sized,
    B: LimbSource + ?Sized,
{
    let (la, lb) = (plan.a_limbs, plan.b_limbs);
    let fs = FourStep::new(shape, plan.prime_set, plan.radix);
    let n = shape.len();
    let count = la + lb - 1;
    assert_eq!(folded, count.saturating_sub(n), "the plan folds what wraps");
    // Room for the folded coefficients' residues past the transform.
    let stores_a: Vec<RamStore> = (0..fs.prime_count())
        .map(|_| RamStore::zeroed(n + folded))
        .collect();
    let spare = (!plan.square).then(|| RamStore::zeroed(n.max(plan.product_limbs)));
    // B is read once per prime: decode it once (text parsing is not free),
    // and let the column passes copy from the decoded limbs. A mapped
    // buffer (huge pages where the kernel has them) faults in faster than
    // a heap vector of the same size.
    let b_limbs = if plan.square {
        WordBuf::zeroed(0)
    } else {
        let mut w = WordBuf::zeroed(lb);
        read_into(b, 0, &mut w);
        w
    };
    transform_passes(
        &fs,
        (la, lb, plan.square),
        a,
        &b_limbs[..],
        &stores_a,
        spare.as_ref(),
        timer,
    )?;
    // The residues are only read from here on: plain slices, with no copy.
    let mut residues: Vec<WordBuf> = stores_a.into_iter().map(RamStore::into_words).collect();
    if folded > 0 {
        timer.pass(plan::WRAP_PASS, || {
            let mut views: Vec<&mut [u64]> = residues.iter_mut().map(|w| &mut w[..]).collect();
            let b_top = (!plan.square).then_some((&b_limbs[..], lb));
            crate::wrap::fold_wrapped(&fs, (a, la), b_top, count, &mut views)
        })?;
    }
    Ok(Residues {
        fs,
        residues,
        spare,
    })
}

/// The NTT in RAM: [`ntt_residues`], then the CRT and carry pass write the
/// limbs into the store B used (or a new buffer for a square).
fn ntt_product<A, B>(
    plan: &Plan,
    shape: (Shape, usize),
    a: &A,
    b: &B,
    timer: &mut Timer,
) -> Result<WordBuf>
where
    A: LimbSource + ?Sized,
    B: LimbSource + ?Sized,
{
    let Residues {
        fs,
        residues,
        spare,
    } = ntt_residues(plan, shape, a, b, timer)?;
    let count = plan.a_limbs + plan.b_limbs - 1;
    let views: Vec<&[u64]> = residues.iter().map(|w| &w[..]).collect();
    let mut out = match spare {
        Some(s) => s.into_words(),
        None => WordBuf::zeroed(plan.product_limbs),
    };
    out.truncate(plan.product_limbs);
    let report = timer.report;
    timer.pass("CRT and carry", || {
        let failure = std::sync::Mutex::new(None);
        if report {
            crate::progress::METER.add_units(count as u64, 0);
        }
        carry::propagate(
            count,
            |first, dst: &mut [U192]| {
                let here: Vec<&[u64]> =
                    views.iter().map(|v| &v[first..first + dst.len()]).collect();
                if let Err(e) = fs.combine(&here, first, dst) {
                    *failure.lock().unwrap() = Some(e);
                }
                if report {
                    crate::progress::METER.advance(dst.len() as u64);
                }
            },
            plan.radix,
            &mut out,
        );
        match failure.into_inner().unwrap() {
            Some(e) => Err(e),
            None => Ok(()),
        }
    })?;
    Ok(out)
}

/// A computed product: in RAM, or in a scratch file for an out-of-core plan.
pub enum Product {
    /// Limbs in RAM, no leading zeros.
    Ram(WordBuf),
    /// Residues in RAM whose limbs are carried as the text writer asks for
    /// them, the text's length known ([`StreamedProduct::layout`]).
    Streamed(Box<StreamedProduct>),
    /// Limbs in a scratch store, `len` significant.
    Disk {
        /// The store holding the limbs from word 0.
        store: Box<dyn Store>,
        /// Significant limbs.
        len: usize,
        /// Scratch still being given back; waited for before the product
        /// counts as written.
        discarding: Discarding,
    },
}

impl Product {
    /// Significant limbs.
    pub fn len(&self) -> usize {
        match self {
            Product::Ram(w) => w.len(),
            Product::Streamed(p) => p.layout().map_or(0, |(len, _)| len),
            Product::Disk { len, .. } => *len,
        }
    }

    /// True for a zero product.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// Carries out any plan; out-of-core plans keep their scratch files in
/// `scratch_dir` (removed afterwards, also on failure).
pub fn execute_to<A, B>(plan: &Plan, a: &A, b: &B, scratch_dir: &Path) -> Result<Product>
where
    A: LimbSource + ?Sized,
    B: LimbSource + ?Sized,
{
    execute_timed(plan, a, b, scratch_dir, &mut Timer::default())
}

/// [`execute_to`], recording each pass's wall time in `timer`.
pub fn execute_timed<A, B>(
    plan: &Plan,
    a: &A,
    b: &B,
    scratch_dir: &Path,
    timer: &mut Timer,
) -> Result<Product>
where
    A: LimbSource + ?Sized,
    B: LimbSource + ?Sized,
{
    match plan.algorithm {
        Algorithm::OutOfCore { shape, window } => {
            let space = FileSpace::temporary(scratch_dir);
            let (run, _) = OutOfCore::open(plan, (shape, window), &space, None, &[])?;
            run.run(a, b, timer)
        }
        Algorithm::Ntt { shape, folded } => {
            ntt_product(plan, (shape, folded), a, b, timer).map(|w| Product::Ram(trim(w)))
        }
        Algorithm::Pieces { .. } => {
            let name = plan.passes[0].name.clone();
            let product = if plan.a_limbs >= plan.b_limbs {
                timer.pass(name, || pieces::product(plan, a, b, scratch_dir))
            } else {
                timer.pass(name, || pieces::product(plan, b, a, scratch_dir))
            }?;
            Ok(match product {
                Product::Ram(w) => Product::Ram(trim(w)),
                disk => disk,
            })
        }
        _ => timer
            .pass("schoolbook convolution and carry", || execute(plan, a, b))
            .map(Product::Ram),
    }
}

/// [`execute_timed`], except that an NTT product in RAM is left as
/// residues to be carried while it is written as `kind` text
/// ([`Product::Streamed`]), when the text's length is known beforehand.
/// Other plans, and products whose layout the top coefficients do not
/// settle, come as `execute_timed` gives them.
pub(crate) fn execute_streamed<A, B>(
    plan: &Plan,
    a: &A,
    b: &B,
    scratch_dir: &Path,
    timer: &mut Timer,
    kind: TextKind,
) -> Result<Product>
where
    A: LimbSource + ?Sized,
    B: LimbSource + ?Sized,
{
    let Algorithm::Ntt { shape, folded } = plan.algorithm else {
        return execute_timed(plan, a, b, scratch_dir, timer);
    };
    let r = ntt_residues(plan, (shape, folded), a, b, timer)?;
    let count = plan.a_limbs + plan.b_limbs - 1;
    let limbs = r
        .spare
        .unwrap_or_else(|| RamStore::zeroed(plan.product_limbs));
    let p = StreamedProduct::new(r.fs, r.residues, count, plan.radix, limbs, kind)?;
    if p.layout().is_some() {
        return Ok(Product::Streamed(Box::new(p)));
    }
    timer
        .pass("CRT and carry", || p.into_limbs())
        .map(|w| Product::Ram(trim(w)))
}

/// Distinct names for one run's scratch files.
pub(crate) fn scratch_path(dir: &Path, what: &str) -> std::path::PathBuf {
    use std::sync::atomic::{AtomicU64, Ordering};
    static COUNTER: AtomicU64 = AtomicU64::new(0);
    let n = COUNTER.fetch_add(1, Ordering::Relaxed);
    dir.join(format!(
        ".vastmul-scratch-{}-{n}-{what}",
        std::process::id()
    ))
}

fn trimmed(x: &[u64]) -> &[u64] {
    let len = x.iter().rposition(|&w| w != 0).map_or(0, |i| i + 1);
    &x[..len]
}

/// The product of two little-endian limb slices in `radix`, trimmed. Inputs
/// may carry leading zero limbs; every limb must be at most
/// `radix.max_limb()`. Runs on rayon's current thread pool.
pub fn multiply(a: &[u64], b: &[u64], radix: Radix) -> Vec<u64> {
    multiply_forced(a, b, radix, Force::Auto)
}

/// [`multiply`] with the algorithm forced (for tests and benchmarks).
pub fn multiply_forced(a: &[u64], b: &[u64], radix: Radix, force: Force) -> Vec<u64> {
    multiply_on(a, b, radix, force, PrimeSet::preferred())
}

/// [`multiply_forced`] on the given prime set and kernels (for tests and
/// benchmarks that compare them; the set must be one this CPU runs).
pub fn multiply_on(a: &[u64], b: &[u64], radix: Radix, force: Force, set: PrimeSet) -> Vec<u64> {
    let (a, b) = (trimmed(a), trimmed(b));
    debug_assert!(a.iter().chain(b).all(|&x| x <= radix.max_limb()));
    let mut req = Request::in_memory(
        a.len(),
        b.len(),
        radix,
        a == b,
        rayon::current_num_threads(),
        force,
    );
    req.primes = set;
    let plan = plan::plan(&req).expect("in-memory products of slices always plan");
    execute(&plan, a, b)
        .expect("RAM stores do not fail")
        .to_vec()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::test_oracles::seeded_words;
    use num_bigint::BigUint;

    fn big(limbs: &[u64]) -> BigUint {
        let words: Vec<u32> = limbs
            .iter()
            .flat_map(|w| [*w as u32, (w >> 32) as u32])
            .collect();
        BigUint::from_slice(&words)
    }

    #[test]
    fn every_path_matches_the_reference_on_binary_limbs() {
        for (la, lb) in [
            (1, 1),
            (3, 70),
            (64, 64),
            (1000, 999),
            (4097, 33),
            (20_000, 20_000),
        ] {
            let a = seeded_words(la, la as u64 + 5);
            let b = seeded_words(lb, lb as u64 + 11);
            let expect = big(&a) * big(&b);
            for force in [Force::Schoolbook, Force::Ntt, Force::Auto] {
                let c = multiply_forced(&a, &b, Radix::Binary, force);
                assert_eq!(big(&c), expect, "{la}x{lb} {force:?}");
            }
            let sq = multiply_forced(&a, &a, Radix::Binary, Force::Ntt);
            assert_eq!(big(&sq), big(&a) * big(&a), "square {la}");
        }
    }

    #[test]
    fn decimal_paths_agree_with_each_other_on_all_nines() {
        let nines = vec![crate::radix::DEC_BASE - 1; 3000];
        let s = multiply_forced(&nines, &nines, Radix::Decimal, Force::Schoolbook);
        let n = multiply_forced(&nines, &nines, Radix::Decimal, Force::Ntt);
        assert_eq!(s, n);
        // (10^k - 1)^2 = 10^2k - 2*10^k + 1: limbs 1, 0.., then 10^19-2, 9..9
        assert_eq!(n[0], 1);
        assert!(n[1..3000].iter().all(|&x| x == 0));
        assert_eq!(n[3000], crate::radix::DEC_BASE - 2);
        assert!(n[3001..].iter().all(|&x| x == crate::radix::DEC_BASE - 1));
        assert_eq!(n.len(), 6000);
    }
}
