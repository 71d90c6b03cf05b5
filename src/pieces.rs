//! The executor of a plan of pieces: a very unbalanced product computed
//! piece by piece of the longer operand, so that its cost grows linearly
//! with that operand rather than with a transform over the whole product.
//!
//! Piece `i` covers limbs `i * piece ..` of the long operand; its product
//! with the short operand has `piece + short` limbs, of which the low
//! `piece` are final once the overlap left by the previous piece has been
//! added, and the high `short` become the overlap for the next one. The
//! transform tables are built once; small transforms run one piece per
//! thread, large ones one piece at a time on all threads.

use crate::carry::{self, U192};
use crate::engine::{read_all, read_into, scratch_path, transform_passes, Product, Timer};
use crate::fourstep::FourStep;
use crate::plan::{Algorithm, Plan};
use crate::radix::Radix;
use crate::schoolbook;
use crate::scratch::FileStore;
use crate::storage::{LimbSource, RamStore, Store, WordBuf};
use crate::Result;
use rayon::prelude::*;
use std::path::Path;

/// Where the product's final limbs go as the pieces complete.
enum Sink {
    Ram(WordBuf),
    Disk(FileStore),
}

impl Sink {
    fn put(&mut self, first: usize, limbs: &[u64]) -> Result<()> {
        match self {
            Sink::Ram(w) => {
                w[first..first + limbs.len()].copy_from_slice(limbs);
                Ok(())
            }
            Sink::Disk(f) => f.write(first, limbs),
        }
    }
}

/// One worker's buffers: the piece's limbs, its product, and the transform
/// stores (reused from piece to piece: fresh memory is slow to touch).
struct Worker {
    limbs: Vec<u64>,
    product: Vec<u64>,
    stores: Option<(Vec<RamStore>, RamStore)>,
}

impl Worker {
    fn new(piece: usize, short: usize, fs: Option<&FourStep>) -> Self {
        Worker {
            limbs: vec![0; piece],
            product: vec![0; piece + short],
            stores: fs.map(|fs| {
                let n = fs.shape().len();
                (
                    (0..fs.prime_count()).map(|_| RamStore::zeroed(n)).collect(),
                    RamStore::zeroed(n),
                )
            }),
        }
    }

    /// Computes the product of limbs `first..first + len` of `long` with
    /// `short` into `self.product[..len + short.len()]`.
    fn run<L: LimbSource + ?Sized>(
        &mut self,
        fs: Option<&FourStep>,
        radix: Radix,
        long: &L,
        (first, len): (usize, usize),
        short: &[u64],
    ) -> Result<()> {
        let a = &mut self.limbs[..len];
        read_into(long, first, a);
        let count = len + short.len() - 1;
        let out = &mut self.product[..len + short.len()];
        match (fs, &self.stores) {
            (Some(fs), Some((stores, spare))) => {
                let a: &[u64] = a;
                transform_passes(
                    fs,
                    (len, short.len(), false),
                    a,
                    short,
                    stores,
                    Some(spare),
                    &mut Timer::default(),
                )?;
                let refs: Vec<&RamStore> = stores.iter().collect();
                let failure = std::sync::Mutex::new(None);
                carry::propagate(
                    count,
                    |f, dst: &mut [U192]| {
                        let mut tmp = Default::default();
                        if let Err(e) = fs.coefficients(&refs, f, dst, &mut tmp) {
                            *failure.lock().unwrap() = Some(e);
                        }
                    },
                    radix,
                    out,
                );
                if let Some(e) = failure.into_inner().unwrap() {
                    return Err(e);
                }
            }
            _ => {
                let coeffs = schoolbook::convolution(a, short);
                carry::propagate(
                    count,
                    |f, dst: &mut [U192]| dst.copy_from_slice(&coeffs[f..f + dst.len()]),
                    radix,
                    out,
                );
            }
        }
        Ok(())
    }
}

/// Adds `src` into `dst` in `radix`, the carry running through all of
/// `dst`; returns the carry out of its top.
fn add_into(dst: &mut [u64], src: &[u64], radix: Radix) -> u64 {
    let max = radix.max_limb();
    let mut carry = 0u64;
    for (i, d) in dst.iter_mut().enumerate() {
        let s = src.get(i).copied().unwrap_or(0);
        if i >= src.len() && carry == 0 {
            break;
        }
        // Limbs are at most `max`, so `d + s + carry` fits in u128 and the
        // new carry is 0 or 1.
        let sum = *d as u128 + s as u128 + carry as u128;
        let base = max as u128 + 1;
        if sum >= base {
            *d = (sum - base) as u64;
            carry = 1;
        } else {
            *d = sum as u64;
            carry = 0;
        }
    }
    carry
}

/// Carries out a plan of pieces with `long` the longer operand; the product
/// goes to RAM or, when the plan says so, to a scratch file in `dir`.
pub fn product<L, S>(plan: &Plan, long: &L, short: &S, dir: &Path) -> Result<Product>
where
    L: LimbSource + ?Sized,
    S: LimbSource + ?Sized,
{
    let Algorithm::Pieces {
        piece,
        count,
        shape,
        batch,
        product_on_disk,
    } = plan.algorithm
    else {
        unreachable!("called with a plan of pieces only")
    };
    let (ll, ls) = (
        plan.a_limbs.max(plan.b_limbs),
        plan.a_limbs.min(plan.b_limbs),
    );
    let total = ll + ls;
    let short = read_all(short, ls);
    let fs = shape.map(|s| FourStep::new(s, plan.prime_set, plan.radix));
    let mut sink = if product_on_disk {
        Sink::Disk(FileStore::create(
            &scratch_path(dir, "product"),
            total,
            crate::packing::WordWidth::Full,
        )?)
    } else {
        Sink::Ram(WordBuf::zeroed(total))
    };
    let mut workers: Vec<Worker> = (0..batch)
        .map(|_| Worker::new(piece, ls, fs.as_ref()))
        .collect();
    let mut overlap = vec![0u64; ls];
    let mut next = 0;
    crate::progress::METER.add_units(count as u64, 0);
    while next < count {
        let here = batch.min(count - next);
        let span = |i: usize| {
            let first = (next + i) * piece;
            (first, piece.min(ll - first))
        };
        let run =
            |(i, w): (usize, &mut Worker)| w.run(fs.as_ref(), plan.radix, long, span(i), &short);
        if here == 1 {
            run((0, &mut workers[0]))?;
        } else {
            workers[..here]
                .par_iter_mut()
                .enumerate()
                .try_for_each(run)?;
        }
        // In order: add the overlap, emit the final low limbs, keep the top.
        for (i, w) in workers[..here].iter_mut().enumerate() {
            let (first, len) = span(i);
            let prod = &mut w.product[..len + ls];
            let carry = add_into(prod, &overlap, plan.radix);
            debug_assert_eq!(carry, 0, "a partial sum never outgrows its limbs");
            if first + len == ll {
                sink.put(first, prod)?;
            } else {
                sink.put(first, &prod[..len])?;
                overlap.copy_from_slice(&prod[len..]);
            }
        }
        next += here;
        crate::progress::METER.advance(here as u64);
    }
    Ok(match sink {
        Sink::Ram(w) => Product::Ram(w),
        Sink::Disk(store) => {
            // The top limb may be zero; the last piece's limbs tell.
            let (first, len) = (((count - 1) * piece), ll - (count - 1) * piece);
            let last = &workers[(count - 1) % batch.max(1)].product[..len + ls];
            let significant = last.iter().rposition(|&x| x != 0).map_or(0, |i| i + 1);
            Product::Disk {
                store: Box::new(store),
                len: first + significant,
                discarding: Default::default(),
            }
        }
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn add_into_carries_through_maximal_limbs() {
        let nine = crate::radix::DEC_BASE - 1;
        let mut d = vec![nine, nine, 5];
        assert_eq!(add_into(&mut d, &[1], Radix::Decimal), 0);
        assert_eq!(d, vec![0, 0, 6]);
        let mut b = vec![u64::MAX, u64::MAX];
        assert_eq!(add_into(&mut b, &[1], Radix::Binary), 1);
        assert_eq!(b, vec![0, 0]);
        let mut e = vec![3, 4];
        assert_eq!(add_into(&mut e, &[], Radix::Binary), 0);
        assert_eq!(e, vec![3, 4]);
    }
}
