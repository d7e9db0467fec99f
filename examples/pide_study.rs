//! Convergence study of the PIDE engine, printed as the Markdown tables of
//! docs/pide.md ("Measured convergence").
//!
//! Run: `cargo run --profile fast --example pide_study [levels]` (default 8
//! levels, 0 to 7; about a minute on one core).
//!
//! 1. European call of the d'Halluin, Forsyth & Vetzal (2005) set against
//!    the closed-form series: error per level and the ratio of successive
//!    errors (4 = second order).
//! 2. American put of the same set at S = 90, 100, 110: each level's price,
//!    the Richardson value `R_l = P_l + (P_l - P_(l-1)) / 3` and its change
//!    `|R_l - R_(l-1)|`, the basis of the digits trusted in docs/pide.md.
//! 3. The engine at the default tolerance on the European sweep of
//!    tests/pide.rs (against the series) and the American tree rows of
//!    tests/data/american_reference.csv: levels used, whether the price is
//!    extrapolated, the error estimate and the true error.
//!
//! Each level of a study solves with an iteration budget of 1e-12 of spot
//! (far below every difference shown), so the tables show the
//! discretisation alone.

use saltus::engines::pide::{self, Exercise, PideConfig};
use saltus::engines::series;
use saltus::model::{Contract, JumpParams, OptionKind};

#[allow(clippy::too_many_arguments)]
fn contract(
    kind: OptionKind,
    s: f64,
    k: f64,
    t: f64,
    r: f64,
    q: f64,
    v: f64,
    j: (f64, f64, f64),
) -> Contract {
    let jumps = JumpParams {
        rate: j.0,
        mean: j.1,
        vol: j.2,
    };
    Contract::new(kind, s, k, t, r, q, v, jumps).expect("valid study contract")
}

const DHFV: (f64, f64, f64) = (0.1, -0.9, 0.45);

fn main() {
    let count: usize = std::env::args()
        .nth(1)
        .map_or(8, |s| s.parse().expect("levels"));
    let fine = PideConfig { tol_spot: 1e-12 };

    // 1. European convergence against the series.
    let c = contract(OptionKind::Call, 100.0, 100.0, 0.25, 0.05, 0.0, 0.15, DHFV);
    let exact = series::price(&c).expect("series").greeks.price;
    println!("European call, S = K = 100, T = 0.25, r = 0.05, sigma = 0.15, lambda = 0.1, mu_J = -0.9, delta = 0.45; series {exact:.10}\n");
    println!("| level | nodes | steps | price | error | error ratio | extrapolated error |");
    println!("|---|---|---|---|---|---|---|");
    let levels = pide::level_prices(&c, Exercise::European, &fine, count).expect("levels");
    for (l, lp) in levels.iter().enumerate() {
        let err = lp.price - exact;
        let ratio = if l > 0 {
            format!("{:.2}", (levels[l - 1].price - exact) / err)
        } else {
            String::new()
        };
        let rich = if l > 0 {
            format!(
                "{:+.2e}",
                lp.price + (lp.price - levels[l - 1].price) / 3.0 - exact
            )
        } else {
            String::new()
        };
        println!(
            "| {l} | {} | {} | {:.10} | {err:+.2e} | {ratio} | {rich} |",
            lp.nodes, lp.steps, lp.price
        );
    }

    // 2. American put at three spots.
    for s in [90.0, 100.0, 110.0] {
        let c = contract(OptionKind::Put, s, 100.0, 0.25, 0.05, 0.0, 0.15, DHFV);
        println!("\nAmerican put, S = {s}, same set\n");
        println!(
            "| level | nodes | steps | price P_l | P_l - P_(l-1) | ratio | R_l | R_l - R_(l-1) |"
        );
        println!("|---|---|---|---|---|---|---|---|");
        let lv = pide::level_prices(&c, Exercise::American, &fine, count).expect("levels");
        let p: Vec<f64> = lv.iter().map(|x| x.price).collect();
        for l in 0..p.len() {
            let d = if l > 0 {
                format!("{:+.3e}", p[l] - p[l - 1])
            } else {
                String::new()
            };
            let ratio = if l > 1 {
                format!("{:.2}", (p[l - 1] - p[l - 2]) / (p[l] - p[l - 1]))
            } else {
                String::new()
            };
            let r = |l: usize| p[l] + (p[l] - p[l - 1]) / 3.0;
            let rl = if l > 0 {
                format!("{:.8}", r(l))
            } else {
                String::new()
            };
            let dr = if l > 1 {
                format!("{:+.2e}", r(l) - r(l - 1))
            } else {
                String::new()
            };
            println!(
                "| {l} | {} | {} | {:.8} | {d} | {ratio} | {rl} | {dr} |",
                lv[l].nodes, lv[l].steps, p[l]
            );
        }
    }

    // 3. The engine at the default tolerance on the test rows.
    let cfg = PideConfig::default();
    println!("\nEngine at the default tolerance (1e-6 of spot)\n");
    println!("| row | levels | extrapolated | estimate | true error | true / estimate |");
    println!("|---|---|---|---|---|---|");
    let mut worst: f64 = 0.0;
    let mut row = |name: String, c: &Contract, ex: Exercise, truth: f64, truth_err: f64| {
        let r = pide::price(c, ex, &cfg).expect("price");
        let err = (r.price - truth).abs();
        let ratio = err / r.error_estimate;
        worst = worst.max(ratio);
        println!(
            "| {name} | {} | {} | {:.1e} | {err:.1e}{} | {ratio:.2} |",
            r.levels,
            r.extrapolated,
            r.error_estimate,
            if truth_err > 0.0 {
                format!(" (reference +- {truth_err:.0e})")
            } else {
                String::new()
            }
        );
    };
    for kind in [OptionKind::Call, OptionKind::Put] {
        for &(k, t) in &[(100.0, 0.1), (85.0, 0.5), (115.0, 1.5)] {
            for &j in &[(0.0, 0.0, 0.0), (0.3, -0.25, 0.2), (2.0, 0.05, 0.1)] {
                let c = contract(kind, 100.0, k, t, 0.03, 0.01, 0.25, j);
                let exact = series::price(&c).expect("series").greeks.price;
                row(
                    format!("European {kind:?} K={k} T={t} lambda={}", j.0),
                    &c,
                    Exercise::European,
                    exact,
                    0.0,
                );
            }
        }
    }
    for &(kind, k, t, j) in &[
        (OptionKind::Call, 100.0, 0.25, DHFV),
        (OptionKind::Put, 90.0, 2.0, (10.0, -0.05, 0.1)),
        (OptionKind::Put, 100.0, 1.0, (20.0, 0.0, 0.05)),
    ] {
        let c = contract(kind, 100.0, k, t, 0.05, 0.0, 0.15, j);
        let exact = series::price(&c).expect("series").greeks.price;
        row(
            format!("European {kind:?} K={k} T={t} lambda T={}", j.0 * t),
            &c,
            Exercise::European,
            exact,
            0.0,
        );
    }
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/data/american_reference.csv"
    );
    let text = std::fs::read_to_string(path).expect("american_reference.csv");
    for line in text.lines().skip(1) {
        let f: Vec<&str> = line.split(',').collect();
        let num = |i: usize| f[i].parse::<f64>().expect("number");
        let kind: OptionKind = f[0].parse().expect("kind");
        let c = contract(
            kind,
            num(1),
            num(2),
            num(3),
            num(4),
            num(5),
            num(6),
            (0.0, 0.0, 0.0),
        );
        row(
            format!("American {kind:?} K={} T={} (tree)", num(2), num(3)),
            &c,
            Exercise::American,
            num(7),
            num(8),
        );
    }
    for &(s, study, err) in &[
        (90.0, 10.003823, 3e-6),
        (100.0, 3.241254, 1e-6),
        (110.0, 1.419805, 1e-6),
    ] {
        let c = contract(OptionKind::Put, s, 100.0, 0.25, 0.05, 0.0, 0.15, DHFV);
        row(
            format!("American Put S={s} d'Halluin set (study above)"),
            &c,
            Exercise::American,
            study,
            err,
        );
    }
    println!("\nWorst true error / estimate: {worst:.2} (American rows include the reference's own error)");
}
