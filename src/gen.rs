//! Reproducible random operands, for tests, benchmarks and demonstrations.
//!
//! The digits are cut into fixed-size chunks and chunk `k` is drawn from
//! [`Rng::for_stream`]`(seed, k)`. Chunks are independent, so they are
//! produced in parallel, and the text depends only on the seed, the digit
//! count and the radix, never on the number of threads.

use std::io::Write;
use std::path::Path;

use rayon::prelude::*;

use crate::format::text::{put16_hex, put18};
use crate::output::AtomicOutput;
use crate::rng::Rng;
use crate::{Error, Radix, Result};

/// Digits per chunk, and so per random stream. Part of the output's
/// definition: changing it changes every generated file.
const CHUNK_DIGITS: usize = 1 << 20;

/// Chunks produced before they are written: 32 MiB per buffer.
const BATCH_CHUNKS: usize = 32;

/// 10^18: the largest power of ten whose draws are rarely rejected. Drawing
/// below 10^19 would reject nearly half the words.
const DEC_DRAW: u64 = 1_000_000_000_000_000_000;
const DEC_DRAW_DIGITS: usize = 18;

/// Fills `buf` with the digits of chunk `index`.
fn fill_chunk(buf: &mut [u8], seed: u64, index: u64, radix: Radix) {
    let mut rng = Rng::for_stream(seed, index);
    let mut group = [0u8; DEC_DRAW_DIGITS];
    match radix {
        Radix::Decimal => {
            let mut pieces = buf.chunks_exact_mut(DEC_DRAW_DIGITS);
            for piece in &mut pieces {
                put18(piece, rng.below(DEC_DRAW));
            }
            let rest = pieces.into_remainder();
            put18(&mut group, rng.below(DEC_DRAW));
            let n = rest.len();
            rest.copy_from_slice(&group[..n]);
        }
        Radix::Binary => {
            let mut pieces = buf.chunks_exact_mut(16);
            for piece in &mut pieces {
                put16_hex(piece, rng.next_u64());
            }
            let rest = pieces.into_remainder();
            put16_hex(&mut group, rng.next_u64());
            let n = rest.len();
            rest.copy_from_slice(&group[..n]);
        }
    }
    if index == 0 && !buf.is_empty() {
        // The number must have exactly the requested digit count.
        let digit = match radix {
            Radix::Decimal => 1 + rng.below(9),
            Radix::Binary => 1 + rng.below(15),
        };
        buf[0] = b"0123456789abcdef"[digit as usize];
    }
}

/// Fills `buf` with the digits that start at chunk `first_chunk`.
fn fill(buf: &mut [u8], first_chunk: u64, seed: u64, radix: Radix) {
    buf.par_chunks_mut(CHUNK_DIGITS)
        .enumerate()
        .for_each(|(k, chunk)| fill_chunk(chunk, seed, first_chunk + k as u64, radix));
}

/// The text [`generate`] writes, in memory: `digits` digits (decimal for
/// [`Radix::Decimal`], lowercase hexadecimal for [`Radix::Binary`]) with a
/// non-zero leading digit, followed by a newline.
///
/// # Panics
///
/// Panics if the text cannot be held in memory.
pub fn random_text(digits: u64, seed: u64, radix: Radix) -> Vec<u8> {
    let n = usize::try_from(digits).expect("digit count exceeds the address space");
    let mut v = vec![0u8; n + 1];
    fill(&mut v[..n], 0, seed, radix);
    v[n] = b'\n';
    v
}

/// Writes a reproducible random operand of exactly `digits` digits (leading
/// digit non-zero) in `radix` — decimal text for [`Radix::Decimal`],
/// lowercase hexadecimal text for [`Radix::Binary`] — with a trailing
/// newline, atomically: the target appears only when complete.
///
/// The file's bytes equal [`random_text`]`(digits, seed, radix)`.
pub fn generate(target: &Path, digits: u64, seed: u64, radix: Radix, force: bool) -> Result<()> {
    if digits == 0 {
        return Err(Error::usage(
            "--digits 0: a generated operand needs at least one digit",
            "pass --digits 1 or more",
        ));
    }
    let mut out = AtomicOutput::create(target, force)?;
    let write_error = |e: std::io::Error| {
        Error::output(
            target,
            format!("cannot write the operand: {e}"),
            "check that the disk has room for the file",
        )
    };
    let batch_digits = (CHUNK_DIGITS * BATCH_CHUNKS) as u64;
    let batches = digits.div_ceil(batch_digits);
    let batch_len = |b: u64| (digits - b * batch_digits).min(batch_digits) as usize;

    // Double buffering: while one batch is written, the next is produced.
    let mut ready = vec![0u8; batch_len(0)];
    fill(&mut ready, 0, seed, radix);
    let mut spare = Vec::new();
    for b in 0..batches {
        let file = out.file();
        let next = b + 1;
        let (written, ()) = rayon::join(
            || file.write_all(&ready),
            || {
                if next < batches {
                    spare.resize(batch_len(next), 0);
                    fill(&mut spare, next * BATCH_CHUNKS as u64, seed, radix);
                }
            },
        );
        written.map_err(write_error)?;
        std::mem::swap(&mut ready, &mut spare);
    }
    out.file().write_all(b"\n").map_err(write_error)?;
    out.commit()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::format::{Format, Operand};

    fn digits_ok(text: &[u8], digits: usize, radix: Radix) {
        assert_eq!(text.len(), digits + 1);
        assert_eq!(text[digits], b'\n');
        assert_ne!(text[0], b'0');
        let valid = |b: &u8| match radix {
            Radix::Decimal => b.is_ascii_digit(),
            Radix::Binary => b.is_ascii_digit() || (b'a'..=b'f').contains(b),
        };
        assert!(text[..digits].iter().all(valid));
    }

    #[test]
    fn exact_digit_count_and_leading_digit() {
        for radix in [Radix::Decimal, Radix::Binary] {
            for digits in [
                1usize,
                2,
                17,
                18,
                19,
                100,
                CHUNK_DIGITS - 1,
                CHUNK_DIGITS,
                CHUNK_DIGITS + 1,
            ] {
                for seed in 0..3 {
                    digits_ok(&random_text(digits as u64, seed, radix), digits, radix);
                }
            }
        }
        // Every non-zero leading digit occurs.
        let mut leading = std::collections::BTreeSet::new();
        for seed in 0..400 {
            leading.insert(random_text(1, seed, Radix::Binary)[0]);
        }
        assert_eq!(leading.len(), 15);
    }

    #[test]
    fn reproducible_and_seed_dependent() {
        let a = random_text(5000, 1, Radix::Decimal);
        assert_eq!(a, random_text(5000, 1, Radix::Decimal));
        assert_ne!(a, random_text(5000, 2, Radix::Decimal));
        assert_ne!(
            random_text(5000, 1, Radix::Binary),
            random_text(5000, 2, Radix::Binary)
        );
    }

    #[test]
    fn digits_look_uniform() {
        let text = random_text(1_000_000, 9, Radix::Decimal);
        let mut counts = [0u32; 10];
        for &b in &text[..1_000_000] {
            counts[(b - b'0') as usize] += 1;
        }
        for c in counts {
            // Expected 100_000; the standard deviation is 300.
            assert!((98_000..102_000).contains(&c), "{counts:?}");
        }
    }

    #[test]
    fn independent_of_thread_count() {
        let digits = (3 * CHUNK_DIGITS + 12345) as u64;
        let run = |threads: usize, radix: Radix| {
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap();
            pool.install(|| random_text(digits, 77, radix))
        };
        for radix in [Radix::Decimal, Radix::Binary] {
            let one = run(1, radix);
            assert_eq!(one, run(3, radix));
            assert_eq!(one, run(8, radix));
        }
        let dir = tempfile::tempdir().unwrap();
        let p1 = dir.path().join("one.txt");
        let p4 = dir.path().join("four.txt");
        rayon::ThreadPoolBuilder::new()
            .num_threads(1)
            .build()
            .unwrap()
            .install(|| generate(&p1, digits, 77, Radix::Decimal, false))
            .unwrap();
        rayon::ThreadPoolBuilder::new()
            .num_threads(4)
            .build()
            .unwrap()
            .install(|| generate(&p4, digits, 77, Radix::Decimal, false))
            .unwrap();
        assert_eq!(std::fs::read(&p1).unwrap(), std::fs::read(&p4).unwrap());
    }

    #[test]
    fn generated_file_equals_text_and_opens() {
        let dir = tempfile::tempdir().unwrap();
        // More than one write batch, with a short last one.
        let digits = (BATCH_CHUNKS * CHUNK_DIGITS + 1000) as u64;
        for (radix, format) in [
            (Radix::Decimal, Format::Decimal),
            (Radix::Binary, Format::Hex),
        ] {
            let p = dir.path().join(format!("{}.txt", format.name()));
            generate(&p, digits, 5, radix, false).unwrap();
            let bytes = std::fs::read(&p).unwrap();
            assert_eq!(bytes, random_text(digits, 5, radix));
            let op = Operand::open(&p, Some(format)).unwrap();
            assert_eq!(op.digit_count(), digits);
            assert_eq!(op.radix(), radix);
            assert!(!op.is_negative());
        }
        let names: Vec<_> = std::fs::read_dir(dir.path()).unwrap().collect();
        assert_eq!(names.len(), 2, "no temporary files are left");
    }

    #[test]
    fn refuses_zero_digits_and_existing_files() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("x.txt");
        let err = generate(&p, 0, 1, Radix::Decimal, false).unwrap_err();
        assert!(matches!(err, Error::Usage { .. }), "{err}");
        assert!(!p.exists());
        generate(&p, 10, 1, Radix::Decimal, false).unwrap();
        let err = generate(&p, 10, 2, Radix::Decimal, false).unwrap_err();
        assert!(matches!(err, Error::Output { .. }), "{err}");
        generate(&p, 12, 2, Radix::Decimal, true).unwrap();
        assert_eq!(
            std::fs::read(&p).unwrap(),
            random_text(12, 2, Radix::Decimal)
        );
    }
}
