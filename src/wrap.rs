//! Products a little longer than their transform: the wrap-around
//! correction.
//!
//! A product of `L = N + T` coefficients (`0 < T <= N`) through a cyclic
//! convolution of length `N` comes out wrapped: position `k < T` holds
//! `c_k + c_(k+N)`. The coefficients that wrapped, `c_(N+j)` for `j < T`,
//! depend on the operands' top `T` digits alone: a term `d_g e_h` of
//! `c_(N+j)` has `g + h = N + j = la + lb - 1 - T + j` with `h < lb`, so
//! `g >= la - T`, and likewise `h >= lb - T`. They are computed here as
//! the top `T` coefficients of a short product of the operands' top
//! `T + 1` limbs, through the same four-step passes and primes, so every
//! prime gets them as residues with no exactness question. The extra limb
//! below makes the top `T` digits exactly those of the whole operand (a
//! balanced digit takes its carry from the limb below); the extra limb's
//! own digit differs, but it only meets the other operand's limbs in
//! coefficients below the ones kept (it would need a partner at `lb + j`,
//! past the operand). The wrapped coefficients are then subtracted from
//! the bottom `T` residues and stored above the transform's end, so the
//! residue arrays hold all `L` coefficients, exactly as a transform of `L`
//! points or more would have left them, and the CRT and the carry run
//! unchanged.
//!
//! The planner ([`crate::plan::ram_shape_for`]) takes this when `N` and
//! the short product together cost less than the next transform length
//! that covers `L`, and need no more memory: a product just past a power
//! of two then pays for little more than its length, instead of half as
//! much again.

use crate::arith::ShoupConst;
use crate::engine::{transform_passes, Timer};
use crate::fourstep::FourStep;
use crate::plan::shape_for;
use crate::storage::{LimbSource, RamStore};
use crate::{Error, Result};
use rayon::prelude::*;

/// The wrap-around correction of a product of `count` coefficients, more
/// than `fs`'s transform length: folds the wrapped coefficients of `a`
/// (`la` limbs) times `b` (`lb` limbs; `None` squares `a`) back into
/// `residues` (one per prime, at least `count` words each), which hold
/// what the inverse columns left. `a` and `b` are peeked, not read, so
/// sources that account for what they read count nothing twice.
pub(crate) fn fold_wrapped<A, B>(
    fs: &FourStep,
    (a, la): (&A, usize),
    b: Option<(&B, usize)>,
    count: usize,
    residues: &mut [&mut [u64]],
) -> Result<()>
where
    A: LimbSource + ?Sized,
    B: LimbSource + ?Sized,
{
    let n = fs.shape().len();
    assert!(count > n && count - n <= n && residues.len() == fs.prime_count());
    let t = count - n;
    let top_a = top_limbs(a, la, t);
    let top_b = b.map(|(b, lb)| top_limbs(b, lb, t));
    let (ea, eb) = (top_a.len(), top_b.as_ref().map_or(top_a.len(), Vec::len));
    // The short product's coefficients, of which the top `t` are kept.
    let short_count = ea + eb - 1;
    let short = FourStep::new(
        shape_for(short_count, fs.prime_set()),
        fs.prime_set(),
        fs.radix(),
    );
    let m = short.shape().len();
    let stores: Vec<RamStore> = (0..short.prime_count())
        .map(|_| RamStore::zeroed(m))
        .collect();
    let spare = top_b.as_ref().map(|_| RamStore::zeroed(m));
    transform_passes(
        &short,
        (ea, eb, top_b.is_none()),
        &top_a[..],
        top_b.as_deref().unwrap_or(&[]),
        &stores,
        spare.as_ref(),
        &mut Timer::default(),
    )?;
    let short_residues: Vec<_> = stores.into_iter().map(RamStore::into_words).collect();
    residues
        .par_iter_mut()
        .zip(&short_residues)
        .enumerate()
        .try_for_each(|(k, (r, s))| {
            let (Some((modulus, scale)), Some((_, short_scale))) =
                (fs.residue_scale(k), short.residue_scale(k))
            else {
                return Err(Error::verify(
                    "internal check: the wrap-around correction met the 62-bit primes",
                    "this is a flaw in vastmul, not in the operands: please report it with \
                     their sizes",
                ));
            };
            let p = modulus.p;
            // The short product's residues carry its own length as a
            // factor; the long one's carry theirs.
            let rescale = ShoupConst::new(modulus.mul(scale, modulus.inv(short_scale)), p);
            let top: Vec<u64> = (0..t)
                .map(|j| match (short_count + j).checked_sub(t) {
                    Some(i) => rescale.mul(s[i], p),
                    None => 0,
                })
                .collect();
            fold_back(r, n, &top, p);
            Ok(())
        })
}

/// The top `t + 1` limbs of `limbs` (`len` of them; all of them when fewer).
fn top_limbs<L: LimbSource + ?Sized>(limbs: &L, len: usize, t: usize) -> Vec<u64> {
    let first = len.saturating_sub(t + 1);
    let mut out = vec![0u64; len - first];
    limbs.peek_limbs(first, &mut out);
    out
}

/// Folds the wrapped coefficients back: `residues` holds a cyclic
/// convolution of `n` points in its first `n` words (any representative
/// below 2^64) and has room for `top.len()` more; `top` holds the wrapped
/// coefficients below `p`, scaled as the residues are. Afterwards the first
/// `n + top.len()` words are the product's residues, in `[0, p)` where they
/// changed.
pub fn fold_back(residues: &mut [u64], n: usize, top: &[u64], p: u64) {
    let t = top.len();
    assert!(t <= n && residues.len() >= n + t);
    let (low, high) = residues.split_at_mut(n);
    for ((r, h), &c) in low.iter_mut().zip(high.iter_mut()).zip(top) {
        *r = (reduce(*r, p) + p - c) % p;
        *h = c;
    }
}

/// `x mod p`, by subtraction for the lazily reduced values the transforms
/// leave (below `4p`).
fn reduce(x: u64, p: u64) -> u64 {
    match x {
        x if x < p => x,
        x if x < 2 * p => x - p,
        x if x < 3 * p => x - 2 * p,
        x if x < 4 * p => x - 3 * p,
        x => x % p,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn folding_back_subtracts_below_and_stores_above() {
        let p = 97;
        let mut r = vec![10, 200, 30, 40, 0, 0];
        fold_back(&mut r, 4, &[15, 96], p);
        // 10 - 15 and 200 - 96 modulo 97; the rest untouched below, the
        // wrapped coefficients above.
        assert_eq!(r, vec![92, 7, 30, 40, 15, 96]);
    }

    #[test]
    fn reduction_covers_every_lazy_range_and_beyond() {
        let p = 1_000_003;
        for x in [
            0,
            1,
            p - 1,
            p,
            2 * p - 1,
            2 * p,
            3 * p + 5,
            4 * p - 1,
            4 * p,
            u64::MAX,
        ] {
            assert_eq!(reduce(x, p), x % p, "{x}");
        }
    }

    #[test]
    fn top_limbs_keep_one_below_or_all() {
        let limbs: Vec<u64> = (10..20).collect();
        assert_eq!(top_limbs(&limbs[..], 10, 3), vec![16, 17, 18, 19]);
        assert_eq!(top_limbs(&limbs[..], 10, 9), limbs);
        assert_eq!(top_limbs(&limbs[..], 10, 20), limbs);
    }
}
