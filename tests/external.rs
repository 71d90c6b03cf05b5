//! The engine against published values: Mersenne numbers 2^p - 1 and
//! factorials, computed in base 10^19 with the library's multiplication
//! and compared with figures from outside the project.

use vastmul::engine::multiply;
use vastmul::radix::DEC_BASE;
use vastmul::Radix;

/// Decimal digits of a number given as base-10^19 limbs (no leading zero
/// limbs).
fn digit_count(limbs: &[u64]) -> usize {
    let top = *limbs.last().unwrap();
    19 * (limbs.len() - 1) + top.to_string().len()
}

/// The leading `n` decimal digits.
fn leading_digits(limbs: &[u64], n: usize) -> String {
    let mut s = limbs.last().unwrap().to_string();
    for l in limbs.iter().rev().skip(1) {
        if s.len() >= n {
            break;
        }
        s.push_str(&format!("{l:019}"));
    }
    s[..n].to_string()
}

/// 2^p in base 10^19, by square and multiply with the engine.
fn two_to_the(p: u32) -> Vec<u64> {
    let mut result = vec![1u64];
    for bit in (0..32 - p.leading_zeros()).rev() {
        result = multiply(&result, &result, Radix::Decimal);
        if p >> bit & 1 == 1 {
            result = multiply(&result, &[2], Radix::Decimal);
        }
    }
    result
}

/// Published digit counts of Mersenne primes 2^p - 1 (the list of known
/// Mersenne primes; values from memory, checked against Python's integers
/// when this test was written).
const MERSENNE_DIGITS: [(u32, usize); 9] = [
    (127, 39),
    (521, 157),
    (1279, 386),
    (4423, 1332),
    (19937, 6002),
    (44497, 13395),
    (86243, 25962),
    (132049, 39751),
    (216091, 65050),
];

#[test]
fn mersenne_numbers_have_their_published_digit_counts() {
    for (p, digits) in MERSENNE_DIGITS {
        let mut m = two_to_the(p);
        // 2^p ends in 2, 4, 8 or 6: subtracting one never borrows.
        m[0] -= 1;
        assert_eq!(digit_count(&m), digits, "2^{p} - 1");
    }
    // The whole of 2^127 - 1, as published (the largest prime found by hand
    // calculation); value from memory, checked against Python.
    let m = {
        let mut m = two_to_the(127);
        m[0] -= 1;
        m
    };
    let text: String = m
        .iter()
        .rev()
        .enumerate()
        .map(|(i, l)| {
            if i == 0 {
                l.to_string()
            } else {
                format!("{l:019}")
            }
        })
        .collect();
    assert_eq!(text, "170141183460469231731687303715884105727");
}

/// `x * k` for a small `k`, in base 10^19.
fn mul_small(x: &mut Vec<u64>, k: u64) {
    let mut carry = 0u128;
    for l in x.iter_mut() {
        let v = *l as u128 * k as u128 + carry;
        *l = (v % DEC_BASE as u128) as u64;
        carry = v / DEC_BASE as u128;
    }
    while carry > 0 {
        x.push((carry % DEC_BASE as u128) as u64);
        carry /= DEC_BASE as u128;
    }
}

/// `lo * (lo + 1) * ... * (hi - 1)` by a product tree whose leaves are
/// runs of 64 factors and whose inner products use the engine.
fn range_product(lo: u64, hi: u64) -> Vec<u64> {
    if hi - lo <= 64 {
        let mut x = vec![1u64];
        for k in lo..hi {
            mul_small(&mut x, k);
        }
        return x;
    }
    let mid = lo + (hi - lo) / 2;
    let (a, b) = rayon::join(|| range_product(lo, mid), || range_product(mid, hi));
    multiply(&a, &b, Radix::Decimal)
}

/// `log10(n!)` by Stirling's series, independent of the product.
fn log10_factorial(n: f64) -> f64 {
    let ln = n * n.ln() - n + 0.5 * (2.0 * std::f64::consts::PI * n).ln() + 1.0 / (12.0 * n)
        - 1.0 / (360.0 * n.powi(3));
    ln / std::f64::consts::LN_10
}

#[test]
fn factorials_have_their_published_digit_counts() {
    // Digits of (10^5)! and (10^6)!: OEIS A061010, "number of digits in
    // (10^n)!" (1, 7, 158, 2568, 35660, 456574, 5565709, ...); values from
    // memory, checked against Python when this test was written.
    for (n, digits) in [(100_000u64, 456_574usize), (1_000_000, 5_565_709)] {
        let f = range_product(1, n + 1);
        assert_eq!(digit_count(&f), digits, "{n}!");
        // Trailing zeros by Legendre's formula (common knowledge of the
        // trade): sum of floor(n / 5^i).
        let zeros: u64 = (1..).map(|i| n / 5u64.pow(i)).take_while(|&z| z > 0).sum();
        let text_tail: String = f
            .iter()
            .take(zeros as usize / 19 + 2)
            .rev()
            .map(|l| format!("{l:019}"))
            .collect();
        let trailing = text_tail.len() - text_tail.trim_end_matches('0').len();
        assert_eq!(trailing as u64, zeros, "{n}!");
        // Leading digits from Stirling's series, a method independent of
        // the multiplication (f64 holds about 8 of them at this size).
        let l = log10_factorial(n as f64);
        let mantissa = 10f64.powf(l - l.floor());
        let expected = format!("{:.10}", mantissa).replace('.', "");
        assert_eq!(leading_digits(&f, 7), expected[..7], "{n}!");
    }
}
