//! A product whose limbs are made from the residues of its convolution
//! wave by wave, as the text writer asks for them, so that the disk writes
//! the product while the cores still run the CRT and the carry.
//!
//! The writer goes from the least significant limb up (the file's end
//! first), since that is the direction the carry runs. It must know the
//! text's length before the first limb is final: [`StreamedProduct::new`]
//! lays the text out from the top 64 coefficients alone. The carry into
//! them from everything below is a signed number of magnitude at most
//! 2^128 (each coefficient is a 192-bit two's complement value, so below
//! 2^191 in magnitude, and the carry out of `sum c_k base^k` over the
//! lower positions is at most `2^191 / (base - 1) + 1 <= 2^128` for both
//! radices). The top limbs are computed with the carry in at both ends of
//! that range; when both give the same limb count and the same digits in
//! the top limb, every carry in between does too (the text's length grows
//! with the value), and the layout is certain. Otherwise (a product whose
//! top limbs sit next to a power of the text's radix, such as radix powers
//! and all-nines operands make) the product is carried whole first and
//! written as any other. The finished product is checked against the
//! layout all the same, and the writer checks the top limb's digits.

use std::io;
use std::sync::Mutex;
use std::time::Instant;

use crate::carry::{self, U192};
use crate::format::text::TextKind;
use crate::format::{digits_of_limb, LimbFeed};
use crate::fourstep::FourStep;
use crate::radix::Radix;
use crate::storage::{RamStore, Store, WordBuf};
use crate::{Error, Result};

/// Limbs made per wave: a few of the writer's blocks, and enough chunks
/// for every thread of the carry pass.
const WAVE_LIMBS: usize = 1 << 17;

/// Coefficients the layout is read from.
const TOP_COEFFICIENTS: usize = 64;

/// `2^128` and `-2^128` in 192-bit two's complement: the bounds of the
/// carry into any position (module notes).
const CARRY_BOUND: [U192; 2] = [[0, 0, u64::MAX], [0, 0, 1]];

/// The limbs made so far.
struct Made {
    /// Limbs below this are final.
    next: usize,
    /// The carry into limb `next`.
    carry: U192,
    /// The final carry has been written above the coefficients.
    done: bool,
    /// Seconds spent making limbs.
    seconds: f64,
    /// A wave's limbs, reused.
    wave: Vec<u64>,
}

/// A product in RAM as residues, carried into limbs on demand.
pub struct StreamedProduct {
    fs: FourStep,
    residues: Vec<WordBuf>,
    count: usize,
    /// The product's limbs at most: `count + 1`.
    limb_count: usize,
    radix: Radix,
    limbs: RamStore,
    layout: Option<(usize, usize)>,
    made: Mutex<Made>,
    /// Why making limbs failed, for the caller of the writer that asked.
    failure: Mutex<Option<Error>>,
}

impl StreamedProduct {
    /// The product of `count` coefficients whose residues (one buffer per
    /// prime of `fs`) the transforms left, to be carried into `limbs`
    /// (at least `count + 1` words, whatever they hold), and laid out as
    /// `kind` text if its length is certain from its top coefficients.
    pub(crate) fn new(
        fs: FourStep,
        residues: Vec<WordBuf>,
        count: usize,
        radix: Radix,
        limbs: RamStore,
        kind: TextKind,
    ) -> Result<Self> {
        assert!(limbs.len() > count && residues.iter().all(|r| r.len() >= count));
        let mut p = StreamedProduct {
            fs,
            residues,
            count,
            limb_count: count + 1,
            radix,
            limbs,
            layout: None,
            made: Mutex::new(Made {
                next: 0,
                carry: [0; 3],
                done: false,
                seconds: 0.0,
                wave: Vec::new(),
            }),
            failure: Mutex::new(None),
        };
        p.layout = p.lay_out(kind)?;
        Ok(p)
    }

    /// The significant limbs and the top limb's digits, when the top
    /// coefficients settle them (module notes).
    fn lay_out(&self, kind: TextKind) -> Result<Option<(usize, usize)>> {
        if self.count < 2 * TOP_COEFFICIENTS {
            return Ok(None);
        }
        let first = self.count - TOP_COEFFICIENTS;
        let mut coeffs = vec![[0u64; 3]; TOP_COEFFICIENTS];
        self.combine(first, &mut coeffs)?;
        let mut found = None;
        for carry_in in CARRY_BOUND {
            let mut top = vec![0u64; TOP_COEFFICIENTS];
            let carry = carry::propagate_block(
                |k, dst: &mut [U192]| dst.copy_from_slice(&coeffs[k..k + dst.len()]),
                self.radix,
                carry_in,
                &mut top,
            );
            if carry[2] >> 63 == 1 {
                return Ok(None);
            }
            top.extend(carry::carry_limbs(carry, self.radix));
            let Some(n) = top.iter().rposition(|&x| x != 0) else {
                return Ok(None);
            };
            let Some(digits) = digits_of_limb(kind, top[n]) else {
                return Ok(None);
            };
            let layout = (first + n + 1, digits);
            match found {
                None => found = Some(layout),
                Some(f) if f != layout => return Ok(None),
                Some(_) => {}
            }
        }
        Ok(found)
    }

    /// Significant limbs and the top limb's digits, when known before the
    /// limbs are made.
    pub fn layout(&self) -> Option<(usize, usize)> {
        self.layout
    }

    /// Why a [`prepare`](LimbFeed::prepare) failed, if one did: the error
    /// the writer reports is only its message.
    pub fn take_failure(&self) -> Option<Error> {
        self.failure.lock().unwrap().take()
    }

    /// Seconds spent so far running the CRT and the carry.
    pub fn carry_seconds(&self) -> f64 {
        self.made.lock().unwrap().seconds
    }

    /// The exact coefficients from `first` on, `out.len()` of them.
    fn combine(&self, first: usize, out: &mut [U192]) -> Result<()> {
        let here: Vec<&[u64]> = self
            .residues
            .iter()
            .map(|r| &r[first..first + out.len()])
            .collect();
        self.fs.combine(&here, first, out)
    }

    /// Makes every limb below `end` final (all of them for `end` past the
    /// coefficients), a wave at a time.
    pub fn make(&self, end: usize) -> Result<()> {
        let mut m = self.made.lock().unwrap();
        let start = Instant::now();
        let target = end.min(self.count);
        while m.next < target {
            let lo = m.next;
            let hi = (lo + WAVE_LIMBS).min(self.count);
            let mut wave = std::mem::take(&mut m.wave);
            wave.resize(hi - lo, 0);
            let failure = Mutex::new(None);
            let carry = carry::propagate_block(
                |k, dst: &mut [U192]| {
                    if let Err(e) = self.combine(lo + k, dst) {
                        *failure.lock().unwrap() = Some(e);
                    }
                },
                self.radix,
                m.carry,
                &mut wave,
            );
            if let Some(e) = failure.into_inner().unwrap() {
                return Err(e);
            }
            self.limbs.write(lo, &wave)?;
            m.wave = wave;
            m.carry = carry;
            m.next = hi;
        }
        if end > self.count && !m.done {
            self.finish(m.carry)?;
            m.done = true;
        }
        m.seconds += start.elapsed().as_secs_f64();
        Ok(())
    }

    /// Writes the final carry above the coefficients and checks the
    /// product against its layout.
    fn finish(&self, carry: U192) -> Result<()> {
        if carry[2] >> 63 == 1 {
            return Err(internal("a negative carry out of the product"));
        }
        let mut top = carry::carry_limbs(carry, self.radix);
        if self.count + top.len() > self.limb_count {
            return Err(internal("the product overflows its limb count"));
        }
        // The buffer held other data: whatever the carry leaves is zeroed.
        top.resize(self.limb_count - self.count, 0);
        self.limbs.write(self.count, &top)?;
        let top_len = top.iter().rposition(|&x| x != 0).map_or(0, |i| i + 1);
        let Some((len, _)) = self.layout else {
            return Ok(());
        };
        let made = if top_len == 0 {
            let mut below = vec![0u64; TOP_COEFFICIENTS];
            let first = self.count - below.len();
            self.limbs.read(first, &mut below)?;
            below
                .iter()
                .rposition(|&x| x != 0)
                .map_or(0, |i| first + i + 1)
        } else {
            self.count + top_len
        };
        if made != len {
            return Err(internal(&format!(
                "the product has {made} limbs, not the {len} its text was laid out for"
            )));
        }
        Ok(())
    }

    /// Carries the whole product and returns its limbs (zero limbs on top
    /// included), for a product written after it is made.
    pub fn into_limbs(self) -> Result<WordBuf> {
        self.make(usize::MAX)?;
        let mut w = self.limbs.into_words();
        w.truncate(self.limb_count);
        Ok(w)
    }
}

/// An error that means a flaw in vastmul, not in its input.
fn internal(what: &str) -> Error {
    Error::verify(
        format!("internal check: {what}"),
        "this is a flaw in vastmul, not in the operands: please report it with their sizes",
    )
}

/// The limbs, as a text writer fetches them: reads below what
/// [`prepare`](LimbFeed::prepare) made final.
impl LimbFeed for StreamedProduct {
    fn read(&self, first: usize, out: &mut [u64]) -> io::Result<()> {
        self.limbs
            .read(first, out)
            .map_err(|e| io::Error::other(e.to_string()))
    }

    fn prepare(&self, end: usize) -> io::Result<()> {
        self.make(end).map_err(|e| {
            let message = e.to_string();
            *self.failure.lock().unwrap() = Some(e);
            io::Error::other(message)
        })
    }
}
