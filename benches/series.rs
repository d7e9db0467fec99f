//! Criterion benchmarks of the series engine: one option, and a book of
//! 10,000 typical contracts (lambda T below 5), single-threaded.
//! Run: cargo bench --bench series

use criterion::{criterion_group, criterion_main, BatchSize, Criterion, Throughput};
use saltus::model::{Contract, JumpParams, OptionKind};
use saltus::series;
use std::hint::black_box;

fn typical_book(n: usize) -> Vec<Contract> {
    // A fixed linear-congruential sequence: reproducible, no extra crates.
    let mut state = 12345u64;
    let mut u = || {
        state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (state >> 11) as f64 / (1u64 << 53) as f64
    };
    (0..n)
        .map(|i| {
            let s = 20.0 + 480.0 * u();
            let t = 0.02 + 2.98 * u();
            let kind = if i % 2 == 0 {
                OptionKind::Put
            } else {
                OptionKind::Call
            };
            let lam = 0.05 + u() * (1.6f64.min(4.9 / t) - 0.05);
            Contract::new(
                kind,
                s,
                s * (0.6 + 0.9 * u()),
                t,
                0.06 * u(),
                0.03 * u(),
                0.1 + 0.4 * u(),
                JumpParams {
                    rate: lam,
                    mean: -0.3 + 0.4 * u(),
                    vol: 0.02 + 0.38 * u(),
                },
            )
            .unwrap()
        })
        .collect()
}

fn bench(c: &mut Criterion) {
    let one = Contract::new(
        OptionKind::Call,
        100.0,
        100.0,
        0.25,
        0.05,
        0.0,
        0.15,
        JumpParams {
            rate: 0.1,
            mean: -0.9,
            vol: 0.45,
        },
    )
    .unwrap();
    c.bench_function("series/one_option_all_greeks", |b| {
        b.iter(|| series::price(black_box(&one)).unwrap())
    });
    let book = typical_book(10_000);
    let mut g = c.benchmark_group("series/book");
    g.throughput(Throughput::Elements(book.len() as u64));
    g.bench_function("10k_typical_rows_one_thread", |b| {
        b.iter_batched(
            || (),
            |_| {
                book.iter()
                    .map(|c| series::price(c).unwrap().greeks.price)
                    .sum::<f64>()
            },
            BatchSize::SmallInput,
        )
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
