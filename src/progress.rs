//! How far a run has come: the passes report blocks as they complete, and a
//! display at the binary's edge ([`crate::display`]) reads snapshots.
//!
//! The meter is global, like the stop flag of [`crate::interrupt`]: the
//! passes report from deep inside rayon tasks, and threading a handle
//! through every kernel call would cost more than one relaxed atomic add
//! per block. Only the top-level job reports; a product nested in another
//! (the pieces of an unbalanced pair) reports through its parent.
//!
//! Rates and times left count only the work done in this process: blocks
//! that a resumed run found already done move the bars forward but not the
//! speed, so the ETA after a resume is as good as on a fresh run.

use crate::plan::Plan;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::Mutex;
use std::time::{Duration, Instant};

/// What happened, for a display to print once.
#[derive(Clone, Debug, PartialEq)]
pub enum Event {
    /// A pass completed.
    PassDone(PassDone),
    /// A message for the user (a resume, a repaired state).
    Note(String),
}

/// A completed pass.
#[derive(Clone, Debug, PartialEq)]
pub struct PassDone {
    /// Position in the plan's passes, from 1 (`None` outside the plan).
    pub index: Option<usize>,
    /// Passes in the plan.
    pub count: usize,
    /// The pass's name, as the plan gives it.
    pub name: String,
    /// Wall time in this process.
    pub seconds: f64,
    /// Bytes per second over the part of the pass done in this process,
    /// from the plan's bytes (`None` when nothing was measured).
    pub bytes_per_second: Option<f64>,
    /// Every block of it was done by an earlier, interrupted run.
    pub done_before: bool,
}

/// The pass under way.
#[derive(Clone, Debug, PartialEq)]
pub struct PassView {
    /// Position in the plan's passes, from 1 (`None` outside the plan).
    pub index: Option<usize>,
    /// Passes in the plan.
    pub count: usize,
    /// Its name.
    pub name: String,
    /// Fraction done, counting blocks done before a resume (`None` when
    /// the pass reports no blocks).
    pub fraction: Option<f64>,
    /// Bytes per second of the plan's bytes, over the work of this process.
    pub bytes_per_second: Option<f64>,
    /// Time left in this pass at that rate.
    pub eta: Option<Duration>,
    /// Time since the pass began.
    pub elapsed: Duration,
}

/// The whole run.
#[derive(Clone, Debug, PartialEq)]
pub struct OverallView {
    /// Fraction of the plan's bytes done, counting passes done before a resume.
    pub fraction: f64,
    /// Time left at the rate of this process.
    pub eta: Option<Duration>,
    /// Time since the first pass began.
    pub elapsed: Duration,
}

/// What a display shows at one instant.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct Snapshot {
    /// The pass under way, if any.
    pub pass: Option<PassView>,
    /// The run, once a plan is known and a pass began.
    pub overall: Option<OverallView>,
}

struct Current {
    index: Option<usize>,
    name: String,
    weight: u64,
    started: Instant,
}

#[derive(Default)]
struct Inner {
    /// The plan's passes and their weights (bytes read plus written).
    passes: Vec<(String, u64)>,
    /// The next plan pass expected; passes before it are finished.
    next: usize,
    /// Plan passes that run inside the pass after them: never reported.
    folded: Vec<usize>,
    first_start: Option<Instant>,
    current: Option<Current>,
    /// Weight of the plan passes finished, in this process or before.
    finished_weight: f64,
    /// Weight of the work done in this process, in finished passes.
    worked_weight: f64,
    events: Vec<Event>,
}

/// Progress of one run: passes, blocks, events.
pub struct Meter {
    inner: Mutex<Option<Inner>>,
    units_total: AtomicU64,
    units_done: AtomicU64,
    units_already: AtomicU64,
    /// Whether a display collects notes (otherwise they go to stderr).
    attached: AtomicBool,
    /// Whether notes are dropped (`--quiet`).
    silent: AtomicBool,
}

impl Default for Meter {
    fn default() -> Self {
        Meter::new()
    }
}

/// The process's meter, which the passes report to.
pub static METER: Meter = Meter::new();

impl Meter {
    /// An idle meter.
    pub const fn new() -> Self {
        Meter {
            inner: Mutex::new(None),
            units_total: AtomicU64::new(0),
            units_done: AtomicU64::new(0),
            units_already: AtomicU64::new(0),
            attached: AtomicBool::new(false),
            silent: AtomicBool::new(false),
        }
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, Option<Inner>> {
        self.inner.lock().unwrap_or_else(|e| e.into_inner())
    }

    /// Starts a run of `plan`: its passes and their bytes weigh the overall
    /// progress.
    pub fn start(&self, plan: &Plan) {
        let mut g = self.lock();
        let events = g.take().map(|i| i.events).unwrap_or_default();
        *g = Some(Inner {
            passes: plan
                .passes
                .iter()
                .map(|p| (p.name.clone(), p.read_bytes + p.write_bytes))
                .collect(),
            events,
            ..Inner::default()
        });
        self.reset_units();
    }

    fn reset_units(&self) {
        self.units_total.store(0, Ordering::Relaxed);
        self.units_done.store(0, Ordering::Relaxed);
        self.units_already.store(0, Ordering::Relaxed);
    }

    /// A pass (or a phase outside the plan, such as validating the inputs)
    /// begins. Plan passes not begun before it were done by an earlier,
    /// interrupted run.
    pub fn begin(&self, name: &str) {
        self.begin_at(name, Instant::now());
    }

    fn begin_at(&self, name: &str, now: Instant) {
        self.end_at(now);
        let mut g = self.lock();
        let inner = g.get_or_insert_with(Inner::default);
        let found = inner.passes[inner.next.min(inner.passes.len())..]
            .iter()
            .position(|(n, _)| n == name)
            .map(|i| i + inner.next);
        let weight = match found {
            Some(i) => {
                let skipped: u64 = inner.passes[inner.next..i].iter().map(|p| p.1).sum();
                inner.finished_weight += skipped as f64;
                let count = inner.passes.len();
                for j in (inner.next..i).filter(|j| !inner.folded.contains(j)) {
                    let name = inner.passes[j].0.clone();
                    inner.events.push(Event::PassDone(PassDone {
                        index: Some(j + 1),
                        count,
                        name,
                        seconds: 0.0,
                        bytes_per_second: None,
                        done_before: true,
                    }));
                }
                inner.next = i + 1;
                inner.first_start.get_or_insert(now);
                inner.passes[i].1
            }
            None => 0,
        };
        inner.current = Some(Current {
            index: found.map(|i| i + 1),
            name: name.into(),
            weight,
            started: now,
        });
        drop(g);
        self.reset_units();
    }

    /// Pass `name`, still to come, runs inside the pass after it (a
    /// streamed product's CRT and carry run inside its write): it is not
    /// reported, and its weight goes to that next pass.
    pub fn fold_into_next(&self, name: &str) {
        let mut g = self.lock();
        let Some(inner) = g.as_mut() else { return };
        let from = inner.next.min(inner.passes.len());
        if let Some(i) = inner.passes[from..].iter().position(|(n, _)| n == name) {
            let i = i + from;
            if i + 1 < inner.passes.len() {
                let weight = std::mem::take(&mut inner.passes[i].1);
                inner.passes[i + 1].1 += weight;
                inner.folded.push(i);
            }
        }
    }

    /// The pass under way failed: it ends without a report that it is done.
    pub fn abandon(&self) {
        if let Some(inner) = self.lock().as_mut() {
            inner.current = None;
        }
    }

    /// The pass under way ends.
    pub fn end(&self) {
        self.end_at(Instant::now());
    }

    fn end_at(&self, now: Instant) {
        let (total, done, already) = self.units();
        let mut g = self.lock();
        let Some(inner) = g.as_mut() else { return };
        let Some(cur) = inner.current.take() else {
            return;
        };
        let worked = match total {
            0 => 1.0,
            t => done as f64 / t as f64,
        };
        let seconds = now.duration_since(cur.started).as_secs_f64();
        if cur.index.is_some() {
            inner.finished_weight += cur.weight as f64;
            inner.worked_weight += cur.weight as f64 * worked;
        }
        inner.events.push(Event::PassDone(PassDone {
            index: cur.index,
            count: inner.passes.len(),
            name: cur.name,
            seconds,
            bytes_per_second: (cur.weight > 0 && seconds > 0.0 && worked > 0.0)
                .then(|| cur.weight as f64 * worked / seconds),
            done_before: total > 0 && already == total,
        }));
    }

    fn units(&self) -> (u64, u64, u64) {
        (
            self.units_total.load(Ordering::Relaxed),
            self.units_done.load(Ordering::Relaxed),
            self.units_already.load(Ordering::Relaxed),
        )
    }

    /// The pass under way has `total` more blocks, `already` of them done
    /// by an earlier run.
    pub fn add_units(&self, total: u64, already: u64) {
        self.units_total.fetch_add(total, Ordering::Relaxed);
        self.units_already.fetch_add(already, Ordering::Relaxed);
    }

    /// `n` blocks of the pass under way are done.
    pub fn advance(&self, n: u64) {
        self.units_done.fetch_add(n, Ordering::Relaxed);
    }

    /// A message for the user: to the display when one is attached, else
    /// straight to stderr.
    pub fn note(&self, message: String) {
        if self.silent.load(Ordering::Relaxed) {
            return;
        }
        if self.attached.load(Ordering::Relaxed) {
            let mut g = self.lock();
            g.get_or_insert_with(Inner::default)
                .events
                .push(Event::Note(message));
        } else {
            eprintln!("vastmul: {message}");
        }
    }

    /// Sends notes to the display from now on (`true`) or to stderr.
    pub fn attach(&self, attached: bool) {
        self.attached.store(attached, Ordering::Relaxed);
    }

    /// Drops notes from now on (`true`), for `--quiet`.
    pub fn silence(&self, silent: bool) {
        self.silent.store(silent, Ordering::Relaxed);
    }

    /// The events since the last call.
    pub fn take_events(&self) -> Vec<Event> {
        self.lock()
            .as_mut()
            .map(|i| std::mem::take(&mut i.events))
            .unwrap_or_default()
    }

    /// Where the run stands now.
    pub fn snapshot(&self) -> Snapshot {
        self.snapshot_at(Instant::now())
    }

    fn snapshot_at(&self, now: Instant) -> Snapshot {
        let (total, done, already) = self.units();
        let g = self.lock();
        let Some(inner) = g.as_ref() else {
            return Snapshot::default();
        };
        let Some(cur) = &inner.current else {
            return Snapshot::default();
        };
        let elapsed = now.duration_since(cur.started);
        let secs = elapsed.as_secs_f64();
        let (fraction, worked) = match total {
            0 => (None, 0.0),
            t => (
                Some(((done + already) as f64 / t as f64).min(1.0)),
                done as f64 / t as f64,
            ),
        };
        let rate = (secs > 0.0 && done > 0).then(|| done as f64 / secs);
        let pass = PassView {
            index: cur.index,
            count: inner.passes.len(),
            name: cur.name.clone(),
            fraction,
            bytes_per_second: (cur.weight > 0 && secs > 0.0 && done > 0)
                .then(|| cur.weight as f64 * worked / secs),
            eta: rate
                .map(|r| Duration::from_secs_f64(total.saturating_sub(done + already) as f64 / r)),
            elapsed,
        };
        let total_weight: u64 = inner.passes.iter().map(|p| p.1).sum();
        let overall = match (inner.first_start, total_weight) {
            (Some(first), w) if w > 0 => {
                let in_pass = if cur.index.is_some() {
                    cur.weight as f64 * fraction.unwrap_or(0.0)
                } else {
                    0.0
                };
                let worked_now = inner.worked_weight
                    + if cur.index.is_some() {
                        cur.weight as f64 * worked
                    } else {
                        0.0
                    };
                let progressed = (inner.finished_weight + in_pass).min(w as f64);
                let run_secs = now.duration_since(first).as_secs_f64();
                let eta = (worked_now > 0.0 && run_secs > 0.0).then(|| {
                    let rate = worked_now / run_secs;
                    Duration::from_secs_f64((w as f64 - progressed) / rate)
                });
                Some(OverallView {
                    fraction: progressed / w as f64,
                    eta,
                    elapsed: now.duration_since(first),
                })
            }
            _ => None,
        };
        Snapshot {
            pass: Some(pass),
            overall,
        }
    }

    /// Forgets the run (after it completed or failed).
    pub fn finish(&self) {
        self.end();
        let mut g = self.lock();
        if let Some(inner) = g.as_mut() {
            inner.passes.clear();
            inner.next = 0;
            inner.first_start = None;
            inner.finished_weight = 0.0;
            inner.worked_weight = 0.0;
        }
    }
}

/// Runs `f` as the phase `name` outside the plan (reading the inputs,
/// hashing them), so that the display says what takes the time.
pub fn phase<T, E>(name: &str, f: impl FnOnce() -> Result<T, E>) -> Result<T, E> {
    METER.begin(name);
    let r = f();
    match r {
        Ok(_) => METER.end(),
        Err(_) => METER.abandon(),
    }
    r
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::plan::{Algorithm, Pass, Plan};

    fn plan(weights: &[(&str, u64)]) -> Plan {
        let mut p = crate::plan::plan(&crate::plan::Request {
            a_limbs: 10,
            b_limbs: 10,
            radix: crate::Radix::Binary,
            square: false,
            threads: 1,
            force: crate::plan::Force::Schoolbook,
            memory: 1 << 30,
            input_bytes: 160,
            primes: crate::primeset::PrimeSet::Three62,
        })
        .unwrap();
        assert_eq!(p.algorithm, Algorithm::Schoolbook);
        p.passes = weights
            .iter()
            .map(|(n, w)| Pass {
                name: n.to_string(),
                read_bytes: *w,
                write_bytes: 0,
            })
            .collect();
        p
    }

    #[test]
    fn fractions_rates_and_etas_follow_the_blocks() {
        let m = Meter::new();
        m.start(&plan(&[("one", 100), ("two", 300)]));
        let t0 = Instant::now();
        m.begin_at("one", t0);
        m.add_units(10, 0);
        m.advance(5);
        let s = m.snapshot_at(t0 + Duration::from_secs(5));
        let p = s.pass.unwrap();
        assert_eq!((p.index, p.count), (Some(1), 2));
        assert_eq!(p.fraction, Some(0.5));
        assert_eq!(p.bytes_per_second, Some(10.0));
        assert_eq!(p.eta, Some(Duration::from_secs(5)));
        let o = s.overall.unwrap();
        assert!((o.fraction - 50.0 / 400.0).abs() < 1e-12);
        // 50 bytes' worth in 5 s: 350 left at 10 per second.
        assert_eq!(o.eta, Some(Duration::from_secs(35)));
        m.advance(5);
        m.begin_at("two", t0 + Duration::from_secs(10));
        let events = m.take_events();
        assert!(
            matches!(&events[..], [Event::PassDone(d)] if d.name == "one"
            && d.index == Some(1) && d.bytes_per_second == Some(10.0))
        );
        let o = m.snapshot_at(t0 + Duration::from_secs(10)).overall.unwrap();
        assert!((o.fraction - 0.25).abs() < 1e-12);
        assert_eq!(o.eta, Some(Duration::from_secs(30)));
    }

    #[test]
    fn a_folded_pass_is_not_reported_and_its_weight_moves_on() {
        let m = Meter::new();
        m.start(&plan(&[("one", 100), ("carry", 100), ("write", 200)]));
        let t0 = Instant::now();
        m.begin_at("one", t0);
        m.fold_into_next("carry");
        m.begin_at("write", t0 + Duration::from_secs(1));
        let events = m.take_events();
        assert!(
            matches!(&events[..], [Event::PassDone(d)] if d.name == "one" && d.count == 3),
            "{events:?}"
        );
        let o = m.snapshot_at(t0 + Duration::from_secs(1)).overall.unwrap();
        assert!((o.fraction - 0.25).abs() < 1e-12);
        let p = m.snapshot_at(t0 + Duration::from_secs(1)).pass.unwrap();
        assert_eq!((p.index, p.count), (Some(3), 3));
        m.add_units(10, 0);
        m.advance(5);
        // Half the write's doubled weight: 100 + 300 / 2 of 400.
        let o = m.snapshot_at(t0 + Duration::from_secs(2)).overall.unwrap();
        assert!((o.fraction - 250.0 / 400.0).abs() < 1e-12, "{}", o.fraction);
    }

    #[test]
    fn a_resumed_run_moves_the_bars_but_not_the_rate() {
        let m = Meter::new();
        m.start(&plan(&[("one", 100), ("two", 100), ("three", 200)]));
        let t0 = Instant::now();
        // Pass "one" was done before the interruption; "two" half done.
        m.begin_at("two", t0);
        m.add_units(10, 5);
        m.advance(1);
        let s = m.snapshot_at(t0 + Duration::from_secs(1));
        let p = s.pass.unwrap();
        assert_eq!(p.fraction, Some(0.6));
        assert_eq!(p.bytes_per_second, Some(10.0));
        assert_eq!(p.eta, Some(Duration::from_secs(4)));
        let o = s.overall.unwrap();
        assert!((o.fraction - 160.0 / 400.0).abs() < 1e-12);
        // 10 bytes' worth done in this process in 1 s: 240 left.
        assert_eq!(o.eta, Some(Duration::from_secs(24)));
        m.begin_at("three", t0 + Duration::from_secs(2));
        m.add_units(4, 4);
        m.end_at(t0 + Duration::from_secs(2));
        let done: Vec<bool> = m
            .take_events()
            .iter()
            .map(|e| matches!(e, Event::PassDone(d) if d.done_before))
            .collect();
        // "one" was skipped whole, "two" resumed, "three" found complete.
        assert_eq!(done, [true, false, true]);
    }

    #[test]
    fn phases_outside_the_plan_do_not_count_towards_it() {
        let m = Meter::new();
        m.start(&plan(&[("one", 100)]));
        let t0 = Instant::now();
        m.begin_at("hash the operands", t0);
        let s = m.snapshot_at(t0 + Duration::from_secs(3));
        assert_eq!(s.pass.as_ref().unwrap().index, None);
        assert_eq!(s.pass.unwrap().fraction, None);
        assert_eq!(s.overall, None);
        m.begin_at("one", t0 + Duration::from_secs(3));
        m.end_at(t0 + Duration::from_secs(4));
        let events = m.take_events();
        assert_eq!(events.len(), 2);
        assert!(matches!(&events[1], Event::PassDone(d) if d.bytes_per_second == Some(100.0)));
        assert_eq!(m.snapshot_at(t0).pass, None);
    }
}
