//! Criterion benchmark of the whole book pipeline in memory: parse CSV,
//! price every row with all Greeks, format and write the output CSV, on the
//! default rayon pool (all cores). Same per-row work as `saltus price`,
//! without the disk. Run: cargo bench --bench book

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use saltus::book::{run_book, PipelineOptions};
use saltus::greeks::RAW_COLUMNS;
use saltus::series;
use std::fmt::Write as _;

/// A book of typical rows (lambda T below 5), like `scripts/make_book.py`.
fn typical_csv(n: usize) -> String {
    let mut state = 987_654_321u64;
    let mut u = || {
        state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (state >> 11) as f64 / (1u64 << 53) as f64
    };
    let mut text = String::from(
        "id,underlying,kind,spot,strike,expiry,rate,div_yield,vol,jump_rate,jump_mean,jump_vol,quantity\n",
    );
    for i in 0..n {
        let s = 20.0 + 480.0 * u();
        let t = 0.02 + 2.98 * u();
        let kind = if i % 2 == 0 { "put" } else { "call" };
        let lam = 0.05 + u() * (1.6f64.min(4.9 / t) - 0.05);
        writeln!(
            text,
            "R{i},SYN-{},{kind},{:.2},{:.2},{:.4},{:.4},{:.4},{:.3},{:.3},{:.3},{:.3},{}",
            i % 7,
            s,
            s * (0.6 + 0.9 * u()),
            t,
            0.06 * u(),
            0.03 * u(),
            0.1 + 0.4 * u(),
            lam,
            -0.3 + 0.4 * u(),
            0.02 + 0.38 * u(),
            (u() * 200.0) as i64 - 100,
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
    let opts = PipelineOptions { result_columns };
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
