//! Words of at most 52 bits packed two to 13 bytes, for the residue stores
//! of the out-of-core passes on the 50-bit prime sets.
//!
//! Every residue those passes leave in scratch is below `4p < 2^52` (the
//! kernels' lazy bound for primes below 2^50), so 12 of each word's 64
//! bits are always zero. Packed, a residue store takes 13/16 of the bytes:
//! fewer bytes copied into the page cache, written back to the disk,
//! hashed nowhere differently (the journal hashes the words, not the
//! bytes) and discarded at the end. A pair is the unit so that every pair
//! starts on a byte: two threads writing whole pairs never share a byte.
//!
//! The packing is checked, never assumed: [`pack`] reports a word of 2^52
//! or more instead of cutting it, so a broken bound stops the run rather
//! than corrupting the product.

/// How a store keeps its words.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum WordWidth {
    /// Eight bytes a word.
    Full,
    /// Words below 2^52, two to [`PAIR_BYTES`] bytes.
    Packed52,
}

impl WordWidth {
    /// Bytes that `words` words take in this width.
    pub fn bytes(self, words: u64) -> u64 {
        match self {
            WordWidth::Full => 8 * words,
            WordWidth::Packed52 => PAIR_BYTES as u64 * words.div_ceil(2),
        }
    }
}

/// Bits of a packed word.
pub const PACKED_BITS: u32 = 52;

/// Bytes of a packed pair of words.
pub const PAIR_BYTES: usize = 13;

const MASK: u64 = (1 << PACKED_BITS) - 1;

/// Packs `words` (an even count) into `out` (`PAIR_BYTES` per pair).
/// Returns false, with `out` partly written, if a word is 2^52 or more.
pub fn pack(words: &[u64], out: &mut [u8]) -> bool {
    assert!(words.len().is_multiple_of(2), "packing whole pairs only");
    let pairs = words.len() / 2;
    assert!(out.len() >= pairs * PAIR_BYTES, "packed output too short");
    let mut high = 0u64;
    // All but the last pair store 16 bytes at once (one unaligned store);
    // the three bytes past the pair are overwritten by the next one.
    let fast = pairs.saturating_sub(1);
    for (i, w) in words.chunks_exact(2).take(fast).enumerate() {
        high |= w[0] | w[1];
        let v = w[0] as u128 | (w[1] as u128) << PACKED_BITS;
        out[i * PAIR_BYTES..i * PAIR_BYTES + 16].copy_from_slice(&v.to_le_bytes());
    }
    if pairs > 0 {
        let w = &words[2 * fast..];
        high |= w[0] | w[1];
        let v = w[0] as u128 | (w[1] as u128) << PACKED_BITS;
        out[fast * PAIR_BYTES..pairs * PAIR_BYTES].copy_from_slice(&v.to_le_bytes()[..PAIR_BYTES]);
    }
    high >> PACKED_BITS == 0
}

/// Unpacks `out.len()` words (an even count) from `bytes`.
pub fn unpack(bytes: &[u8], out: &mut [u64]) {
    assert!(out.len().is_multiple_of(2), "unpacking whole pairs only");
    let pairs = out.len() / 2;
    assert!(bytes.len() >= pairs * PAIR_BYTES, "packed input too short");
    // A 16-byte load may reach past the last pair: only where the slice
    // has those bytes is it taken.
    let fast = if bytes.len() >= pairs * PAIR_BYTES + 3 {
        pairs
    } else {
        pairs.saturating_sub(1)
    };
    for (i, w) in out.chunks_exact_mut(2).take(fast).enumerate() {
        let b: [u8; 16] = bytes[i * PAIR_BYTES..i * PAIR_BYTES + 16]
            .try_into()
            .unwrap();
        let v = u128::from_le_bytes(b);
        w[0] = v as u64 & MASK;
        w[1] = (v >> PACKED_BITS) as u64 & MASK;
    }
    for i in fast..pairs {
        let mut b = [0u8; 16];
        b[..PAIR_BYTES].copy_from_slice(&bytes[i * PAIR_BYTES..(i + 1) * PAIR_BYTES]);
        let v = u128::from_le_bytes(b);
        out[2 * i] = v as u64 & MASK;
        out[2 * i + 1] = (v >> PACKED_BITS) as u64 & MASK;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::Rng;

    #[test]
    fn round_trips_every_length_and_the_extremes() {
        let mut rng = Rng::new(52);
        for n in (0..40).step_by(2).chain([1000, 4096]) {
            let mut words: Vec<u64> = (0..n).map(|_| rng.next_u64() & MASK).collect();
            if n >= 4 {
                words[0] = MASK;
                words[1] = 0;
                words[n - 2] = 1;
                words[n - 1] = MASK;
            }
            // Exact length (the last pair's careful path) and slack after.
            for slack in [0, 3, 7] {
                let mut bytes = vec![0xa5u8; n / 2 * PAIR_BYTES + slack];
                assert!(pack(&words, &mut bytes));
                assert!(bytes[n / 2 * PAIR_BYTES..].iter().all(|&b| b == 0xa5));
                let mut back = vec![u64::MAX; n];
                unpack(&bytes, &mut back);
                assert_eq!(back, words, "n = {n}, slack = {slack}");
            }
        }
    }

    #[test]
    fn refuses_words_of_52_bits_or_more() {
        for bad in [1u64 << 52, u64::MAX, MASK + 1] {
            for at in 0..6 {
                let mut words = vec![7u64; 6];
                words[at] = bad;
                let mut bytes = vec![0u8; 3 * PAIR_BYTES];
                assert!(!pack(&words, &mut bytes), "{bad:#x} at {at}");
            }
        }
    }

    #[test]
    fn sizes() {
        assert_eq!(WordWidth::Full.bytes(5), 40);
        assert_eq!(WordWidth::Packed52.bytes(4), 26);
        assert_eq!(WordWidth::Packed52.bytes(5), 39);
        assert_eq!(WordWidth::Packed52.bytes(1 << 27), 13 << 26);
    }
}
