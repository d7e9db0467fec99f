//! Criterion benchmark of the whole book pipeline in memory: parse CSV,
//! price every row with all Greeks, format and write the output CSV, on the
//! default rayon pool (all cores). Same per-row work as `saltus price`,
//! without the disk. Run: cargo bench --bench book

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use saltus::book::{run_book, PipelineOptions};
use saltus::engines::series;
use saltus::greeks::RAW_COLUMNS;
use std::fmt::Write as _;

mod common;

/// The typical book as CSV text, rounded like a real book
/// (`scripts/make_book.py` draws from the same ranges).
fn typical_csv(n: usize) -> String {
    let mut u = common::Lcg::new(987_654_321);
    let mut text = String::from(
        "id,underlying,kind,spot,strike,expiry,rate,div_yield,vol,jump_rate,jump_mean,jump_vol,quantity\n",
    );
    for i in 0..n {
        let r = common::typical_row(i, &mut u);
        let kind = if r.call { "call" } else { "put" };
        writeln!(
            text,
            "R{i},SYN-{},{kind},{:.2},{:.2},{:.4},{:.4},{:.4},{:.3},{:.3},{:.3},{:.3},{}",
            i % 7,
            r.spot,
            r.strike,
            r.expiry,
            r.rate,
            r.div_yield,
            r.vol,
            r.jump_rate,
            r.jump_mean,
            r.jump_vol,
            (u.next() * 200.0) as i64 - 100,
        )
        .unwrap();
    }
    text
}

fn bench(c: &mut Criterion) {
    let rows = 200_000;
    let csv = typical_csv(rows);
    let mut result_columns: Vec<String> = RAW_COLUMNS.iter().map(|s| s.to_string()).collect();
    result_columns.push("terms".into());
    result_columns.push("status".into());
    let opts = PipelineOptions {
        result_columns,
        ..Default::default()
    };
    let mut g = c.benchmark_group("book");
    g.sample_size(10);
    g.throughput(Throughput::Elements(rows as u64));
    g.bench_function("200k_rows_read_price_write_in_memory", |b| {
        b.iter(|| {
            let mut out = Vec::with_capacity(64 << 20);
            let summary = run_book(csv.as_bytes(), &mut out, &opts, |row, w| {
                let r = series::price(&row.contract).map_err(|e| e.to_string())?;
                for v in r.greeks.headline() {
                    w.push_f64(v);
                }
                w.push_u64(r.terms as u64);
                Ok(())
            })
            .unwrap();
            assert_eq!(summary.failed, 0);
            out.len()
        })
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
