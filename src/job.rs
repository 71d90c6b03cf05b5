//! The `mul` job end to end: open and validate the operands, plan, compute,
//! and write the product atomically in the requested format.

use crate::engine::{self, LimbSource};
use crate::engine::{PassTime, Product, StreamedProduct, Timer};
use crate::faults::FaultySpace;
use crate::format::{
    format_radix_compatible, text::TextKind, write_operand_file, write_text_file_from,
    write_text_file_rising, Format, LimbFeed, Operand, Released,
};
use crate::ooc::{OutOfCore, Space};
use crate::output::{ensure_distinct, AtomicOutput};
use crate::plan::{self, Algorithm, Force, Plan, Request};
use crate::progress::{phase, METER};
use crate::residue::{mul_mod, residue_m61, signed, ResidueTap, TapM61, FIXED_MODULI, MERSENNE_61};
use crate::scratch::free_space;
use crate::scratch::FileSpace;
use crate::size::{default_budget, show_size};
use crate::state::{identify, Found, Journal, Manifest, Record, StateDir, STATE_VERSION};
use crate::storage::Store;
use crate::{Error, Result};
use rayon::prelude::*;
use serde::Serialize;
use std::path::{Path, PathBuf};
use std::time::Instant;

/// What a multiplication is asked to do.
#[derive(Clone, Debug)]
pub struct MulOptions {
    /// First operand file.
    pub a: PathBuf,
    /// Second operand file.
    pub b: PathBuf,
    /// Where the product goes.
    pub output: PathBuf,
    /// Operand format, or `None` to detect each file's.
    pub in_format: Option<Format>,
    /// Product format, or `None` for the first operand's.
    pub out_format: Option<Format>,
    /// Replace an existing output.
    pub force: bool,
    /// Worker threads.
    pub threads: usize,
    /// A forced algorithm (benchmarks and tests).
    pub algorithm: Force,
    /// Memory budget in bytes (`None`: half of physical RAM).
    pub memory: Option<u64>,
    /// Directory for scratch files (`None`: the output's directory).
    pub scratch: Option<PathBuf>,
    /// Discard any state an interrupted run left, and start over.
    pub restart: bool,
    /// Keep the state directory after success.
    pub keep_state: bool,
    /// Keep resumable state for out-of-core runs (the default); without it
    /// an interrupted run starts over (for measuring what checkpoints cost).
    pub checkpoint: bool,
    /// Check the product against its factors by a residue before it is
    /// written (the default).
    pub self_check: bool,
    /// Damage done to the product before the self-check (its tests only).
    #[doc(hidden)]
    pub tamper: Option<Tamper>,
    /// Injected scratch I/O faults (tests of the recovery paths only).
    #[doc(hidden)]
    pub faults: Option<std::sync::Arc<crate::faults::FaultPlan>>,
}

impl MulOptions {
    /// `a x b` into `output` with the command line's defaults: formats
    /// detected, nothing replaced, every core, the planner's choice, half of
    /// RAM, scratch beside the output, checkpoints and the self-check on.
    pub fn new(a: impl Into<PathBuf>, b: impl Into<PathBuf>, output: impl Into<PathBuf>) -> Self {
        MulOptions {
            a: a.into(),
            b: b.into(),
            output: output.into(),
            in_format: None,
            out_format: None,
            force: false,
            threads: std::thread::available_parallelism().map_or(1, |n| n.get()),
            algorithm: Force::Auto,
            memory: None,
            scratch: None,
            restart: false,
            keep_state: false,
            checkpoint: true,
            self_check: true,
            tamper: None,
            faults: None,
        }
    }
}

/// Damage to a computed product, for testing that the self-check sees it.
#[doc(hidden)]
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Tamper {
    /// Add one to the limb at this fraction of the product (0.0 = lowest).
    ChangeLimb(f64),
    /// Swap the limb at this fraction with its neighbour above.
    SwapLimbs(f64),
    /// Drop the top limb.
    DropTop,
    /// Append a limb 1 above the top.
    AppendLimb,
    /// Write the product with the other sign.
    FlipSign,
}

/// The residue check of a product against its factors, made before the
/// product is renamed into place.
#[derive(Clone, Debug, Serialize)]
pub struct SelfCheck {
    /// True: a product that fails the check is an error, never a report.
    pub passed: bool,
    /// The prime, 2^61 - 1.
    pub modulus: u64,
    /// Signed residues of A, B and the product.
    pub residues: [u64; 3],
    /// Seconds it took (the factors' residues and the product's).
    pub seconds: f64,
}

/// What a multiplication did.
#[derive(Clone, Debug, Serialize)]
pub struct MulReport {
    /// The plan that was carried out.
    pub plan: Plan,
    /// Format of the written product.
    pub out_format: Format,
    /// Seconds spent opening and validating the inputs.
    pub open_seconds: f64,
    /// Seconds spent computing the product's limbs.
    pub compute_seconds: f64,
    /// Seconds spent writing and syncing the output.
    pub write_seconds: f64,
    /// Limbs of the product (no leading zeros).
    pub product_limbs: usize,
    /// Wall time of each pass, named as in the plan's passes.
    pub passes: Vec<PassTime>,
    /// Seconds spent hashing the operands for the state's manifest (out of
    /// core only).
    pub identify_seconds: f64,
    /// Where an interrupted run was resumed, when it was.
    pub resumed_at: Option<String>,
    /// What a resume found wrong in the saved state, and what it did.
    pub resume_notes: Vec<String>,
    /// The self-check, unless it was turned off.
    pub self_check: Option<SelfCheck>,
    /// The manifest written beside the product.
    pub manifest: PathBuf,
    /// Seconds spent writing it (hashing the product and its residues).
    pub manifest_seconds: f64,
    /// What the manifest records: size, BLAKE3 and residues of the product.
    pub product: crate::manifest::Manifest,
    /// The operands' identities and BLAKE3, when the run hashed them (out
    /// of core, for its resumable state); empty otherwise.
    pub operands: Vec<crate::state::OperandId>,
    /// True when the run continued from an interrupted run's state.
    pub resumed: bool,
    /// True when the product was carried while it was written (its text's
    /// length settled by its top coefficients); false when it was made
    /// whole first.
    pub streamed: bool,
    /// Wall time of the whole job.
    pub wall_seconds: f64,
    /// Peak resident memory of the process, from the kernel.
    pub peak_rss_bytes: Option<u64>,
    /// Bytes the process read and wrote, from the kernel.
    pub io: Option<crate::usage::ProcessIo>,
}

/// True when both files are the same file (same device and inode).
fn same_file(a: &Path, b: &Path) -> bool {
    use std::os::unix::fs::MetadataExt;
    match (std::fs::metadata(a), std::fs::metadata(b)) {
        (Ok(x), Ok(y)) => x.dev() == y.dev() && x.ino() == y.ino(),
        _ => false,
    }
}

/// True when two operands hold the same magnitude, compared in parallel
/// chunks that stop at the first difference.
fn same_magnitude(a: &Operand, b: &Operand) -> bool {
    if a.radix() != b.radix() || a.limb_count() != b.limb_count() {
        return false;
    }
    const CHUNK: usize = 1 << 16;
    let chunks = a.limb_count().div_ceil(CHUNK);
    (0..chunks).into_par_iter().all(|c| {
        let first = c * CHUNK;
        let len = CHUNK.min(a.limb_count() - first);
        let (mut x, mut y) = (vec![0u64; len], vec![0u64; len]);
        a.read_limbs(first, &mut x);
        b.read_limbs(first, &mut y);
        x == y
    })
}

/// Two opened operands of one radix; `b` is `None` when both paths name
/// the same file.
struct Operands {
    a: Operand,
    b: Option<Operand>,
}

impl Operands {
    fn open(a_path: &Path, b_path: &Path, format: Option<Format>) -> Result<Self> {
        let a = Operand::open(a_path, format)?;
        let b = if same_file(a_path, b_path) {
            None
        } else {
            Some(Operand::open(b_path, format)?)
        };
        let ops = Operands { a, b };
        let (a, b) = (&ops.a, ops.b());
        if a.radix() != b.radix() {
            return Err(Error::input(
                b_path,
                None,
                format!(
                    "radix {} ({} format) does not match {}'s radix {} ({} format)",
                    b.radix().name(),
                    b.format(),
                    a_path.display(),
                    a.radix().name(),
                    a.format()
                ),
                "vastmul multiplies in the operands' own radix without conversion: give both \
                 operands in decimal, or both in hexadecimal, raw limbs or binary containers",
            ));
        }
        Ok(ops)
    }

    fn b(&self) -> &Operand {
        self.b.as_ref().unwrap_or(&self.a)
    }

    fn request(&self, threads: usize, force: Force, memory: u64) -> Result<Request> {
        let (a, b) = (&self.a, self.b());
        let input_bytes = a.file_len() + self.b.as_ref().map_or(0, |b| b.file_len());
        let primes = crate::primeset::PrimeSet::from_env().map_err(|e| {
            Error::usage(
                e.to_string(),
                format!(
                    "unset {} to let vastmul pick the fastest kernels this CPU has",
                    crate::primeset::KERNEL_ENV
                ),
            )
        })?;
        Ok(Request {
            a_limbs: a.limb_count(),
            b_limbs: b.limb_count(),
            radix: a.radix(),
            square: self.b.is_none() || same_magnitude(a, b),
            threads,
            force,
            memory,
            input_bytes,
            primes,
        })
    }
}

/// The plan `vastmul mul` would follow for these operand files under a
/// memory budget (`None`: the default share of RAM).
pub fn plan_files(
    a: &Path,
    b: &Path,
    format: Option<Format>,
    threads: usize,
    memory: Option<u64>,
) -> Result<Plan> {
    let ops = Operands::open(a, b, format)?;
    plan::plan(&ops.request(threads, Force::Auto, memory.unwrap_or_else(default_budget))?)
}

/// The directory an output file goes to.
fn output_dir(output: &Path) -> PathBuf {
    match output.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

/// Refuses a scratch directory that is missing or not a directory.
fn require_dir(dir: &Path) -> Result<()> {
    if dir.is_dir() {
        return Ok(());
    }
    Err(Error::usage(
        format!(
            "scratch directory {} does not exist or is not a directory",
            dir.display()
        ),
        "create it, or pass --scratch with an existing directory",
    ))
}

/// The directory scratch files go to: `--scratch`, else the output's
/// directory (so the final rename stays on one file system). It must exist
/// and have room for `needed` bytes.
fn scratch_dir(opts: &MulOptions, needed: u64) -> Result<PathBuf> {
    let dir = match &opts.scratch {
        Some(d) => d.clone(),
        None => output_dir(&opts.output),
    };
    require_dir(&dir)?;
    let probe = dir.join(format!(".vastmul-probe-{}", std::process::id()));
    match std::fs::OpenOptions::new()
        .write(true)
        .create_new(true)
        .open(&probe)
    {
        Ok(_) => {
            let _ = std::fs::remove_file(&probe);
        }
        Err(e) => {
            return Err(Error::usage(
                format!("scratch directory {} is not writable: {e}", dir.display()),
                "pass --scratch with a directory you can write to, on a disk with room",
            ))
        }
    }
    // Scratch files an interrupted run left for this output are reused.
    let kept = state_bytes(&StateDir::for_output(&dir, &opts.output));
    let needed = needed.saturating_sub(kept);
    let free = free_space(&dir)?;
    if free < needed {
        return Err(Error::Resources {
            what: format!(
                "{}: scratch space needed {}, available {}",
                dir.display(),
                show_size(needed),
                show_size(free)
            ),
            fix: "free space there, or pass --scratch DIR on a disk with more room".into(),
        });
    }
    Ok(dir)
}

/// The pass after the last one `timer` saw finish, for messages.
fn position_after(timer: &Timer, plan: &Plan) -> String {
    let i = timer.passes.len().saturating_sub(1);
    match timer.passes.last() {
        Some(p) => format!(
            "pass {} of {} ({})",
            plan.passes
                .iter()
                .position(|q| q.name == p.name)
                .unwrap_or(i)
                + 1,
            plan.passes.len(),
            p.name
        ),
        None => "the start".into(),
    }
}

/// Disk bytes held by the files of a state directory (0 when none).
fn state_bytes(state: &StateDir) -> u64 {
    use std::os::unix::fs::MetadataExt;
    std::fs::read_dir(state.path()).map_or(0, |entries| {
        entries
            .filter_map(|e| e.ok()?.metadata().ok())
            .map(|m| m.blocks() * 512)
            .sum()
    })
}

/// The state of an out-of-core run: found and checked, or created fresh.
struct RunState {
    dir: StateDir,
    operands: Vec<crate::state::OperandId>,
    journal: Journal,
    records: Vec<Record>,
    notes: Vec<String>,
    identify_seconds: f64,
}

/// Finds the state an interrupted run left for this output, refusing it
/// when it belongs to other work, or starts a fresh one.
fn open_state(
    opts: &MulOptions,
    ops: &Operands,
    plan: &Plan,
    out_format: Format,
    dir: &Path,
) -> Result<RunState> {
    let state = StateDir::for_output(dir, &opts.output);
    if opts.restart {
        state.remove()?;
    }
    let t = Instant::now();
    let operands = phase("hash the operands for the resumable state", || {
        let mut operands = vec![identify(&opts.a, &ops.a)?];
        if let Some(b) = &ops.b {
            operands.push(identify(&opts.b, b)?);
        }
        Ok::<_, Error>(operands)
    })?;
    let identify_seconds = t.elapsed().as_secs_f64();
    let manifest = Manifest {
        version: STATE_VERSION,
        tool: env!("CARGO_PKG_VERSION").into(),
        operands: operands.clone(),
        plan: plan.clone(),
        output: opts.output.clone(),
        out_format,
    };
    let mut notes = Vec::new();
    let refuse = |what: String| {
        Error::usage(
            format!("{}: {what}", state.path().display()),
            "rerun with the original inputs and options to resume, or pass --restart to discard              the saved state and start over",
        )
    };
    match state.find() {
        Found::Nothing => state.create(&manifest)?,
        Found::Broken(why) => {
            notes.push(format!(
                "discarded unusable saved state ({why}); starting over"
            ));
            state.remove()?;
            state.create(&manifest)?;
        }
        Found::Manifest(old) => {
            if old.version != STATE_VERSION {
                return Err(refuse(format!(
                    "saved state of format version {} (written by vastmul {}); this vastmul reads version {STATE_VERSION}",
                    old.version, old.tool
                )));
            }
            if old.operands.len() != manifest.operands.len() {
                return Err(refuse(
                    "saved state is for a different pair of operands".into(),
                ));
            }
            for (was, now) in old.operands.iter().zip(&manifest.operands) {
                if was.size != now.size || was.blake3 != now.blake3 {
                    return Err(refuse(format!(
                        "{} changed since the interrupted run (size {} -> {} bytes, BLAKE3 {} -> {})",
                        now.path.display(),
                        was.size,
                        now.size,
                        &was.blake3[..16],
                        &now.blake3[..16]
                    )));
                }
            }
            if !same_plan_up_to_kernel(&old.plan, &manifest.plan) {
                return Err(refuse(
                    "saved state follows a different plan (other --memory, --threads, operands \
                     or VASTMUL_KERNEL)"
                        .into(),
                ));
            }
            if old.out_format != manifest.out_format {
                return Err(refuse(format!(
                    "saved state writes the product as {}, not {}",
                    old.out_format, manifest.out_format
                )));
            }
        }
    }
    let (journal, load) = state.journal()?;
    if load.dropped_bytes > 0 {
        notes.push(format!(
            "the journal ended in {} damaged or torn byte(s); they were dropped and their blocks are redone",
            load.dropped_bytes
        ));
    }
    Ok(RunState {
        dir: state,
        operands,
        journal,
        records: load.records,
        notes,
        identify_seconds,
    })
}

/// True when a saved plan is the new one, or differs only in the kernel
/// path of the same primes: every path leaves the same residues modulo
/// each prime (its lazy representatives may differ, but each block is
/// checked against the hash of what was written), so a run may resume on a
/// CPU with other vector units.
fn same_plan_up_to_kernel(old: &Plan, new: &Plan) -> bool {
    use crate::primeset::PrimeSet;
    match (old.prime_set, new.prime_set) {
        (PrimeSet::Four50(_), PrimeSet::Four50(_))
        | (PrimeSet::Three50(_), PrimeSet::Three50(_)) => {
            let mut o = old.clone();
            o.prime_set = new.prime_set;
            o == *new
        }
        _ => old == new,
    }
}

/// An error of a checkpointed run, completed with what was kept.
fn with_state_note(e: Error, state: &StateDir, position: &str) -> Error {
    match e {
        Error::Interrupted { .. } => Error::Interrupted {
            what: format!("stopped by a signal at {position}"),
            resume: format!(
                "rerun the same command to continue from there (state kept in {}; --restart discards it)",
                state.path().display()
            ),
        },
        Error::Resources { what, fix } => Error::Resources {
            what,
            fix: format!(
                "{fix}; the completed blocks are kept in {} ({position}) and a rerun resumes from them",
                state.path().display()
            ),
        },
        Error::Io { path, source } => Error::Io {
            path,
            source: std::io::Error::new(
                source.kind(),
                format!(
                    "{source}; the completed blocks are kept in {} ({position}), rerun the same command to resume",
                    state.path().display()
                ),
            ),
        },
        other => other,
    }
}

/// Multiplies two operand files into an output file.
pub fn multiply_files(opts: &MulOptions) -> Result<MulReport> {
    let started = Instant::now();
    let ops = phase("read and validate the operands", || {
        Operands::open(&opts.a, &opts.b, opts.in_format)
    })?;
    let (a, b) = (&ops.a, ops.b());
    let radix = a.radix();
    let out_format = opts.out_format.unwrap_or(a.format());
    if !format_radix_compatible(out_format, radix) {
        return Err(Error::usage(
            format!(
                "--out-format {out_format} cannot hold a product in radix {} without a radix conversion",
                radix.name()
            ),
            match radix {
                crate::Radix::Decimal => "use --out-format dec or container for decimal operands",
                crate::Radix::Binary => "use --out-format hex, limbs or container for binary operands",
            },
        ));
    }
    let negative = a.is_negative() != b.is_negative();
    ensure_distinct(&opts.output, &[&opts.a, &opts.b])?;
    // Only out-of-core plans use it, but a mistyped --scratch should show on
    // the first run, not on the day a product outgrows the budget.
    if let Some(dir) = &opts.scratch {
        require_dir(dir)?;
    }
    let mut out = AtomicOutput::create(&opts.output, opts.force)?;
    let memory = opts.memory.unwrap_or_else(default_budget);
    let plan = plan::plan(&ops.request(opts.threads, opts.algorithm, memory)?)?;
    METER.start(&plan);
    // Room for the product beside its target, checked before any work.
    let product_bytes = match out_format {
        Format::Decimal => 19,
        Format::Hex => 16,
        Format::Limbs | Format::Container => 8,
    } * plan.product_limbs as u64
        + 128;
    let out_dir = output_dir(&opts.output);
    let dir = if plan.scratch_bytes > 0 {
        let same_dir = opts.scratch.is_none();
        scratch_dir(
            opts,
            plan.scratch_bytes + if same_dir { product_bytes } else { 0 },
        )?
    } else {
        out_dir.clone()
    };
    if plan.scratch_bytes == 0 || opts.scratch.is_some() {
        let free = free_space(&out_dir)?;
        if free < product_bytes {
            return Err(Error::Resources {
                what: format!(
                    "{}: the product needs {}, available {}",
                    out_dir.display(),
                    show_size(product_bytes),
                    show_size(free)
                ),
                fix: "free space there, or write the product (-o) to a disk with more room".into(),
            });
        }
    }
    let open_seconds = started.elapsed().as_secs_f64();

    let compute = Instant::now();
    let mut timer = Timer::reporting();
    if plan.release_inputs {
        a.expect_scattered_reads();
        b.expect_scattered_reads();
    }
    let mut state = None;
    let mut tapped: Option<(u64, u64)> = None;
    let mut resumed_at = None;
    let mut resume_notes = Vec::new();
    let mut identify_seconds = 0.0;
    // A product in RAM written as text is carried while it is written; a
    // tampered one (for tests of the self-check) is made whole first.
    let stream = crate::format::text_kind(out_format)
        .filter(|_| opts.tamper.is_none() && format_radix_compatible(out_format, radix));
    let product = match plan.algorithm {
        Algorithm::OutOfCore { .. } if !opts.checkpoint => {
            engine::execute_timed(&plan, &Released(a), &Released(b), &dir, &mut timer)?
        }
        Algorithm::OutOfCore { shape, window } => {
            let st = open_state(opts, &ops, &plan, out_format, &dir)?;
            identify_seconds = st.identify_seconds;
            for n in &st.notes {
                METER.note(n.clone());
            }
            let files = FileSpace::kept(st.dir.path());
            let faulty;
            let space: &dyn Space = match &opts.faults {
                Some(f) => {
                    faulty = FaultySpace {
                        inner: &files,
                        plan: f.clone(),
                    };
                    &faulty
                }
                None => &files,
            };
            let (run, resumed) = OutOfCore::open(
                &plan,
                (shape, window),
                space,
                Some(&st.journal),
                &st.records,
            )
            .map_err(|e| with_state_note(e, &st.dir, "opening the saved state"))?;
            resume_notes.extend(st.notes.iter().cloned());
            resume_notes.extend(resumed.problems.iter().cloned());
            let position = run.position();
            if !st.records.is_empty() {
                METER.note(format!(
                    "resuming from {}: {position} ({} block(s) verified, {} dropped)",
                    st.dir.path().display(),
                    resumed.kept_blocks,
                    resumed.dropped_blocks
                ));
                for p in &resumed.problems {
                    METER.note(p.clone());
                }
                resumed_at = Some(position.clone());
            } else {
                METER.note(format!(
                    "out of core; the run's state is kept in {} until it completes, \
                     and an interrupted run resumes from it",
                    st.dir.path().display()
                ));
            }
            let product = run
                .run(&Released(a), &Released(b), &mut timer)
                .map_err(|e| with_state_note(e, &st.dir, &position_after(&timer, &plan)))?;
            state = Some(st);
            product
        }
        // In RAM each limb of the factors is read once: the self-check takes
        // their residues on the way, instead of parsing the files again.
        Algorithm::Ntt { .. } | Algorithm::Pieces { .. } | Algorithm::Schoolbook
            if opts.self_check =>
        {
            let (ra, rb) = (Released(a), Released(b));
            let (ta, tb);
            let product = if plan.release_inputs {
                ta = TapM61::new(&ra as &dyn LimbSource, radix);
                tb = TapM61::new(&rb as &dyn LimbSource, radix);
                execute_in_ram(&plan, &ta, &tb, &dir, &mut timer, stream)?
            } else {
                ta = TapM61::new(a as &dyn LimbSource, radix);
                tb = TapM61::new(b as &dyn LimbSource, radix);
                execute_in_ram(&plan, &ta, &tb, &dir, &mut timer, stream)?
            };
            tapped = Some((
                ta.value(),
                if plan.square { ta.value() } else { tb.value() },
            ));
            product
        }
        _ if plan.release_inputs => {
            execute_in_ram(&plan, &Released(a), &Released(b), &dir, &mut timer, stream)?
        }
        _ => execute_in_ram(&plan, a, b, &dir, &mut timer, stream)?,
    };
    let compute_seconds = compute.elapsed().as_secs_f64();

    // The self-check: the factors' residues now, the product's as it is
    // written (the writer taps every limb once, for the manifest too).
    let mut product = product;
    let mut negative = negative;
    if let Some(t) = opts.tamper {
        tamper(&mut product, &mut negative, t)?;
    }
    let check_start = Instant::now();
    let mut self_check = None;
    if opts.self_check {
        let p = MERSENNE_61;
        let residue_of = |op: &Operand| {
            let r = if plan.release_inputs {
                residue_m61(&Released(op), op.limb_count(), radix)
            } else {
                residue_m61(op, op.limb_count(), radix)
            };
            signed(r, op.is_negative(), p)
        };
        let (ra, rb) = match tapped {
            Some((x, y)) => (signed(x, a.is_negative(), p), signed(y, b.is_negative(), p)),
            None => {
                let ra = residue_of(a);
                (ra, if ops.b.is_some() { residue_of(b) } else { ra })
            }
        };
        self_check = Some(SelfCheck {
            passed: false,
            modulus: p,
            residues: [ra, rb, 0],
            seconds: 0.0,
        });
    }
    let mut check_seconds = check_start.elapsed().as_secs_f64();

    let write = Instant::now();
    let target = opts.output.clone();
    // A streamed product runs its CRT and carry inside the write.
    if matches!(product, Product::Streamed(_)) {
        METER.fold_into_next("CRT and carry");
    }
    METER.begin("write the product");
    METER.add_units(product.len() as u64, 0);
    // The top limb, for the manifest's digit count: read now, since a read
    // that fails after the rename would leave a product without its
    // manifest.
    let top = match &product {
        Product::Ram(limbs) => limbs.last().copied().unwrap_or(0),
        // Not made yet: read once the product is written.
        Product::Streamed(_) => 0,
        Product::Disk { store, len, .. } => {
            let mut top = [0u64];
            if *len > 0 {
                store.read(len - 1, &mut top).map_err(|e| match &state {
                    Some(st) => {
                        with_state_note(e, &st.dir, "write the product: all computing done")
                    }
                    None => e,
                })?;
            }
            top[0]
        }
    };
    let tap = ResidueTap::fixed(radix);
    let written = match &product {
        Product::Ram(limbs) => write_operand_file(
            out.file(),
            out_format,
            radix,
            negative,
            limbs,
            &|first, limbs| note_written(&tap, first, limbs),
        ),
        Product::Streamed(p) => {
            let feed = StreamFeed {
                product: p,
                tap: &tap,
            };
            let layout = p.layout().expect("a streamed product is laid out");
            write_text_file_rising(out.file(), out_format, radix, negative, layout, &feed)
        }
        Product::Disk { store, len, .. } => {
            let feed = StoreFeed {
                store: store.as_ref(),
                tap: &tap,
            };
            write_text_file_from(out.file(), out_format, radix, negative, *len, &feed)
        }
    }
    .map_err(|e| {
        // A failure of the CRT or the carry under the writer is reported
        // as itself, not as a failure to write.
        let made = match &product {
            Product::Streamed(p) => p.take_failure(),
            _ => None,
        };
        let e = if let Some(made) = made {
            made
        } else if crate::interrupt::requested() {
            Error::Interrupted {
                what: String::new(),
                resume: String::new(),
            }
        } else if e.raw_os_error() == Some(libc::ENOSPC) {
            Error::Resources {
                what: format!(
                    "{}: the disk filled up while the product was written",
                    target.display()
                ),
                fix: "free space there".into(),
            }
        } else {
            Error::io(&target, e)
        };
        match &state {
            Some(st) => with_state_note(e, &st.dir, "write the product: all computing done"),
            None => match e {
                Error::Interrupted { .. } => crate::interrupt::check().unwrap_err(),
                other => other,
            },
        }
    })?;
    METER.end();
    // The scratch given back while the product was written: a failure
    // there fails the run like any other, before the product appears.
    if let Product::Disk { discarding, .. } = &mut product {
        discarding.wait().map_err(|e| match &state {
            Some(st) => with_state_note(e, &st.dir, "write the product: all computing done"),
            None => e,
        })?;
    }
    let (top, carry_seconds) = match &product {
        Product::Streamed(p) => {
            // The writer stops at the top limb of the layout; the carry
            // above the coefficients and the check of the product against
            // the layout come with the rest.
            p.make(usize::MAX)?;
            let mut t = [0u64];
            p.read(product.len() - 1, &mut t)
                .map_err(|e| Error::io(&target, e))?;
            (t[0], Some(p.carry_seconds()))
        }
        _ => (top, None),
    };
    let product_residues = tap.values();
    if let Some(sc) = self_check.as_mut() {
        let t0 = Instant::now();
        verify_self_check(sc, product_residues[0], negative && !product.is_empty())?;
        check_seconds += t0.elapsed().as_secs_f64();
        sc.seconds = check_seconds;
    }
    out.commit()?;
    // The manifest beside the product: its BLAKE3 is that of the bytes the
    // writer wrote, its residues those the writer tapped.
    let manifest_start = Instant::now();
    let product_manifest = phase("write the manifest", || {
        let m = crate::manifest::describe_written(
            &opts.output,
            out_format,
            radix,
            negative,
            (product.len(), top),
            written,
            &product_residues,
        );
        crate::manifest::write_for(&opts.output, m)
    })?;
    let manifest_seconds = manifest_start.elapsed().as_secs_f64();
    let mut operands = Vec::new();
    if let Some(st) = state {
        if !opts.keep_state {
            st.dir.remove()?;
        }
        operands = st.operands;
    }
    // A streamed product ran its CRT and carry inside the write: the time
    // they took is theirs, the rest the write's.
    let write_seconds = write.elapsed().as_secs_f64();
    if let Some(carry) = carry_seconds {
        timer.passes.push(PassTime {
            name: "CRT and carry".into(),
            seconds: carry,
            read_bytes: 0,
            write_bytes: 0,
        });
    }
    timer.passes.push(PassTime {
        name: "write the product".into(),
        seconds: write_seconds - carry_seconds.unwrap_or(0.0),
        read_bytes: 0,
        write_bytes: 0,
    });
    for t in &mut timer.passes {
        if let Some(p) = plan.passes.iter().find(|p| p.name == t.name) {
            t.read_bytes = p.read_bytes;
            t.write_bytes = p.write_bytes;
        }
    }
    METER.finish();
    let resumed = resumed_at.is_some();
    Ok(MulReport {
        plan,
        out_format,
        open_seconds,
        compute_seconds,
        write_seconds: write.elapsed().as_secs_f64(),
        product_limbs: product.len(),
        passes: timer.passes,
        identify_seconds,
        resumed_at,
        resume_notes,
        self_check,
        manifest: crate::manifest::path_for(&opts.output),
        manifest_seconds,
        product: product_manifest,
        operands,
        resumed,
        streamed: carry_seconds.is_some(),
        wall_seconds: started.elapsed().as_secs_f64(),
        peak_rss_bytes: crate::usage::peak_rss_bytes(),
        io: crate::usage::process_io(),
    })
}

/// [`engine::execute_timed`], or [`engine::execute_streamed`] when the
/// product is to be written as `stream` text.
fn execute_in_ram<A, B>(
    plan: &Plan,
    a: &A,
    b: &B,
    dir: &Path,
    timer: &mut Timer,
    stream: Option<TextKind>,
) -> Result<Product>
where
    A: LimbSource + ?Sized,
    B: LimbSource + ?Sized,
{
    match stream {
        Some(kind) => engine::execute_streamed(plan, a, b, dir, timer, kind),
        None => engine::execute_timed(plan, a, b, dir, timer),
    }
}

/// The self-check's modulus is the first of the manifest's, so one tap
/// serves both.
const _: () = assert!(FIXED_MODULI[0] == MERSENNE_61);

/// Told of the product's limbs as the writer writes them (each once, in
/// windows in any order): the residues for the self-check and the
/// manifest, and progress.
fn note_written(tap: &ResidueTap, first: usize, limbs: &[u64]) {
    tap.add(first, limbs);
    METER.advance(limbs.len() as u64);
}

/// A streamed product's limbs for the writer, tapped as they are written.
struct StreamFeed<'a> {
    product: &'a StreamedProduct,
    tap: &'a ResidueTap,
}

impl LimbFeed for StreamFeed<'_> {
    fn read(&self, first: usize, out: &mut [u64]) -> std::io::Result<()> {
        self.product.read(first, out)
    }

    fn prepare(&self, end: usize) -> std::io::Result<()> {
        self.product.prepare(end)
    }

    fn seen(&self, first: usize, limbs: &[u64]) {
        note_written(self.tap, first, limbs);
    }
}

/// The limbs of a product on disk as the writer takes them: read from its
/// store (a signal stops the reading of a long one) and noted as written.
struct StoreFeed<'a> {
    store: &'a dyn Store,
    tap: &'a ResidueTap,
}

impl LimbFeed for StoreFeed<'_> {
    fn read(&self, first: usize, dst: &mut [u64]) -> std::io::Result<()> {
        if crate::interrupt::requested() {
            return Err(std::io::Error::new(
                std::io::ErrorKind::Interrupted,
                "stopped by a signal",
            ));
        }
        self.store
            .read(first, dst)
            .map_err(|e| std::io::Error::other(e.to_string()))
    }

    fn seen(&self, first: usize, limbs: &[u64]) {
        note_written(self.tap, first, limbs);
    }
}

/// Compares the product's residue (of its magnitude) with its factors';
/// a mismatch fails the run before anything is renamed into place.
fn verify_self_check(sc: &mut SelfCheck, magnitude: u64, negative: bool) -> Result<()> {
    let p = sc.modulus;
    sc.residues[2] = signed(magnitude, negative, p);
    let expected = mul_mod(sc.residues[0], sc.residues[1], p);
    if sc.residues[2] == expected {
        sc.passed = true;
        return Ok(());
    }
    Err(Error::verify(
        format!(
            "self-check failed: modulo the prime {p} the product's residue is {:#x}, \
             but its factors give {expected:#x}; the product was not written. This points at \
             a fault of the machine (memory, disk) or of vastmul",
            sc.residues[2]
        ),
        "rerun (with --restart for an out-of-core run); if it fails again, please report it",
    ))
}

/// Applies test damage to a computed product.
fn tamper(product: &mut Product, negative: &mut bool, t: Tamper) -> Result<()> {
    let len = product.len();
    let at = |f: f64| ((len.saturating_sub(1)) as f64 * f) as usize;
    match (product, t) {
        (_, Tamper::FlipSign) => *negative = !*negative,
        (Product::Ram(w), Tamper::ChangeLimb(f)) => w[at(f)] ^= 1,
        (Product::Ram(w), Tamper::SwapLimbs(f)) => {
            let i = at(f).min(len - 2);
            w.swap(i, i + 1);
        }
        (Product::Ram(w), Tamper::DropTop) => w.truncate(len - 1),
        (Product::Ram(w), Tamper::AppendLimb) => {
            let mut grown = crate::storage::WordBuf::zeroed(len + 1);
            grown[..len].copy_from_slice(w);
            grown[len] = 1;
            *w = grown;
        }
        (Product::Disk { store, len, .. }, t) => {
            let mut x = [0u64; 2];
            match t {
                Tamper::ChangeLimb(f) => {
                    let i = at(f);
                    store.read(i, &mut x[..1])?;
                    x[0] ^= 1;
                    store.write(i, &x[..1])?;
                }
                Tamper::SwapLimbs(f) => {
                    let i = at(f).min(*len - 2);
                    store.read(i, &mut x)?;
                    x.swap(0, 1);
                    store.write(i, &x)?;
                }
                Tamper::DropTop => *len -= 1,
                Tamper::AppendLimb => {
                    store.write(*len, &[1])?;
                    *len += 1;
                }
                Tamper::FlipSign => unreachable!(),
            }
        }
        (Product::Streamed(_), _) => unreachable!("a tampered product is made whole first"),
    }
    Ok(())
}
