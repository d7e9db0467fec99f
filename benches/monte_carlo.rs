//! Criterion benchmarks of the Monte Carlo engine against the cost of its
//! random numbers alone. Run: cargo bench --bench monte_carlo
//!
//! The first engine run is a plain European call with lambda*T = 0.5, antithetic
//! pairs and the control variate on, importance sampling off (gamma = 1) so
//! the pilot run is not timed. "random numbers only" draws what the engine
//! draws per antithetic pair (one uniform, one normal, a second normal when
//! a jump occurs) with the same generator and parallel block structure.

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;
use saltus::engines::monte_carlo::{
    self, IntensityChoice, McConfig, MethodChoice, Work, BLOCK_PAIRS,
};
use saltus::model::{Contract, JumpParams, OptionKind};
use std::hint::black_box;

const PATHS: u64 = 1 << 24;

fn bench(c: &mut Criterion) {
    let call = Contract::new(
        OptionKind::Call,
        100.0,
        100.0,
        1.0,
        0.03,
        0.0,
        0.2,
        JumpParams {
            rate: 0.5,
            mean: -0.1,
            vol: 0.15,
        },
    )
    .unwrap();
    let cfg = McConfig {
        work: Work::Paths(PATHS),
        intensity: IntensityChoice::Fixed(1.0),
        ..McConfig::default()
    };
    let mut g = c.benchmark_group("monte_carlo");
    g.throughput(Throughput::Elements(PATHS));
    g.sample_size(10);
    g.bench_function("european_call_lambdaT_0.5_paths", |b| {
        b.iter(|| monte_carlo::price(black_box(&call), 42, &cfg).price)
    });
    // The same row with the pick rule (pilot included): an ordinary row
    // stays on the untilted estimator, so this measures the pilot's cost.
    let auto = McConfig {
        work: Work::Paths(PATHS),
        ..McConfig::default()
    };
    g.bench_function("european_call_lambdaT_0.5_auto_paths", |b| {
        b.iter(|| monte_carlo::price(black_box(&call), 42, &auto).price)
    });
    // The Esscher-tilted loop on the same row, forced (one extra exp per path).
    g.bench_function("european_call_lambdaT_0.5_esscher_paths", |b| {
        b.iter(|| {
            monte_carlo::price_with(
                black_box(&call),
                42,
                &auto,
                MethodChoice::Esscher { gamma: 1.0 },
            )
            .price
        })
    });
    // A deep-wing row (d'Halluin-Forsyth-Vetzal set, K = 50 put), pick rule.
    let wing = Contract::new(
        OptionKind::Put,
        100.0,
        50.0,
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
    g.bench_function("dfv_put_50_auto_paths", |b| {
        b.iter(|| monte_carlo::price(black_box(&wing), 42, &auto).price)
    });
    g.bench_function("random_numbers_only_paths", |b| {
        b.iter(|| {
            let blocks = PATHS / (2 * BLOCK_PAIRS);
            (0..blocks)
                .into_par_iter()
                .map(|blk| {
                    let mut rng = ChaCha8Rng::seed_from_u64(42);
                    rng.set_stream(blk);
                    let mut acc = 0.0;
                    let p0 = (-0.5f64).exp();
                    for _ in 0..BLOCK_PAIRS {
                        let u: f64 = rng.random();
                        let z: f64 = StandardNormal.sample(&mut rng);
                        acc += z;
                        if u > p0 {
                            let z2: f64 = StandardNormal.sample(&mut rng);
                            acc += z2;
                        }
                    }
                    acc
                })
                .sum::<f64>()
        })
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
