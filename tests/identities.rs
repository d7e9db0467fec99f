//! Identities of the theory and published worked examples.

use crate::common::merton;
use saltus::black_scholes;
use saltus::engines::series;
use saltus::model::OptionKind::{self, Call, Put};

fn sweep() -> Vec<[f64; 9]> {
    // s, k, t, r, q, sigma, lambda, mu_J, delta
    let mut v = Vec::new();
    for &k in &[1.0, 40.0, 80.0, 100.0, 125.0, 250.0, 10_000.0] {
        for &t in &[1.0 / 365.0, 0.1, 1.0, 7.0] {
            for &(lam, mu, dl) in &[
                (0.0, 0.0, 0.0),
                (0.3, -0.2, 0.15),
                (2.0, 0.05, 0.3),
                (50.0, -0.02, 0.04),
            ] {
                for &sig in &[0.0, 0.25] {
                    v.push([100.0, k, t, 0.03, 0.015, sig, lam, mu, dl]);
                }
            }
        }
    }
    v
}

fn price(kind: OptionKind, p: &[f64; 9]) -> saltus::greeks::Greeks {
    let c = merton(kind, p[0], p[1], p[2], p[3], p[4], p[5], p[6], p[7], p[8]);
    series::price(&c).unwrap().greeks
}

#[test]
fn put_call_parity_across_a_sweep() {
    // C - P = S e^{-qT} - K e^{-rT}: model-free put-call parity (Hull, Options,
    // Futures and Other Derivatives; from memory).
    for p in sweep() {
        let c = price(Call, &p);
        let put = price(Put, &p);
        let fwd = p[0] * (-p[4] * p[2]).exp() - p[1] * (-p[3] * p[2]).exp();
        let scale = p[0].max(p[1]);
        assert!((c.price - put.price - fwd).abs() <= 1e-12 * scale, "{p:?}");
        // Delta parity: delta_C - delta_P = e^{-qT}.
        assert!(
            (c.delta - put.delta - (-p[4] * p[2]).exp()).abs() < 1e-12,
            "{p:?}"
        );
        // No NaN, no negative price.
        for g in [c, put] {
            assert!(g.headline().iter().all(|x| x.is_finite()), "{p:?} {g:?}");
            assert!(g.price >= 0.0);
        }
    }
}

#[test]
fn lambda_zero_equals_black_scholes_to_1e_13() {
    for p in sweep().into_iter().filter(|p| p[6] == 0.0) {
        for kind in [Call, Put] {
            let g = price(kind, &p);
            let bs = black_scholes::greeks(kind, p[0], p[1], p[2], p[3], p[4], p[5]);
            assert!(
                (g.price - bs.price).abs() <= 1e-13 * p[0].max(bs.price),
                "{p:?}"
            );
            assert!((g.delta - bs.delta).abs() <= 1e-13, "{p:?}");
        }
    }
}

#[test]
fn forward_is_recovered_by_a_zero_strike_limit() {
    // E[S_T] = S e^{(r-q)T} under the compensated drift: a call struck near 0
    // is worth e^{-rT} (E[S_T] - K).
    for &(lam, mu, dl) in &[(0.5, -0.3, 0.2), (5.0, 0.1, 0.1), (300.0, -0.01, 0.03)] {
        let (s, k, t, r, q) = (100.0, 1e-6, 2.0, 0.04, 0.01);
        let c = price(Call, &[s, k, t, r, q, 0.2, lam, mu, dl]);
        let want = (-r * t).exp() * (s * ((r - q) * t).exp() - k);
        assert!(
            (c.price - want).abs() < 1e-12 * s,
            "{lam}: {} vs {want}",
            c.price
        );
    }
}

#[test]
fn fang_oosterlee_2008_black_scholes_values() {
    // Fang & Oosterlee (2008), COS method paper: S=100, r=0.1, q=0, T=0.1,
    // sigma=0.25; K = 80 / 100 / 120 -> 20.799226309 / 3.659968453 / 0.044577814.
    for (k, want) in [
        (80.0, 20.799226309),
        (100.0, 3.659968453),
        (120.0, 0.044577814),
    ] {
        let g = price(Call, &[100.0, k, 0.1, 0.1, 0.0, 0.25, 0.0, 0.0, 0.0]);
        assert!((g.price - want).abs() < 1e-9, "K={k}: {}", g.price);
    }
}

#[test]
fn haug_handbook_greek_examples() {
    // Haug, The Complete Guide to Option Pricing Formulas (2nd ed.), worked
    // examples recalled from memory, each confirmed here with mpmath; b = r - q.
    let g = black_scholes::greeks(Call, 60.0, 65.0, 0.25, 0.08, 0.0, 0.3);
    assert!((g.price - 2.1334).abs() < 5e-5);
    let c = black_scholes::greeks(Call, 105.0, 100.0, 0.5, 0.1, 0.1, 0.36);
    let p = black_scholes::greeks(Put, 105.0, 100.0, 0.5, 0.1, 0.1, 0.36);
    assert!((c.delta - 0.5946).abs() < 5e-5 && (p.delta + 0.3566).abs() < 5e-5);
    let g = black_scholes::greeks(Call, 55.0, 60.0, 0.75, 0.1, 0.0, 0.3);
    assert!((g.gamma - 0.0278).abs() < 5e-5);
    let p = black_scholes::greeks(Put, 430.0, 405.0, 0.0833, 0.07, 0.05, 0.2);
    assert!((p.theta + 31.1924).abs() < 5e-5, "{}", p.theta);
    let c = black_scholes::greeks(Call, 72.0, 75.0, 1.0, 0.09, 0.0, 0.19);
    assert!((c.rho - 38.7325).abs() < 5e-5);
    // The same through the Merton series with lambda = 0.
    let m = price(
        Put,
        &[430.0, 405.0, 0.0833, 0.07, 0.05, 0.2, 0.0, -0.1, 0.1],
    );
    assert!((m.theta + 31.1924).abs() < 5e-5);
}

#[test]
fn hull_42_40_example() {
    // Hull, Options, Futures and Other Derivatives (from memory): S=42, K=40,
    // r=10%, sigma=20%, T=0.5 -> call 4.76, put 0.81.
    let c = price(Call, &[42.0, 40.0, 0.5, 0.1, 0.0, 0.2, 0.0, 0.0, 0.0]);
    let p = price(Put, &[42.0, 40.0, 0.5, 0.1, 0.0, 0.2, 0.0, 0.0, 0.0]);
    assert!((c.price - 4.7594).abs() < 1e-4 && (p.price - 0.8086).abs() < 1e-4);
}

#[test]
fn greeks_match_central_differences_of_the_price() {
    // Central differences with Richardson extrapolation (error O(h^4)).
    use saltus::model::Param;
    let cases = [
        (Call, [100.0, 105.0, 0.7, 0.03, 0.01, 0.22, 0.8, -0.15, 0.2]),
        (Put, [100.0, 80.0, 0.3, 0.01, 0.0, 0.18, 0.2, -0.5, 0.25]),
        (Call, [50.0, 40.0, 3.0, -0.005, 0.02, 0.3, 5.0, 0.05, 0.1]),
    ];
    for (kind, p) in cases {
        let c = merton(kind, p[0], p[1], p[2], p[3], p[4], p[5], p[6], p[7], p[8]);
        let g = series::price(&c).unwrap().greeks;
        let f = |param: Param, x: f64| {
            series::price(&c.with(param, x).unwrap())
                .unwrap()
                .greeks
                .price
        };
        let d = |param: Param, h: f64| {
            let x = c.get(param);
            let d1 = (f(param, x + h) - f(param, x - h)) / (2.0 * h);
            let d2 = (f(param, x + 2.0 * h) - f(param, x - 2.0 * h)) / (4.0 * h);
            (4.0 * d1 - d2) / 3.0
        };
        let checks = [
            ("delta", g.delta, d(Param::Spot, 1e-3 * p[0])),
            ("vega", g.vega, d(Param::Vol, 1e-3)),
            ("theta", g.theta, -d(Param::Expiry, 1e-3)),
            ("rho", g.rho, d(Param::Rate, 1e-3)),
            ("div_rho", g.div_rho, d(Param::DivYield, 1e-3)),
            ("d_jump_rate", g.d_jump_rate, d(Param::JumpRate, 1e-3)),
            ("d_jump_mean", g.d_jump_mean, d(Param::JumpMean, 1e-3)),
            ("d_jump_vol", g.d_jump_vol, d(Param::JumpVol, 1e-3)),
        ];
        for (name, analytic, fd) in checks {
            assert!(
                (analytic - fd).abs() < 1e-7 * (1.0 + analytic.abs()),
                "{name}: {analytic} vs {fd}"
            );
        }
    }
}

#[test]
fn edge_cases_are_exact() {
    // T = 0: intrinsic value, payoff slope, zero theta (documented convention).
    let g = price(Call, &[100.0, 90.0, 0.0, 0.05, 0.0, 0.2, 1.0, -0.1, 0.1]);
    assert_eq!((g.price, g.delta, g.gamma, g.theta), (10.0, 1.0, 0.0, 0.0));
    let g = price(Put, &[100.0, 90.0, 0.0, 0.05, 0.0, 0.2, 1.0, -0.1, 0.1]);
    assert_eq!((g.price, g.delta), (0.0, 0.0));
    // sigma = delta = 0, lambda = 0: discounted forward intrinsic value.
    let g = price(Call, &[100.0, 90.0, 1.0, 0.05, 0.0, 0.0, 0.0, 0.0, 0.0]);
    assert!((g.price - (100.0 - 90.0 * (-0.05f64).exp())).abs() < 1e-13);
    // lambda * T = 1000 works (no overflow, finite Greeks).
    let g = price(
        Put,
        &[100.0, 100.0, 1.0, 0.02, 0.0, 0.2, 1000.0, -0.01, 0.02],
    );
    assert!(g.headline().iter().all(|x| x.is_finite()) && g.price > 0.0);
    // d/dlambda at lambda = 0 is not zero when the jumps are not trivial.
    let g = price(Put, &[100.0, 100.0, 1.0, 0.02, 0.0, 0.2, 0.0, -0.2, 0.1]);
    assert!(g.d_jump_rate > 0.0);
}
