//! The out-of-core executor, checkpointed: the four-step passes over
//! scratch stores, each block journaled with the BLAKE3 of what it wrote,
//! so that an interrupted run resumes where it stopped.
//!
//! Every pass writes somewhere other than where it reads, so a block cut
//! short by a crash is simply done again from inputs that are still intact:
//!
//! | step | reads | writes |
//! |---|---|---|
//! | columns of A (one part per prime) | operand A | `a0`, `a1`, ... (one per prime) |
//! | columns of B, prime k | operand B | `s` |
//! | rows and pointwise product, prime k | `ak`, `s` | `p` |
//! | inverse columns, prime k | `p` | `ak` |
//! | CRT and carry, window by window | `a0`, `a1`, ... | `s` (the limbs) |
//!
//! The primes are done one after another (a "chain" per prime), so `s` and
//! `p` are reused. On resume every block the remaining work still reads is
//! hashed again and compared with its record; a block that does not match
//! is dropped, and so is everything computed from it, back to data that can
//! be recomputed from the operands.

use crate::carry::{self, U192};
use crate::engine::{Product, Timer};
use crate::fourstep::{BlockLog, FourStep, Shape};
use crate::packing::WordWidth;
use crate::plan::Plan;
use crate::progress::METER;
use crate::state::{Journal, Record};
use crate::storage::{words_as_bytes, Discarding, LimbSource, Store};
use crate::Result;
use std::collections::HashMap;
use std::sync::Mutex;

/// Step numbers in journal records.
pub mod step {
    /// Columns of A; the record's part is the prime.
    pub const COLUMNS_A: u16 = 0;
    /// Columns of B for prime `k`.
    pub const fn columns_b(k: usize) -> u16 {
        1 + 3 * k as u16
    }
    /// Rows and pointwise product for prime `k`.
    pub const fn rows(k: usize) -> u16 {
        2 + 3 * k as u16
    }
    /// Inverse columns for prime `k`.
    pub const fn inverse(k: usize) -> u16 {
        3 + 3 * k as u16
    }
    /// CRT and carry windows: above the steps of any prime set's primes.
    pub const CARRY: u16 = 100;

    /// True for the row steps, whose blocks are rows rather than column
    /// blocks.
    pub const fn is_rows(step: u16) -> bool {
        step != CARRY && step != COLUMNS_A && step % 3 == 2
    }
}

/// How often the scratch stores and the journal are made durable (fsync).
/// A process that is killed loses nothing it wrote (the page cache keeps
/// it); a machine that crashes loses at most the work since the last sync,
/// since anything later that did not reach the disk fails its hash on
/// resume and is recomputed. Syncing after every pass instead would write
/// scratch to disk that the page cache would otherwise hold for the whole
/// run, which costs more than the work it protects on runs that fit there.
pub const SYNC_INTERVAL: std::time::Duration = std::time::Duration::from_secs(60);

/// Where an out-of-core run keeps its stores.
pub trait Space: Sync {
    /// Opens store `name` of `len` words of `width`, reusing one left by
    /// an earlier run of the same state; says whether it was reused.
    fn store(&self, name: &str, len: usize, width: WordWidth) -> Result<(Box<dyn Store>, bool)>;
}

/// Journaled blocks, by (step, part): block index to hash.
type Done = HashMap<(u16, u16), HashMap<u64, Record>>;

/// One (step, part)'s view of the journal for the passes.
struct StepLog<'a> {
    step: u16,
    part: u16,
    done: Vec<bool>,
    journal: Option<&'a Journal>,
    /// Records appended in this run, for the caller's in-memory copy.
    new: &'a Mutex<Vec<Record>>,
}

// An out-of-core run is always the top-level job (nothing nests one), so
// its blocks go straight to the progress meter.
impl BlockLog for StepLog<'_> {
    fn done(&self, block: usize) -> bool {
        self.done.get(block).copied().unwrap_or(false)
    }

    fn started(&self, blocks: usize, already: usize) {
        METER.add_units(blocks as u64, already as u64);
    }

    fn wants_hash(&self) -> bool {
        self.journal.is_some()
    }

    fn finished(&self, block: usize, hash: Option<blake3::Hash>) -> Result<()> {
        METER.advance(1);
        if let (Some(j), Some(h)) = (self.journal, hash) {
            let r = Record {
                step: self.step,
                part: self.part,
                block: block as u64,
                hash: *h.as_bytes(),
                carry: [0; 3],
            };
            j.append(&r)?;
            self.new.lock().unwrap().push(r);
        }
        Ok(())
    }
}

/// Where a resumed run stands, for the message that says so.
#[derive(Clone, Debug, Default)]
pub struct Resumed {
    /// Blocks whose records were kept (verified).
    pub kept_blocks: usize,
    /// Blocks whose records were dropped (hash mismatch or depending on a
    /// dropped block).
    pub dropped_blocks: usize,
    /// What was found wrong, one line each.
    pub problems: Vec<String>,
}

/// The out-of-core run of `plan`.
pub struct OutOfCore<'a> {
    plan: &'a Plan,
    fs: FourStep,
    window: usize,
    journal: Option<&'a Journal>,
    done: Done,
    new: Mutex<Vec<Record>>,
    last_sync: Mutex<std::time::Instant>,
    /// A residue store per prime.
    a: Vec<Box<dyn Store>>,
    s: Box<dyn Store>,
    p: Box<dyn Store>,
}

/// Names of the passes, as the plan lists them.
fn pass_names(k: usize) -> [String; 3] {
    [
        format!("columns of B, prime {k}"),
        format!("rows and pointwise product, prime {k}"),
        format!("inverse columns, prime {k}"),
    ]
}

impl<'a> OutOfCore<'a> {
    /// Opens the stores in `space` and takes `records` (from the journal of
    /// an earlier run, empty for a fresh one) as the blocks done, after
    /// checking every one the remaining work depends on.
    pub fn open(
        plan: &'a Plan,
        (shape, window): (Shape, usize),
        space: &dyn Space,
        journal: Option<&'a Journal>,
        records: &[Record],
    ) -> Result<(Self, Resumed)> {
        let n = shape.len();
        let mut reused = true;
        let mut open = |name: &str, len: usize, width| -> Result<Box<dyn Store>> {
            let (s, was) = space.store(name, len, width)?;
            reused &= was;
            Ok(s)
        };
        let residues = crate::plan::residue_width(plan.prime_set, shape);
        let a = (0..plan.prime_set.count())
            .map(|k| open(&format!("a{k}"), n, residues))
            .collect::<Result<Vec<_>>>()?;
        // `s` ends up holding the product's limbs: full words.
        let s = open("s", n.max(plan.product_limbs), WordWidth::Full)?;
        let p = open("p", n, residues)?;
        let mut done: Done = HashMap::new();
        for r in records {
            done.entry((r.step, r.part))
                .or_default()
                .insert(r.block, *r);
        }
        let mut run = OutOfCore {
            plan,
            fs: FourStep::new(shape, plan.prime_set, plan.radix),
            window,
            journal,
            done,
            new: Mutex::new(Vec::new()),
            last_sync: Mutex::new(std::time::Instant::now()),
            a,
            s,
            p,
        };
        let mut resumed = Resumed::default();
        if !records.is_empty() {
            if !reused && !run.complete(step::CARRY, 0) {
                resumed
                    .problems
                    .push("scratch files were missing or of the wrong size".into());
            }
            run.verify(&mut resumed)?;
            if let Some(j) = journal {
                let mut kept: Vec<Record> = run
                    .done
                    .values()
                    .flat_map(|m| m.values().copied())
                    .collect();
                kept.sort_by_key(|r| (r.step, r.part, r.block));
                resumed.kept_blocks = kept.len();
                resumed.dropped_blocks = records.len() - kept.len();
                if resumed.dropped_blocks > 0 {
                    j.rewrite(&kept)?;
                }
            }
        }
        Ok((run, resumed))
    }

    fn blocks_of(&self, step: u16) -> usize {
        if step == step::CARRY {
            self.coefficient_count().div_ceil(self.window)
        } else if step::is_rows(step) {
            self.fs.shape().rows
        } else {
            self.fs.column_blocks()
        }
    }

    /// How many primes (chains) the run has.
    fn primes(&self) -> usize {
        self.a.len()
    }

    fn coefficient_count(&self) -> usize {
        self.plan.a_limbs + self.plan.b_limbs - 1
    }

    fn count(&self, step: u16, part: u16) -> usize {
        self.done.get(&(step, part)).map_or(0, |m| m.len())
    }

    fn complete(&self, step: u16, part: u16) -> bool {
        self.count(step, part) == self.blocks_of(step)
    }

    fn chain_done(&self, k: usize) -> bool {
        self.complete(step::inverse(k), 0)
    }

    fn drop_step(&mut self, step: u16, part: u16) {
        self.done.remove(&(step, part));
    }

    /// Drops every record of prime `k`'s chain, its columns of A included.
    fn restart_chain(&mut self, k: usize) {
        self.drop_step(step::COLUMNS_A, k as u16);
        for s in [step::columns_b(k), step::rows(k), step::inverse(k)] {
            self.drop_step(s, 0);
        }
    }

    /// Checks the recorded blocks of `(step, part)` held in `store` and
    /// drops those that do not match; returns how many were dropped.
    fn verify_step(&mut self, step: u16, part: u16, store: StoreRef) -> Result<usize> {
        let Some(blocks) = self.done.get(&(step, part)) else {
            return Ok(0);
        };
        let mut bad = Vec::new();
        for (&b, r) in blocks {
            let st: &dyn Store = match store {
                StoreRef::A(k) => &*self.a[k],
                StoreRef::S => &*self.s,
                StoreRef::P => &*self.p,
            };
            let h = if step == step::CARRY {
                let first = b as usize * self.window;
                let w = self.window.min(self.coefficient_count() - first);
                let mut v = vec![0u64; w];
                st.read(first, &mut v)?;
                blake3::hash(words_as_bytes(&v))
            } else if step::is_rows(step) {
                self.fs.row_hash(st, b as usize)?
            } else {
                self.fs.column_block_hash(st, b as usize)?
            };
            if h.as_bytes() != &r.hash {
                bad.push(b);
            }
        }
        let m = self.done.get_mut(&(step, part)).unwrap();
        for b in &bad {
            m.remove(b);
        }
        Ok(bad.len())
    }

    /// The resume rules: keep what verifies and what it was computed from,
    /// drop the rest back to data that can be recomputed from the operands.
    fn verify(&mut self, out: &mut Resumed) -> Result<()> {
        let carry_complete = self.complete(step::CARRY, 0);
        let note = |out: &mut Resumed, what: String| out.problems.push(what);
        if !carry_complete {
            // The residues of finished chains feed the carry pass.
            for k in 0..self.primes() {
                if self.chain_done(k) {
                    let bad = self.verify_step(step::inverse(k), 0, StoreRef::A(k))?;
                    if bad > 0 {
                        note(out, format!("{bad} block(s) of the residues for prime {k} did not match their records; that prime is recomputed"));
                        self.restart_chain(k);
                        self.drop_step(step::CARRY, 0);
                        // `s` and `p` will be overwritten by that chain.
                        for j in 0..self.primes() {
                            if !self.chain_done(j) && j != k {
                                if self.count(step::inverse(j), 0) > 0 {
                                    self.restart_chain(j);
                                } else {
                                    self.drop_step(step::columns_b(j), 0);
                                    self.drop_step(step::rows(j), 0);
                                }
                            }
                        }
                    }
                }
            }
            // The chain in progress, if any.
            if let Some(k) = (0..self.primes()).find(|&k| !self.chain_done(k)) {
                let (b, r, i) = (step::columns_b(k), step::rows(k), step::inverse(k));
                if self.count(i, 0) > 0 {
                    let bad = self.verify_step(i, 0, StoreRef::A(k))?;
                    if bad > 0 {
                        note(out, format!("{bad} inverse column block(s) of prime {k} did not match; they are redone"));
                    }
                    if self.verify_step(r, 0, StoreRef::P)? > 0 {
                        note(out, format!("rows of prime {k} did not match after its inverse pass began; prime {k} is recomputed"));
                        self.restart_chain(k);
                    }
                } else {
                    let bad_rows = self.verify_step(r, 0, StoreRef::P)?;
                    if bad_rows > 0 {
                        note(
                            out,
                            format!(
                                "{bad_rows} row(s) of prime {k} did not match; they are redone"
                            ),
                        );
                    }
                    let bad_b = if self.plan.square {
                        0
                    } else {
                        self.verify_step(b, 0, StoreRef::S)?
                    };
                    let bad_a = self.verify_step(step::COLUMNS_A, k as u16, StoreRef::A(k))?;
                    if bad_a + bad_b > 0 {
                        note(out, format!("{} column block(s) of prime {k} did not match; they are redone from the operands, and the rows after them", bad_a + bad_b));
                        self.drop_step(r, 0);
                    }
                }
                // Later chains have only their columns of A so far.
                for j in k + 1..self.primes() {
                    let bad = self.verify_step(step::COLUMNS_A, j as u16, StoreRef::A(j))?;
                    if bad > 0 {
                        note(out, format!("{bad} column block(s) of A for prime {j} did not match; they are redone"));
                    }
                }
            }
        }
        // Carry windows: a prefix, each with the carry into the next.
        if self.count(step::CARRY, 0) > 0 {
            let bad = self.verify_step(step::CARRY, 0, StoreRef::S)?;
            let m = self.done.entry((step::CARRY, 0)).or_default();
            let prefix = (0..).take_while(|w| m.contains_key(w)).count() as u64;
            let dropped = m.keys().filter(|&&w| w >= prefix).count();
            m.retain(|&w, _| w < prefix);
            if bad > 0 || dropped > 0 {
                note(out, format!("{} carry window(s) did not match or followed one that did not; the carry pass continues from window {prefix}", bad + dropped));
            }
        }
        Ok(())
    }

    /// The pass to resume at and how far it got, as "name: done of total".
    pub fn position(&self) -> String {
        let name_count = |name: String, step: u16, part: u16| {
            let i = self
                .plan
                .passes
                .iter()
                .position(|p| p.name == name)
                .map_or(0, |i| i + 1);
            format!(
                "pass {i} of {} ({name}): {} of {} blocks done",
                self.plan.passes.len(),
                self.count(step, part),
                self.blocks_of(step)
            )
        };
        if self.complete(step::CARRY, 0) {
            return format!(
                "pass {n} of {n} (write the product): from its start",
                n = self.plan.passes.len()
            );
        }
        for k in 0..self.primes() {
            if !self.complete(step::COLUMNS_A, k as u16) && !self.chain_done(k) {
                return name_count(
                    crate::plan::columns_of_a_name(self.primes()),
                    step::COLUMNS_A,
                    k as u16,
                );
            }
        }
        for k in 0..self.primes() {
            if self.chain_done(k) {
                continue;
            }
            let [b, r, i] = pass_names(k);
            if !self.plan.square && !self.complete(step::columns_b(k), 0) {
                return name_count(b, step::columns_b(k), 0);
            }
            if !self.complete(step::rows(k), 0) {
                return name_count(r, step::rows(k), 0);
            }
            return name_count(i, step::inverse(k), 0);
        }
        if !self.complete(step::CARRY, 0) {
            return name_count("CRT and carry".into(), step::CARRY, 0);
        }
        format!(
            "pass {n} of {n} (write the product): from its start",
            n = self.plan.passes.len()
        )
    }

    fn log(&self, step: u16, part: u16) -> StepLog<'_> {
        let total = self.blocks_of(step);
        let mut done = vec![false; total];
        if let Some(m) = self.done.get(&(step, part)) {
            for &b in m.keys() {
                done[b as usize] = true;
            }
        }
        StepLog {
            step,
            part,
            done,
            journal: self.journal,
            new: &self.new,
        }
    }

    /// Folds this run's new records into the done set.
    fn absorb(&mut self) {
        for r in self.new.get_mut().unwrap().drain(..) {
            self.done
                .entry((r.step, r.part))
                .or_default()
                .insert(r.block, r);
        }
    }

    /// Makes `stores` and the journal durable: the end of a checkpoint.
    /// Makes the stores and the journal durable when [`SYNC_INTERVAL`] has
    /// passed since the last time (or always, with `now`).
    fn checkpoint(&self, now: bool) -> Result<()> {
        // A run without a journal keeps no state: nothing to make durable.
        let Some(j) = self.journal else {
            return Ok(());
        };
        let mut last = self.last_sync.lock().unwrap();
        if !now && last.elapsed() < SYNC_INTERVAL {
            return Ok(());
        }
        for s in self.a.iter().chain([&self.s, &self.p]) {
            s.sync()?;
        }
        j.sync()?;
        *last = std::time::Instant::now();
        Ok(())
    }

    /// Runs the remaining work and returns the product's limbs in `s`. When
    /// the run stops early (a signal, an error), what it wrote is synced
    /// first, as far as the disk allows, so that a rerun finds it.
    pub fn run<A, B>(mut self, a: &A, b: &B, timer: &mut Timer) -> Result<Product>
    where
        A: LimbSource + ?Sized,
        B: LimbSource + ?Sized,
    {
        match self.work(a, b, timer) {
            Ok(len) => {
                // The journal no longer names them: the residue and row
                // stores are truncated while the product is written.
                let mut given_back = self.a;
                given_back.push(self.p);
                Ok(Product::Disk {
                    store: self.s,
                    len,
                    discarding: Discarding::start(given_back)?,
                })
            }
            Err(e) => {
                // The error is what matters; a failing sync here only means
                // the rerun recomputes more.
                let _ = self.checkpoint(true);
                Err(e)
            }
        }
    }

    /// The passes still to do; returns the product's significant limbs.
    fn work<A, B>(&mut self, a: &A, b: &B, timer: &mut Timer) -> Result<usize>
    where
        A: LimbSource + ?Sized,
        B: LimbSource + ?Sized,
    {
        let (la, lb) = (self.plan.a_limbs, self.plan.b_limbs);
        let count = self.coefficient_count();
        // Once every carry window is journaled, only `s` is still needed.
        if !self.complete(step::CARRY, 0) {
            self.transforms(a, b, (la, lb), timer)?;
            let a_refs: Vec<&dyn Store> = self.a.iter().map(|s| &**s).collect();
            self.fs.check_zero_tail(&a_refs, count)?;
        }
        let len = timer.pass("CRT and carry", || self.carry_pass(count))?;
        self.release_transforms()?;
        Ok(len)
    }

    /// The column, row and inverse passes still to do.
    fn transforms<A, B>(
        &mut self,
        a: &A,
        b: &B,
        (la, lb): (usize, usize),
        timer: &mut Timer,
    ) -> Result<()>
    where
        A: LimbSource + ?Sized,
        B: LimbSource + ?Sized,
    {
        // Columns of A for every prime whose chain needs them, in one read.
        let parts: Vec<usize> = (0..self.primes())
            .filter(|&k| !self.chain_done(k) && !self.complete(step::COLUMNS_A, k as u16))
            .collect();
        if !parts.is_empty() {
            let logs: Vec<StepLog> = parts
                .iter()
                .map(|&k| self.log(step::COLUMNS_A, k as u16))
                .collect();
            let log_refs: Vec<&dyn BlockLog> = logs.iter().map(|l| l as &dyn BlockLog).collect();
            let stores: Vec<&dyn Store> = parts.iter().map(|&k| &*self.a[k]).collect();
            timer.pass(crate::plan::columns_of_a_name(self.primes()), || {
                self.fs.forward_columns(a, la, &parts, &stores, &log_refs)?;
                self.checkpoint(false)
            })?;
            drop(logs);
            self.absorb();
        }
        for k in 0..self.primes() {
            if self.chain_done(k) {
                continue;
            }
            let [nb, nr, ni] = pass_names(k);
            let b_store: Option<&dyn Store> = (!self.plan.square).then_some(&*self.s);
            if let Some(s) = b_store {
                let log = self.log(step::columns_b(k), 0);
                timer.pass(nb, || {
                    self.fs.forward_columns(b, lb, &[k], &[s], &[&log])?;
                    self.checkpoint(false)
                })?;
            }
            let log = self.log(step::rows(k), 0);
            timer.pass(nr, || {
                self.fs.rows(k, &*self.a[k], b_store, &*self.p, &log)?;
                self.checkpoint(false)
            })?;
            let log = self.log(step::inverse(k), 0);
            timer.pass(ni, || {
                self.fs.inverse_columns(k, &*self.p, &*self.a[k], &log)?;
                self.checkpoint(false)
            })?;
            self.absorb();
        }
        Ok(())
    }

    /// Once the limbs are in `s`, the residue and row stores are no longer
    /// read: their records are dropped from the journal, and then
    /// ([`OutOfCore::run`]) the files are truncated, so that their pages
    /// are not written back to the disk while the product is written, and
    /// their space is free for it. A resume that then finds `s` damaged
    /// starts over.
    fn release_transforms(&mut self) -> Result<()> {
        if let Some(j) = self.journal {
            self.absorb();
            self.done.retain(|&(step, _), _| step == step::CARRY);
            let mut kept: Vec<Record> = self
                .done
                .values()
                .flat_map(|m| m.values().copied())
                .collect();
            kept.sort_by_key(|r| r.block);
            j.rewrite(&kept)?;
        }
        Ok(())
    }

    /// The carry pass, window by window from the first not yet journaled,
    /// each window's carry recorded with it.
    fn carry_pass(&self, count: usize) -> Result<usize> {
        let window = self.window;
        let windows = count.div_ceil(window);
        let done = self.done.get(&(step::CARRY, 0));
        let start = done.map_or(0, |m| m.len());
        let mut carry = match start {
            0 => [0u64; 3],
            w => done.unwrap()[&(w as u64 - 1)].carry,
        };
        let a_refs: Vec<&dyn Store> = self.a.iter().map(|s| &**s).collect();
        let failure = Mutex::new(None);
        let mut digits = vec![0u64; window];
        METER.add_units(windows as u64, start as u64);
        for w in start..windows {
            crate::interrupt::check()?;
            let first = w * window;
            let len = window.min(count - first);
            carry = carry::propagate_block(
                |f, dst: &mut [U192]| {
                    let mut tmp = Default::default();
                    if let Err(e) = self.fs.coefficients(&a_refs, first + f, dst, &mut tmp) {
                        *failure.lock().unwrap() = Some(e);
                    }
                },
                self.plan.radix,
                carry,
                &mut digits[..len],
            );
            if let Some(e) = failure.lock().unwrap().take() {
                return Err(e);
            }
            self.s.write(first, &digits[..len])?;
            if let Some(j) = self.journal {
                let r = Record {
                    step: step::CARRY,
                    part: 0,
                    block: w as u64,
                    hash: *blake3::hash(words_as_bytes(&digits[..len])).as_bytes(),
                    carry,
                };
                j.append(&r)?;
                self.new.lock().unwrap().push(r);
            }
            METER.advance(1);
        }
        let top = carry::carry_limbs(carry, self.plan.radix);
        self.s.write(count, &top)?;
        self.checkpoint(false)?;
        Ok(count + top.len())
    }
}

#[derive(Clone, Copy)]
enum StoreRef {
    A(usize),
    S,
    P,
}
