//! Unit tests of the P&L explain: the order of the Taylor remainder, zero
//! moves, the waterfall identity, the analytic vanna and volga against
//! independent references, and the matching of two books.

use super::*;
use crate::book::BookInputs;
use crate::model::OptionKind::{Call, Put};
use crate::model::{Contract, JumpParams, OptionKind};

#[allow(clippy::too_many_arguments)]
fn contract(
    kind: OptionKind,
    s: f64,
    k: f64,
    t: f64,
    r: f64,
    q: f64,
    vol: f64,
    lam: f64,
    mu: f64,
    delta: f64,
) -> Contract {
    Contract::new(
        kind,
        s,
        k,
        t,
        r,
        q,
        vol,
        JumpParams {
            rate: lam,
            mean: mu,
            vol: delta,
        },
    )
    .unwrap()
}

/// A few invented Merton contracts: at, in and out of the money, short and
/// long, with and without jumps.
fn cases() -> Vec<Contract> {
    vec![
        contract(Call, 100.0, 100.0, 0.5, 0.03, 0.01, 0.2, 0.5, -0.1, 0.15),
        contract(Put, 100.0, 90.0, 0.25, 0.02, 0.0, 0.25, 1.0, -0.2, 0.1),
        contract(Call, 100.0, 115.0, 1.0, 0.04, 0.02, 0.15, 0.1, -0.9, 0.45),
        contract(Put, 50.0, 55.0, 2.0, 0.01, 0.03, 0.35, 0.0, 0.0, 0.0),
    ]
}

/// `c` with spot and vol moved by `h` (group 0), or only time (1), rates
/// (2) or the jump parameters (3).
fn moved(c: &Contract, h: f64, group: u8) -> Contract {
    let mut m = *c;
    match group {
        0 => {
            m.spot = c.spot * (1.0 + 0.5 * h);
            m.vol = c.vol + 0.3 * h;
        }
        1 => m.expiry = c.expiry * (1.0 - 0.5 * h),
        2 => {
            m.rate = c.rate + 0.05 * h;
            m.div_yield = c.div_yield + 0.02 * h;
        }
        _ => {
            m.jumps.rate = c.jumps.rate + 0.5 * h;
            m.jumps.mean = c.jumps.mean + 0.1 * h;
            m.jumps.vol = c.jumps.vol + 0.1 * h;
        }
    }
    m
}

/// The remainder for moves h, h/2, h/4, ... and the ratios of successive ones.
fn ratios(c: &Contract, group: u8, halvings: i32) -> Vec<f64> {
    let rem: Vec<f64> = (0..=halvings)
        .map(|i| {
            let h = 0.2 / f64::from(1 << i);
            explain_position(c, &moved(c, h, group), 1.0)
                .unwrap()
                .unexplained()
                .abs()
        })
        .collect();
    rem.windows(2).map(|w| w[0] / w[1]).collect()
}

#[test]
fn remainder_is_third_order_in_a_joint_spot_vol_move() {
    // Source: Taylor's theorem. With delta, gamma, vega, volga and vanna the
    // expansion of V(S, sigma) is complete to second order, so the remainder
    // is O(h^3): halving the move divides it by about 2^3 = 8.
    for c in cases() {
        let r = ratios(&c, 0, 4);
        eprintln!("spot/vol move halved, remainder ratios {r:.3?} for {c:?}");
        let last = r[r.len() - 1];
        assert!((7.0..9.0).contains(&last), "ratio {last} for {c:?}: {r:?}");
    }
}

#[test]
fn time_rates_and_jump_terms_leave_a_second_order_remainder() {
    // Source: Taylor's theorem. Time, rates and jumps carry first-order
    // terms only, so moving one group alone leaves its second-order term in
    // the remainder: O(h^2), a ratio near 2^2 = 4 as the move halves.
    for c in cases() {
        for group in 1..=3 {
            if group == 3 && c.jumps.rate == 0.0 {
                continue; // no jump move (its vol and mean do not matter)
            }
            let r = ratios(&c, group, 6);
            eprintln!("group {group} moved and halved, remainder ratios {r:.3?}");
            let last = r[r.len() - 1];
            assert!(
                (3.6..4.4).contains(&last),
                "group {group}: ratio {last} for {c:?}: {r:?}"
            );
        }
    }
}

#[test]
fn zero_moves_give_zero_in_every_column() {
    // Source: the definitions (no move, no change, no term).
    for c in cases() {
        let e = explain_position(&c, &c, -37.5).unwrap();
        assert!(e.value_before != 0.0);
        assert_eq!(e.value_before, e.value_after);
        let all: Vec<f64> = explain_values(&e)[2..]
            .iter()
            .chain(term_values(&e.terms).iter())
            .copied()
            .collect();
        assert!(all.iter().all(|v| *v == 0.0), "{all:?}");
    }
}

#[test]
fn waterfall_steps_add_up_to_the_change() {
    // Source: the steps telescope (each state is the next one's start), so
    // their sum equals V_after - V_before up to the rounding of 5 additions.
    let mut rng = crate::test_rng::TestRng::new(0x5eed_e4a1);
    for _ in 0..300 {
        let mut u = || rng.unit();
        let c = contract(
            if u() < 0.5 { Call } else { Put },
            50.0 + 100.0 * u(),
            50.0 + 100.0 * u(),
            0.02 + 2.0 * u(),
            0.05 * u(),
            0.03 * u(),
            0.05 + 0.5 * u(),
            2.0 * u(),
            -0.3 * u(),
            0.3 * u(),
        );
        let h = 0.3 * (u() - 0.5);
        let mut a = c;
        for g in 0..=3 {
            a = moved(&a, h, g);
        }
        let w = 100.0 * (u() - 0.5);
        let e = explain_position(&c, &a, w).unwrap();
        let sum: f64 = e.steps.iter().sum();
        let scale = e.value_before.abs().max(e.value_after.abs()).max(1e-300);
        assert!(
            (sum - e.change).abs() <= 16.0 * f64::EPSILON * scale,
            "{sum} vs {}",
            e.change
        );
        // The last state is the AFTER contract itself.
        let direct = w * series::price(&a).unwrap().greeks.price;
        assert_eq!(e.value_after, direct);
    }
}

#[test]
fn analytic_vanna_and_volga_match_central_differences_of_delta_and_vega() {
    // Independent reference: central differences (Richardson-extrapolated)
    // in sigma of the analytic delta and vega of the same series. The
    // analytic values come from the series sums with d sigma_n / d sigma =
    // sigma / sigma_n; the 40-digit mpmath fixture (tests/reference.rs,
    // scripts/make_reference.py) checks them too.
    for c in cases() {
        let g = series::price(&c).unwrap().greeks;
        let at = |dv: f64| {
            let mut m = c;
            m.vol += dv;
            series::price(&m).unwrap().greeks
        };
        let d = |h: f64, f: fn(&Greeks) -> f64| (f(&at(h)) - f(&at(-h))) / (2.0 * h);
        let rich = |f: fn(&Greeks) -> f64| {
            let h = 1e-3;
            (4.0 * d(h / 2.0, f) - d(h, f)) / 3.0
        };
        let vanna = rich(|g| g.delta);
        let volga = rich(|g| g.vega);
        assert!(
            (vanna - g.vanna).abs() <= 1e-7 * (1.0 + g.vanna.abs()),
            "vanna {} vs {vanna}",
            g.vanna
        );
        assert!(
            (volga - g.volga).abs() <= 1e-7 * (c.spot + g.volga.abs()),
            "volga {} vs {volga}",
            g.volga
        );
    }
}

#[test]
fn without_jumps_vanna_and_volga_are_the_textbook_black_scholes_ones() {
    // Source (from memory; e.g. Haug, The Complete Guide to Option Pricing
    // Formulas): vanna = -e^{-qT} phi(d1) d2 / sigma,
    // volga = S e^{-qT} phi(d1) sqrt(T) d1 d2 / sigma.
    let c = contract(Call, 100.0, 110.0, 0.75, 0.03, 0.01, 0.25, 0.0, 0.0, 0.0);
    let g = series::price(&c).unwrap().greeks;
    let (s, k, t, r, q, v) = (100.0f64, 110.0f64, 0.75f64, 0.03, 0.01, 0.25);
    let d1 = ((s / k).ln() + (r - q + 0.5 * v * v) * t) / (v * t.sqrt());
    let d2 = d1 - v * t.sqrt();
    let phi = (-0.5 * d1 * d1).exp() / (2.0 * std::f64::consts::PI).sqrt();
    let vanna = -(-q * t).exp() * phi * d2 / v;
    let volga = s * (-q * t).exp() * phi * t.sqrt() * d1 * d2 / v;
    assert!((g.vanna - vanna).abs() < 1e-12, "{} vs {vanna}", g.vanna);
    assert!((g.volga - volga).abs() < 1e-10, "{} vs {volga}", g.volga);
}

const HEAD: &str =
    "id,underlying,kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol,quantity";

fn book(name: &str, rows: &[&str]) -> ExplainBook {
    let text = format!("{HEAD}\n{}\n", rows.join("\n"));
    read_book(text.as_bytes(), name, &BookInputs::default()).unwrap()
}

fn status_of(r: &BookExplain, id: &str) -> String {
    r.positions
        .iter()
        .find(|p| p.id == id)
        .unwrap_or_else(|| panic!("no row for {id}"))
        .status()
}

#[test]
fn matching_reports_new_expired_bad_and_changed_positions() {
    let before = book(
        "b.csv",
        &[
            "A,X,call,100,100,0.5,0.03,0.2,0.5,-0.1,0.1,10",
            "GONE,X,put,100,90,0.5,0.03,0.2,0.5,-0.1,0.1,1",
            "BAD,Y,put,100,90,0.5,0.03,0.2,0.5,-0.1,0.1,1",
            "K,Y,put,100,90,0.5,0.03,0.2,0.5,-0.1,0.1,1",
            "D,Y,put,100,90,0.5,0.03,0.2,0.5,-0.1,0.1,1",
            "D,Y,put,100,95,0.5,0.03,0.2,0.5,-0.1,0.1,1",
            ",Y,put,100,90,0.5,0.03,0.2,0.5,-0.1,0.1,1",
        ],
    );
    let after = book(
        "a.csv",
        &[
            "NEW,X,call,101,100,0.49,0.03,0.21,0.5,-0.1,0.1,3",
            "A,X,call,101,100,0.49,0.03,0.21,0.5,-0.1,0.1,10",
            "BAD,Y,put,100,90,0.49,0.03,abc,0.5,-0.1,0.1,1",
            "K,Y,put,100,92,0.49,0.03,0.2,0.5,-0.1,0.1,2",
            "D,Y,put,100,90,0.49,0.03,0.2,0.5,-0.1,0.1,1",
        ],
    );
    let r = BookExplain::new(&before, &after);
    let ids: Vec<&str> = r.positions.iter().map(|p| p.id.as_str()).collect();
    assert_eq!(ids, ["A", "GONE", "BAD", "K", "D", "", "NEW"]);
    assert_eq!(status_of(&r, "A"), "ok");
    assert_eq!(status_of(&r, "GONE"), "expired");
    assert_eq!(status_of(&r, "NEW"), "new");
    assert_eq!(
        status_of(&r, "BAD"),
        "error: a.csv line 4: vol is not a number: 'abc'"
    );
    assert_eq!(
        status_of(&r, "K"),
        "error: contract terms differ between b.csv line 5 and a.csv line 5: strike 90 vs 92, quantity 1 vs 2"
    );
    assert_eq!(
        status_of(&r, "D"),
        "error: b.csv: id 'D' is repeated on lines 6, 7: a position must appear once in each book"
    );
    assert_eq!(
        status_of(&r, ""),
        "error: b.csv line 8: id is empty: positions are matched by id"
    );
    assert_eq!(
        (
            r.book.positions,
            r.book.new,
            r.book.expired,
            r.book.left_out
        ),
        (1, 1, 1, 4)
    );
    assert!(r.book.status().starts_with("partial: 4 positions left out"));
    let x = &r.underlyings.iter().find(|(n, _)| n == "X").unwrap().1;
    assert_eq!(x.status(), "ok");
    assert_eq!(
        x.explain,
        r.positions
            .iter()
            .find_map(|p| match &p.outcome {
                Outcome::Explained(e, _) => Some(*e),
                _ => None,
            })
            .unwrap()
    );
}

#[test]
fn a_book_without_an_id_column_is_refused_naming_the_file() {
    let e = read_book(
        "kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol\n".as_bytes(),
        "before.csv",
        &BookInputs::default(),
    )
    .unwrap_err();
    assert!(
        e.starts_with("before.csv line 1: the book has no id column"),
        "{e}"
    );
}

#[test]
fn a_waterfall_state_outside_the_domain_is_an_error_naming_the_step() {
    // Yesterday's jump rate with today's expiry: 200 x 600 = 1.2e5 jumps,
    // above the model's limit of 1e5 (model::MAX_JUMP_INTENSITY_TIMES_EXPIRY),
    // although both days' contracts are valid.
    let b = contract(Call, 100.0, 100.0, 1.0, 0.03, 0.0, 0.2, 200.0, -0.01, 0.01);
    let a = contract(Call, 100.0, 100.0, 600.0, 0.03, 0.0, 0.2, 0.1, -0.01, 0.01);
    let e = explain_position(&b, &a, 1.0).unwrap_err();
    assert!(
        e.starts_with("waterfall step time: jump_rate = 200 is outside"),
        "{e}"
    );
}
