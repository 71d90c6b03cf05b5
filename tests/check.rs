//! `vastmul check` against damaged products: one changed digit (first,
//! middle, last), two swapped digits, a truncated file, an appended digit,
//! a wrong sign, each in decimal and hexadecimal; correct products of many
//! random sizes always pass, squares included, in both radixes and across
//! formats; seeds reproduce the random moduli.

mod common;

use common::Rng;
use std::path::{Path, PathBuf};
use vastmul::check::{check, CheckRequest};
use vastmul::engine::multiply;
use vastmul::format::{write_operand, Format};
use vastmul::Radix;

fn write(
    dir: &Path,
    name: &str,
    format: Format,
    radix: Radix,
    negative: bool,
    limbs: &[u64],
) -> PathBuf {
    let path = dir.join(name);
    let mut f = std::fs::File::create(&path).unwrap();
    write_operand(&mut f, format, radix, negative, limbs).unwrap();
    path
}

fn request(a: &Path, b: Option<&Path>, c: &Path, seed: u64) -> CheckRequest {
    CheckRequest {
        a: a.to_path_buf(),
        b: b.map(Path::to_path_buf),
        c: c.to_path_buf(),
        format: None,
        seed: Some(seed),
        random: 2,
    }
}

/// The damaged variants of a text product, by name.
fn damaged(text: &[u8]) -> Vec<(&'static str, Vec<u8>)> {
    let body_end = text.len() - 1; // before the newline
    let digit = |b: u8| if b == b'1' { b'2' } else { b'1' };
    let mut out = Vec::new();
    let mut first = text.to_vec();
    first[0] = digit(first[0]);
    out.push(("first digit changed", first));
    let mut middle = text.to_vec();
    middle[body_end / 2] = digit(middle[body_end / 2]);
    out.push(("middle digit changed", middle));
    let mut last = text.to_vec();
    last[body_end - 1] = digit(last[body_end - 1]);
    out.push(("last digit changed", last));
    let mut swapped = text.to_vec();
    let i = (body_end / 3..body_end - 1)
        .find(|&i| swapped[i] != swapped[i + 1])
        .unwrap();
    swapped.swap(i, i + 1);
    out.push(("two digits swapped", swapped));
    let mut truncated = text[..body_end - 5].to_vec();
    truncated.push(b'\n');
    out.push(("truncated", truncated));
    let mut appended = text[..body_end].to_vec();
    appended.extend_from_slice(b"7\n");
    out.push(("digit appended", appended));
    let mut negative = b"-".to_vec();
    negative.extend_from_slice(text);
    out.push(("wrong sign", negative));
    out
}

#[test]
fn every_kind_of_damage_is_caught() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    let mut rng = Rng::new(0xdead);
    for (radix, format) in [
        (Radix::Decimal, Format::Decimal),
        (Radix::Binary, Format::Hex),
    ] {
        let a = rng.limbs(3000, radix);
        let b = rng.limbs(2500, radix);
        let c = multiply(&a, &b, radix);
        let pa = write(d, "a", format, radix, false, &a);
        let pb = write(d, "b", format, radix, false, &b);
        let pc = write(d, "c", format, radix, false, &c);
        check(&request(&pa, Some(&pb), &pc, 1)).expect("the true product passes");
        let text = std::fs::read(&pc).unwrap();
        for (what, bytes) in damaged(&text) {
            let bad = d.join("bad");
            std::fs::write(&bad, &bytes).unwrap();
            let e = check(&request(&pa, Some(&pb), &bad, 1)).unwrap_err();
            assert_eq!(
                e.exit_code(),
                vastmul::error::exit::VERIFY,
                "{format:?} {what}: {e}"
            );
            let msg = e.to_string();
            assert!(msg.contains("seed 1") && msg.contains("bad"), "{msg}");
        }
    }
}

#[test]
fn a_changed_limb_is_caught_in_binary_formats() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    let mut rng = Rng::new(7);
    let a = rng.limbs(1000, Radix::Binary);
    let b = rng.limbs(900, Radix::Binary);
    let mut c = multiply(&a, &b, Radix::Binary);
    for format in [Format::Limbs, Format::Container] {
        let pa = write(d, "a", format, Radix::Binary, false, &a);
        let pb = write(d, "b", format, Radix::Binary, false, &b);
        // Raw limbs carry no header: their format is named, not detected.
        let req = |pc: &Path| CheckRequest {
            format: Some(format),
            ..request(&pa, Some(&pb), pc, 3)
        };
        for i in [0, c.len() / 2, c.len() - 1] {
            c[i] ^= 1 << 17;
            let pc = write(d, "c", format, Radix::Binary, false, &c);
            assert!(check(&req(&pc)).is_err(), "{format:?} limb {i}");
            c[i] ^= 1 << 17;
        }
        let pc = write(d, "c", format, Radix::Binary, false, &c);
        check(&req(&pc)).unwrap();
    }
}

#[test]
fn correct_products_always_pass_over_random_sizes_signs_and_formats() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    let mut rng = Rng::new(2026);
    for i in 0..40u64 {
        let radix = if i % 2 == 0 {
            Radix::Decimal
        } else {
            Radix::Binary
        };
        let (la, lb) = (rng.log_uniform(1, 200_000), rng.log_uniform(1, 5_000));
        let a = rng.limbs(la, radix);
        let b = rng.limbs(lb, radix);
        let c = multiply(&a, &b, radix);
        let (na, nb) = (rng.below(2) == 1, rng.below(2) == 1);
        let formats: &[Format] = match radix {
            Radix::Decimal => &[Format::Decimal, Format::Container],
            Radix::Binary => &[Format::Hex, Format::Container],
        };
        let mut f = |k: u64| formats[(rng.below(2) + k) as usize % 2];
        let pa = write(d, "a", f(0), radix, na, &a);
        let pb = write(d, "b", f(1), radix, nb, &b);
        let pc = write(d, "c", f(2), radix, na != nb, &c);
        let r =
            check(&request(&pa, Some(&pb), &pc, i)).unwrap_or_else(|e| panic!("{la}x{lb}: {e}"));
        assert!(r.passed && r.moduli.len() == 5);
        // squares, checked with --square semantics
        let sq = multiply(&a, &a, radix);
        let ps = write(d, "s", f(3), radix, false, &sq);
        check(&request(&pa, None, &ps, i)).unwrap();
    }
}

#[test]
fn residues_ignore_the_radix_across_files() {
    // The same number in decimal and in hexadecimal: a decimal product
    // checks against hexadecimal factors.
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    let a_hex = write(
        d,
        "a.hex",
        Format::Hex,
        Radix::Binary,
        false,
        &[123_456_789_012_345],
    );
    let b_dec = write(
        d,
        "b.txt",
        Format::Decimal,
        Radix::Decimal,
        false,
        &[987_654_321],
    );
    // 123456789012345 * 987654321 = 121932631124827861592745, computed with
    // Python's arbitrary-precision integers.
    std::fs::write(d.join("c.txt"), b"121932631124827861592745\n").unwrap();
    check(&request(&a_hex, Some(&b_dec), &d.join("c.txt"), 9)).unwrap();
    std::fs::write(d.join("c.txt"), b"121932631124827861592746\n").unwrap();
    assert!(check(&request(&a_hex, Some(&b_dec), &d.join("c.txt"), 9)).is_err());
}

#[test]
fn the_seed_fixes_the_random_moduli() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    let a = write(d, "a", Format::Decimal, Radix::Decimal, false, &[5]);
    let c = write(d, "c", Format::Decimal, Radix::Decimal, false, &[25]);
    let r1 = check(&request(&a, None, &c, 77)).unwrap();
    let r2 = check(&request(&a, None, &c, 77)).unwrap();
    let r3 = check(&request(&a, None, &c, 78)).unwrap();
    let randoms = |r: &vastmul::check::CheckReport| -> Vec<u64> {
        r.moduli
            .iter()
            .filter(|m| m.kind == "random")
            .map(|m| m.modulus)
            .collect()
    };
    assert_eq!(randoms(&r1), randoms(&r2));
    assert_ne!(randoms(&r1), randoms(&r3));
    assert_eq!(r1.seed, 77);
}
