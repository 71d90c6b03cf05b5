//! Very unbalanced pairs, cut into pieces of the longer operand: products
//! against num-bigint in both radixes, in either operand order, with long
//! operands on and beside piece boundaries, with maximal limbs whose
//! carries cross every piece, with schoolbook and NTT pieces, and with the
//! product collected in RAM or in a scratch file.

mod common;

use common::{assert_product, Rng};
use vastmul::engine::{execute_to, Product};
use vastmul::plan::{plan, Algorithm, Force, Request};
use vastmul::storage::Store;
use vastmul::Radix;

/// Plans `a x b` with `force` under `memory` bytes, asserts a plan of
/// pieces, runs it and returns its limbs and the piece length.
fn by_pieces(a: &[u64], b: &[u64], radix: Radix, force: Force, memory: u64) -> (Vec<u64>, usize) {
    let mut req = Request::in_memory(a.len(), b.len(), radix, false, 2, force);
    req.memory = memory;
    let p = plan(&req).expect("plan");
    let Algorithm::Pieces {
        piece,
        product_on_disk,
        ..
    } = p.algorithm
    else {
        panic!(
            "{}x{} {force:?}: not a plan of pieces: {:?}",
            a.len(),
            b.len(),
            p.algorithm
        )
    };
    assert!(p.ram_bytes <= memory);
    let dir = tempfile::tempdir().unwrap();
    let product = execute_to(&p, a, b, dir.path()).expect("product");
    let limbs = match &product {
        Product::Ram(w) => {
            assert!(!product_on_disk);
            w.to_vec()
        }
        Product::Disk { store, len, .. } => {
            assert!(product_on_disk);
            let mut v = vec![0u64; *len];
            store.read(0, &mut v).unwrap();
            v
        }
        Product::Streamed(_) => panic!("execute_to returned a streamed product"),
    };
    drop(product);
    assert_eq!(
        std::fs::read_dir(dir.path()).unwrap().count(),
        0,
        "scratch left behind"
    );
    (limbs, piece)
}

#[test]
fn random_unbalanced_pairs_in_either_order() {
    let mut rng = Rng::new(0x9eced);
    for radix in [Radix::Binary, Radix::Decimal] {
        for (long, short) in [
            (20_000, 40),
            (100_000, 1_000),
            (300_000, 3_000),
            (70_001, 33),
        ] {
            let a = rng.limbs(long, radix);
            let b = rng.limbs(short, radix);
            let what = format!("{radix:?} {long}x{short}");
            let (c, _) = by_pieces(&a, &b, radix, Force::Pieces, u64::MAX);
            assert_product(&c, &a, &b, radix, &what);
            let (d, _) = by_pieces(&b, &a, radix, Force::Pieces, u64::MAX);
            assert_eq!(c, d, "{what}: operand order changes the product");
        }
    }
}

/// The piece length the planner picks for `long x short`.
fn piece_of(long: usize, short: usize, radix: Radix) -> usize {
    let req = Request::in_memory(long, short, radix, false, 2, Force::Pieces);
    match plan(&req).unwrap().algorithm {
        Algorithm::Pieces { piece, .. } => piece,
        other => panic!("{other:?}"),
    }
}

#[test]
fn long_operands_on_and_beside_piece_boundaries() {
    let mut rng = Rng::new(41);
    for radix in [Radix::Binary, Radix::Decimal] {
        let short = rng.limbs(500, radix);
        for k in [2usize, 3, 7] {
            for d in [-1isize, 0, 1] {
                // The piece length depends on the long operand's length:
                // settle on a length that is k pieces plus d of its own plan.
                let mut len = (k * piece_of(k * 2000, 500, radix)) as isize + d;
                for _ in 0..8 {
                    let next = (k * piece_of(len as usize, 500, radix)) as isize + d;
                    if next == len {
                        break;
                    }
                    len = next;
                }
                let len = len as usize;
                let a = rng.limbs(len, radix);
                let (c, piece) = by_pieces(&a, &short, radix, Force::Pieces, u64::MAX);
                assert_product(&c, &a, &short, radix, &format!("{radix:?} {len}x500"));
                let off = (len as isize - (k * piece) as isize).rem_euclid(piece as isize);
                assert_eq!(
                    off,
                    d.rem_euclid(piece as isize),
                    "{len} is not on the boundary"
                );
            }
        }
    }
}

#[test]
fn maximal_limbs_carry_across_every_piece() {
    for radix in [Radix::Binary, Radix::Decimal] {
        let long = vec![radix.max_limb(); 200_000];
        for short_len in [40, 999, 4_096] {
            let short = vec![radix.max_limb(); short_len];
            let (c, _) = by_pieces(&long, &short, radix, Force::Pieces, u64::MAX);
            assert_product(
                &c,
                &long,
                &short,
                radix,
                &format!("{radix:?} all max x{short_len}"),
            );
        }
        // radix^k + 1 against all-maximal limbs: long zero runs in pieces.
        let mut sparse = vec![0u64; 150_000];
        sparse[0] = 1;
        sparse[149_999] = 1;
        let short = vec![radix.max_limb(); 700];
        let (c, _) = by_pieces(&sparse, &short, radix, Force::Pieces, u64::MAX);
        assert_product(&c, &sparse, &short, radix, &format!("{radix:?} sparse"));
    }
}

#[test]
fn small_budgets_collect_the_product_on_disk() {
    let mut rng = Rng::new(5150);
    for radix in [Radix::Binary, Radix::Decimal] {
        // 10^6 x 2000 limbs: the product alone is 16 MB, over the budget.
        let a = rng.limbs(1_000_000, radix);
        let b = rng.limbs(2_000, radix);
        let mut req = Request::in_memory(a.len(), b.len(), radix, false, 2, Force::Auto);
        req.memory = 12 << 20;
        let p = plan(&req).unwrap();
        assert!(
            matches!(
                p.algorithm,
                Algorithm::Pieces {
                    product_on_disk: true,
                    ..
                }
            ),
            "{:?}",
            p.algorithm
        );
        let (c, _) = by_pieces(&a, &b, radix, Force::Auto, 12 << 20);
        assert_product(
            &c,
            &a,
            &b,
            radix,
            &format!("{radix:?} 10^6x2000 under 12 MiB"),
        );
    }
}

#[test]
fn schoolbook_pieces_when_the_short_operand_is_tiny() {
    let mut rng = Rng::new(808);
    for radix in [Radix::Binary, Radix::Decimal] {
        // A whole schoolbook product of 10^6 x 20 limbs needs about 40 MB.
        let a = rng.limbs(1_000_000, radix);
        for short_len in [1, 2, 20] {
            let b = rng.limbs(short_len, radix);
            let mut req = Request::in_memory(a.len(), b.len(), radix, false, 2, Force::Auto);
            req.memory = 16 << 20;
            let p = plan(&req).unwrap();
            assert!(
                matches!(p.algorithm, Algorithm::Pieces { shape: None, .. }),
                "{:?}",
                p.algorithm
            );
            let (c, _) = by_pieces(&a, &b, radix, Force::Auto, 16 << 20);
            assert_product(
                &c,
                &a,
                &b,
                radix,
                &format!("{radix:?} 10^6x{short_len} schoolbook pieces"),
            );
        }
    }
}
