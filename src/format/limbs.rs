//! Raw limb files: the bare little-endian words, nothing else.
//!
//! A raw limb file is a sequence of 64-bit words, each stored least
//! significant byte first, the least significant word first. It has no
//! header, so it cannot say its radix or sign: it is always a non-negative
//! number in base 2^64, and it is never detected, only named. The length must
//! be a positive multiple of 8; zero is one zero word. Leading zero words
//! (at the end of the file) are allowed on input and never written.

use std::io::{self, Write};
use std::ops::Range;
use std::path::Path;

use rayon::prelude::*;

use crate::{Error, Result};

/// Bytes per limb.
pub const LIMB_BYTES: usize = 8;

/// Limbs converted per write buffer: 8 MiB of bytes.
pub(crate) const IO_CHUNK_LIMBS: usize = 1 << 20;

/// Validates a raw limb file and returns the byte range of its significant
/// words (empty for zero).
pub(crate) fn scan(path: &Path, bytes: &[u8]) -> Result<Range<usize>> {
    let partial = bytes.len() % LIMB_BYTES;
    if partial != 0 {
        let at = bytes.len() - partial;
        return Err(Error::input(
            path,
            Some(at as u64),
            format!(
                "file length {} is not a multiple of 8: the last word has only {partial} byte(s)",
                bytes.len()
            ),
            "a raw limb file holds whole 64-bit words; check that it was written completely \
             and that it really is raw limbs",
        ));
    }
    Ok(0..significant_bytes(bytes))
}

/// Length of `bytes` without its trailing all-zero words.
fn significant_bytes(bytes: &[u8]) -> usize {
    let words = bytes.len() / LIMB_BYTES;
    let mut n = words;
    while n > 0 && word(bytes, n - 1) == 0 {
        n -= 1;
    }
    n * LIMB_BYTES
}

/// Word `i` of a little-endian word array.
#[inline]
pub(crate) fn word(bytes: &[u8], i: usize) -> u64 {
    let mut a = [0u8; LIMB_BYTES];
    a.copy_from_slice(&bytes[i * LIMB_BYTES..(i + 1) * LIMB_BYTES]);
    u64::from_le_bytes(a)
}

/// Words `first..first + out.len()` of a little-endian word array; words
/// past its end read as zero.
pub(crate) fn read_words(payload: &[u8], first: usize, out: &mut [u64]) {
    let count = payload.len() / LIMB_BYTES;
    for (k, slot) in out.iter_mut().enumerate() {
        let i = first.saturating_add(k);
        *slot = if i < count { word(payload, i) } else { 0 };
    }
}

/// Fills `buf` with the little-endian bytes of `limbs`, in parallel.
pub(crate) fn limbs_to_bytes(limbs: &[u64], buf: &mut Vec<u8>) {
    buf.clear();
    buf.resize(limbs.len() * LIMB_BYTES, 0);
    buf.par_chunks_mut(LIMB_BYTES << 12)
        .zip(limbs.par_chunks(1 << 12))
        .for_each(|(out, src)| {
            for (o, &x) in out.chunks_exact_mut(LIMB_BYTES).zip(src) {
                o.copy_from_slice(&x.to_le_bytes());
            }
        });
}

/// Writes `limbs` (trimmed; empty for zero) as a raw limb file.
pub(crate) fn write_raw<W: Write>(w: &mut W, limbs: &[u64]) -> io::Result<()> {
    if limbs.is_empty() {
        return w.write_all(&[0u8; LIMB_BYTES]);
    }
    let mut buf = Vec::new();
    for chunk in limbs.chunks(IO_CHUNK_LIMBS) {
        limbs_to_bytes(chunk, &mut buf);
        w.write_all(&buf)?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn trailing_zero_words_are_not_significant() {
        let mut bytes = Vec::new();
        for x in [5u64, 0, 7, 0, 0] {
            bytes.extend_from_slice(&x.to_le_bytes());
        }
        assert_eq!(scan(Path::new("x"), &bytes).unwrap(), 0..24);
        let mut out = [9u64; 6];
        read_words(&bytes[..24], 1, &mut out);
        assert_eq!(out, [0, 7, 0, 0, 0, 0]);
        assert_eq!(scan(Path::new("x"), &[0u8; 16]).unwrap(), 0..0);
    }

    #[test]
    fn partial_word_offset() {
        let err = scan(Path::new("w.bin"), &[1u8; 21]).unwrap_err();
        match err {
            Error::Input { offset, path, .. } => {
                assert_eq!(offset, Some(16));
                assert_eq!(path, Path::new("w.bin"));
            }
            other => panic!("{other}"),
        }
    }

    #[test]
    fn bytes_round_trip_across_task_boundaries() {
        let limbs: Vec<u64> = (0..10_000u64)
            .map(|i| i.wrapping_mul(0x9e37_79b9_7f4a_7c15))
            .collect();
        let mut buf = Vec::new();
        limbs_to_bytes(&limbs, &mut buf);
        let mut back = vec![0u64; limbs.len()];
        read_words(&buf, 0, &mut back);
        assert_eq!(back, limbs);
    }
}
