//! Kernel micro-benchmarks: in-cache transforms (single vector and lanes),
//! the row twiddle, the CRT, the decimal carry split and the packing of
//! residue stores.
//!
//! `cargo bench --bench kernels` (criterion). Divide a transform's time by
//! `len/2 * log2(len)` for the cost of one butterfly.

use criterion::{black_box, criterion_group, criterion_main, BenchmarkId, Criterion, Throughput};
use vastmul::arith::primes::PRIMES;
use vastmul::ntt::{self, Twiddles};

fn words(n: usize, p: u64) -> Vec<u64> {
    let mut x = 0x2545_f491_4f6c_dd1du64;
    (0..n)
        .map(|_| {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            x % p
        })
        .collect()
}

fn transforms(c: &mut Criterion) {
    let pr = &PRIMES[0];
    let m = pr.modulus;
    let mut g = c.benchmark_group("ntt");
    for log in [10u32, 12, 14] {
        let n = 1usize << log;
        let tw = Twiddles::new(pr, n);
        let butterflies = (n / 2) as u64 * log as u64;
        g.throughput(Throughput::Elements(butterflies));
        let mut a = words(n, m.p);
        g.bench_with_input(BenchmarkId::new("forward", n), &n, |bch, _| {
            bch.iter(|| ntt::forward(black_box(&mut a), &tw, &m))
        });
        let mut a = words(n, m.p);
        g.bench_with_input(BenchmarkId::new("inverse", n), &n, |bch, _| {
            bch.iter(|| ntt::inverse(black_box(&mut a), &tw, &m))
        });
        let lanes = 16;
        g.throughput(Throughput::Elements(butterflies * lanes as u64));
        let mut a = words(n * lanes, m.p);
        g.bench_with_input(BenchmarkId::new("forward_lanes16", n), &n, |bch, _| {
            bch.iter(|| ntt::forward_lanes(black_box(&mut a), lanes, &tw, &m))
        });
        let mut a = words(n * lanes, m.p);
        g.bench_with_input(BenchmarkId::new("inverse_lanes16", n), &n, |bch, _| {
            bch.iter(|| ntt::inverse_lanes(black_box(&mut a), lanes, &tw, &m))
        });
    }
    g.finish();
}

/// The 50-bit transforms on every path this CPU runs, single vectors of
/// 2^10..2^14 points and 16 lanes of 2^10, throughput in butterflies (as
/// above). `cargo bench --bench kernels -- ntt50`.
fn transforms50(c: &mut Criterion) {
    use vastmul::ntt50::{primes::PRIMES as PRIMES50, Kernel, Twiddles as Twiddles50};
    let pr = &PRIMES50[0];
    let p = pr.modulus.p;
    let mut g = c.benchmark_group("ntt50");
    for k in Kernel::ALL.into_iter().filter(|k| k.is_supported()) {
        for log in [10u32, 12, 14] {
            let n = 1usize << log;
            let tw = Twiddles50::new(pr, n);
            g.throughput(Throughput::Elements((n / 2) as u64 * log as u64));
            let mut a = words(n, p);
            g.bench_with_input(
                BenchmarkId::new(format!("forward/{}", k.name()), n),
                &n,
                |bch, _| bch.iter(|| k.forward(black_box(&mut a), &tw)),
            );
            let mut a = words(n, p);
            g.bench_with_input(
                BenchmarkId::new(format!("inverse/{}", k.name()), n),
                &n,
                |bch, _| bch.iter(|| k.inverse(black_box(&mut a), &tw)),
            );
        }
        let (n, lanes) = (1usize << 10, 16);
        let tw = Twiddles50::new(pr, n);
        g.throughput(Throughput::Elements((n / 2 * 10 * lanes) as u64));
        let mut a = words(n * lanes, p);
        g.bench_with_input(
            BenchmarkId::new(format!("forward_lanes16/{}", k.name()), n),
            &n,
            |bch, _| bch.iter(|| k.forward_lanes(black_box(&mut a), lanes, &tw)),
        );
        let mut a = words(n * lanes, p);
        g.bench_with_input(
            BenchmarkId::new(format!("inverse_lanes16/{}", k.name()), n),
            &n,
            |bch, _| bch.iter(|| k.inverse_lanes(black_box(&mut a), lanes, &tw)),
        );
    }
    g.finish();
}

/// The 50-bit row twiddle (`twiddle_powers`) on 4096 elements per path,
/// throughput in elements. `cargo bench --bench kernels -- twiddle50`.
fn twiddle50(c: &mut Criterion) {
    use vastmul::ntt50::{primes::PRIMES as PRIMES50, Kernel};
    let pr = &PRIMES50[0];
    let m = pr.modulus;
    let n = 4096usize;
    let step = pr.root_of_unity(1 << 20);
    let mut g = c.benchmark_group("twiddle50");
    g.throughput(Throughput::Elements(n as u64));
    for k in Kernel::ALL.into_iter().filter(|k| k.is_supported()) {
        let mut a = words(n, m.p);
        g.bench_with_input(BenchmarkId::new(k.name(), n), &n, |bch, _| {
            bch.iter(|| k.twiddle_powers(black_box(&mut a), step, &m))
        });
    }
    g.finish();
}

/// The four-prime CRT (`Crt50::coefficients`) on 4096 coefficients,
/// throughput in coefficients. `cargo bench --bench kernels -- crt50`.
fn crt50(c: &mut Criterion) {
    use vastmul::ntt50::{crt::Crt50, primes::PRIMES as PRIMES50};
    let n = 4096usize;
    let crt = Crt50::for_transform_len(n as u64);
    // residues of real values (times the length, as the inverse leaves
    // them): arbitrary residues would name values past 2^192
    let values = words(n, u64::MAX);
    let res: Vec<Vec<u64>> = PRIMES50
        .iter()
        .map(|pr| {
            let m = pr.modulus;
            values.iter().map(|&v| m.mul(v % m.p, n as u64)).collect()
        })
        .collect();
    let mut out = vec![[0u64; 3]; n];
    let mut g = c.benchmark_group("crt50");
    g.throughput(Throughput::Elements(n as u64));
    g.bench_with_input(BenchmarkId::new("coefficients", n), &n, |bch, _| {
        bch.iter(|| crt.coefficients([&res[0], &res[1], &res[2], &res[3]], black_box(&mut out)))
    });
    g.finish();
}

/// Packing 52-bit residues for the out-of-core stores, against a plain
/// copy of the same words: what a packed store adds per word.
fn packing(c: &mut Criterion) {
    use vastmul::packing::{pack, unpack, PAIR_BYTES};
    let n = 1usize << 15;
    let w = words(n, 1 << 52);
    let mut bytes = vec![0u8; n / 2 * PAIR_BYTES];
    let mut back = vec![0u64; n];
    let mut g = c.benchmark_group("packing");
    g.throughput(Throughput::Elements(n as u64));
    g.bench_with_input(BenchmarkId::new("pack", n), &n, |bch, _| {
        bch.iter(|| pack(black_box(&w), black_box(&mut bytes)))
    });
    g.bench_with_input(BenchmarkId::new("unpack", n), &n, |bch, _| {
        bch.iter(|| unpack(black_box(&bytes), black_box(&mut back)))
    });
    g.bench_with_input(BenchmarkId::new("copy", n), &n, |bch, _| {
        bch.iter(|| back.copy_from_slice(black_box(&w)))
    });
    g.finish();
}

criterion_group! {
    name = benches;
    config = Criterion::default().sample_size(20).measurement_time(std::time::Duration::from_secs(2));
    targets = transforms, transforms50, twiddle50, crt50, packing
}
criterion_main!(benches);
