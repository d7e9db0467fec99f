//! Criterion benchmarks of the PIDE engine: one American put at the default
//! tolerance (1e-6 of spot, 0.0001 at S = 100), without jumps and with the
//! d'Halluin, Forsyth & Vetzal (2005) jump set, single-threaded.
//! Run: cargo bench --bench pide

use criterion::{criterion_group, criterion_main, Criterion};
use saltus::engines::pide::{self, Exercise, PideConfig};
use saltus::model::{Contract, JumpParams, OptionKind};
use std::hint::black_box;

fn put(t: f64, vol: f64, jumps: JumpParams) -> Contract {
    Contract::new(OptionKind::Put, 100.0, 100.0, t, 0.05, 0.0, vol, jumps).unwrap()
}

fn bench(c: &mut Criterion) {
    let mut g = c.benchmark_group("pide_american_put");
    g.sample_size(10);
    let none = JumpParams {
        rate: 0.0,
        mean: 0.0,
        vol: 0.0,
    };
    let dfv = JumpParams {
        rate: 0.1,
        mean: -0.9,
        vol: 0.45,
    };
    for (name, contract) in [
        ("no_jumps_T1_vol0.3", put(1.0, 0.3, none)),
        ("dhfv_T0.25_vol0.15", put(0.25, 0.15, dfv)),
    ] {
        g.bench_function(name, |b| {
            b.iter(|| {
                pide::price(
                    black_box(&contract),
                    Exercise::American,
                    &PideConfig::default(),
                )
                .unwrap()
            })
        });
    }
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
