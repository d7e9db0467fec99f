//! Bump-and-reprice Greeks against the analytic ones, textbook
//! Black-Scholes Greeks and put-call parity.

use crate::common::merton;
use saltus::black_scholes;
use saltus::engines::monte_carlo::{stream_key, McConfig, Work};
use saltus::engines::series;
use saltus::engines::{FourierEngine, SeriesEngine};
use saltus::greeks::finite_diff::{self, FdConfig};
use saltus::greeks::{Greeks, SENSITIVITY_NAMES};
use saltus::model::{
    Contract,
    OptionKind::{Call, Put},
};

fn fields(g: &Greeks) -> [(&'static str, f64); 11] {
    let v = g.sensitivities();
    std::array::from_fn(|i| (SENSITIVITY_NAMES[i], v[i]))
}

/// The documented tolerance of `saltus greeks --method both`: a relative
/// tolerance plus a 1e-9 floor scaled to each Greek's units (plus, where the
/// caller passes it, the engine error propagated through the difference).
fn close(name: &str, fd: f64, an: f64, s: f64, rel: f64) -> bool {
    let floor = match name {
        "delta" | "vanna" => 1e-9,
        "gamma" => 1e-9 / s,
        _ => 1e-9 * s,
    };
    (fd - an).abs() <= rel * an.abs() + floor
}

fn sweep() -> Vec<Contract> {
    let mut v = Vec::new();
    for kind in [Call, Put] {
        for &k in &[70.0, 100.0, 130.0] {
            for &t in &[0.05, 1.0, 5.0] {
                for &(lam, mu, dl) in &[(0.3, -0.25, 0.2), (2.0, 0.05, 0.1)] {
                    v.push(merton(kind, 100.0, k, t, 0.03, 0.01, 0.22, lam, mu, dl));
                }
            }
        }
    }
    v
}

#[test]
fn series_finite_differences_match_analytic_greeks_across_a_sweep() {
    let cfg = FdConfig::for_engine(&SeriesEngine);
    for c in sweep() {
        let a = series::price(&c).unwrap().greeks;
        let r = finite_diff::greeks(&SeriesEngine, &c, &cfg).unwrap();
        for (((name, fd), (_, an)), (_, noise)) in fields(&r.greeks)
            .into_iter()
            .zip(fields(&a))
            .zip(fields(&r.noise))
        {
            assert!(
                (fd - an).abs() <= noise || close(name, fd, an, c.spot, 1e-6),
                "{c:?}\n{name}: fd {fd} vs analytic {an} (noise {noise})"
            );
        }
    }
}

#[test]
fn fourier_finite_differences_match_at_1e_5() {
    let cfg = FdConfig::for_engine(&FourierEngine);
    for c in sweep().into_iter().step_by(3) {
        let a = series::price(&c).unwrap().greeks;
        let r = finite_diff::greeks(&FourierEngine, &c, &cfg).unwrap();
        for (((name, fd), (_, an)), (_, noise)) in fields(&r.greeks)
            .into_iter()
            .zip(fields(&a))
            .zip(fields(&r.noise))
        {
            assert!(
                (fd - an).abs() <= noise || close(name, fd, an, c.spot, 1e-5),
                "{c:?}\n{name}: fd {fd} vs analytic {an} (noise {noise})"
            );
        }
    }
}

#[test]
fn without_jumps_they_are_the_textbook_black_scholes_greeks() {
    // Closed-form Black-Scholes Greeks (Hull, Options, Futures and Other Derivatives,
    // chapter on the Greek letters; chapter number not given, from memory).
    let cfg = FdConfig::for_engine(&SeriesEngine);
    for kind in [Call, Put] {
        for &k in &[80.0, 100.0, 125.0] {
            let c = merton(kind, 100.0, k, 0.75, 0.04, 0.02, 0.3, 0.0, -0.1, 0.2);
            let bs = black_scholes::greeks(kind, 100.0, k, 0.75, 0.04, 0.02, 0.3);
            let f = finite_diff::greeks(&SeriesEngine, &c, &cfg).unwrap().greeks;
            for ((name, fd), (_, want)) in fields(&f).into_iter().zip(fields(&bs)).take(6) {
                assert!(close(name, fd, want, 100.0, 1e-6), "{name}: {fd} vs {want}");
            }
            assert!(close("vanna", f.vanna, bs.vanna, 100.0, 1e-6));
            assert!(close("volga", f.volga, bs.volga, 100.0, 1e-6));
        }
    }
}

#[test]
fn put_and_call_deltas_differ_by_the_dividend_discount() {
    // Put-call parity differentiated in S: delta_C - delta_P = e^{-qT}.
    let cfg = FdConfig::for_engine(&SeriesEngine);
    for &t in &[0.1f64, 2.0] {
        let c = merton(Call, 100.0, 95.0, t, 0.03, 0.02, 0.25, 0.7, -0.2, 0.15);
        let p = merton(Put, 100.0, 95.0, t, 0.03, 0.02, 0.25, 0.7, -0.2, 0.15);
        let dc = finite_diff::greeks(&SeriesEngine, &c, &cfg)
            .unwrap()
            .greeks
            .delta;
        let dp = finite_diff::greeks(&SeriesEngine, &p, &cfg)
            .unwrap()
            .greeks
            .delta;
        assert!((dc - dp - (-0.02 * t).exp()).abs() < 1e-9);
    }
}

#[test]
fn one_sided_at_the_edge_of_the_domain() {
    // sigma = 0, lambda = 0 and delta = 0: right-derivatives, as documented.
    let cfg = FdConfig::for_engine(&SeriesEngine);
    let c = merton(Put, 100.0, 100.0, 1.0, 0.02, 0.0, 0.2, 0.0, -0.2, 0.1);
    let a = series::price(&c).unwrap().greeks;
    let f = finite_diff::greeks(&SeriesEngine, &c, &cfg).unwrap().greeks;
    assert!(close(
        "d_jump_rate",
        f.d_jump_rate,
        a.d_jump_rate,
        100.0,
        1e-6
    ));
    let c = merton(Call, 100.0, 105.0, 0.5, 0.02, 0.0, 0.2, 0.8, -0.1, 0.0);
    let a = series::price(&c).unwrap().greeks;
    let f = finite_diff::greeks(&SeriesEngine, &c, &cfg).unwrap().greeks;
    assert!(close("d_jump_vol", f.d_jump_vol, a.d_jump_vol, 100.0, 1e-6));
}

#[test]
fn monte_carlo_differences_on_common_random_numbers() {
    let c = merton(Call, 100.0, 100.0, 1.0, 0.03, 0.0, 0.2, 0.5, -0.1, 0.15);
    let a = series::price(&c).unwrap().greeks;
    let mc_cfg = McConfig {
        work: Work::Paths(1 << 20),
        ..McConfig::default()
    };
    let engine = finite_diff::crn_monte_carlo(&c, stream_key(1, "fd"), &mc_cfg);
    let f = finite_diff::greeks(&engine, &c, &FdConfig::for_engine(&engine)).unwrap();
    for (name, fd, an, noise) in [
        ("delta", f.greeks.delta, a.delta, f.noise.delta),
        ("vega", f.greeks.vega, a.vega, f.noise.vega),
        (
            "d_jump_rate",
            f.greeks.d_jump_rate,
            a.d_jump_rate,
            f.noise.d_jump_rate,
        ),
        ("theta", f.greeks.theta, a.theta, f.noise.theta),
    ] {
        // Documented MC tolerance: 5% relative plus the propagated noise.
        assert!(
            (fd - an).abs() <= 0.05 * an.abs() + noise,
            "{name}: {fd} vs {an} (noise {noise})"
        );
    }
}
