//! Wall time of whole in-memory products (limbs in RAM, no file I/O), per
//! algorithm and thread count, compared side by side in one run.
//!
//! `cargo bench --bench product -- [LOG2_LIMBS ...]` (default 16 20 22).
//! Each line: radix, limbs per operand, threads, algorithm, best of 3.

use std::time::Instant;
use vastmul::plan::Force;
use vastmul::radix::{Radix, DEC_BASE};

fn limbs(n: usize, seed: u64, radix: Radix) -> Vec<u64> {
    let mut x = seed | 1;
    (0..n)
        .map(|_| {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            match radix {
                Radix::Binary => x,
                Radix::Decimal => x % DEC_BASE,
            }
        })
        .collect()
}

fn best_of(runs: usize, mut f: impl FnMut()) -> f64 {
    (0..runs)
        .map(|_| {
            let t = Instant::now();
            f();
            t.elapsed().as_secs_f64()
        })
        .fold(f64::INFINITY, f64::min)
}

/// Schoolbook against the NTT on one thread, balanced and unbalanced, to
/// place the planner's threshold.
fn crossover() {
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .unwrap();
    println!("la        lb      schoolbook_s  ntt_s      ntt/schoolbook");
    let mut pairs: Vec<(usize, usize)> = [8, 16, 24, 32, 48, 64, 96, 128, 192, 256, 512]
        .iter()
        .map(|&n| (n, n))
        .collect();
    pairs.extend([16, 32, 64, 128, 256, 512].iter().map(|&k| (100_000, k)));
    for (la, lb) in pairs {
        let a = limbs(la, 3, Radix::Binary);
        let b = limbs(lb, 5, Radix::Binary);
        let reps = (2_000_000 / (la * lb)).clamp(1, 2000);
        let time = |force| {
            best_of(3, || {
                pool.install(|| {
                    for _ in 0..reps {
                        std::hint::black_box(vastmul::engine::multiply_forced(
                            &a,
                            &b,
                            Radix::Binary,
                            force,
                        ));
                    }
                })
            }) / reps as f64
        };
        let (s, n) = (time(Force::Schoolbook), time(Force::Ntt));
        println!("{la:<9} {lb:<7} {s:<13.3e} {n:<10.3e} {:.2}", n / s);
    }
}

fn main() {
    if std::env::args().any(|a| a == "crossover") {
        crossover();
        return;
    }
    let logs: Vec<u32> = std::env::args()
        .skip(1)
        .filter_map(|a| a.parse().ok())
        .collect();
    let logs = if logs.is_empty() {
        vec![16, 20, 22]
    } else {
        logs
    };
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    println!("radix    limbs      threads  algorithm  seconds");
    for &log in &logs {
        for radix in [Radix::Binary, Radix::Decimal] {
            let n = 1usize << log;
            let a = limbs(n, 7, radix);
            let b = limbs(n, 11, radix);
            let mut times = Vec::new();
            for threads in [1, cores] {
                let pool = rayon::ThreadPoolBuilder::new()
                    .num_threads(threads)
                    .build()
                    .unwrap();
                let t = best_of(3, || {
                    pool.install(|| vastmul::engine::multiply_forced(&a, &b, radix, Force::Ntt));
                });
                println!(
                    "{:<8} {:<10} {:<8} ntt        {:.4}",
                    radix.name(),
                    n,
                    threads,
                    t
                );
                times.push(t);
            }
            if times.len() == 2 {
                println!(
                    "  speedup 1 -> {cores} threads: {:.2}x",
                    times[0] / times[1]
                );
            }
        }
    }
}
