//! Products carried while they are written (the file's end first), file to
//! file, against num-bigint: random operands whose text spans one block or
//! several, products too short to be laid out from their top coefficients,
//! and those whose layout the top coefficients cannot settle (all-maximal
//! limbs, radix powers, a power just below a new limb), in both radixes,
//! signed; the text, the manifest's hash and limb count, and the passes
//! reported.

mod common;

use common::{from_big, radix_power, radix_power_minus_one, radix_power_plus_one, to_big, Rng};
use num_bigint::BigUint;
use std::path::Path;
use vastmul::format::{write_operand, Format};
use vastmul::job::{multiply_files, MulOptions};
use vastmul::plan::Force;
use vastmul::Radix;

fn text_of(x: &BigUint, radix: Radix, negative: bool) -> Vec<u8> {
    let digits = match radix {
        Radix::Binary => x.to_str_radix(16),
        Radix::Decimal => x.to_str_radix(10),
    };
    let sign = if negative && *x != BigUint::from(0u32) {
        "-"
    } else {
        ""
    };
    format!("{sign}{digits}\n").into_bytes()
}

fn format_of(radix: Radix) -> Format {
    match radix {
        Radix::Binary => Format::Hex,
        Radix::Decimal => Format::Decimal,
    }
}

fn write(
    dir: &Path,
    name: &str,
    radix: Radix,
    negative: bool,
    limbs: &[u64],
) -> std::path::PathBuf {
    let path = dir.join(name);
    let format = format_of(radix);
    let mut f = std::fs::File::create(&path).unwrap();
    write_operand(&mut f, format, radix, negative, limbs).unwrap();
    path
}

/// Multiplies through the job with the NTT forced and checks the file, its
/// manifest and the passes.
fn check(a: &[u64], b: &[u64], radix: Radix, negative: (bool, bool), streamed: bool, what: &str) {
    let dir = tempfile::tempdir().unwrap();
    let pa = write(dir.path(), "a.txt", radix, negative.0, a);
    let pb = write(dir.path(), "b.txt", radix, negative.1, b);
    let out = dir.path().join("c.txt");
    let mut opts = MulOptions::new(&pa, &pb, &out);
    opts.algorithm = Force::Ntt;
    // "1000" is decimal text too: the radix is named, not guessed.
    opts.in_format = Some(format_of(radix));
    opts.threads = 2;
    let report = multiply_files(&opts).unwrap_or_else(|e| panic!("{what}: {e}"));
    let product = to_big(a, radix) * to_big(b, radix);
    let want = text_of(&product, radix, negative.0 != negative.1);
    let got = std::fs::read(&out).unwrap();
    assert!(
        got == want,
        "{what}: {} bytes written against {}; first difference at {:?}",
        got.len(),
        want.len(),
        got.iter().zip(&want).position(|(x, y)| x != y)
    );
    assert_eq!(
        report.product.blake3,
        blake3::hash(&got).to_hex().to_string(),
        "{what}"
    );
    assert_eq!(
        report.product.limbs as usize,
        from_big(&product, radix).len(),
        "{what}"
    );
    assert_eq!(report.product.bytes as usize, got.len(), "{what}");
    let names: Vec<&str> = report.passes.iter().map(|p| p.name.as_str()).collect();
    let n = names.len();
    assert_eq!(
        names[n - 2..],
        ["CRT and carry", "write the product"],
        "{what}: {names:?}"
    );
    assert!(report.self_check.unwrap().passed, "{what}");
    assert_eq!(report.streamed, streamed, "{what}: streamed");
}

#[test]
fn random_products_match_the_reference() {
    let mut rng = Rng::new(41);
    for radix in [Radix::Binary, Radix::Decimal] {
        // product limbs: under the 128 coefficients that lay a text out, at
        // it, within one 1 MiB block, and over several blocks (a hex limb
        // is 16 bytes of text, a decimal one 19)
        for (la, lb) in [
            (30, 20),
            (64, 65),
            (100, 29),
            (3000, 2000),
            (90_000, 70_000),
            (150_000, 3),
        ] {
            for negative in [(false, false), (true, false)] {
                let a = rng.limbs(la, radix);
                let b = rng.limbs(lb, radix);
                let streamed = la + lb > 128;
                let what = format!("{radix:?} {la}x{lb} {negative:?}");
                check(&a, &b, radix, negative, streamed, &what);
            }
        }
    }
}

#[test]
fn products_next_to_radix_powers_match_the_reference() {
    for radix in [Radix::Binary, Radix::Decimal] {
        for k in [70, 5000, 80_000] {
            let what = |s: &str| format!("{radix:?} k={k}: {s}");
            let max = radix_power_minus_one(k, radix);
            // Top limbs all maximal, or a one over zeros: the carry from
            // below could change the limb count, so these are made whole.
            check(
                &max,
                &max,
                radix,
                (false, false),
                false,
                &what("(B^k - 1)^2"),
            );
            let p = radix_power(k);
            check(&p, &p, radix, (true, true), false, &what("B^k B^k"));
            let q = radix_power_plus_one(k);
            check(
                &max,
                &q,
                radix,
                (false, true),
                false,
                &what("(B^k - 1)(B^k + 1)"),
            );
            check(
                &p,
                &max,
                radix,
                (false, false),
                false,
                &what("B^k (B^k - 1)"),
            );
            // Maximal limbs below a top limb that cannot overflow: streamed.
            let mut r = Rng::new(k as u64);
            let b = r.limbs(k, radix);
            check(
                &max,
                &b,
                radix,
                (false, false),
                true,
                &what("(B^k - 1) x random"),
            );
            let mut tripled = max.clone();
            tripled.push(2);
            check(
                &tripled,
                &q,
                radix,
                (true, false),
                true,
                &what("(3B^k - 1)(B^k + 1)"),
            );
        }
    }
}
