//! Criterion benchmark of the calibration: one underlying with 200 quotes
//! over 8 expiries (exact series prices of the d'Halluin, Forsyth & Vetzal
//! 2005 parameters), all six starts, on the calling thread.
//! Run: cargo bench --bench calibrate

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use saltus::engines::series;
use saltus::market::calibrate::{fit_group, CalibrationSpec};
use saltus::market::quotes::{read_quotes, Quote};
use saltus::model::{Contract, JumpParams, OptionKind};
use std::fmt::Write as _;
use std::hint::black_box;

fn sheet() -> String {
    let (s, r, q): (f64, f64, f64) = (100.0, 0.03, 0.01);
    let p = [0.15, 0.1, -0.9, 0.45];
    let mut out = String::from("underlying,kind,strike,expiry,spot,rate,div_yield,price\n");
    for t in [0.1_f64, 0.25, 0.5, 0.75, 1.0, 1.5, 2.0, 3.0] {
        let f = s * ((r - q) * t).exp();
        for i in 0..25 {
            let z = -2.2 + 4.4 * i as f64 / 24.0;
            let k = s * (z * 0.25 * f64::sqrt(t)).exp();
            let kind = if k < f {
                OptionKind::Put
            } else {
                OptionKind::Call
            };
            let c = Contract::new(
                kind,
                s,
                k,
                t,
                r,
                q,
                p[0],
                JumpParams {
                    rate: p[1],
                    mean: p[2],
                    vol: p[3],
                },
            )
            .unwrap();
            let v = series::price(&c).unwrap().greeks.price;
            writeln!(out, "A,{kind},{k},{t},{s},{r},{q},{v}").unwrap();
        }
    }
    out
}

fn bench(c: &mut Criterion) {
    let text = sheet();
    let sheet = read_quotes(text.as_bytes()).unwrap();
    let quotes: Vec<&Quote> = sheet
        .rows
        .iter()
        .map(|r| r.quote.as_ref().unwrap())
        .collect();
    let rows: Vec<usize> = (0..quotes.len()).collect();
    let spec = CalibrationSpec::default();
    let mut g = c.benchmark_group("calibrate");
    g.sample_size(10);
    g.throughput(Throughput::Elements(quotes.len() as u64));
    g.bench_function("200 quotes, 8 expiries, 6 starts", |b| {
        b.iter(|| {
            let fit = fit_group("A".into(), None, rows.clone(), black_box(&quotes), &spec);
            assert!(fit.params.is_some());
            fit
        })
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
