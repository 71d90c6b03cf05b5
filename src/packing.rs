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

/// Words in a run: 16 words of 52 bits fill 13 whole 64-bit words, so
/// a run packs with constant shifts and no byte-by-byte work.
const RUN_WORDS: usize = 16;
const RUN_BYTES: usize = RUN_WORDS / 2 * PAIR_BYTES;

/// Where word `i` of a run starts: which 64-bit word, which bit.
const fn bit_of(i: usize) -> (usize, u32) {
    let bit = i * PACKED_BITS as usize;
    (bit / 64, (bit % 64) as u32)
}

/// Runs `$body` with `$i` bound to each word index of a run, as
/// constants, so that every shift is fixed at compile time.
macro_rules! each_word_of_run {
    ($i:ident => $body:block) => {
        each_word_of_run!(@ $i $body; 0 1 2 3 4 5 6 7 8 9 10 11 12 13 14 15)
    };
    (@ $i:ident $body:block; $($n:literal)*) => {
        $({
            const $i: usize = $n;
            $body
        })*
    };
}

/// One run: the packed layout is a little-endian stream of 52-bit words,
/// the same as pair after pair.
#[inline(always)]
fn pack_run(w: &[u64; RUN_WORDS], out: &mut [u8; RUN_BYTES]) -> u64 {
    let mut acc = [0u64; RUN_BYTES / 8];
    each_word_of_run!(I => {
        let (j, s) = bit_of(I);
        acc[j] |= w[I] << s;
        // A word starting past bit 12 reaches into the next 64-bit word.
        if s > 64 - PACKED_BITS {
            acc[j + 1] |= w[I] >> (64 - s);
        }
    });
    for (o, a) in out.chunks_exact_mut(8).zip(acc) {
        o.copy_from_slice(&a.to_le_bytes());
    }
    w.iter().fold(0, |h, &x| h | x)
}

#[inline(always)]
fn unpack_run(bytes: &[u8; RUN_BYTES], out: &mut [u64; RUN_WORDS]) {
    let mut acc = [0u64; RUN_BYTES / 8];
    for (a, b) in acc.iter_mut().zip(bytes.chunks_exact(8)) {
        *a = u64::from_le_bytes(b.try_into().unwrap());
    }
    each_word_of_run!(I => {
        let (j, s) = bit_of(I);
        let mut v = acc[j] >> s;
        if s > 64 - PACKED_BITS {
            v |= acc[j + 1] << (64 - s);
        }
        out[I] = v & MASK;
    });
}

/// Packs `words` (an even count) into `out` (`PAIR_BYTES` per pair).
/// Returns false, with `out` partly written, if a word is 2^52 or more.
pub fn pack(words: &[u64], out: &mut [u8]) -> bool {
    assert!(words.len().is_multiple_of(2), "packing whole pairs only");
    let pairs = words.len() / 2;
    assert!(out.len() >= pairs * PAIR_BYTES, "packed output too short");
    let runs = words.len() / RUN_WORDS;
    let mut high = 0u64;
    for (w, o) in words
        .chunks_exact(RUN_WORDS)
        .zip(out.chunks_exact_mut(RUN_BYTES))
    {
        high |= pack_run(w.try_into().unwrap(), o.try_into().unwrap());
    }
    // The pairs after the last whole run.
    let words = &words[runs * RUN_WORDS..];
    let out = &mut out[runs * RUN_BYTES..];
    for (i, w) in words.chunks_exact(2).enumerate() {
        high |= w[0] | w[1];
        let v = w[0] as u128 | (w[1] as u128) << PACKED_BITS;
        out[i * PAIR_BYTES..(i + 1) * PAIR_BYTES].copy_from_slice(&v.to_le_bytes()[..PAIR_BYTES]);
    }
    high >> PACKED_BITS == 0
}

/// Unpacks `out.len()` words (an even count) from `bytes`.
pub fn unpack(bytes: &[u8], out: &mut [u64]) {
    assert!(out.len().is_multiple_of(2), "unpacking whole pairs only");
    let pairs = out.len() / 2;
    assert!(bytes.len() >= pairs * PAIR_BYTES, "packed input too short");
    let runs = out.len() / RUN_WORDS;
    for (b, o) in bytes
        .chunks_exact(RUN_BYTES)
        .zip(out.chunks_exact_mut(RUN_WORDS))
    {
        unpack_run(b.try_into().unwrap(), o.try_into().unwrap());
    }
    let bytes = &bytes[runs * RUN_BYTES..];
    let out = &mut out[runs * RUN_WORDS..];
    for (i, w) in out.chunks_exact_mut(2).enumerate() {
        let mut b = [0u8; 16];
        b[..PAIR_BYTES].copy_from_slice(&bytes[i * PAIR_BYTES..(i + 1) * PAIR_BYTES]);
        let v = u128::from_le_bytes(b);
        w[0] = v as u64 & MASK;
        w[1] = (v >> PACKED_BITS) as u64 & MASK;
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

    /// The layout stores of earlier runs hold: word `k` at bits
    /// `52k .. 52k + 52` of a little-endian byte stream, written bit by bit.
    #[test]
    fn layout_is_a_little_endian_stream_of_52_bit_words() {
        let mut rng = Rng::new(53);
        for n in [2, 14, 16, 18, 32, 46, 64] {
            let words: Vec<u64> = (0..n).map(|_| rng.next_u64() & MASK).collect();
            let mut expected = vec![0u8; n / 2 * PAIR_BYTES];
            for (k, &w) in words.iter().enumerate() {
                for bit in 0..PACKED_BITS as usize {
                    if w >> bit & 1 == 1 {
                        let at = k * PACKED_BITS as usize + bit;
                        expected[at / 8] |= 1 << (at % 8);
                    }
                }
            }
            let mut bytes = vec![0u8; expected.len()];
            assert!(pack(&words, &mut bytes));
            assert_eq!(bytes, expected, "n = {n}");
        }
    }

    #[test]
    fn refuses_words_of_52_bits_or_more() {
        for bad in [1u64 << 52, u64::MAX, MASK + 1] {
            // In a whole run and in the pairs after it.
            for at in 0..22 {
                let mut words = vec![7u64; 22];
                words[at] = bad;
                let mut bytes = vec![0u8; 11 * PAIR_BYTES];
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
