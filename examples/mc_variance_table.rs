//! Prints the variance reduction and cost of the Monte Carlo pick rule per
//! regime (the table in docs/performance.md), against the untilted
//! estimator of the row's own side with antithetics and the control
//! variate (the engine before issue 10, with and without its jump-count
//! pilot). Run: cargo run --release --example mc_variance_table
//!
//! Variance ratios compare per-path variances at equal paths (2^20 each);
//! times are wall clock for one row, pilot included, on whatever machine
//! runs it. Reference prices from the series engine.

use saltus::engines::monte_carlo::{self, choose_intensity, McConfig, Work};
use saltus::engines::series;
use saltus::model::{Contract, JumpParams, OptionKind};
use std::time::Instant;

#[allow(clippy::too_many_arguments)]
fn row(
    kind: OptionKind,
    k: f64,
    t: f64,
    r: f64,
    vol: f64,
    lam: f64,
    mu: f64,
    delta: f64,
) -> Contract {
    let jumps = JumpParams {
        rate: lam,
        mean: mu,
        vol: delta,
    };
    Contract::new(kind, 100.0, k, t, r, 0.0, vol, jumps).expect("valid row")
}

fn main() {
    use OptionKind::{Call, Put};
    let rows = [
        (
            "ordinary ATM call",
            row(Call, 100.0, 1.0, 0.03, 0.2, 0.5, -0.1, 0.15),
        ),
        (
            "OTM call K=130, T=0.5",
            row(Call, 130.0, 0.5, 0.03, 0.2, 0.5, -0.1, 0.15),
        ),
        (
            "diffusion-tail put K=60, delta=0.005",
            row(Put, 60.0, 0.5, 0.03, 0.2, 0.5, -0.05, 0.005),
        ),
        (
            "crash put K=40 (lambda 0.1, mu_J -0.7)",
            row(Put, 40.0, 0.5, 0.03, 0.15, 0.1, -0.7, 0.1),
        ),
        (
            "DFV 2005 put K=50",
            row(Put, 50.0, 0.25, 0.05, 0.15, 0.1, -0.9, 0.45),
        ),
        (
            "DFV 2005 call K=150",
            row(Call, 150.0, 0.25, 0.05, 0.15, 0.1, -0.9, 0.45),
        ),
        (
            "one-day call K=115, vol 0.3",
            row(Call, 115.0, 1.0 / 365.0, 0.03, 0.3, 1.0, -0.1, 0.1),
        ),
        (
            "deep ITM put K=250, T=0.02",
            row(Put, 250.0, 0.02, 0.03, 0.3, 0.5, -0.1, 0.1),
        ),
        (
            "zero diffusion put K=60, lambda 5",
            row(Put, 60.0, 1.0, 0.03, 0.0, 5.0, -0.1, 0.3),
        ),
        (
            "heavy: lambda T = 200, delta 0.5, ATM call",
            row(Call, 100.0, 1.0, 0.02, 0.2, 200.0, -0.01, 0.5),
        ),
    ];
    let paths = 1u64 << 20;
    let base = McConfig {
        work: Work::Paths(paths),
        ..McConfig::default()
    };
    println!("| regime | price | untilted se | + jump-count pilot se | pick rule: method | se | variance ratio | time ratio | paying paths |");
    println!("|---|---|---|---|---|---|---|---|---|");
    for (name, c) in rows {
        let key = monte_carlo::stream_key(7, name);
        let s = series::price(&c).expect("series").greeks.price;
        let timed = |cfg: &McConfig| {
            let t0 = Instant::now();
            let e = monte_carlo::price(&c, key, cfg);
            (e, t0.elapsed().as_secs_f64())
        };
        let plain_cfg = McConfig {
            sampling_count_mean: Some(c.jump_intensity()),
            ..base.clone()
        };
        let old_cfg = McConfig {
            sampling_count_mean: Some(choose_intensity(&c, key, &base) * c.jump_intensity()),
            ..base.clone()
        };
        let (plain, t_plain) = timed(&plain_cfg);
        let (old, _) = timed(&old_cfg);
        let (new, t_new) = timed(&base);
        let ratio = if new.std_error > 0.0 {
            let v = (plain.std_error / new.std_error).powi(2);
            if v >= 100.0 {
                format!("{v:.3e}")
            } else {
                format!("{v:.2}")
            }
        } else {
            "exact".to_string()
        };
        println!(
            "| {name} | {s:.6e} | {:.2e} | {:.2e} | {} | {:.2e} | {ratio} | {:.2} | {} |",
            plain.std_error,
            old.std_error,
            new.method.as_str(),
            new.std_error,
            t_new / t_plain,
            new.hits
        );
    }
}
