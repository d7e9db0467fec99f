//! Criterion benchmarks of the Black-Scholes implied volatility: a sweep of
//! 10,000 seeded quotes (vol 0.05..1, expiry one week..5 years, strikes
//! 50%..200% of the forward, calls and puts) inverted one at a time on one
//! core, and as a batch on the rayon pool (all cores).
//! Run: cargo bench --bench implied_vol

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use saltus::black_scholes;
use saltus::market::implied_vol::{implied_vol, implied_vols, VolQuote};
use saltus::model::OptionKind;
use std::hint::black_box;

#[allow(dead_code)] // the typical book is for the other benchmarks
mod common;

fn quotes(n: usize) -> Vec<VolQuote> {
    let mut u = common::Lcg::new(2015);
    (0..n)
        .map(|i| {
            let kind = if i % 2 == 0 {
                OptionKind::Call
            } else {
                OptionKind::Put
            };
            let vol = 0.05 + 0.95 * u.next();
            let expiry = (1.0f64 / 52.0) * (260.0f64).powf(u.next());
            let strike = 100.0 * (0.5 * 4.0f64.powf(u.next()));
            let (rate, div_yield) = (0.03, 0.01);
            let price = black_scholes::price(kind, 100.0, strike, expiry, rate, div_yield, vol);
            VolQuote {
                kind,
                price,
                spot: 100.0,
                strike,
                expiry,
                rate,
                div_yield,
            }
        })
        .collect()
}

fn bench(c: &mut Criterion) {
    let qs = quotes(10_000);
    let mut g = c.benchmark_group("implied_vol");
    g.throughput(Throughput::Elements(qs.len() as u64));
    g.bench_function("single_core_10k", |b| {
        b.iter(|| {
            let mut sum = 0.0;
            for q in &qs {
                sum += implied_vol(
                    q.kind,
                    black_box(q.price),
                    q.spot,
                    q.strike,
                    q.expiry,
                    q.rate,
                    q.div_yield,
                )
                .unwrap_or(0.0);
            }
            sum
        })
    });
    let big = quotes(200_000);
    g.throughput(Throughput::Elements(big.len() as u64));
    g.bench_function("batch_all_cores_200k", |b| {
        b.iter(|| implied_vols(black_box(&big)))
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
