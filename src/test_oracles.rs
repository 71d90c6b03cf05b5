//! Slow, obviously correct references the kernels are compared with:
//! u128 modular arithmetic, an O(n^2) DFT and a schoolbook convolution.

/// `words` reproducible pseudo-random words from `seed` (xorshift).
pub fn seeded_words(words: usize, seed: u64) -> Vec<u64> {
    let mut x = seed.wrapping_mul(0x9e37_79b9_7f4a_7c15) | 1;
    (0..words)
        .map(|_| {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            x
        })
        .collect()
}

/// `X_k = sum_j a_j w^(jk) mod p`, in natural order.
pub fn naive_dft(a: &[u64], w: u64, p: u64) -> Vec<u64> {
    let mul = |x: u64, y: u64| ((x as u128 * y as u128) % p as u128) as u64;
    let n = a.len();
    let mut out = vec![0u64; n];
    let mut wk = 1u64;
    for o in out.iter_mut() {
        let mut acc = 0u64;
        let mut wjk = 1u64;
        for &x in a {
            acc = ((acc as u128 + mul(x, wjk) as u128) % p as u128) as u64;
            wjk = mul(wjk, wk);
        }
        *o = acc;
        wk = mul(wk, w);
    }
    out
}

/// The exact acyclic convolution of two limb vectors, as 192-bit
/// coefficients `[lo, mid, hi]`.
pub fn schoolbook_convolution(a: &[u64], b: &[u64]) -> Vec<[u64; 3]> {
    if a.is_empty() || b.is_empty() {
        return Vec::new();
    }
    let mut out = vec![[0u64; 3]; a.len() + b.len() - 1];
    for (i, &x) in a.iter().enumerate() {
        for (j, &y) in b.iter().enumerate() {
            let t = x as u128 * y as u128;
            let c = &mut out[i + j];
            let (s0, c0) = c[0].overflowing_add(t as u64);
            let (s1, c1) = c[1].overflowing_add((t >> 64) as u64);
            let (s1, c2) = s1.overflowing_add(c0 as u64);
            c[0] = s0;
            c[1] = s1;
            c[2] += c1 as u64 + c2 as u64;
        }
    }
    out
}
