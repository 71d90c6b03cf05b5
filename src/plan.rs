//! The planner: a pure function from the sizes of a product to a [`Plan`].
//!
//! The plan is a value: it is printed, compared in tests and (later) stored
//! with a run's state. The executor only takes a `&Plan`.

use crate::fourstep::Shape;
use crate::packing::WordWidth;
use crate::primeset::PrimeSet;
use crate::radix::Radix;
use crate::{Error, Result};
use serde::{Deserialize, Serialize};

/// Below this many limbs in the shorter operand schoolbook always wins.
/// Measured with `cargo bench --bench kernels -- crossover` (see
/// DEVELOPERS.md): the NTT's fixed costs dominate below it.
pub const SCHOOLBOOK_ALWAYS: usize = 32;

/// Schoolbook cost per limb product, in the units of [`NTT_COST`].
const SCHOOLBOOK_COST: f64 = 1.0;

/// NTT cost per `N log2 N` (all primes, both operands' transforms and the
/// inverse), relative to one schoolbook limb product. Measured, see
/// [`SCHOOLBOOK_ALWAYS`]: about 14 ns per `N log2 N` against 1 ns per limb
/// product on one core.
const NTT_COST: f64 = 14.0;

/// The NTT's fixed cost (tables, buffers), in the same units: about 60 us.
const NTT_FIXED_COST: f64 = 60_000.0;

/// Rows (the column-transform length) are chosen near the square root of
/// the length, at most `2^ROWS_LOG_MAX`, so that a block of `LANES` columns
/// (`rows * LANES` words per prime) stays within a core's L2 cache.
const ROWS_LOG_MAX: u32 = 11;

/// Adjacent columns transformed together in a column pass: 32 words fill
/// four cache lines per row segment, which the strided reads of a column
/// block need to run near the memory's bandwidth (16 took a quarter longer
/// in the inverse column pass at 2^28 bits); with at most 2^11 rows a
/// block is 512 KiB, within a core's L2 cache.
const LANES: usize = 32;

/// How a product is computed.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case", tag = "kind")]
pub enum Algorithm {
    /// One operand is zero: nothing to compute.
    Zero,
    /// Quadratic convolution, for a short operand.
    Schoolbook,
    /// Four-step NTT in RAM, over the plan's prime set.
    Ntt {
        /// The transform's shape.
        shape: Shape,
        /// Coefficients past the transform's length, folded back by the
        /// wrap-around correction ([`crate::wrap`]); 0 when the transform
        /// covers the product.
        #[serde(default)]
        folded: usize,
    },
    /// Four-step NTT over scratch files, under the memory
    /// budget: column blocks of `shape.lanes` columns and single rows in
    /// RAM, the carry and output passes in windows of `window` limbs.
    OutOfCore {
        /// The transform's shape.
        shape: Shape,
        /// Limbs per carry/output window.
        window: usize,
    },
    /// A very unbalanced pair: the longer operand is cut into pieces of
    /// `piece` limbs, each multiplied in RAM by the shorter one, and the
    /// partial products are added on the way out, so that the cost grows
    /// linearly with the longer operand.
    Pieces {
        /// Limbs of the longer operand per piece (the last may be shorter).
        piece: usize,
        /// How many pieces.
        count: usize,
        /// Each piece's transform, or `None` for schoolbook pieces.
        shape: Option<Shape>,
        /// Pieces computed at once (one per thread for small transforms).
        batch: usize,
        /// The product's limbs collect in a scratch file rather than RAM.
        product_on_disk: bool,
    },
}

/// One pass over the data, with the bytes it moves.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Pass {
    /// What the pass does.
    pub name: String,
    /// Bytes read (inputs or scratch).
    pub read_bytes: u64,
    /// Bytes written (scratch or output).
    pub write_bytes: u64,
}

/// A choice of algorithm forced by the caller (tests, benchmarks).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub enum Force {
    /// Let the planner decide.
    Auto,
    /// Always schoolbook.
    Schoolbook,
    /// Always one NTT over the whole product.
    Ntt,
    /// NTT pieces whenever the pair allows them (unbalanced enough).
    Pieces,
}

/// What the planner is asked.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Request {
    /// Significant limbs of the first operand.
    pub a_limbs: usize,
    /// Significant limbs of the second operand.
    pub b_limbs: usize,
    /// The operands' radix.
    pub radix: Radix,
    /// The second operand is the first (same file or same content).
    pub square: bool,
    /// Worker threads.
    pub threads: usize,
    /// A forced algorithm, or `Force::Auto`.
    pub force: Force,
    /// The memory budget in bytes (`u64::MAX`: unlimited).
    pub memory: u64,
    /// Bytes of the input files, which are memory-mapped while read.
    pub input_bytes: u64,
    /// The primes and kernels of the transforms.
    pub primes: PrimeSet,
}

impl Request {
    /// A request without a memory budget, for products of slices in RAM.
    pub fn in_memory(
        a_limbs: usize,
        b_limbs: usize,
        radix: Radix,
        square: bool,
        threads: usize,
        force: Force,
    ) -> Self {
        Request {
            a_limbs,
            b_limbs,
            radix,
            square,
            threads,
            force,
            memory: u64::MAX,
            input_bytes: 0,
            primes: PrimeSet::preferred(),
        }
    }
}

/// A complete description of how a product will be computed.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Plan {
    /// The operands' radix.
    pub radix: Radix,
    /// Significant limbs of the first operand.
    pub a_limbs: usize,
    /// Significant limbs of the second operand.
    pub b_limbs: usize,
    /// Limbs reserved for the product (`a_limbs + b_limbs`).
    pub product_limbs: usize,
    /// The operand is multiplied by itself.
    pub square: bool,
    /// Worker threads.
    pub threads: usize,
    /// The algorithm and its parameters.
    pub algorithm: Algorithm,
    /// The NTT primes (when the NTT is used).
    pub primes: Vec<u64>,
    /// The prime set and kernels of the transforms (when the NTT is used).
    #[serde(default)]
    pub prime_set: PrimeSet,
    /// Peak RAM the plan needs, in bytes, mapped input pages included.
    pub ram_bytes: u64,
    /// The memory budget the plan was made for (`u64::MAX`: none).
    pub memory_budget: u64,
    /// Scratch disk the plan needs, in bytes (0 in RAM).
    pub scratch_bytes: u64,
    /// The passes over the data, in order, with the bytes each moves.
    pub passes: Vec<Pass>,
    /// The input files are read through mappings whose pages are released
    /// after each read, because keeping them would exceed the budget.
    pub release_inputs: bool,
}

/// The four-step shape for a transform of at least `min_len` points.
///
/// The length is `2^k`, or `3 * 2^k` when that covers `min_len` with fewer
/// points (up to a quarter fewer: a product just above a power of two no
/// longer pays for nearly twice its length, in time and in scratch). The
/// factor 3 goes to the rows' transforms (`cols`); `rows` stays a power of
/// two near the square root. (Both prime sets' kernels take both kinds of
/// length; the set is asked anyway, so that a set without radix-3 steps
/// would get `2^k`.)
pub fn shape_for(min_len: usize, set: PrimeSet) -> Shape {
    let pow2 = min_len.max(2).next_power_of_two();
    let (odd, n) =
        if pow2 >= MIN_RADIX3_LEN && min_len <= pow2 / 4 * 3 && set.supports_len(pow2 / 4 * 3) {
            (3, pow2 / 4 * 3)
        } else {
            (1, pow2)
        };
    let log = (n / odd).trailing_zeros();
    let rows_log = (log / 2).min(ROWS_LOG_MAX);
    let rows = 1usize << rows_log;
    let cols = n / rows;
    Shape {
        rows,
        cols,
        lanes: LANES.min(1 << cols.trailing_zeros()),
    }
}

/// The transform of an NTT product in RAM of `count` coefficients whose
/// longer operand has `longer` limbs, with the coefficients it folds back:
/// [`shape_for`] the whole product, or a shorter transform whose top
/// coefficients wrap around and are folded back ([`crate::wrap`]), when
/// the cost model finds it cheaper and it needs no more memory. The
/// shorter one still holds both operands and folds back at most a quarter
/// of its length. Only the 50-bit sets fold back.
pub fn ram_shape_for(count: usize, longer: usize, set: PrimeSet) -> (Shape, usize) {
    let plain = shape_for(count, set);
    if !set.balanced_digits() {
        return (plain, 0);
    }
    let k = set.count();
    // Words of the residue stores and the spare store (B's, then the
    // product's limbs) with and without folding.
    let plain_words = (k + 1) * plain.len().max(count + 1);
    let mut best = (transform_cost(plain.len()), plain, 0);
    let mut pow2 = MIN_RADIX3_LEN;
    while pow2 < count {
        for len in [pow2, pow2 / 2 * 3] {
            let folded = count.saturating_sub(len);
            if folded == 0 || len < longer || 4 * folded > len || !set.supports_len(len) {
                continue;
            }
            let short = fold_shape(folded, set).len();
            let cost = transform_cost(len) + transform_cost(short);
            let words = k * (len + folded) + (count + 1) + fold_words(folded, set);
            if cost < best.0 && words <= plain_words {
                let shape = shape_for(len, set);
                debug_assert_eq!(shape.len(), len);
                best = (cost, shape, folded);
            }
        }
        pow2 *= 2;
    }
    (best.1, best.2)
}

/// The shape of the short product that gives `folded` wrapped
/// coefficients: the top `folded + 1` limbs of each operand
/// ([`crate::wrap`]).
fn fold_shape(folded: usize, set: PrimeSet) -> Shape {
    shape_for(2 * folded + 1, set)
}

/// Words the short product of the wrap-around correction holds at once:
/// its stores (one per prime and B's) and the operands' top limbs.
fn fold_words(folded: usize, set: PrimeSet) -> usize {
    (set.count() + 1) * fold_shape(folded, set).len() + 2 * (folded + 1)
}

/// Below this many points every transform has a power-of-two length: the
/// saving is a few microseconds there, and rows of `3 * 2^k` points keep
/// at least `LANES` columns per block.
const MIN_RADIX3_LEN: usize = 1 << 10;

/// Fixed RAM besides the working arrays: the binary and its libraries and
/// thread stacks (about 4 MiB resident, measured with `/usr/bin/time -v`),
/// the text writer's batch buffers (under 2 MiB) and allocator slack.
const FIXED_RAM: u64 = 6 << 20;

/// Text bytes per limb when a product is written (decimal is widest).
const TEXT_BYTES_PER_LIMB: u64 = 19;

/// RAM per thread of the passes of `shape`: a column block (raw and
/// transformed) and the row buffers.
fn per_thread_ram(shape: Shape) -> u64 {
    8 * (2 * shape.rows * shape.lanes + 3 * shape.cols) as u64
}

/// RAM of the carry and output passes for a window of `window` limbs: a
/// residue word per prime and a 192-bit coefficient per limb in flight, the
/// limbs themselves and their text.
fn window_ram(window: usize, primes: PrimeSet) -> u64 {
    (8 * primes.count() as u64 + 24 + 8 + TEXT_BYTES_PER_LIMB) * window as u64
}

/// The name of the column pass of A over `count` primes.
pub fn columns_of_a_name(count: usize) -> String {
    let word = match count {
        3 => "three",
        4 => "four",
        _ => return format!("columns of A, {count} primes"),
    };
    format!("columns of A, {word} primes")
}

/// The pass that folds wrapped coefficients back ([`crate::wrap`]).
pub const WRAP_PASS: &str = "fold back the wrapped coefficients";

/// Plans a product.
pub fn plan(req: &Request) -> Result<Plan> {
    if req.threads == 0 {
        return Err(Error::usage(
            "--threads 0: at least one thread is needed",
            "omit --threads to use every core, or pass a positive number",
        ));
    }
    let (la, lb) = (req.a_limbs, req.b_limbs);
    let product_limbs = la + lb;
    let mut plan = Plan {
        radix: req.radix,
        a_limbs: la,
        b_limbs: lb,
        product_limbs,
        square: req.square,
        threads: req.threads,
        algorithm: Algorithm::Zero,
        primes: Vec::new(),
        prime_set: req.primes,
        ram_bytes: FIXED_RAM + req.input_bytes,
        memory_budget: req.memory,
        scratch_bytes: 0,
        passes: Vec::new(),
        release_inputs: false,
    };
    if la == 0 || lb == 0 {
        plan.product_limbs = 0;
        return Ok(plan);
    }
    let coefficients = la + lb - 1;
    let short = la.min(lb);
    // The primes below 2^50 stop at 2^32 points; longer transforms take the
    // three primes below 2^62 (up to 2^40). Within the 50-bit family, three
    // primes where they are exact for the shorter operand, else four.
    let req = &Request {
        primes: if shape_for(coefficients, req.primes).len() as u64 > req.primes.max_transform_len()
        {
            PrimeSet::Three62
        } else {
            req.primes.fitted(short as u64, req.radix)
        },
        ..*req
    };
    plan.prime_set = req.primes;
    let shape = shape_for(coefficients, req.primes);
    let (ram_shape, folded) = ram_shape_for(coefficients, la.max(lb), req.primes);
    let ntt_cost = transform_cost(ram_shape.len())
        + if folded > 0 {
            transform_cost(fold_shape(folded, req.primes).len())
        } else {
            0.0
        };
    let schoolbook_cost = SCHOOLBOOK_COST * la as f64 * lb as f64;
    let pieces = best_pieces(req);
    let pieces_cost = pieces.as_ref().map_or(f64::INFINITY, |p| p.1);
    let use_ntt = match req.force {
        Force::Schoolbook => false,
        Force::Ntt | Force::Pieces => true,
        Force::Auto => short > SCHOOLBOOK_ALWAYS && ntt_cost.min(pieces_cost) < schoolbook_cost,
    };
    let limb_bytes = 8 * product_limbs as u64;
    if !use_ntt {
        plan.algorithm = Algorithm::Schoolbook;
        plan.ram_bytes += 24 * coefficients as u64 + limb_bytes + 8 * (la + lb) as u64;
        plan.passes = vec![Pass {
            name: "schoolbook convolution and carry".into(),
            read_bytes: req.input_bytes,
            write_bytes: limb_bytes,
        }];
        if plan.ram_bytes <= req.memory {
            return Ok(plan);
        }
        // Too large for RAM in one go: schoolbook pieces of the longer
        // operand keep the working set to one piece per thread.
        let piece = SCHOOLBOOK_PIECE.max(short);
        return pieces_plan(req, plan, piece, None);
    }
    if let (Force::Pieces, Some((plan_pieces, _))) = (req.force, &pieces) {
        return Ok(plan_pieces.clone());
    }
    let max_len = req.primes.max_transform_len();
    if shape.len() as u64 > max_len {
        return Err(Error::Resources {
            what: format!(
                "a product of {la} x {lb} limbs needs a transform of {} points; the limit of \
                 {} is 2^{}",
                shape.len(),
                req.primes.describe(),
                max_len.trailing_zeros()
            ),
            fix: format!(
                "split the operands into pieces below 2^{} limbs{}",
                max_len.trailing_zeros() - 1,
                if req.primes == PrimeSet::Three62 {
                    ""
                } else {
                    ", or run with VASTMUL_KERNEL=wide (longer transforms)"
                }
            ),
        });
    }
    // Exactness: every coefficient sums at most `short` limb products, and
    // the CRT over the set's primes is exact below their product.
    assert!(req.primes.exact_for(short as u64, req.radix));
    plan.primes = req.primes.primes();
    // The residues of folded coefficients sit past the transform's end.
    let n_words = (ram_shape.len() + folded) as u64;
    // A store per prime for A, one reused for B and then for the product
    // limbs.
    let spare_words = n_words.max(product_limbs as u64);
    let count = req.primes.count() as u64;
    let store_bytes = 8 * (count * n_words + if req.square { 0 } else { spare_words });
    let product_store = if req.square { limb_bytes } else { 0 };
    let b_decoded = if req.square { 0 } else { 8 * lb as u64 };
    let threads = req.threads as u64;
    // The short product of the wrap-around correction runs after the
    // long one's transforms, beside its stores.
    let fold_bytes = if folded > 0 {
        8 * fold_words(folded, req.primes) as u64
            + threads * per_thread_ram(fold_shape(folded, req.primes))
    } else {
        0
    };
    let in_ram = plan.ram_bytes
        + store_bytes
        + product_store
        + b_decoded
        + fold_bytes
        + threads * per_thread_ram(ram_shape);
    let single_fits = in_ram <= req.memory;
    match pieces {
        // Pieces win when they are cheaper, or when the single transform
        // would have to go out of core and the pieces fit in RAM.
        Some((p, cost)) if req.force != Force::Ntt && (!single_fits || cost < ntt_cost) => {
            return Ok(p)
        }
        _ => {}
    }
    if single_fits {
        plan.algorithm = Algorithm::Ntt {
            shape: ram_shape,
            folded,
        };
        plan.ram_bytes = in_ram;
        plan.passes = ntt_passes(req, ram_shape, folded, WordWidth::Full);
        return Ok(plan);
    }
    plan_out_of_core(req, plan, coefficients)
}

/// Modelled cost of one convolution with a transform of `n` points.
fn transform_cost(n: usize) -> f64 {
    let n = n as f64;
    NTT_COST * n * n.log2() + NTT_FIXED_COST
}

/// Limbs of the longer operand per schoolbook piece: the working set of a
/// piece (192-bit coefficients) stays a few MiB per thread.
const SCHOOLBOOK_PIECE: usize = 1 << 16;

/// Pieces whose transform is at most this long run one per thread, each
/// transform on one core; longer ones run one at a time on all cores.
const PIECE_PARALLEL_MAX_LEN: usize = 1 << 18;

/// Modelled cost of starting one piece (its passes' scheduling), in the
/// units of [`NTT_COST`]; the tables are built once for all pieces.
const PIECE_FIXED_COST: f64 = 10_000.0;

/// The cheapest plan of NTT pieces that fits the budget, with its modelled
/// cost; `None` when the pair is too balanced for pieces (fewer than two)
/// or none fits.
fn best_pieces(req: &Request) -> Option<(Plan, f64)> {
    let (long, short) = (req.a_limbs.max(req.b_limbs), req.a_limbs.min(req.b_limbs));
    if req.square || short <= SCHOOLBOOK_ALWAYS {
        return None;
    }
    let single = shape_for(long + short - 1, req.primes).len();
    let mut best: Option<(Plan, f64)> = None;
    // Each piece's transform holds at least twice the short operand, so a
    // piece is at least as long as the short operand.
    let mut t = (2 * short).next_power_of_two();
    while t < single && t as u64 <= req.primes.max_transform_len() {
        let piece = t - short + 1;
        let count = long.div_ceil(piece);
        let cost =
            count as f64 * (transform_cost(t) - NTT_FIXED_COST + PIECE_FIXED_COST) + NTT_FIXED_COST;
        let base = Plan {
            radix: req.radix,
            a_limbs: req.a_limbs,
            b_limbs: req.b_limbs,
            product_limbs: long + short,
            square: false,
            threads: req.threads,
            algorithm: Algorithm::Zero,
            primes: Vec::new(),
            prime_set: req.primes,
            ram_bytes: FIXED_RAM,
            memory_budget: req.memory,
            scratch_bytes: 0,
            passes: Vec::new(),
            release_inputs: false,
        };
        if count >= 2 && best.as_ref().is_none_or(|b| cost < b.1) {
            if let Ok(p) = pieces_plan(req, base, piece, Some(shape_for(t, req.primes))) {
                best = Some((p, cost));
            }
        }
        t *= 2;
    }
    best
}

/// The plan of pieces of `piece` limbs of the longer operand, each with a
/// transform of `shape` (`None`: schoolbook), with inputs and product kept
/// in RAM where the budget allows; refuses when even one piece at a time
/// does not fit.
fn pieces_plan(req: &Request, mut plan: Plan, piece: usize, shape: Option<Shape>) -> Result<Plan> {
    let (long, short) = (req.a_limbs.max(req.b_limbs), req.a_limbs.min(req.b_limbs));
    let count = long.div_ceil(piece);
    let threads = req.threads as u64;
    let batch = match shape {
        Some(s) if s.len() > PIECE_PARALLEL_MAX_LEN => 1,
        _ => req.threads.min(count),
    };
    let words = |x: usize| 8 * x as u64;
    // Per piece in flight: its limbs, its product's limbs, and either the
    // transform stores (one per prime and a spare) or the schoolbook
    // coefficients.
    let per_piece = words(piece)
        + words(piece + short)
        + match shape {
            Some(s) => words((req.primes.count() + 1) * s.len() + 1),
            None => 3 * words(piece + short),
        };
    let per_thread = shape.map_or(0, per_thread_ram);
    // The short operand decoded once, and the overlap carried from one
    // piece to the next.
    let mut ram = FIXED_RAM + words(2 * short) + batch as u64 * per_piece + threads * per_thread;
    // Inputs: kept mapped when they fit, else released after each read
    // (then only each thread's chunk in flight is resident).
    let released_inputs = threads * (READ_CHUNK_LIMBS as u64 * TEXT_BYTES_PER_LIMB + (128 << 10));
    plan.release_inputs = ram + req.input_bytes + words(long + short) > req.memory;
    ram += if plan.release_inputs {
        released_inputs.min(req.input_bytes)
    } else {
        req.input_bytes
    };
    let product_on_disk = ram + words(long + short) > req.memory;
    if !product_on_disk {
        ram += words(long + short);
    }
    if ram > req.memory {
        return Err(budget_too_small(req.memory, ram));
    }
    if shape.is_some() {
        assert!(req.primes.exact_for(short as u64, req.radix));
        plan.primes = req.primes.primes();
    }
    plan.algorithm = Algorithm::Pieces {
        piece,
        count,
        shape,
        batch,
        product_on_disk,
    };
    plan.ram_bytes = ram;
    plan.scratch_bytes = if product_on_disk {
        words(long + short)
    } else {
        0
    };
    let p8 = words(long + short);
    plan.passes = vec![
        Pass {
            name: pieces_pass_name(count, piece, short),
            read_bytes: req.input_bytes,
            write_bytes: p8,
        },
        Pass {
            name: "write the product".into(),
            read_bytes: p8,
            write_bytes: TEXT_BYTES_PER_LIMB * (long + short) as u64,
        },
    ];
    Ok(plan)
}

/// The refusal of a budget below the smallest plan, naming that plan's
/// need.
fn budget_too_small(budget: u64, need: u64) -> Error {
    Error::Resources {
        what: format!(
            "a memory budget of {} is too small for this product: the smallest plan needs {}",
            crate::size::show_size(budget),
            crate::size::show_size(need)
        ),
        fix: format!(
            "pass --memory {}MiB or more, or fewer --threads",
            need.div_ceil(1 << 20)
        ),
    }
}

/// Limbs per parallel read of an operand (the chunk released after it).
pub const READ_CHUNK_LIMBS: usize = 1 << 16;

/// The name of the pass of a plan of pieces.
pub fn pieces_pass_name(count: usize, piece: usize, short: usize) -> String {
    format!("{count} pieces of {piece} x {short} limbs")
}

/// How the out-of-core residue stores (one per prime, and the row pass's
/// output) keep their words: packed to 52 bits on the 50-bit sets, whose
/// residues stay below `4p < 2^52`, where every block's segments are whole
/// pairs of words (an even number of lanes), so that no two threads write
/// the same byte; full words otherwise.
pub fn residue_width(set: PrimeSet, shape: Shape) -> WordWidth {
    if set.balanced_digits() && shape.lanes.is_multiple_of(2) && shape.cols.is_multiple_of(2) {
        WordWidth::Packed52
    } else {
        WordWidth::Full
    }
}

/// The passes of the NTT path and the bytes each moves (through scratch
/// files out of core, through RAM otherwise). `residues` is how the
/// residue stores keep their words; B's column transforms and the limbs
/// are full words.
fn ntt_passes(req: &Request, shape: Shape, folded: usize, residues: WordWidth) -> Vec<Pass> {
    let n8 = 8 * shape.len() as u64;
    let nr = residues.bytes(shape.len() as u64);
    let p8 = 8 * (req.a_limbs + req.b_limbs) as u64;
    let count = req.primes.count();
    let mut passes = vec![Pass {
        name: columns_of_a_name(count),
        read_bytes: req.input_bytes / if req.square { 1 } else { 2 },
        write_bytes: count as u64 * nr,
    }];
    for k in 0..count {
        if !req.square {
            passes.push(Pass {
                name: format!("columns of B, prime {k}"),
                read_bytes: req.input_bytes / 2,
                write_bytes: n8,
            });
        }
        passes.push(Pass {
            name: format!("rows and pointwise product, prime {k}"),
            read_bytes: if req.square { nr } else { nr + n8 },
            write_bytes: nr,
        });
        passes.push(Pass {
            name: format!("inverse columns, prime {k}"),
            read_bytes: nr,
            write_bytes: nr,
        });
    }
    if folded > 0 {
        passes.push(Pass {
            name: WRAP_PASS.into(),
            read_bytes: 8 * count as u64 * folded as u64,
            write_bytes: 16 * count as u64 * folded as u64,
        });
    }
    passes.push(Pass {
        name: "CRT and carry".into(),
        read_bytes: count as u64 * residues.bytes((req.a_limbs + req.b_limbs - 1) as u64),
        write_bytes: p8,
    });
    passes.push(Pass {
        name: "write the product".into(),
        read_bytes: p8,
        write_bytes: TEXT_BYTES_PER_LIMB * (req.a_limbs + req.b_limbs) as u64,
    });
    passes
}

/// Chooses column blocks, rows and windows that fit the budget, or refuses
/// with the smallest budget that would do.
fn plan_out_of_core(req: &Request, mut plan: Plan, coefficients: usize) -> Result<Plan> {
    let mut shape = shape_for(coefficients, req.primes);
    let threads = req.threads as u64;
    let product_limbs = req.a_limbs + req.b_limbs;
    // Carry and output windows start at up to a quarter of the budget, then
    // column blocks as wide as fit: wide blocks mean long sequential
    // segments on disk. Both shrink until the plan fits.
    let mut window = product_limbs.next_power_of_two().clamp(1 << 12, 1 << 20);
    while window > 1 << 12 && window_ram(window, req.primes) > req.memory / 4 {
        window /= 2;
    }
    // Input pages are released after each read, so only the segments in
    // flight are resident: a column block's rows, each at most 19 bytes a
    // limb plus a page at either end.
    let input = |shape: Shape| {
        (shape.rows as u64 * (TEXT_BYTES_PER_LIMB * shape.lanes as u64 + 8192)).min(req.input_bytes)
    };
    // A packed store's buffer per thread, and one for the carry pass's.
    let packing = |shape: Shape| match residue_width(req.primes, shape) {
        WordWidth::Packed52 => crate::scratch::PACK_BUFFER_BYTES,
        WordWidth::Full => 0,
    };
    let ram = |shape: Shape, window: usize| {
        FIXED_RAM
            + window_ram(window, req.primes)
            + (threads + 1) * packing(shape)
            + threads * (per_thread_ram(shape) + input(shape))
    };
    loop {
        shape.lanes = shape.cols;
        while shape.lanes > 1 && ram(shape, window) > req.memory {
            shape.lanes /= 2;
        }
        if ram(shape, window) <= req.memory || window == 1 << 12 {
            break;
        }
        window /= 2;
    }
    let need = ram(shape, window);
    if need > req.memory {
        return Err(budget_too_small(req.memory, need));
    }
    let n_words = shape.len() as u64;
    let spare_words = n_words.max(product_limbs as u64);
    plan.algorithm = Algorithm::OutOfCore { shape, window };
    plan.release_inputs = true;
    plan.ram_bytes = need;
    // A residue store per prime, one for B and then the product's limbs,
    // and one for the row pass's output (so that no pass writes where it
    // reads, and an interrupted block can always be redone).
    let residues = residue_width(req.primes, shape);
    plan.scratch_bytes =
        (req.primes.count() as u64 + 1) * residues.bytes(n_words) + 8 * spare_words;
    plan.passes = ntt_passes(req, shape, 0, residues);
    Ok(plan)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn req(a: usize, b: usize) -> Request {
        Request::in_memory(a, b, Radix::Binary, false, 2, Force::Auto)
    }

    #[test]
    fn shapes_cover_the_product_and_stay_balanced() {
        for min_len in [1usize, 2, 3, 1000, 1 << 20, (1 << 23) + 1, 1 << 30] {
            let s = shape_for(min_len, PrimeSet::Three62);
            assert!(s.len() >= min_len);
            assert!(s.len() < 2 * min_len.max(2));
            assert!(s.rows <= s.cols);
            assert_eq!(s.cols % s.lanes, 0);
            assert!(crate::ntt::supported_len(s.cols) && s.rows.is_power_of_two());
        }
        // Just above a power of two, three quarters of the next one: at
        // most 3/2 of the length needed, never 2x.
        for k in 10..=34u32 {
            for min_len in [(1usize << k) + 1, 3 << (k - 1), (3 << (k - 1)) + 1] {
                let s = shape_for(min_len, PrimeSet::Three62);
                let n = s.len();
                assert!(n >= min_len);
                let best = if min_len <= 3 << (k - 1) {
                    3 << (k - 1)
                } else {
                    1 << (k + 1)
                };
                assert_eq!(n, best, "min_len {min_len}");
                assert!(s.rows <= s.cols && s.cols.is_multiple_of(s.lanes) && s.lanes == LANES);
            }
        }
    }

    /// The four-prime kernels take `3 * 2^k` rows too, so their shapes are
    /// the three-prime ones; the plan records the set it was made for and
    /// sizes its stores by that set's prime count.
    #[test]
    fn four_prime_plans_use_the_same_shapes_and_four_stores() {
        let four = PrimeSet::Four50(crate::ntt50::Kernel::Scalar);
        for min_len in [1usize, 1000, (1 << 20) + 1, 3 << 20, (1 << 23) + 1] {
            assert_eq!(
                shape_for(min_len, four),
                shape_for(min_len, PrimeSet::Three62)
            );
        }
        // 2^23 limbs (2^29 bits) are past three 50-bit primes' bound.
        let n = 1u64 << 24;
        let mut r = req(1 << 23, 1 << 23);
        r.primes = four;
        let p4 = plan(&r).unwrap();
        r.primes = PrimeSet::Three62;
        let p3 = plan(&r).unwrap();
        assert_eq!((p4.prime_set, p4.primes.len()), (four, 4));
        assert_eq!((p3.prime_set, p3.primes.len()), (PrimeSet::Three62, 3));
        // One more residue store of 2^24 words in RAM.
        assert_eq!(p4.ram_bytes - p3.ram_bytes, 8 * n);
        assert_eq!(p4.passes[0].name, "columns of A, four primes");
        assert_eq!(p4.passes.len(), p3.passes.len() + 3);
        // Out of core, one more residue store of scratch.
        r.memory = 64 << 20;
        r.primes = four;
        let o4 = plan(&r).unwrap();
        r.primes = PrimeSet::Three62;
        let o3 = plan(&r).unwrap();
        let Algorithm::OutOfCore { shape, .. } = o4.algorithm else {
            panic!("{o4:?}");
        };
        // Four residue stores and the row pass's, packed to 52 bits on the
        // 50-bit set, and one of full words for B and the limbs.
        assert_eq!(residue_width(four, shape), WordWidth::Packed52);
        assert_eq!(residue_width(PrimeSet::Three62, shape), WordWidth::Full);
        assert_eq!(o4.scratch_bytes, 5 * 13 * n / 2 + 8 * n);
        assert_eq!(o3.scratch_bytes, 4 * 8 * n + 8 * n);
        // One limb fewer in the shorter operand and three primes suffice:
        // the same stores as the 62-bit set, on the same shape.
        let mut r = req(1 << 23, 8_385_533);
        r.primes = four;
        let t = plan(&r).unwrap();
        assert_eq!(t.prime_set, PrimeSet::Three50(crate::ntt50::Kernel::Scalar));
        assert_eq!(t.primes, four.primes()[..3]);
        r.primes = PrimeSet::Three62;
        assert_eq!(plan(&r).unwrap().ram_bytes, t.ram_bytes);
    }

    /// Past the four primes' 2^32 points the plan takes the three primes
    /// below 2^62 rather than refusing.
    #[test]
    fn products_past_the_four_prime_limit_use_three_primes() {
        let four = PrimeSet::Four50(crate::ntt50::Kernel::Scalar);
        // 2^32 + 1 coefficients: the shortest length, 3 * 2^31, is past
        // 2^32.
        let mut r = req((1 << 31) + 2, 1 << 31);
        r.primes = four;
        r.memory = 1 << 30;
        r.input_bytes = 1 << 35;
        let p = plan(&r).unwrap();
        assert_eq!(p.prime_set, PrimeSet::Three62, "{p:?}");
        assert_eq!(p.primes.len(), 3);
        // 2^32 - 1 coefficients fit 2^32 points.
        let mut r = req(1 << 31, 1 << 31);
        r.primes = four;
        r.memory = 1 << 30;
        r.input_bytes = 1 << 35;
        assert_eq!(plan(&r).unwrap().prime_set, four);
    }

    #[test]
    fn small_operands_use_schoolbook_and_large_ones_the_ntt() {
        assert_eq!(plan(&req(10, 10)).unwrap().algorithm, Algorithm::Schoolbook);
        assert_eq!(
            plan(&req(1_000_000, 5)).unwrap().algorithm,
            Algorithm::Schoolbook
        );
        assert!(matches!(
            plan(&req(100_000, 100_000)).unwrap().algorithm,
            Algorithm::Ntt { .. }
        ));
        assert_eq!(plan(&req(0, 100)).unwrap().algorithm, Algorithm::Zero);
    }

    #[test]
    fn zero_threads_is_refused_with_a_fix() {
        let mut r = req(5, 5);
        r.threads = 0;
        let e = plan(&r).unwrap_err().to_string();
        assert!(e.contains("--threads"), "{e}");
    }

    /// Over a grid of sizes and budgets: every plan fits its budget, takes
    /// the RAM path exactly when that fits, covers the product, and keeps
    /// the convolution exact.
    /// The wrap-around correction is planned where it pays and nowhere
    /// else: the 4·10^7-digit decimal pair (4_210_527 coefficients) folds
    /// its 16_223 coefficients past 2^22 points instead of taking 3·2^21;
    /// one coefficient past a power of two or three times one is folded; a
    /// product 19% past 2^23 (8·10^7 hexadecimal digits a side) is not,
    /// since its short product would need more memory than the longer
    /// transform saves; an operand longer than the transform, and the
    /// 62-bit set, never fold.
    #[test]
    fn folding_is_planned_only_where_it_pays() {
        let four = PrimeSet::Four50(crate::ntt50::Kernel::Scalar);
        let three = PrimeSet::Three50(crate::ntt50::Kernel::Scalar);
        let fold = |count: usize, longer: usize, set| {
            let (s, f) = ram_shape_for(count, longer, set);
            (s.len(), f)
        };
        assert_eq!(fold(4_210_527, 2_105_264, three), (1 << 22, 16_223));
        assert_eq!(fold(4_210_527, 2_105_264, four), (1 << 22, 16_223));
        for len in [1 << 10, 3 << 9, 1 << 16, 3 << 20] {
            assert_eq!(fold(len + 1, len / 2 + 1, four), (len, 1), "{len}");
        }
        assert_eq!(fold(9_999_999, 5_000_000, three), (3 << 22, 0));
        assert_eq!(fold((1 << 20) + 1, (1 << 20) + 1, four), (3 << 19, 0));
        assert_eq!(
            fold((1 << 20) + 1, 1 << 19, PrimeSet::Three62),
            (3 << 19, 0)
        );
        // Below 2^10 points nothing folds.
        assert_eq!(fold(513, 257, four), (768, 0));
        // The plan carries it: its RAM counts the short product, and a
        // pass folds it back before the CRT.
        let r = Request {
            primes: three,
            ..Request::in_memory(2_105_264, 2_105_264, Radix::Decimal, false, 2, Force::Ntt)
        };
        let p = plan(&r).unwrap();
        assert!(
            matches!(p.algorithm, Algorithm::Ntt { folded: 16_223, .. }),
            "{p:?}"
        );
        let names: Vec<&str> = p.passes.iter().map(|x| x.name.as_str()).collect();
        let at = names.iter().position(|n| *n == WRAP_PASS).unwrap();
        assert_eq!(names[at + 1], "CRT and carry");
        assert!(names[at - 1].starts_with("inverse columns"));
    }

    #[test]
    fn no_plan_exceeds_its_budget() {
        let mb = 1u64 << 20;
        for limbs in [1_000usize, 100_000, 1_000_000, 50_000_000, 600_000_000] {
            for budget in [8 * mb, 64 * mb, 256 * mb, 2048 * mb, 1 << 40] {
                for radix in [Radix::Binary, Radix::Decimal] {
                    let mut r =
                        Request::in_memory(limbs, limbs / 3 + 1, radix, false, 2, Force::Ntt);
                    r.memory = budget;
                    r.input_bytes = 19 * (limbs + limbs / 3) as u64;
                    match plan(&r) {
                        Ok(p) => {
                            assert!(p.ram_bytes <= budget, "{limbs} {budget}: {p:?}");
                            let (shape, folded) = match p.algorithm {
                                Algorithm::Ntt { shape, folded } => (shape, folded),
                                Algorithm::OutOfCore { shape, .. } => {
                                    assert!(p.scratch_bytes >= 8 * 4 * shape.len() as u64);
                                    (shape, 0)
                                }
                                other => panic!("{other:?}"),
                            };
                            // What the transform does not cover wraps and is
                            // folded back: a quarter of it at most, and the
                            // operands fit it whole.
                            assert_eq!(shape.len() + folded, shape.len().max(limbs + limbs / 3));
                            assert!(4 * folded <= shape.len() && shape.len() >= limbs);
                            assert_eq!(shape.cols % shape.lanes, 0);
                            assert!(p.prime_set.exact_for((limbs / 3 + 1) as u64, radix));
                            assert!(p.prime_set.supports_len(shape.len()));
                            assert_eq!(p.primes.len(), p.prime_set.count());
                        }
                        Err(e) => {
                            let text = e.to_string();
                            assert!(text.contains("smallest plan needs"), "{text}");
                            assert!(
                                budget <= 8 * mb || limbs >= 50_000_000,
                                "{limbs} {budget}: {text}"
                            );
                        }
                    }
                }
            }
        }
    }

    /// Unbalanced pairs over a grid of budgets: plans of pieces fit their
    /// budget, cover the long operand, hold each piece's product in its
    /// transform, and keep the convolution exact.
    #[test]
    fn plans_of_pieces_fit_and_cover_the_product() {
        let mb = 1u64 << 20;
        let mut seen = 0;
        for (long, short) in [
            (100_000usize, 1_000usize),
            (1_000_000, 40),
            (1_000_000, 5_000),
            (50_000_000, 300),
            (600_000_000, 20_000),
            (600_000_000, 3),
        ] {
            for budget in [8 * mb, 64 * mb, 2048 * mb, 1 << 40] {
                for radix in [Radix::Binary, Radix::Decimal] {
                    for swap in [false, true] {
                        let (a, b) = if swap { (short, long) } else { (long, short) };
                        let mut r = Request::in_memory(a, b, radix, false, 2, Force::Auto);
                        r.memory = budget;
                        r.input_bytes = 19 * (long + short) as u64;
                        let p = match plan(&r) {
                            Ok(p) => p,
                            Err(e) => {
                                assert!(budget <= 8 * mb, "{long}x{short} {budget}: {e}");
                                continue;
                            }
                        };
                        assert!(p.ram_bytes <= budget, "{long}x{short} {budget}: {p:?}");
                        if let Algorithm::Pieces {
                            piece,
                            count,
                            shape,
                            batch,
                            product_on_disk,
                        } = p.algorithm
                        {
                            seen += 1;
                            assert!(count >= 2 && batch >= 1);
                            assert!(piece * count >= long && piece * (count - 1) < long);
                            if let Some(s) = shape {
                                assert!(s.len() >= piece + short - 1, "{p:?}");
                                assert!(p.prime_set.exact_for(short as u64, radix));
                            }
                            assert_eq!(product_on_disk, p.scratch_bytes > 0);
                        }
                    }
                }
            }
        }
        assert!(seen > 20, "the grid exercises pieces ({seen} plans)");
    }

    #[test]
    fn long_by_short_pairs_are_cut_into_pieces() {
        // 10^6 x 5000 limbs: pieces cost less than one 2^21-point transform.
        let p = plan(&req(1_000_000, 5_000)).unwrap();
        assert!(matches!(p.algorithm, Algorithm::Pieces { .. }), "{p:?}");
        // Balanced pairs never are.
        let p = plan(&req(1_000_000, 900_000)).unwrap();
        assert!(matches!(p.algorithm, Algorithm::Ntt { .. }), "{p:?}");
        // Forcing the NTT keeps one transform.
        let mut r = req(1_000_000, 5_000);
        r.force = Force::Ntt;
        assert!(matches!(plan(&r).unwrap().algorithm, Algorithm::Ntt { .. }));
    }

    #[test]
    fn small_budgets_go_out_of_core_and_tiny_ones_are_refused() {
        let mut r = req(1_000_000, 1_000_000);
        r.memory = 32 << 20;
        let p = plan(&r).unwrap();
        assert!(matches!(p.algorithm, Algorithm::OutOfCore { .. }), "{p:?}");
        r.memory = 1 << 20;
        let e = plan(&r).unwrap_err().to_string();
        assert!(e.contains("--memory"), "{e}");
        r.memory = u64::MAX;
        assert!(matches!(plan(&r).unwrap().algorithm, Algorithm::Ntt { .. }));
    }

    #[test]
    fn square_skips_the_second_operand_in_memory() {
        // A square keeps no store and no decoded limbs for B: 4N + lb words
        // become 3N + (la + lb).
        let mut r = req(1 << 20, 1 << 20);
        let full = plan(&r).unwrap().ram_bytes;
        r.square = true;
        let sq = plan(&r).unwrap().ram_bytes;
        let n = 1u64 << 21;
        assert_eq!(full - sq, 8 * (n + (1 << 20)) - 8 * (1 << 21));
    }
}
