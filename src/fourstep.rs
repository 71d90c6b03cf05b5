//! The four-step NTT convolution over [`Store`]s.
//!
//! A transform of length `N = R * C` views the data as `R` rows of `C`
//! words (index `C * n1 + n2`). Forward: length-`R` transforms down each
//! column, a twiddle `w_N^(k1 n2)`, length-`C` transforms along each row.
//! The result is left in the transposed, bit-reversed order, which is fine
//! for a convolution: both operands share it, the pointwise product does not
//! care, and the inverse undoes the steps in reverse, so no transpose pass is
//! ever run. Three passes over the data:
//!
//! 1. **column pass** per operand: columns are read in blocks of `lanes`
//!    adjacent columns straight from the operand's limbs, reduced modulo each
//!    prime, transformed, written to the operand's stores;
//! 2. **row pass**: per row and prime, twiddle and transform the rows of
//!    both operands, multiply pointwise, inverse-transform, twiddle back,
//!    and write over the first operand's row;
//! 3. **inverse column pass**: inverse column transforms leave the residues
//!    of the convolution in natural order; the carry pass then reads the
//!    residues of each coefficient side by side (three or four, one per
//!    prime of the [`PrimeSet`]), and the CRT turns them into its exact
//!    192-bit value on the way.
//!
//! Each pass is parallel over blocks with rayon; blocks are independent.
//! The passes work one prime at a time, so the second operand needs one
//! store, reused for every prime, not one per prime.
//!
//! The passes are the same for both prime sets; only the per-prime
//! arithmetic differs ([`PrimeArith`]): the 62-bit scalar kernels with
//! Montgomery twiddles, or one of the 50-bit kernel paths.
//!
//! The 50-bit sets transform balanced digits rather than the limbs: a limb
//! at or above half the base becomes negative by lending one base to the
//! next limb ([`balance_flags`]), so that no digit but the top one exceeds
//! half the base in size. The convolution's coefficients are then a quarter
//! the size and signed, three 50-bit primes hold them for operands twice as
//! long, and the CRT returns them in two's complement
//! ([`Crt50::signed_values`]), which the carry pass takes as it is.

use crate::arith::primes::{NttPrime, PRIMES};
use crate::arith::Modulus;
use crate::carry::U192;
use crate::crt::Crt;
use crate::ntt::{self, bit_reverse, Twiddles};
use crate::ntt50::crt::Crt50;
use crate::ntt50::primes::Prime50;
use crate::ntt50::{self as n50, Kernel, Modulus50};
use crate::primeset::PrimeSet;
use crate::radix::{Radix, DEC_BASE};
use crate::storage::{LimbSource, Store};
use crate::{Error, Result};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// The shape of a four-step transform.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Shape {
    /// Rows `R`: the length of the column transforms.
    pub rows: usize,
    /// Columns `C`: the length of the row transforms.
    pub cols: usize,
    /// Adjacent columns transformed together in the column passes.
    pub lanes: usize,
}

impl Shape {
    /// The transform length `R * C`.
    pub fn len(&self) -> usize {
        self.rows * self.cols
    }

    /// Never true for a valid shape.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// The checkpointing hook of a pass: which blocks an earlier run already
/// completed (they are skipped), and where each newly completed block is
/// reported, with the BLAKE3 of what it wrote. Blocks are column blocks in
/// the column passes and rows in the row pass.
pub trait BlockLog: Sync {
    /// True when `block` is already done.
    fn done(&self, _block: usize) -> bool {
        false
    }

    /// Whether [`BlockLog::finished`] wants the block's hash.
    fn wants_hash(&self) -> bool {
        false
    }

    /// Called once `block`'s output is written.
    fn finished(&self, _block: usize, _hash: Option<blake3::Hash>) -> Result<()> {
        Ok(())
    }

    /// Called when a pass over `blocks` blocks begins, `already` of them
    /// done by an earlier run.
    fn started(&self, _blocks: usize, _already: usize) {}
}

/// The log of a run that keeps no checkpoints.
pub struct NoLog;

impl BlockLog for NoLog {}

/// A log that also reports its blocks to the progress meter; only the
/// top-level job wraps its logs in it, so nested products stay silent.
pub struct Metered<'a>(pub &'a dyn BlockLog);

impl BlockLog for Metered<'_> {
    fn done(&self, block: usize) -> bool {
        self.0.done(block)
    }

    fn wants_hash(&self) -> bool {
        self.0.wants_hash()
    }

    fn finished(&self, block: usize, hash: Option<blake3::Hash>) -> Result<()> {
        self.0.finished(block, hash)?;
        crate::progress::METER.advance(1);
        Ok(())
    }

    fn started(&self, blocks: usize, already: usize) {
        self.0.started(blocks, already);
        crate::progress::METER.add_units(blocks as u64, already as u64);
    }
}

/// Tells each log that a pass over `blocks` blocks begins.
fn announce(logs: &[&dyn BlockLog], blocks: usize) {
    for log in logs {
        let already = (0..blocks).filter(|&b| log.done(b)).count();
        log.started(blocks, already);
    }
}

/// The BLAKE3 of a buffer of words, when the log wants one.
fn digest(log: &dyn BlockLog, words: &[u64]) -> Option<blake3::Hash> {
    log.wants_hash()
        .then(|| blake3::hash(crate::storage::words_as_bytes(words)))
}

/// The row twiddle steps of a shape with `rows` rows: the successive powers
/// `one, next(one), next(next(one)), ...` of a root (in whatever form `next`
/// multiplies), the `k1`-th placed at row `bitrev(k1)`, where the column
/// transform leaves frequency `k1`.
fn row_steps(rows: usize, one: u64, next: impl Fn(u64) -> u64) -> Vec<u64> {
    let bits = rows.trailing_zeros();
    let mut out = vec![0; rows];
    let mut x = one;
    for k1 in 0..rows {
        out[bit_reverse(k1, bits)] = x;
        x = next(x);
    }
    out
}

/// Tables of one prime below 2^62 for one shape.
struct WideTables {
    modulus: Modulus,
    col: Twiddles,
    row: Twiddles,
    /// `w_N^(k1)` in Montgomery form for the row at position `i`, where
    /// `k1 = bitrev(i)` is the frequency the column transform left there.
    row_step_fwd: Vec<u64>,
    /// `w_N^(-k1)` likewise.
    row_step_inv: Vec<u64>,
}

impl WideTables {
    fn new(prime: &NttPrime, shape: Shape) -> Self {
        let m = prime.modulus;
        let n = shape.len() as u64;
        let w = prime.root_of_unity_any(n);
        let wi = m.inv(w);
        let (w_m, wi_m) = (m.to_mont(w), m.to_mont(wi));
        let fwd = row_steps(shape.rows, m.mont_one, |x| m.mont_mul(x, w_m));
        let inv = row_steps(shape.rows, m.mont_one, |x| m.mont_mul(x, wi_m));
        WideTables {
            modulus: m,
            col: Twiddles::new(prime, shape.rows),
            row: Twiddles::new(prime, shape.cols),
            row_step_fwd: fwd,
            row_step_inv: inv,
        }
    }
}

/// Tables of one prime below 2^50 for one shape, with the kernel path.
struct NarrowTables {
    kernel: Kernel,
    modulus: Modulus50,
    /// `p - (base mod p)`: what a balanced digit's borrow of one base adds.
    neg_base: u64,
    col: n50::Twiddles,
    row: n50::Twiddles,
    /// `w_N^(k1)` for the row at position `i` (`k1 = bitrev(i)`).
    row_step_fwd: Vec<u64>,
    /// `w_N^(-k1)` likewise.
    row_step_inv: Vec<u64>,
}

impl NarrowTables {
    fn new(prime: &Prime50, shape: Shape, kernel: Kernel, radix: Radix) -> Self {
        let m = prime.modulus;
        let base = match radix {
            Radix::Binary => ((1u128 << 64) % m.p as u128) as u64,
            Radix::Decimal => DEC_BASE % m.p,
        };
        // The generator's root, as the rows' radix-3 step assumes.
        let w = prime.root_of_unity_any(shape.len() as u64);
        let wi = m.inv(w);
        let fwd = row_steps(shape.rows, 1, |x| m.mul(x, w));
        let inv = row_steps(shape.rows, 1, |x| m.mul(x, wi));
        NarrowTables {
            kernel,
            modulus: m,
            neg_base: m.p - base,
            col: n50::Twiddles::new(prime, shape.rows),
            row: n50::Twiddles::new(prime, shape.cols),
            row_step_fwd: fwd,
            row_step_inv: inv,
        }
    }
}

/// The arithmetic of one prime in the passes: what a column block or a
/// row needs done, whichever prime set it belongs to.
enum PrimeArith {
    Wide(Box<WideTables>),
    Narrow(Box<NarrowTables>),
}

impl PrimeArith {
    /// `buf` = the digits of the limbs `raw` for a forward transform
    /// (`[0, 2p)`). For the balanced 50-bit sets, bit 0 of `flags[i]` adds
    /// the carry in and bit 1 takes one base off (see [`balance_flags`]);
    /// the 62-bit set takes plain limbs and no flags.
    fn digits_into(&self, raw: &[u64], flags: &[u8], buf: &mut [u64]) {
        match self {
            PrimeArith::Wide(t) => {
                for (b, r) in buf.iter_mut().zip(raw) {
                    *b = t.modulus.reduce_lazy(*r);
                }
            }
            PrimeArith::Narrow(t) => t
                .kernel
                .digits_into(raw, flags, t.neg_base, buf, &t.modulus),
        }
    }

    /// Forward column transforms of a block of `lanes` columns.
    fn forward_columns(&self, buf: &mut [u64], lanes: usize) {
        match self {
            PrimeArith::Wide(t) => ntt::forward_lanes(buf, lanes, &t.col, &t.modulus),
            PrimeArith::Narrow(t) => t.kernel.forward_lanes(buf, lanes, &t.col),
        }
    }

    /// Inverse column transforms of a block of `lanes` columns.
    fn inverse_columns(&self, buf: &mut [u64], lanes: usize) {
        match self {
            PrimeArith::Wide(t) => ntt::inverse_lanes(buf, lanes, &t.col, &t.modulus),
            PrimeArith::Narrow(t) => t.kernel.inverse_lanes(buf, lanes, &t.col),
        }
    }

    /// The row step for row `i`: twiddle and transform `buf.a` (and
    /// `buf.b` when `with_b`, else square `buf.a`), multiply pointwise,
    /// inverse-transform and twiddle back, leaving the result in `buf.a`.
    fn row_product(&self, i: usize, buf: &mut RowBuffers, with_b: bool) {
        match self {
            PrimeArith::Wide(t) => {
                let m = &t.modulus;
                powers_mont(&mut buf.tw, t.row_step_fwd[i], m);
                twiddle(&mut buf.a, &buf.tw, m);
                ntt::forward(&mut buf.a, &t.row, m);
                if with_b {
                    twiddle(&mut buf.b, &buf.tw, m);
                    ntt::forward(&mut buf.b, &t.row, m);
                    for (x, y) in buf.a.iter_mut().zip(&buf.b) {
                        *x = m.mont_mul(m.reduce_2p(*x), *y);
                    }
                } else {
                    for x in buf.a.iter_mut() {
                        *x = m.mont_mul(m.reduce_2p(*x), *x);
                    }
                }
                ntt::inverse(&mut buf.a, &t.row, m);
                powers_mont(&mut buf.tw, t.row_step_inv[i], m);
                twiddle(&mut buf.a, &buf.tw, m);
            }
            PrimeArith::Narrow(t) => {
                // The CRT divides out the transform length.
                let steps = (t.row_step_fwd[i], t.row_step_inv[i]);
                t.kernel
                    .row_product(&mut buf.a, &mut buf.b, with_b, steps, &t.row);
            }
        }
    }
}

/// The CRT of one prime set, with the scale the transforms leave folded in.
enum Combiner {
    Wide(Crt),
    Narrow(Box<Crt50>, Kernel),
}

/// A prepared four-step convolution of one shape.
pub struct FourStep {
    shape: Shape,
    set: PrimeSet,
    radix: Radix,
    /// Half the limb base when the set transforms balanced digits.
    balance_half: Option<u64>,
    tables: Vec<PrimeArith>,
    crt: Combiner,
}

/// Fills `out` with `w^j` (Montgomery form) for `j = 0, 1, ...`, using eight
/// independent chains so the multiplications overlap.
#[inline(never)]
fn powers_mont(out: &mut [u64], w: u64, m: &Modulus) {
    let mut x = m.mont_one;
    let head = out.len().min(8);
    for o in out[..head].iter_mut() {
        *o = x;
        x = m.mont_mul(x, w);
    }
    // x is now w^8
    for j in 8..out.len() {
        out[j] = m.mont_mul(out[j - 8], x);
    }
}

/// Multiplies `row` (values below `4p`) by `tw` (Montgomery form), fully
/// reducing it.
#[inline(never)]
fn twiddle(row: &mut [u64], tw: &[u64], m: &Modulus) {
    for (x, t) in row.iter_mut().zip(tw) {
        *x = m.mont_mul(*x, *t);
    }
}

/// Columns read ahead at a time in the column passes, per row: a stretch of
/// each row that many column blocks share (32 KiB of scratch words, 76 KiB
/// of decimal text), so one hint per row serves all of them.
const READ_AHEAD_COLUMNS: usize = 4096;

/// The columns to read ahead when the column pass reaches `block`: at the
/// first block of each read-ahead stretch, that stretch and the next, so
/// that the disk reads the next while this one is transformed (hints for
/// pages already cached cost little). `None` between stretches.
fn read_ahead_span(block: usize, lanes: usize, cols: usize) -> Option<std::ops::Range<usize>> {
    let c0 = block * lanes;
    let stretch = READ_AHEAD_COLUMNS.min(cols);
    if !c0.is_multiple_of(stretch) {
        return None;
    }
    Some(c0..(c0 + 2 * stretch).min(cols))
}

/// Where a column block's row segments lie in the operand: `lanes` limbs
/// from `cols * n1 + c0` for row `n1`, of an operand of `len` limbs.
#[derive(Clone, Copy)]
struct Segments {
    lanes: usize,
    cols: usize,
    c0: usize,
    len: usize,
}

/// The balanced-digit flags of a column block's limbs `raw` (row segments
/// laid out as [`Segments`] says, `live_rows` of them read): bit 0 of
/// `flags[i]` when limb `g` (`raw[i]`'s position) takes a carry in, bit 1
/// when it gives one base away.
///
/// The balanced digit of limb `g` is `x_g + t_(g-1) - base t_g` with
/// `t_g = [x_g >= half]`, except that the top limb (`g = len - 1`) keeps its
/// carry in and gives nothing away, so no digit appears past the operand
/// and the transform length stays that of the plain limbs. Every digit but
/// the top one lies in `[-half, half]`, which is what halves the
/// coefficients' size ([`crate::ntt50::primes::balanced_bound_holds_for_first`]).
/// The carry into each segment's first limb comes from its left neighbour,
/// which another block reads: it is peeked, not read, so residue taps count
/// every limb once.
fn balance_flags<L: LimbSource + ?Sized>(
    raw: &[u64],
    flags: &mut [u8],
    seg: Segments,
    live_rows: usize,
    half: u64,
    limbs: &L,
) {
    let Segments {
        lanes,
        cols,
        c0,
        len,
    } = seg;
    for (n1, (x, f)) in raw
        .chunks_exact(lanes)
        .zip(flags.chunks_exact_mut(lanes))
        .enumerate()
    {
        if n1 >= live_rows {
            f.fill(0);
            continue;
        }
        let g0 = cols * n1 + c0;
        let mut prev_top = g0 > 0 && g0 < len && limbs.peek_limb(g0 - 1) >= half;
        for (l, (&xl, fl)) in x.iter().zip(f.iter_mut()).enumerate() {
            let g = g0 + l;
            let carry_in = prev_top && g < len;
            let top = xl >= half && g + 1 < len;
            *fl = carry_in as u8 | (top as u8) << 1;
            prev_top = xl >= half;
        }
    }
}

/// Per-thread buffers of the row pass.
struct RowBuffers {
    a: Vec<u64>,
    b: Vec<u64>,
    tw: Vec<u64>,
}

impl FourStep {
    /// Prepares tables for `shape` (`rows` a power of two, `cols` a length
    /// the set's kernels take, `lanes` dividing `cols`) with the primes and
    /// kernels of `set`.
    pub fn new(shape: Shape, set: PrimeSet, radix: Radix) -> Self {
        assert!(shape.rows.is_power_of_two() && set.supports_len(shape.cols));
        assert!(set.supports_len(shape.len()));
        assert!(shape.lanes >= 1 && shape.cols.is_multiple_of(shape.lanes));
        let n = shape.len() as u64;
        let balance_half = set.balanced_digits().then(|| radix.half_base());
        match set {
            PrimeSet::Three62 => {
                let tables: Vec<WideTables> =
                    PRIMES.iter().map(|p| WideTables::new(p, shape)).collect();
                // The inverse leaves N * c * 2^-64 (the pointwise Montgomery
                // product drops one 2^64); the CRT divides that scale out.
                let scale: Vec<u64> = tables
                    .iter()
                    .map(|t| {
                        let m = t.modulus;
                        m.mul(n % m.p, m.inv(m.mont_one))
                    })
                    .collect();
                FourStep {
                    shape,
                    set,
                    radix,
                    balance_half,
                    tables: tables
                        .into_iter()
                        .map(|t| PrimeArith::Wide(Box::new(t)))
                        .collect(),
                    crt: Combiner::Wide(Crt::new([scale[0], scale[1], scale[2]])),
                }
            }
            PrimeSet::Four50(kernel) | PrimeSet::Three50(kernel) => FourStep {
                shape,
                set,
                radix,
                balance_half,
                tables: n50::primes::PRIMES[..set.count()]
                    .iter()
                    .map(|p| {
                        PrimeArith::Narrow(Box::new(NarrowTables::new(p, shape, kernel, radix)))
                    })
                    .collect(),
                // The pointwise product keeps the scale at 1, so the inverse
                // leaves N * c; balanced digits make c signed.
                crt: Combiner::Narrow(
                    Box::new(Crt50::for_transform_len(n).signed_values()),
                    kernel,
                ),
            },
        }
    }

    /// The primes and kernels this convolution uses.
    pub fn prime_set(&self) -> PrimeSet {
        self.set
    }

    /// How many primes (residue stores) the passes use.
    pub fn prime_count(&self) -> usize {
        self.tables.len()
    }

    /// The shape this convolution was prepared for.
    pub fn shape(&self) -> Shape {
        self.shape
    }

    /// Column pass: reads limbs `0..len` of `limbs` and leaves the column
    /// transforms modulo prime `primes[j]` in `stores[j]`, reporting each
    /// column block to `logs[j]`. Reading several primes at once reads the
    /// input once.
    pub fn forward_columns<S, L>(
        &self,
        limbs: &L,
        len: usize,
        primes: &[usize],
        stores: &[&S],
        logs: &[&dyn BlockLog],
    ) -> Result<()>
    where
        S: Store + ?Sized,
        L: LimbSource + ?Sized,
    {
        let Shape { rows, cols, lanes } = self.shape;
        announce(logs, cols / lanes);
        (0..cols / lanes).into_par_iter().try_for_each_init(
            || {
                let flags = vec![
                    0u8;
                    if self.balance_half.is_some() {
                        rows * lanes
                    } else {
                        0
                    }
                ];
                (vec![0u64; rows * lanes], vec![0u64; rows * lanes], flags)
            },
            |(raw, buf, flags), block| {
                if logs.iter().all(|l| l.done(block)) {
                    return Ok(());
                }
                crate::interrupt::check()?;
                let c0 = block * lanes;
                // Rows past the operand's end are zero; most transforms are
                // zero-padded to twice the operand, so skip reading them.
                let live_rows = if len > c0 {
                    (len - c0).div_ceil(cols).min(rows)
                } else {
                    0
                };
                if let Some(span) = read_ahead_span(block, lanes, cols) {
                    for n1 in 0..live_rows {
                        limbs.prefetch_limbs(cols * n1 + span.start, span.len());
                    }
                }
                for (n1, seg) in raw.chunks_exact_mut(lanes).enumerate().take(live_rows) {
                    limbs.fill_limbs(cols * n1 + c0, seg);
                }
                if let Some(half) = self.balance_half {
                    let seg = Segments {
                        lanes,
                        cols,
                        c0,
                        len,
                    };
                    balance_flags(raw, flags, seg, live_rows, half, limbs);
                }
                for ((&k, store), log) in primes.iter().zip(stores).zip(logs) {
                    if log.done(block) {
                        continue;
                    }
                    let t = &self.tables[k];
                    // Rows past the operand are zero: only the live ones
                    // are read and reduced.
                    let live = live_rows * lanes;
                    let live_flags = if flags.is_empty() {
                        &[][..]
                    } else {
                        &flags[..live]
                    };
                    t.digits_into(&raw[..live], live_flags, &mut buf[..live]);
                    buf[live..].fill(0);
                    t.forward_columns(buf, lanes);
                    for (n1, seg) in buf.chunks_exact(lanes).enumerate() {
                        store.write(cols * n1 + c0, seg)?;
                    }
                    log.finished(block, digest(*log, buf))?;
                }
                Ok(())
            },
        )
    }

    /// Row pass for prime `k`: transforms the rows of both operands,
    /// multiplies them pointwise and inverse-transforms the product into
    /// `out` (which may be `a`: in RAM the pass runs in place; on disk it
    /// writes elsewhere, so that a block interrupted halfway can be redone
    /// from intact inputs). With `b` as `None` the operand is squared and
    /// its second transform skipped. Each row is a block of `log`.
    pub fn rows<S: Store + ?Sized>(
        &self,
        k: usize,
        a: &S,
        b: Option<&S>,
        out: &S,
        log: &dyn BlockLog,
    ) -> Result<()> {
        let Shape { rows, cols, .. } = self.shape;
        let t = &self.tables[k];
        announce(&[log], rows);
        (0..rows).into_par_iter().try_for_each_init(
            || RowBuffers {
                a: vec![0; cols],
                b: vec![0; cols],
                tw: vec![0; cols],
            },
            |buf, i| {
                if log.done(i) {
                    return Ok(());
                }
                crate::interrupt::check()?;
                let start = i * cols;
                // The next row is most likely this thread's next task.
                if i + 1 < rows {
                    a.prefetch(start + cols, cols);
                    if let Some(b) = b {
                        b.prefetch(start + cols, cols);
                    }
                }
                a.read(start, &mut buf.a)?;
                if let Some(b) = b {
                    b.read(start, &mut buf.b)?;
                }
                t.row_product(i, buf, b.is_some());
                out.write(start, &buf.a)?;
                log.finished(i, digest(log, &buf.a))
            },
        )
    }

    /// Inverse column pass for prime `k`: reads what the row pass left in
    /// `src` and leaves the (scaled, lazily reduced) residues of the
    /// convolution in natural order in `dst` (which may be `src`).
    pub fn inverse_columns<S: Store + ?Sized>(
        &self,
        k: usize,
        src: &S,
        dst: &S,
        log: &dyn BlockLog,
    ) -> Result<()> {
        let Shape { rows, cols, lanes } = self.shape;
        let t = &self.tables[k];
        let store = src;
        announce(&[log], cols / lanes);
        (0..cols / lanes).into_par_iter().try_for_each_init(
            || vec![0u64; rows * lanes],
            |buf, block| {
                if log.done(block) {
                    return Ok(());
                }
                crate::interrupt::check()?;
                let c0 = block * lanes;
                if let Some(span) = read_ahead_span(block, lanes, cols) {
                    for n1 in 0..rows {
                        store.prefetch(cols * n1 + span.start, span.len());
                    }
                }
                for (n1, seg) in buf.chunks_exact_mut(lanes).enumerate() {
                    store.read(cols * n1 + c0, seg)?;
                }
                t.inverse_columns(buf, lanes);
                for (n1, seg) in buf.chunks_exact(lanes).enumerate() {
                    dst.write(cols * n1 + c0, seg)?;
                }
                log.finished(block, digest(log, buf))
            },
        )
    }

    /// The radix of the limbs the column passes read.
    pub fn radix(&self) -> Radix {
        self.radix
    }

    /// Prime `k`'s modulus and the factor its residues carry: the inverse
    /// columns leave `scale * c mod p` for a coefficient `c`. `None` for
    /// the 62-bit set, whose residues are in Montgomery form (the
    /// wrap-around correction, the only user, is planned for the 50-bit
    /// sets alone).
    pub fn residue_scale(&self, k: usize) -> Option<(Modulus50, u64)> {
        match &self.tables[k] {
            PrimeArith::Wide(_) => None,
            // The pointwise product keeps the scale at 1 (see `new`).
            PrimeArith::Narrow(t) => Some((t.modulus, self.shape.len() as u64 % t.modulus.p)),
        }
    }

    /// Column blocks of this shape.
    pub fn column_blocks(&self) -> usize {
        self.shape.cols / self.shape.lanes
    }

    /// The BLAKE3 of column block `block` of `store`, laid out as the
    /// column passes hash it: for checking a journaled block.
    pub fn column_block_hash<S: Store + ?Sized>(
        &self,
        store: &S,
        block: usize,
    ) -> Result<blake3::Hash> {
        let Shape { rows, cols, lanes } = self.shape;
        let mut buf = vec![0u64; rows * lanes];
        for (n1, seg) in buf.chunks_exact_mut(lanes).enumerate() {
            store.read(cols * n1 + block * lanes, seg)?;
        }
        Ok(blake3::hash(crate::storage::words_as_bytes(&buf)))
    }

    /// The BLAKE3 of row `row` of `store`, as the row pass hashes it.
    pub fn row_hash<S: Store + ?Sized>(&self, store: &S, row: usize) -> Result<blake3::Hash> {
        let cols = self.shape.cols;
        let mut buf = vec![0u64; cols];
        store.read(row * cols, &mut buf)?;
        Ok(blake3::hash(crate::storage::words_as_bytes(&buf)))
    }

    /// The exact coefficients `first..first + out.len()` from the residue
    /// stores left by [`FourStep::inverse_columns`] for every prime (one
    /// store per prime, in order); `tmp` is the caller's reusable buffer.
    pub fn coefficients<S: Store + ?Sized>(
        &self,
        stores: &[&S],
        first: usize,
        out: &mut [U192],
        tmp: &mut Vec<Vec<u64>>,
    ) -> Result<()> {
        tmp.resize(stores.len(), Vec::new());
        for (store, t) in stores.iter().zip(tmp.iter_mut()) {
            t.resize(out.len(), 0);
            store.read(first, t)?;
        }
        let views: Vec<&[u64]> = tmp.iter().map(|t| &t[..]).collect();
        self.combine(&views, first, out)
    }

    /// The exact coefficients from residue slices in RAM (one per prime,
    /// each `out.len()` long; `first` only names the position in errors).
    pub fn combine(&self, residues: &[&[u64]], first: usize, out: &mut [U192]) -> Result<()> {
        let tmp = residues;
        match &self.crt {
            Combiner::Wide(crt) => {
                for (i, o) in out.iter_mut().enumerate() {
                    *o = crt.combine([tmp[0][i], tmp[1][i], tmp[2][i]]);
                }
            }
            Combiner::Narrow(crt, kernel) => {
                // Residues of a product are below 2^52 and combine to less
                // than 2^192; corrupted ones need not, and must be caught.
                if !crt.coefficients_checked(*kernel, tmp, out) {
                    return Err(Error::verify(
                        format!(
                            "transform consistency: a residue among coefficients {first}..{} \
                             is out of range; memory or scratch data was corrupted",
                            first + out.len()
                        ),
                        "rerun (with --restart for an out-of-core run); if it fails again, \
                         suspect the machine's memory or disk, and please report it",
                    ));
                }
            }
        }
        Ok(())
    }

    /// Checks that the coefficients from `first` to the transform's end
    /// are zero, as they must be past the product's end: anything else means
    /// corrupted memory or scratch data.
    pub fn check_zero_tail<S: Store + ?Sized>(&self, stores: &[&S], first: usize) -> Result<()> {
        let n = self.shape.len();
        // One set of buffers for every window: fresh ones would fault in
        // anew each time.
        let (mut out, mut tmp) = (Vec::new(), Vec::new());
        let mut k = first;
        while k < n {
            let w = (n - k).min(1 << 16);
            out.resize(w, [0u64; 3]);
            self.check_zero_tail_range(stores, k, &mut out[..w], &mut tmp)?;
            k += w;
        }
        Ok(())
    }

    /// [`FourStep::check_zero_tail`] for the coefficients from `first`,
    /// `out.len()` of them; `out` and `tmp` are scratch.
    fn check_zero_tail_range<S: Store + ?Sized>(
        &self,
        stores: &[&S],
        first: usize,
        out: &mut [U192],
        tmp: &mut Vec<Vec<u64>>,
    ) -> Result<()> {
        self.coefficients(stores, first, out, tmp)?;
        match out.iter().position(|v| *v != [0, 0, 0]) {
            None => Ok(()),
            Some(i) => Err(Error::verify(
                format!(
                    "transform consistency: coefficient {} beyond the product is not zero; \
                     memory or scratch data was corrupted",
                    first + i
                ),
                "rerun (with --restart for an out-of-core run); if it fails again, suspect \
                 the machine's memory or disk, and please report it",
            )),
        }
    }
}
