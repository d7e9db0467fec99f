//! Criterion benchmark of `book::columns::price_columns`, the library call
//! behind the Python package: a book of 1,000,000 rows held as arrays, priced
//! with all Greeks on the default rayon pool (all cores), compute only (no
//! parsing, no formatting). The rows are drawn from the ranges of
//! `python/bench/bench_price.py`, so the two rates compare the same work.
//! Run: cargo bench --bench columns

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use saltus::book::columns::{price_columns, Column, ColumnBook};

#[allow(dead_code)] // the bench uses the generator only
mod common;

fn bench(c: &mut Criterion) {
    let n = 1_000_000;
    let mut u = common::Lcg::new(2026);
    let mut draw =
        |lo: f64, hi: f64| -> Vec<f64> { (0..n).map(|_| lo + (hi - lo) * u.next()).collect() };
    let strike = draw(60.0, 160.0);
    let expiry = draw(0.05, 3.0);
    let vol = draw(0.1, 0.4);
    let jump_rate = draw(0.1, 2.0);
    let jump_mean = draw(-0.3, 0.1);
    let jump_vol = draw(0.05, 0.4);
    let kind: Vec<Option<String>> = draw(0.0, 1.0)
        .iter()
        .map(|x| Some(if *x < 0.5 { "call" } else { "put" }.to_string()))
        .collect();
    let spot = vec![100.0; n];
    let rate = vec![0.02; n];
    let div = vec![0.01; n];
    let book = ColumnBook {
        kind: Column::Text(&kind),
        spot: Column::Numbers(&spot),
        strike: Column::Numbers(&strike),
        expiry: Column::Numbers(&expiry),
        rate: Column::Numbers(&rate),
        vol: Column::Numbers(&vol),
        jump_rate: Column::Numbers(&jump_rate),
        jump_mean: Column::Numbers(&jump_mean),
        jump_vol: Column::Numbers(&jump_vol),
        div_yield: Some(Column::Numbers(&div)),
        quantity: None,
        multiplier: None,
        valuation_date: None,
        default_valuation: None,
        exercise: None,
        pide: Default::default(),
    };
    let mut g = c.benchmark_group("columns");
    g.sample_size(10);
    g.throughput(Throughput::Elements(n as u64));
    g.bench_function("price_columns_1m_rows", |b| {
        b.iter(|| price_columns(&book, false).unwrap())
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
