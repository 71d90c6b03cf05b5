//! The self-check of `mul`: a product damaged after it was computed (one
//! changed limb, first, middle or last; two swapped limbs; the top limb
//! dropped; a limb appended; the wrong sign) fails the run with exit code 6
//! and leaves nothing at the output path, for products in RAM and on disk.
//! The manifest written beside every product: `check --file` finds bit rot,
//! `check A B C` finds a stale manifest, `info` reports it.

mod common;

use common::Rng;
use std::path::Path;
use vastmul::format::{write_operand, Format};
use vastmul::job::{multiply_files, MulOptions, Tamper};
use vastmul::Radix;

fn options(dir: &Path, memory: Option<u64>) -> MulOptions {
    MulOptions {
        threads: 2,
        memory,
        ..MulOptions::new(dir.join("a.txt"), dir.join("b.txt"), dir.join("c.txt"))
    }
}

const DAMAGE: [Tamper; 8] = [
    Tamper::ChangeLimb(0.0),
    Tamper::ChangeLimb(0.5),
    Tamper::ChangeLimb(1.0),
    Tamper::SwapLimbs(0.3),
    Tamper::DropTop,
    Tamper::AppendLimb,
    Tamper::FlipSign,
    Tamper::SwapLimbs(0.0),
];

#[test]
fn damaged_products_fail_the_run_and_leave_nothing() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    let mut rng = Rng::new(4040);
    let a = rng.limbs(150_000, Radix::Decimal);
    let b = rng.limbs(120_000, Radix::Decimal);
    for (name, x) in [("a.txt", &a), ("b.txt", &b)] {
        let mut f = std::fs::File::create(d.join(name)).unwrap();
        write_operand(&mut f, Format::Decimal, Radix::Decimal, false, x).unwrap();
    }
    // In RAM, and out of core (the product on disk, checked as written).
    for memory in [None, Some(16 << 20)] {
        let o = options(d, memory);
        let r = multiply_files(&o).expect("an undamaged product passes");
        let sc = r.self_check.expect("on by default");
        assert_eq!(
            vastmul::residue::mul_mod(sc.residues[0], sc.residues[1], sc.modulus),
            sc.residues[2]
        );
        std::fs::remove_file(&o.output).unwrap();
        for damage in DAMAGE {
            let mut bad = o.clone();
            bad.tamper = Some(damage);
            let e = multiply_files(&bad).unwrap_err();
            assert_eq!(
                e.exit_code(),
                vastmul::error::exit::VERIFY,
                "{damage:?} {memory:?}: {e}"
            );
            assert!(e.to_string().contains("self-check failed"), "{e}");
            assert!(
                !o.output.exists(),
                "{damage:?}: a damaged product was written"
            );
            let stray: Vec<_> = std::fs::read_dir(d)
                .unwrap()
                .flatten()
                .map(|e| e.file_name().to_string_lossy().into_owned())
                .filter(|n| n.contains("partial"))
                .collect();
            assert!(stray.is_empty(), "{stray:?}");
            // An out-of-core run keeps its state; start the next one afresh.
            let mut clean = o.clone();
            clean.restart = true;
            clean.tamper = None;
            multiply_files(&clean).unwrap();
            std::fs::remove_file(&o.output).unwrap();
        }
    }
}

#[test]
fn the_self_check_can_be_turned_off() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    std::fs::write(d.join("a.txt"), "123456789\n").unwrap();
    std::fs::write(d.join("b.txt"), "-987654321\n").unwrap();
    let mut o = options(d, None);
    o.self_check = false;
    let r = multiply_files(&o).unwrap();
    assert!(r.self_check.is_none());
    // 123456789 * -987654321 = -121932631112635269 (Python's integers).
    assert_eq!(
        std::fs::read_to_string(&o.output).unwrap(),
        "-121932631112635269\n"
    );
}

#[test]
fn the_manifest_beside_the_product_catches_later_damage() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    let mut rng = Rng::new(99);
    let a = rng.limbs(20_000, Radix::Decimal);
    let b = rng.limbs(15_000, Radix::Decimal);
    for (name, x) in [("a.txt", &a), ("b.txt", &b)] {
        let mut f = std::fs::File::create(d.join(name)).unwrap();
        write_operand(&mut f, Format::Decimal, Radix::Decimal, true, x).unwrap();
    }
    let o = options(d, None);
    let r = multiply_files(&o).unwrap();
    assert_eq!(r.manifest, d.join("c.txt.vastmul.json"));
    let m = vastmul::manifest::check_file(&o.output, None).expect("fresh product matches");
    assert!(!m.negative, "(-a) x (-b) is positive");
    let info = vastmul::info::info(&o.output, None).unwrap();
    assert_eq!(info.manifest_matches, Some(true));
    let req = vastmul::check::CheckRequest {
        a: o.a.clone(),
        b: Some(o.b.clone()),
        c: o.output.clone(),
        format: None,
        seed: Some(5),
        random: 1,
    };
    assert_eq!(
        vastmul::check::check(&req).unwrap().manifest_agrees,
        Some(true)
    );
    // Bit rot: one digit changed in the middle of the product.
    let good = std::fs::read(&o.output).unwrap();
    let mut bytes = good.clone();
    let i = bytes.len() / 2;
    bytes[i] = if bytes[i] == b'3' { b'4' } else { b'3' };
    std::fs::write(&o.output, &bytes).unwrap();
    let e = vastmul::manifest::check_file(&o.output, None).unwrap_err();
    assert_eq!(e.exit_code(), vastmul::error::exit::VERIFY);
    assert!(e.to_string().contains("does not match its manifest"), "{e}");
    assert_eq!(
        vastmul::info::info(&o.output, None)
            .unwrap()
            .manifest_matches,
        Some(false)
    );
    // A stale manifest: the product is right, the manifest's residues not.
    std::fs::write(&o.output, &good).unwrap();
    let path = vastmul::manifest::path_for(&o.output);
    let mut m: vastmul::manifest::Manifest =
        serde_json::from_slice(&std::fs::read(&path).unwrap()).unwrap();
    m.residues[1][1] ^= 1;
    std::fs::write(&path, serde_json::to_vec(&m).unwrap()).unwrap();
    let e = vastmul::check::check(&req).unwrap_err();
    assert!(e.to_string().contains("manifest"), "{e}");
    // No manifest: check --file says so and how to check instead.
    std::fs::remove_file(&path).unwrap();
    let e = vastmul::manifest::check_file(&o.output, None).unwrap_err();
    assert!(e.to_string().contains("vastmul check A B C"), "{e}");
}

/// Every in-memory path takes the factors' residues as it reads them: a
/// wrong residue would fail these correct products.
#[test]
fn correct_products_pass_on_every_path_and_sign() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    let mut rng = Rng::new(31337);
    for radix in [Radix::Decimal, Radix::Binary] {
        let format = match radix {
            Radix::Decimal => Format::Decimal,
            Radix::Binary => Format::Hex,
        };
        // schoolbook, one NTT, pieces (both orders)
        for (la, lb) in [(20, 7), (30_000, 25_000), (200_000, 900), (900, 200_000)] {
            let a = rng.limbs(la, radix);
            let b = rng.limbs(lb, radix);
            for (na, nb) in [(false, false), (true, false), (true, true)] {
                for (name, x, neg) in [("a.txt", &a, na), ("b.txt", &b, nb)] {
                    let mut f = std::fs::File::create(d.join(name)).unwrap();
                    write_operand(&mut f, format, radix, neg, x).unwrap();
                }
                let mut o = options(d, None);
                o.force = true;
                let r = multiply_files(&o).unwrap_or_else(|e| panic!("{la}x{lb}: {e}"));
                assert!(r.self_check.is_some());
            }
        }
        // squares: the same file, and equal magnitudes of opposite signs
        let a = rng.limbs(40_000, radix);
        for (name, neg) in [("a.txt", false), ("b.txt", true)] {
            let mut f = std::fs::File::create(d.join(name)).unwrap();
            write_operand(&mut f, format, radix, neg, &a).unwrap();
        }
        let mut o = options(d, None);
        o.force = true;
        let r = multiply_files(&o).unwrap();
        assert!(r.plan.square, "equal magnitudes are squared");
        o.b = o.a.clone();
        multiply_files(&o).unwrap();
    }
}

/// Out of core, the manifest's residues come from the limbs in the scratch
/// store and its BLAKE3 from the text as written: for a negative product in
/// each radix, `check --file` and `check A B C` agree with it, and it equals
/// the manifest `describe` makes by parsing the file from scratch.
#[test]
fn an_out_of_core_manifest_matches_the_file_it_describes() {
    for (radix, format) in [
        (Radix::Decimal, Format::Decimal),
        (Radix::Binary, Format::Hex),
    ] {
        let t = tempfile::tempdir().unwrap();
        let d = t.path();
        let mut rng = Rng::new(101);
        let a = rng.limbs(150_000, radix);
        let b = rng.limbs(120_000, radix);
        for (name, x, neg) in [("a.txt", &a, true), ("b.txt", &b, false)] {
            let mut f = std::fs::File::create(d.join(name)).unwrap();
            write_operand(&mut f, format, radix, neg, x).unwrap();
        }
        let o = options(d, Some(16 << 20));
        let r = multiply_files(&o).unwrap();
        assert!(
            matches!(r.plan.algorithm, vastmul::plan::Algorithm::OutOfCore { .. }),
            "{radix:?}: the budget forces scratch files"
        );
        let m = vastmul::manifest::check_file(&o.output, None).expect("fresh product matches");
        assert!(m.negative, "{radix:?}: (-a) x b is negative");
        let parsed = vastmul::manifest::describe(&o.output, None).unwrap();
        assert_eq!(
            m, parsed,
            "{radix:?}: the manifest from the limbs equals the one parsed from the file"
        );
        let req = vastmul::check::CheckRequest {
            a: o.a.clone(),
            b: Some(o.b.clone()),
            c: o.output.clone(),
            format: None,
            seed: Some(5),
            random: 1,
        };
        let checked = vastmul::check::check(&req).unwrap();
        assert_eq!(checked.manifest_agrees, Some(true));
    }
}
