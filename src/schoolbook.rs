//! Schoolbook convolution for products where one operand is short: exact
//! 192-bit coefficients, parallel over ranges of output positions.

use crate::carry::U192;
use rayon::prelude::*;

/// Coefficients `c_k = sum_i a_i b_(k-i)` for `k < len a + len b - 1`, as
/// 192-bit numbers. Exact while `min(len a, len b) < 2^64`.
pub fn convolution(a: &[u64], b: &[u64]) -> Vec<U192> {
    if a.is_empty() || b.is_empty() {
        return Vec::new();
    }
    // Iterate over the short operand in the outer loop so the inner loop
    // streams along the long one.
    let (long, short) = if a.len() >= b.len() { (a, b) } else { (b, a) };
    let count = long.len() + short.len() - 1;
    let mut out = vec![[0u64; 3]; count];
    let chunk = 4096;
    out.par_chunks_mut(chunk).enumerate().for_each(|(ci, dst)| {
        let k0 = ci * chunk;
        let k1 = k0 + dst.len();
        for (j, &y) in short.iter().enumerate() {
            // positions k in [k0, k1) with i = k - j in [0, long.len())
            let lo = k0.max(j);
            let hi = k1.min(j + long.len());
            if lo >= hi {
                continue;
            }
            let src = &long[lo - j..hi - j];
            for (c, &x) in dst[lo - k0..hi - k0].iter_mut().zip(src) {
                let t = x as u128 * y as u128;
                let (s0, c0) = c[0].overflowing_add(t as u64);
                let s1 = (c[1] as u128) + ((t >> 64) as u64 as u128) + c0 as u128;
                c[0] = s0;
                c[1] = s1 as u64;
                c[2] += (s1 >> 64) as u64;
            }
        }
    });
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::test_oracles::{schoolbook_convolution, seeded_words};

    #[test]
    fn matches_oracle_on_uneven_lengths_and_maximal_limbs() {
        for (la, lb) in [(1, 1), (1, 9000), (9000, 3), (37, 4500), (5000, 5000)] {
            let mut a = seeded_words(la, la as u64);
            let b = seeded_words(lb, 77 + lb as u64);
            a[0] = u64::MAX;
            assert_eq!(
                convolution(&a, &b),
                schoolbook_convolution(&a, &b),
                "{la}x{lb}"
            );
            let ones = vec![u64::MAX; la];
            let ones_b = vec![u64::MAX; lb];
            assert_eq!(
                convolution(&ones, &ones_b),
                schoolbook_convolution(&ones, &ones_b)
            );
        }
    }
}
