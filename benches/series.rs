//! Criterion benchmarks of the series engine: one option, and a book of
//! 10,000 typical contracts (lambda T below 5), single-threaded.
//! Run: cargo bench --bench series

use criterion::{criterion_group, criterion_main, BatchSize, Criterion, Throughput};
use saltus::engines::series;
use saltus::model::{Contract, JumpParams, OptionKind};
use std::hint::black_box;

mod common;

fn typical_book(n: usize) -> Vec<Contract> {
    let mut u = common::Lcg::new(12345);
    (0..n)
        .map(|i| {
            let r = common::typical_row(i, &mut u);
            let kind = if r.call {
                OptionKind::Call
            } else {
                OptionKind::Put
            };
            Contract::new(
                kind,
                r.spot,
                r.strike,
                r.expiry,
                r.rate,
                r.div_yield,
                r.vol,
                JumpParams {
                    rate: r.jump_rate,
                    mean: r.jump_mean,
                    vol: r.jump_vol,
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
