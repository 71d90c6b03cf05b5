//! The multiplication engine against num-bigint, in both radixes: random
//! sizes up to a million limbs, squares, long-by-short products, adversarial
//! limb patterns, the planner's thresholds and transform-length boundaries,
//! and every forced path on the same operands.
//!
//! Every expected value comes from num-bigint applied to the operands'
//! limbs; no test compares the engine only with itself. Operands are drawn
//! from fixed seeds, so a failure reproduces exactly.

mod common;

use common::*;
use num_bigint::BigUint;
use vastmul::engine::{multiply, multiply_forced};
use vastmul::plan::{plan, shape_for, Algorithm, Force, Request, SCHOOLBOOK_ALWAYS};
use vastmul::primeset::PrimeSet;
use vastmul::radix::DEC_BASE;
use vastmul::Radix;

const RADIXES: [Radix; 2] = [Radix::Binary, Radix::Decimal];
const FORCES: [Force; 3] = [Force::Schoolbook, Force::Ntt, Force::Auto];

/// A seed that differs per radix, so the two radixes never see the same
/// stream reinterpreted.
fn seed(radix: Radix, n: u64) -> u64 {
    match radix {
        Radix::Binary => n,
        Radix::Decimal => n ^ 0x5eed_0000_d0d0_0000,
    }
}

// ---------------------------------------------------------------------------
// The reference helpers themselves: a wrong conversion would make every
// decimal comparison meaningless, so each fast one is checked against a
// direct one.
// ---------------------------------------------------------------------------

/// The divide-and-conquer decimal conversion splits at powers of two and
/// switches to Horner below 32 limbs: lengths on both sides of each split,
/// and leading zero limbs, must give Horner's value, and converting back
/// must give the trimmed limbs.
#[test]
fn decimal_conversion_matches_horner() {
    let mut rng = Rng::new(1);
    let mut lengths: Vec<usize> = vec![
        0, 1, 2, 31, 32, 33, 63, 64, 65, 127, 128, 129, 1000, 2047, 2048, 2049,
    ];
    lengths.extend((0..20).map(|_| rng.range(1, 5000)));
    for len in lengths {
        let mut limbs = rng.limbs(len, Radix::Decimal);
        // Maximal digits at both ends exercise the carries of the sums.
        if len >= 2 {
            limbs[0] = DEC_BASE - 1;
            limbs[len - 1] = DEC_BASE - 1;
        }
        let fast = decimal_to_big(&limbs);
        assert_eq!(
            fast,
            decimal_to_big_horner(&limbs),
            "to BigUint, {len} limbs"
        );
        assert_eq!(big_to_decimal(&fast), limbs, "back to limbs, {len} limbs");
        assert_eq!(
            big_to_decimal_direct(&fast),
            limbs,
            "direct back, {len} limbs"
        );
        let mut padded = limbs.clone();
        padded.extend(std::iter::repeat_n(0, 37));
        assert_eq!(decimal_to_big(&padded), fast, "leading zeros, {len} limbs");
    }
    // The cached powers are the values the limb vectors [0; 2^j] ++ [1] mean.
    for j in 0..8 {
        assert_eq!(
            *decimal_power(j),
            BigUint::from(10u8).pow(19 << j),
            "10^(19*2^{j})"
        );
    }
    assert_eq!(decimal_to_big(&[]), BigUint::default());
}

/// Binary limbs through 32-bit digits must agree with shifting limbs in
/// one at a time, and round-trip.
#[test]
fn binary_conversion_matches_shifts() {
    let mut rng = Rng::new(2);
    for len in [0usize, 1, 2, 3, 100, 1001] {
        let limbs = rng.limbs(len, Radix::Binary);
        let mut acc = BigUint::default();
        for &l in limbs.iter().rev() {
            acc = (acc << 64u32) + l;
        }
        assert_eq!(binary_to_big(&limbs), acc, "{len} limbs");
        assert_eq!(big_to_binary(&acc), limbs, "{len} limbs back");
    }
    assert_eq!(big_to_binary(&BigUint::default()), Vec::<u64>::new());
}

/// The generator's decimal limbs must stay below 10^19 and still reach the
/// top of the range, or decimal tests would silently avoid the largest
/// digits.
#[test]
fn generated_decimal_limbs_cover_the_digit_range() {
    let mut rng = Rng::new(3);
    let limbs = rng.limbs(100_000, Radix::Decimal);
    assert!(limbs.iter().all(|&l| l < DEC_BASE));
    assert!(limbs.iter().any(|&l| l > DEC_BASE / 10 * 9));
    assert!(limbs.iter().any(|&l| l < DEC_BASE / 10));
    // Same seed, same stream.
    assert_eq!(Rng::new(3).limbs(100_000, Radix::Decimal), limbs);
}

/// The fingerprint and block checks used for the largest decimal products
/// must reject a product with a single wrong limb, wherever it is.
#[test]
fn large_product_checks_reject_a_corrupted_limb() {
    let mut rng = Rng::new(4);
    let a = rng.limbs(20_000, Radix::Decimal);
    let b = rng.limbs(40, Radix::Decimal);
    let good = from_big(&(decimal_to_big(&a) * decimal_to_big(&b)), Radix::Decimal);
    let fp = Fingerprint::new(99);
    let long = LongDecimal::new(&a);
    assert!(fp.agrees(&good, &a, &b, Radix::Decimal));
    assert_eq!(long.mismatch(&good, &b), None);
    for pos in [0, 127, 128, 2048, 10_000, good.len() - 2, good.len() - 1] {
        let mut bad = good.clone();
        bad[pos] = if bad[pos] == 0 { 1 } else { bad[pos] - 1 };
        assert!(
            !fp.agrees(&bad, &a, &b, Radix::Decimal),
            "fingerprint missed limb {pos}"
        );
        let found = long.mismatch(&bad, &b);
        assert!(found.is_some(), "block check missed limb {pos}");
        if pos < 10_000 {
            assert_eq!(
                found.unwrap(),
                format!("limb {pos}: got {}, expected {}", bad[pos], good[pos])
            );
        }
    }
    // A product one limb short, as a dropped top carry would leave it.
    let short = &good[..good.len() - 1];
    assert!(!fp.agrees(short, &a, &b, Radix::Decimal));
    assert!(long.mismatch(short, &b).is_some());
}

// ---------------------------------------------------------------------------
// Random sizes.
// ---------------------------------------------------------------------------

/// Random operand lengths, log-uniform so every octave from one limb to
/// about 10^5 is visited, in both radixes, on the planner's own choice and
/// on the forced NTT (which Auto rarely picks for unbalanced sizes).
#[test]
fn random_sizes_match_reference() {
    for radix in RADIXES {
        let mut rng = Rng::new(seed(radix, 10));
        let max = match radix {
            Radix::Binary => 120_000,
            Radix::Decimal => 40_000,
        };
        for i in 0..60 {
            let la = rng.log_uniform(1, max);
            let lb = rng.log_uniform(1, max);
            let a = rng.limbs(la, radix);
            let b = rng.limbs(lb, radix);
            let force = if i % 2 == 0 { Force::Auto } else { Force::Ntt };
            check(&a, &b, radix, force, &format!("random #{i} {la}x{lb}"));
        }
    }
}

/// One balanced million-limb binary product, checked limb for limb: the
/// transform length (2^21) and the coefficient sizes are those of real
/// workloads.
#[test]
fn million_limb_binary_product_matches_reference() {
    let mut rng = Rng::new(seed(Radix::Binary, 11));
    let a = rng.limbs(1_000_000, Radix::Binary);
    let b = rng.limbs(1_000_000, Radix::Binary);
    let got = multiply(&a, &b, Radix::Binary);
    assert_product(&got, &a, &b, Radix::Binary, "1e6 x 1e6 binary");
}

/// One balanced million-limb decimal product, compared whole: the
/// operands and the two-million-limb product go through the
/// divide-and-conquer conversion, on two threads next to num-bigint's
/// product. The most expensive test here (about 40 CPU-seconds), and the
/// only one that checks a decimal product of this size exactly.
#[test]
fn million_limb_decimal_product_matches_reference() {
    let mut rng = Rng::new(seed(Radix::Decimal, 11));
    let a = rng.limbs(1_000_000, Radix::Decimal);
    let b = rng.limbs(1_000_000, Radix::Decimal);
    let got = multiply(&a, &b, Radix::Decimal);
    assert_product(&got, &a, &b, Radix::Decimal, "1e6 x 1e6 decimal");
}

// ---------------------------------------------------------------------------
// Squares.
// ---------------------------------------------------------------------------

/// `a == b` takes the squaring path (one forward transform): it must give
/// the same as a general product, whether the operands are one slice, equal
/// copies, or equal after trimming different numbers of leading zeros.
#[test]
fn squares_match_reference() {
    for radix in RADIXES {
        let mut rng = Rng::new(seed(radix, 20));
        let sizes: &[usize] = match radix {
            Radix::Binary => &[1, 2, 31, 32, 33, 100, 1000, 4097, 65_536, 300_000],
            Radix::Decimal => &[1, 2, 31, 32, 33, 100, 1000, 4097, 65_536],
        };
        for &n in sizes {
            let a = rng.limbs(n, radix);
            let expected = to_big(&a, radix).pow(2);
            let same = |got: &[u64], how: &str| {
                let what = format!("square {n} {how} [{}]", radix.name());
                assert_well_formed(got, radix, &what);
                assert!(
                    to_big(got, radix) == expected,
                    "{what}: differs from num-bigint"
                );
            };
            same(&multiply(&a, &a, radix), "auto");
            same(&multiply_forced(&a, &a, radix, Force::Ntt), "ntt");
            if n <= 4097 {
                same(
                    &multiply_forced(&a, &a, radix, Force::Schoolbook),
                    "schoolbook",
                );
            }
            // Equal content in two allocations, with different leading zeros.
            let mut b = a.clone();
            b.extend([0, 0, 0]);
            let mut c = a.clone();
            c.push(0);
            same(&multiply_forced(&c, &b, radix, Force::Ntt), "padded copies");
        }
    }
}

/// Million-limb squares, in both radixes, checked by residues and exactly
/// on their low 4096 limbs: an exact check would cost another million-limb
/// num-bigint product each (and a two-million-limb decimal conversion), on
/// top of the two exact balanced products above.
#[test]
fn million_limb_squares_match_reference_residues() {
    let fp = Fingerprint::new(21);
    for radix in RADIXES {
        let mut rng = Rng::new(seed(radix, 21));
        let a = rng.limbs(1_000_000, radix);
        let got = multiply(&a, &a, radix);
        fp.assert_product(
            &got,
            &a,
            &a,
            radix,
            &format!("1e6 square [{}]", radix.name()),
        );
        assert_low_limbs(
            &got,
            &a,
            &a,
            radix,
            4096,
            &format!("1e6 square [{}]", radix.name()),
        );
    }
}

// ---------------------------------------------------------------------------
// Long by short.
// ---------------------------------------------------------------------------

/// Short operand lengths for the long-by-short products: both sides of
/// [`SCHOOLBOOK_ALWAYS`] and of the lane width, powers of two and their
/// neighbours, up to 100.
const SHORT_LENGTHS: [usize; 11] = [1, 2, 3, 16, 31, 32, 33, 63, 64, 65, 100];

/// A million limbs times `k` limbs, `k` up to 100, in binary: the planner
/// keeps these on schoolbook, so the forced NTT is run as well at a few `k`
/// (a transform of 2^20 points holding a nearly empty operand). The short
/// operand is passed first and second.
#[test]
fn million_by_short_binary_matches_reference() {
    let radix = Radix::Binary;
    let mut rng = Rng::new(seed(radix, 30));
    let a = rng.limbs(1_000_000, radix);
    let big_a = binary_to_big(&a);
    for k in SHORT_LENGTHS {
        let b = rng.limbs(k, radix);
        let expected = big_to_binary(&(&big_a * binary_to_big(&b)));
        let forces: &[Force] = if [1, 33, 100].contains(&k) {
            &[Force::Auto, Force::Ntt]
        } else {
            &[Force::Auto]
        };
        for &force in forces {
            let got = multiply_forced(&a, &b, radix, force);
            let what = format!("1e6 x {k} binary {force:?}");
            assert_well_formed(&got, radix, &what);
            assert_limbs_eq(&got, &expected, &what);
        }
        if k % 2 == 1 {
            let got = multiply(&b, &a, radix);
            assert_limbs_eq(&got, &expected, &format!("{k} x 1e6 binary"));
        }
    }
}

/// The decimal counterpart of [`million_by_short_binary_matches_reference`],
/// checked exactly block by block (linear in the long operand).
#[test]
fn million_by_short_decimal_matches_reference() {
    let radix = Radix::Decimal;
    let mut rng = Rng::new(seed(radix, 30));
    let a = rng.limbs(1_000_000, radix);
    let long = LongDecimal::new(&a);
    for k in SHORT_LENGTHS {
        let b = rng.limbs(k, radix);
        let forces: &[Force] = if [1, 33, 100].contains(&k) {
            &[Force::Auto, Force::Ntt]
        } else {
            &[Force::Auto]
        };
        for &force in forces {
            let got = multiply_forced(&a, &b, radix, force);
            long.assert_product(&got, &b, &format!("1e6 x {k} decimal {force:?}"));
        }
        if k == 64 {
            let got = multiply(&b, &a, radix);
            long.assert_product(&got, &b, &format!("{k} x 1e6 decimal"));
        }
    }
}

// ---------------------------------------------------------------------------
// Adversarial limb patterns.
// ---------------------------------------------------------------------------

/// All-maximal limbs (`B^n - 1`: u64::MAX in binary, 10^19 - 1 in decimal)
/// give the largest convolution coefficients and products whose upper half
/// is one long run of maximal limbs, which every carry must ripple through.
#[test]
fn all_maximal_limbs_match_reference() {
    for radix in RADIXES {
        for (la, lb) in [
            (1, 1),
            (2, 3),
            (31, 31),
            (33, 33),
            (64, 1000),
            (1000, 1000),
            (4096, 4096),
            (5000, 77),
        ] {
            let a = radix_power_minus_one(la, radix);
            let b = radix_power_minus_one(lb, radix);
            check_all_paths(&a, &b, radix, &format!("max limbs {la}x{lb}"));
        }
        for (la, lb) in [(50_000, 50_000), (100_000, 3)] {
            let a = radix_power_minus_one(la, radix);
            let b = radix_power_minus_one(lb, radix);
            for force in [Force::Auto, Force::Ntt] {
                check(&a, &b, radix, force, &format!("max limbs {la}x{lb}"));
            }
        }
    }
}

/// Million-limb all-maximal operands: the largest coefficients an input of
/// this size can produce (about 2^148 in binary) must come back exactly
/// through the three-prime reconstruction. Binary is compared with
/// `(B^n - 1)(B^(n-1) - 1) = B^(2n-1) - B^n - B^(n-1) + 1` evaluated by
/// num-bigint, the decimal square by residues and its exact low limbs.
#[test]
fn million_limb_all_maximal_matches_reference() {
    let n = 1_000_000;
    let ones = radix_power_minus_one(n, Radix::Binary);
    let other = radix_power_minus_one(n - 1, Radix::Binary);
    let got = multiply(&ones, &other, Radix::Binary);
    let one = BigUint::from(1u8);
    let bits = |k: usize| 64 * k as u64;
    let expected = (&one << bits(2 * n - 1)) + &one - (&one << bits(n)) - (&one << bits(n - 1));
    assert_well_formed(&got, Radix::Binary, "1e6 max limbs binary");
    assert_limbs_eq(&got, &big_to_binary(&expected), "1e6 max limbs binary");

    let nines = radix_power_minus_one(n, Radix::Decimal);
    let got = multiply(&nines, &nines, Radix::Decimal);
    Fingerprint::new(40).assert_product(
        &got,
        &nines,
        &nines,
        Radix::Decimal,
        "1e6 max limbs decimal",
    );
    // (10^19n - 1)^2: limbs 1, then n - 1 zeros, 10^19 - 2, n - 1 nines.
    assert_eq!(got.len(), 2 * n);
    assert_low_limbs(
        &got,
        &nines,
        &nines,
        Radix::Decimal,
        4096,
        "1e6 max limbs decimal",
    );
}

/// `B^k - 1`, `B^k` and `B^k + 1` against each other: sparse operands,
/// exact powers and maximal runs, whose products are long runs of zero or
/// maximal limbs with isolated limbs at the ends, on every path.
#[test]
fn radix_powers_and_neighbours_match_reference() {
    for radix in RADIXES {
        let ks = [1usize, 2, 32, 33, 1000, 4097];
        for &k in &ks {
            for &j in &ks {
                let left = [
                    radix_power_minus_one(k, radix),
                    radix_power(k),
                    radix_power_plus_one(k),
                ];
                let right = [
                    radix_power_minus_one(j, radix),
                    radix_power(j),
                    radix_power_plus_one(j),
                ];
                for (x, a) in left.iter().enumerate() {
                    for (y, b) in right.iter().enumerate() {
                        check_all_paths(
                            a,
                            b,
                            radix,
                            &format!(
                                "B^{k}{} * B^{j}{}",
                                ["-1", "", "+1"][x],
                                ["-1", "", "+1"][y]
                            ),
                        );
                    }
                }
            }
        }
    }
}

/// An operand whose only non-zero limb is its top one (`t * B^z`): the
/// engine must not mistake the low zero run for an empty operand, and the
/// product's low `z` limbs must be zero.
#[test]
fn single_top_limb_operands_match_reference() {
    for radix in RADIXES {
        let mut rng = Rng::new(seed(radix, 50));
        for z in [1usize, 40, 5000] {
            for top in [1, radix.max_limb(), rng.limb(radix).max(1)] {
                let mut a = vec![0u64; z];
                a.push(top);
                for lb in [1usize, 33, 3000] {
                    let b = rng.limbs(lb, radix);
                    check_all_paths(&a, &b, radix, &format!("{top}*B^{z} x {lb}"));
                }
                check_all_paths(&a, &a, radix, &format!("({top}*B^{z})^2"));
            }
        }
    }
}

/// Leading zero limbs must be ignored: on every path the product equals
/// num-bigint's product of the significant limbs and comes back trimmed.
/// One case hides 32 significant limbs (the schoolbook threshold) under
/// 1000 zeros, where counting the zeros would change the planner's choice.
#[test]
fn leading_zero_limbs_are_ignored() {
    for radix in RADIXES {
        let mut rng = Rng::new(seed(radix, 60));
        for (la, za, lb, zb) in [
            (1, 1, 1, 0),
            (32, 1000, 32, 1),
            (33, 5, 40, 500),
            (3000, 7, 2000, 2),
            (1, 4000, 5, 3),
        ] {
            let mut a = rng.limbs(la, radix);
            let mut b = rng.limbs(lb, radix);
            let expected = to_big(&a, radix) * to_big(&b, radix);
            a.resize(la + za, 0);
            b.resize(lb + zb, 0);
            for force in FORCES {
                let what = format!(
                    "{la}+{za} zeros x {lb}+{zb} zeros {force:?} [{}]",
                    radix.name()
                );
                let got = multiply_forced(&a, &b, radix, force);
                assert_well_formed(&got, radix, &what);
                assert!(
                    to_big(&got, radix) == expected,
                    "{what}: differs from num-bigint"
                );
            }
        }
    }
}

/// A zero operand, however it is written (no limbs, one zero limb, many
/// zero limbs), gives the empty product on every path.
#[test]
fn zero_operands_give_an_empty_product() {
    for radix in RADIXES {
        let mut rng = Rng::new(seed(radix, 70));
        let x = rng.limbs(100, radix);
        let zeros: [Vec<u64>; 3] = [vec![], vec![0], vec![0; 1000]];
        for z in &zeros {
            for force in FORCES {
                for (a, b) in [(z, &x), (&x, z), (z, z)] {
                    let got = multiply_forced(a, b, radix, force);
                    assert!(
                        got.is_empty(),
                        "{} x {} limbs {force:?}: {got:?}",
                        a.len(),
                        b.len()
                    );
                    // And num-bigint agrees that it is zero.
                    assert_eq!(to_big(a, radix) * to_big(b, radix), BigUint::default());
                }
            }
        }
    }
}

/// Multiplying by one returns the other operand: the smallest non-trivial
/// product, on every path.
#[test]
fn one_is_the_identity() {
    for radix in RADIXES {
        let mut rng = Rng::new(seed(radix, 80));
        for n in [1usize, 2, 33, 5000] {
            let x = rng.limbs(n, radix);
            check_all_paths(&x, &[1], radix, &format!("{n} x 1"));
            check_all_paths(&[1], &x, radix, &format!("1 x {n}"));
        }
    }
}

// ---------------------------------------------------------------------------
// Thresholds and transform shapes.
// ---------------------------------------------------------------------------

/// Short operands of `SCHOOLBOOK_ALWAYS - 1`, `SCHOOLBOOK_ALWAYS` and
/// `SCHOOLBOOK_ALWAYS + 1` limbs, against long operands of several sizes,
/// on every path: the planner switches there, so both sides must be right.
#[test]
fn schoolbook_threshold_lengths_match_reference() {
    for radix in RADIXES {
        let mut rng = Rng::new(seed(radix, 90));
        for short in [
            SCHOOLBOOK_ALWAYS - 1,
            SCHOOLBOOK_ALWAYS,
            SCHOOLBOOK_ALWAYS + 1,
        ] {
            for long in [short, short + 1, 1000, 20_000] {
                let a = rng.limbs(short, radix);
                let b = rng.limbs(long, radix);
                check_all_paths(&a, &b, radix, &format!("threshold {short}x{long}"));
            }
        }
    }
}

/// The transform length the planner must pick for `coefficients`
/// coefficients: the smallest power of two holding them (at least 2), or
/// three quarters of it when that holds them too (from 2^10 points on), for
/// a prime set whose kernels take that length.
fn expected_transform_len(coefficients: usize, set: PrimeSet) -> usize {
    let p = coefficients.max(2).next_power_of_two();
    if p >= 1 << 10 && coefficients <= p / 4 * 3 && set.supports_len(p / 4 * 3) {
        p / 4 * 3
    } else {
        p
    }
}

/// The NTT shape the planner gives a forced-NTT product of `la x lb` limbs
/// on `set`, and the coefficients it folds back.
fn planned_on(
    la: usize,
    lb: usize,
    radix: Radix,
    set: PrimeSet,
) -> (vastmul::fourstep::Shape, usize) {
    let mut r = Request::in_memory(la, lb, radix, false, 2, Force::Ntt);
    r.primes = set;
    match plan(&r).expect("plan").algorithm {
        Algorithm::Ntt { shape, folded } => (shape, folded),
        other => panic!("{la}x{lb}: forced NTT planned as {other:?}"),
    }
}

/// Checks the transform the planner gives `la x lb` limbs on the preferred
/// set: the shortest length covering every coefficient, or (50-bit sets
/// only) a shorter one that still holds both operands and folds back what
/// wraps, at most a quarter of its length, for less modelled cost and no
/// more memory. One
/// coefficient past a length of `2^k` or `3 * 2^k` points (from 2^10 on)
/// that holds both operands is always folded back. Returns the shape.
fn assert_planned_length(la: usize, lb: usize, radix: Radix) -> vastmul::fourstep::Shape {
    let set = PrimeSet::preferred();
    let coefficients = la + lb - 1;
    let (shape, folded) = planned_on(la, lb, radix, set);
    let cover = expected_transform_len(coefficients, set);
    let ctx = format!("{la}x{lb} on {set:?}: {shape:?}, {folded} folded");
    if folded == 0 {
        assert_eq!(shape.len(), cover, "{ctx}");
    } else {
        assert!(set.balanced_digits(), "{ctx}");
        assert_eq!(shape.len() + folded, coefficients, "{ctx}");
        assert!(shape.len() < cover && shape.len() >= la.max(lb), "{ctx}");
        assert!(4 * folded <= shape.len(), "{ctx}");
    }
    let below = coefficients - 1;
    if set.balanced_digits() && below >= 1 << 10 && below >= la.max(lb) && set.supports_len(below) {
        assert_eq!((shape.len(), folded), (below, 1), "{ctx}");
    }
    shape
}

/// Products with `la + lb - 1 = 2^k - 1, 2^k, 2^k + 1` coefficients: a
/// transform exactly full, and one coefficient over, which must move to the
/// next length (a cyclic transform one point short would wrap the top
/// coefficient onto the bottom one). Every power of two up to 2^16 with
/// balanced operands, so that every four-step rows/columns split and every
/// lane width below 16 is used. The planned length is checked too.
///
/// From 2^10 points on, lengths of `3 * 2^k` too: `3 * 2^k - 1`, `3 * 2^k`
/// and `3 * 2^k + 1` coefficients (full, and one over, which moves to
/// `2^(k+2)`), so that the radix-3 row transforms are checked at every
/// split as well.
#[test]
fn transform_length_boundaries_balanced_match_reference() {
    for radix in RADIXES {
        let mut rng = Rng::new(seed(radix, 100));
        let mut lengths: Vec<usize> = (1..=16u32)
            .flat_map(|k| {
                let p = 1usize << k;
                [p - 1, p, p + 1]
            })
            .collect();
        lengths.extend((8..=15u32).flat_map(|k| {
            let t = 3usize << k;
            [t - 1, t, t + 1]
        }));
        for coefficients in lengths {
            {
                let la = coefficients.div_ceil(2).max(1);
                let lb = coefficients + 1 - la;
                assert_planned_length(la, lb, radix);
                let a = rng.limbs(la, radix);
                let b = rng.limbs(lb, radix);
                for force in [Force::Ntt, Force::Auto] {
                    check(
                        &a,
                        &b,
                        radix,
                        force,
                        &format!("{coefficients} coefficients, {la}x{lb}"),
                    );
                }
            }
        }
    }
}

/// The same boundaries with one long and one short operand, which makes
/// long transforms cheap to check: 2^20 and 2^20 + 1 coefficients in both
/// radixes (decimal checked block by block), and 2^24 + 1 in binary, whose
/// transform (2^24 points, one coefficient folded back on the 50-bit sets)
/// is the first whose four-step split is no longer near the square root:
/// its rows stay at the planner's maximum while the columns keep growing,
/// so the rows are checked to be shorter than half the columns there.
#[test]
fn transform_length_boundaries_long_by_short_match_reference() {
    let mut rng = Rng::new(seed(Radix::Binary, 110));
    let short = 41;
    for coefficients in [1 << 20, (1 << 20) + 1, (1 << 24) + 1] {
        let la = coefficients + 1 - short;
        let shape = assert_planned_length(la, short, Radix::Binary);
        if coefficients > 1 << 24 {
            assert!(
                shape.rows < shape.cols / 2,
                "{shape:?} is not the capped split"
            );
        }
        let a = rng.limbs(la, Radix::Binary);
        let b = rng.limbs(short, Radix::Binary);
        let what = format!("{coefficients} coefficients, {la}x{short}");
        check(&a, &b, Radix::Binary, Force::Ntt, &what);
    }
    let mut rng = Rng::new(seed(Radix::Decimal, 110));
    for k in [12u32, 20] {
        let p = 1usize << k;
        for coefficients in [p, p + 1] {
            let la = coefficients + 1 - short;
            let a = rng.limbs(la, Radix::Decimal);
            let b = rng.limbs(short, Radix::Decimal);
            let got = multiply_forced(&a, &b, Radix::Decimal, Force::Ntt);
            LongDecimal::new(&a).assert_product(
                &got,
                &b,
                &format!("{coefficients} coefficients, {la}x{short} decimal"),
            );
        }
    }
}

/// The shape's contract, over lengths on and beside every power of two up
/// to 2^30 and three times one: the shortest length of `2^k` or `3 * 2^k`
/// points covering the request, rows times columns, rows a power of two,
/// columns one or three times one, lanes dividing the columns, and rows
/// not exceeding columns.
#[test]
fn shapes_cover_every_length_minimally() {
    for k in 0..=30u32 {
        let p = 1usize << k;
        let t = 3 * p;
        for min_len in [p.saturating_sub(1).max(1), p, p + 1, t - 1, t, t + 1] {
            for set in PrimeSet::all_supported() {
                let s = shape_for(min_len, set);
                assert_eq!(
                    s.len(),
                    expected_transform_len(min_len, set),
                    "len for {min_len}, {set:?}"
                );
                assert!(set.supports_len(s.cols), "{min_len}: {s:?}");
            }
            let s = shape_for(min_len, PrimeSet::Three62);
            assert_eq!(s.rows * s.cols, s.len(), "rows*cols for {min_len}");
            let cols_odd = s.cols >> s.cols.trailing_zeros();
            assert!(
                s.rows.is_power_of_two() && (cols_odd == 1 || cols_odd == 3),
                "{min_len}: {s:?}"
            );
            assert!(s.rows <= s.cols, "{min_len}: {s:?}");
            assert!(
                s.lanes >= 1 && s.cols.is_multiple_of(s.lanes),
                "{min_len}: {s:?}"
            );
        }
    }
}

// ---------------------------------------------------------------------------
// Every path on the same operands.
// ---------------------------------------------------------------------------

/// Schoolbook, NTT and Auto on identical operands, each against num-bigint,
/// at sizes from one limb to a few thousand and lopsided shapes.
#[test]
fn every_forced_path_matches_reference() {
    for radix in RADIXES {
        let mut rng = Rng::new(seed(radix, 120));
        for (la, lb) in [
            (1, 1),
            (1, 2),
            (2, 2),
            (3, 70),
            (16, 17),
            (64, 64),
            (65, 63),
            (100, 1000),
            (999, 1000),
            (4097, 33),
            (5000, 5000),
            (20_000, 3),
            (1, 20_000),
        ] {
            let a = rng.limbs(la, radix);
            let b = rng.limbs(lb, radix);
            check_all_paths(&a, &b, radix, &format!("paths {la}x{lb}"));
        }
    }
}

// ---------------------------------------------------------------------------
// The planner's choices.
// ---------------------------------------------------------------------------

fn auto_plan(la: usize, lb: usize, radix: Radix, square: bool) -> Algorithm {
    plan(&Request::in_memory(la, lb, radix, square, 2, Force::Auto))
        .expect("plan")
        .algorithm
}

/// Auto picks schoolbook for tiny products and for any product whose short
/// operand is at most `SCHOOLBOOK_ALWAYS` limbs (however long the other),
/// the NTT for large balanced products with a shape holding the product,
/// and nothing for a zero operand; the same in both radixes and for squares.
#[test]
fn planner_auto_choices_match_expectations() {
    for radix in RADIXES {
        for square in [false, true] {
            assert_eq!(auto_plan(1, 1, radix, square), Algorithm::Schoolbook);
            assert_eq!(auto_plan(10, 10, radix, square), Algorithm::Schoolbook);
            assert_eq!(
                auto_plan(SCHOOLBOOK_ALWAYS, 1 << 30, radix, square),
                Algorithm::Schoolbook
            );
            assert_eq!(
                auto_plan(1 << 30, SCHOOLBOOK_ALWAYS, radix, square),
                Algorithm::Schoolbook
            );
            assert_eq!(
                auto_plan(1_000_000, 5, radix, square),
                Algorithm::Schoolbook
            );
            assert_eq!(auto_plan(0, 100, radix, square), Algorithm::Zero);
            assert_eq!(auto_plan(100, 0, radix, square), Algorithm::Zero);
            for (la, lb) in [(100_000, 100_000), (1_000_000, 1_000_000), (4096, 4096)] {
                match auto_plan(la, lb, radix, square) {
                    Algorithm::Ntt { .. } => {
                        assert_planned_length(la, lb, radix);
                    }
                    other => panic!("{la}x{lb}: Auto planned {other:?}, expected the NTT"),
                }
            }
        }
        // Forcing overrides the choice in both directions.
        let forced = |la, lb, force| {
            plan(&Request::in_memory(la, lb, radix, false, 1, force))
                .expect("plan")
                .algorithm
        };
        assert_eq!(
            forced(100_000, 100_000, Force::Schoolbook),
            Algorithm::Schoolbook
        );
        assert!(matches!(
            forced(1, 1, Force::Ntt),
            Algorithm::Ntt { shape, folded: 0 } if shape.len() == 2
        ));
    }
}

// ---------------------------------------------------------------------------
// Every prime set and kernel path in one run.
// ---------------------------------------------------------------------------

/// The NTT on every prime set this CPU runs (three primes below 2^62; four
/// below 2^50 with the scalar, AVX2 and IFMA kernels), on the same
/// operands, against num-bigint: random pairs across the transform lengths
/// `2^k` and `3 * 2^k` and one past them, all-maximal limbs (the largest
/// coefficients), radix powers and their neighbours, squares. A path the CPU
/// lacks is named as skipped.
#[test]
fn every_prime_set_matches_reference() {
    use vastmul::ntt50::Kernel;
    let sets = PrimeSet::all_supported();
    for k in Kernel::ALL {
        if !k.is_supported() {
            eprintln!(
                "every_prime_set_matches_reference: {} kernels SKIPPED (CPU lacks them)",
                k.name()
            );
        }
    }
    for radix in RADIXES {
        let mut rng = Rng::new(seed(radix, 900));
        let mut cases: Vec<(String, Vec<u64>, Vec<u64>)> = Vec::new();
        for coefficients in [1023usize, 1024, 1025, 3071, 3072, 3073, 12_289, 98_305] {
            let la = coefficients.div_ceil(2);
            let lb = coefficients + 1 - la;
            cases.push((
                format!("random {la}x{lb}"),
                rng.limbs(la, radix),
                rng.limbs(lb, radix),
            ));
        }
        for (la, lb) in [(3000, 3000), (40_000, 9)] {
            cases.push((
                format!("max limbs {la}x{lb}"),
                radix_power_minus_one(la, radix),
                radix_power_minus_one(lb, radix),
            ));
        }
        cases.push((
            "B^4097+1 * B^2000-1".into(),
            radix_power_plus_one(4097),
            radix_power_minus_one(2000, radix),
        ));
        let sq = rng.limbs(5000, radix);
        cases.push(("square 5000".into(), sq.clone(), sq));
        for (what, a, b) in &cases {
            let expected = to_big(a, radix) * to_big(b, radix);
            for &set in &sets {
                let ctx = format!("{what} [{} {set:?}]", radix.name());
                assert_set_matches(a, b, radix, set, &expected, &ctx);
            }
        }
    }
}

/// Products a little longer than a transform, whose top coefficients wrap
/// around and are folded back, on every prime set this CPU runs, against
/// num-bigint: one coefficient over (the digits' carries only), 32 and 33
/// over (short products of one and two column blocks), and 500 over (a
/// short product of 1024 points, about the most the planner folds on 4096
/// points before the short product's memory outweighs the saving);
/// balanced and unbalanced pairs (the longer operand exactly the
/// transform's length, so that every wrapped term involves its top limb,
/// and the shorter one exactly the `T + 1` limbs the short product takes),
/// squares, all-maximal limbs (all nines in decimal), a radix power plus
/// one, and limbs at half the base (the balanced digits' carries at the
/// wrap). For the 50-bit sets the plan is checked to fold exactly what was
/// meant, so that the correction cannot go untested.
#[test]
fn wrapped_products_match_reference() {
    for radix in RADIXES {
        let mut rng = Rng::new(seed(radix, 950));
        let n = 4096;
        let mut cases: Vec<(String, Vec<u64>, Vec<u64>, usize)> = Vec::new();
        for folded in [1usize, 32, 33, 500] {
            let count = n + folded;
            let la = count.div_ceil(2);
            let lb = count + 1 - la;
            cases.push((
                format!("random {la}x{lb}"),
                rng.limbs(la, radix),
                rng.limbs(lb, radix),
                folded,
            ));
            cases.push((
                format!("unbalanced {n}x{}", folded + 1),
                rng.limbs(n, radix),
                rng.limbs(folded + 1, radix),
                folded,
            ));
            cases.push((
                format!("max {la}x{lb}"),
                radix_power_minus_one(la, radix),
                radix_power_minus_one(lb, radix),
                folded,
            ));
            let h = radix.half_base();
            cases.push((
                format!("halves {n}x{}", folded + 1),
                vec![h; n],
                vec![h - 1; folded + 1],
                folded,
            ));
        }
        // Squares fold an odd count: 2 * la - 1 = n + folded.
        for folded in [1usize, 33, 499] {
            let la = (n + folded).div_ceil(2);
            let a = rng.limbs(la, radix);
            cases.push((format!("square {la}"), a.clone(), a, folded));
            let m = radix_power_minus_one(la, radix);
            cases.push((format!("square max {la}"), m.clone(), m, folded));
        }
        cases.push((
            "B^4095+1 * B^501-1".into(),
            radix_power_plus_one(n - 1),
            radix_power_minus_one(501, radix),
            // 4096 + 501 - 1 coefficients on a transform of 4096 points.
            500,
        ));
        for (what, a, b, folded) in &cases {
            let expected = to_big(a, radix) * to_big(b, radix);
            for set in PrimeSet::all_supported() {
                let ctx = format!("{what}, {folded} folded [{} {set:?}]", radix.name());
                let (shape, planned) = planned_on(
                    a.len(),
                    b.len(),
                    radix,
                    set.fitted(a.len().min(b.len()) as u64, radix),
                );
                if set.balanced_digits() {
                    assert_eq!(
                        (shape.len(), planned),
                        (a.len() + b.len() - 1 - folded, *folded),
                        "{ctx}"
                    );
                } else {
                    assert_eq!(planned, 0, "{ctx}: the 62-bit set folds nothing");
                }
                assert_set_matches(a, b, radix, set, &expected, &ctx);
            }
        }
    }
}

/// Multiplies `a` by `b` with the NTT on prime set `set` and checks the
/// product's form and its value against `expected` (num-bigint's).
fn assert_set_matches(
    a: &[u64],
    b: &[u64],
    radix: Radix,
    set: PrimeSet,
    expected: &BigUint,
    ctx: &str,
) {
    let got = vastmul::engine::multiply_on(a, b, radix, Force::Ntt, set);
    assert_well_formed(&got, radix, ctx);
    let value = match radix {
        Radix::Binary => binary_to_big(&got),
        Radix::Decimal => decimal_to_big(&got),
    };
    assert!(&value == expected, "{ctx}: product differs from num-bigint");
}

/// A forced path is the path planned: VASTMUL_KERNEL (as the kernel test
/// script sets it) selects the prime set every product of this process
/// uses, so a forced run can never silently test another one.
#[test]
fn plans_follow_the_forced_kernel() {
    let want = PrimeSet::from_env().expect("VASTMUL_KERNEL names a path this CPU runs");
    let p = plan(&Request::in_memory(
        50_000,
        50_000,
        Radix::Binary,
        false,
        2,
        Force::Ntt,
    ))
    .unwrap();
    // The kernel path is the forced one; the planner fits the prime count.
    assert_eq!(p.prime_set.kernel(), want.kernel());
    assert_eq!(p.prime_set, want.fitted(50_000, Radix::Binary));
    assert_eq!(p.primes, p.prime_set.primes());
    eprintln!("plans_follow_the_forced_kernel: {:?}", p.prime_set);
}

/// Limbs `half, half - 1, half, half - 1, ...`: their balanced digits
/// alternate `-half, +half`, so the square's coefficients are as large as
/// balanced digits allow, positive at even positions and negative at odd
/// ones.
fn alternating_halves(n: usize, radix: Radix) -> Vec<u64> {
    let h = radix.half_base();
    (0..n)
        .map(|i| if i.is_multiple_of(2) { h } else { h - 1 })
        .collect()
}

/// Three 50-bit primes hold coefficients up to 8_385_533 terms of balanced
/// binary digits, and the planner takes them up to exactly there. At that
/// length the square of alternating halves, whose coefficients reach
/// `n (B / 2)^2` in size with both signs (less than a millionth below half the
/// primes' product, the most the signed recovery takes), must match the
/// reference's residues. The square of `B^n - 1` (digits -1, then zeros,
/// then the whole base on top) must equal `B^2n - 2 B^n + 1` limb for limb;
/// as plain limbs its coefficients would exceed the three primes' product,
/// so it fails if the digits are not balanced. One limb more and the plan
/// takes four primes.
#[test]
fn three_fifty_bit_primes_are_exact_up_to_their_bound() {
    use vastmul::ntt50::primes::MAX_BALANCED_TERMS_THREE;
    let Some(kernel) = PrimeSet::detect().kernel() else {
        println!("skipped: no vector kernel here; the scalar path is covered by the kernel script");
        return;
    };
    let n = MAX_BALANCED_TERMS_THREE as usize;
    let mut r = Request::in_memory(n, n, Radix::Binary, false, 2, Force::Ntt);
    r.primes = PrimeSet::Four50(kernel);
    assert_eq!(plan(&r).unwrap().prime_set, PrimeSet::Three50(kernel));
    let mut r1 = Request::in_memory(n + 1, n + 1, Radix::Binary, false, 2, Force::Ntt);
    r1.primes = PrimeSet::Three50(kernel);
    assert_eq!(plan(&r1).unwrap().prime_set, PrimeSet::Four50(kernel));
    let three = PrimeSet::Three50(kernel);
    let a = radix_power_minus_one(n, Radix::Binary);
    let got = vastmul::engine::multiply_on(&a, &a, Radix::Binary, Force::Ntt, three);
    // (B^n - 1)^2 = 1, then n - 1 zero limbs, B - 2, then n - 1 maximal limbs.
    assert_eq!(got.len(), 2 * n);
    assert_eq!(got[0], 1);
    assert!(got[1..n].iter().all(|&x| x == 0), "zero run");
    assert_eq!(got[n], u64::MAX - 1);
    assert!(got[n + 1..].iter().all(|&x| x == u64::MAX), "maximal run");
    Fingerprint::new(8).assert_product(&got, &a, &a, Radix::Binary, "three-prime bound");
    drop(got);
    let a = alternating_halves(n, Radix::Binary);
    let got = vastmul::engine::multiply_on(&a, &a, Radix::Binary, Force::Ntt, three);
    Fingerprint::new(8).assert_product(&got, &a, &a, Radix::Binary, "alternating halves");
}

/// Balanced digits on every 50-bit set against num-bigint, in both radixes:
/// limbs just below, at and above half the base (alternating, constant,
/// and mixed with maximal and zero limbs), whose digits and carries are
/// the edge cases of the digit form, on lengths around column-block and
/// row boundaries; products of unequal operands too.
#[test]
fn balanced_digit_edges_match_reference() {
    for set in PrimeSet::all_supported() {
        if !set.balanced_digits() {
            continue;
        }
        for radix in [Radix::Binary, Radix::Decimal] {
            let h = radix.half_base();
            let max = radix.max_limb();
            for &n in &[1usize, 2, 3, 17, 4095, 4096, 4097, 70_001] {
                let alt = alternating_halves(n, radix);
                let at: Vec<u64> = vec![h; n];
                let below: Vec<u64> = vec![h - 1; n];
                let mixed: Vec<u64> = (0..n)
                    .map(|i| [h, h - 1, max, 0, h + 1, max, h][i % 7])
                    .collect();
                for (x, y) in [(&alt, &alt), (&at, &at), (&below, &at), (&mixed, &alt)] {
                    let got = vastmul::engine::multiply_on(x, y, radix, Force::Ntt, set);
                    assert_product(&got, x, y, radix, &format!("{set:?} {radix:?} n={n}"));
                }
                let short = &mixed[..n.div_ceil(3)];
                let got = vastmul::engine::multiply_on(&alt, short, radix, Force::Ntt, set);
                let what = format!("{set:?} {radix:?} unequal n={n}");
                assert_product(&got, &alt, short, radix, &what);
            }
        }
    }
}
