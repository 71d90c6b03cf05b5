//! The planner: a pure function from the sizes of a product to a [`Plan`].
//!
//! The plan is a value: it is printed, compared in tests and (later) stored
//! with a run's state. The executor only takes a `&Plan`.

use crate::arith::primes::{coefficient_bound_holds, MAX_TRANSFORM_LEN, PRIMES, PRIME_COUNT};
use crate::fourstep::Shape;
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

/// Adjacent columns transformed together in a column pass: 16 words fill
/// two cache lines per row segment.
const LANES: usize = 16;

/// How a product is computed.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case", tag = "kind")]
pub enum Algorithm {
    /// One operand is zero: nothing to compute.
    Zero,
    /// Quadratic convolution, for a short operand.
    Schoolbook,
    /// Three-prime four-step NTT in RAM.
    Ntt {
        /// The transform's shape.
        shape: Shape,
    },
}

/// A choice of algorithm forced by the caller (tests, benchmarks).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub enum Force {
    /// Let the planner decide.
    Auto,
    /// Always schoolbook.
    Schoolbook,
    /// Always the NTT.
    Ntt,
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
    /// RAM the working arrays need, in bytes.
    pub ram_bytes: u64,
}

/// The four-step shape for a transform of at least `min_len` points.
pub fn shape_for(min_len: usize) -> Shape {
    let n = min_len.max(2).next_power_of_two();
    let log = n.trailing_zeros();
    let rows_log = (log / 2).min(ROWS_LOG_MAX);
    let rows = 1usize << rows_log;
    let cols = n / rows;
    Shape {
        rows,
        cols,
        lanes: LANES.min(cols),
    }
}

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
        ram_bytes: 0,
    };
    if la == 0 || lb == 0 {
        plan.product_limbs = 0;
        return Ok(plan);
    }
    let coefficients = la + lb - 1;
    let short = la.min(lb);
    let shape = shape_for(coefficients);
    let n = shape.len() as f64;
    let ntt_cost = NTT_COST * n * n.log2() + NTT_FIXED_COST;
    let schoolbook_cost = SCHOOLBOOK_COST * la as f64 * lb as f64;
    let use_ntt = match req.force {
        Force::Schoolbook => false,
        Force::Ntt => true,
        Force::Auto => short > SCHOOLBOOK_ALWAYS && ntt_cost < schoolbook_cost,
    };
    let limb_bytes = 8 * product_limbs as u64;
    if !use_ntt {
        plan.algorithm = Algorithm::Schoolbook;
        plan.ram_bytes = 24 * coefficients as u64 + limb_bytes;
        return Ok(plan);
    }
    if shape.len() as u64 > MAX_TRANSFORM_LEN {
        return Err(Error::Resources {
            what: format!(
                "a product of {la} x {lb} limbs needs a transform of {} points; the limit is 2^40",
                shape.len()
            ),
            fix: "split the operands into pieces below 2^39 limbs".into(),
        });
    }
    // Exactness: every coefficient sums at most `short` limb products, and
    // the CRT over the three primes is exact below their product.
    assert!(coefficient_bound_holds(short as u64, req.radix.max_limb()));
    let operands = if req.square { 1 } else { 2 };
    plan.algorithm = Algorithm::Ntt { shape };
    plan.primes = PRIMES.iter().map(|p| p.modulus.p).collect();
    plan.ram_bytes = (operands * PRIME_COUNT * shape.len() * 8) as u64 + limb_bytes;
    Ok(plan)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn req(a: usize, b: usize) -> Request {
        Request {
            a_limbs: a,
            b_limbs: b,
            radix: Radix::Binary,
            square: false,
            threads: 2,
            force: Force::Auto,
        }
    }

    #[test]
    fn shapes_cover_the_product_and_stay_balanced() {
        for min_len in [1usize, 2, 3, 1000, 1 << 20, (1 << 23) + 1, 1 << 30] {
            let s = shape_for(min_len);
            assert!(s.len() >= min_len);
            assert!(s.len() < 2 * min_len.max(2));
            assert!(s.rows <= s.cols);
            assert_eq!(s.cols % s.lanes, 0);
        }
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

    #[test]
    fn square_needs_half_the_transform_memory() {
        let mut r = req(1 << 20, 1 << 20);
        let full = plan(&r).unwrap().ram_bytes;
        r.square = true;
        let sq = plan(&r).unwrap().ram_bytes;
        assert!(sq < full * 6 / 10);
    }
}
