//! Black-Scholes implied volatility (`market::implied_vol`) against an
//! independent 100-digit mpmath inversion (`tests/data/implied_vol_reference.csv`,
//! made by `scripts/make_implied_vol_reference.py`), textbook examples, a
//! seeded random round trip price -> vol -> price, and every error case.
//!
//! Accuracy is asserted as the issue states it (price to 1e-13 relative,
//! vol to 1e-12 relative wherever the time value is above 1e-300 and above
//! 1e-13 of the price), except where double precision cannot reach it: a
//! price with vol elasticity `E = sigma vega / price` carries a relative
//! error of about `eps E` from the rounding of its own exponent, and a vol
//! recovered from a double price an error of about `eps / E`. The bounds
//! below are therefore `max(1e-13, PRICE_COND * eps * E)` and
//! `max(1e-12, VOL_COND * eps / E)` (docs/implied_vol.md).

use crate::common::{num, read_fixture};
use saltus::black_scholes;
use saltus::market::implied_vol::{implied_vol, implied_vols, ImpliedVolError, VolQuote};
use saltus::model::OptionKind::{self, Call, Put};

const EPS: f64 = f64::EPSILON;
/// Price round trip: relative error at most this many `eps * E`.
const PRICE_COND: f64 = 8.0;
/// Vol recovery: relative error at most this many `eps / E`.
const VOL_COND: f64 = 16.0;
/// The issue's flat targets.
const PRICE_TOL: f64 = 1e-13;
const VOL_TOL: f64 = 1e-12;

fn kind_of(s: &str) -> OptionKind {
    s.parse().unwrap()
}

/// Vol elasticity of the price, `sigma * vega / price`.
fn elasticity(kind: OptionKind, s: f64, k: f64, t: f64, r: f64, q: f64, vol: f64) -> f64 {
    let g = black_scholes::greeks(kind, s, k, t, r, q, vol);
    vol * g.vega / g.price
}

fn intrinsic(kind: OptionKind, s: f64, k: f64, t: f64, r: f64, q: f64) -> f64 {
    (kind.sign() * (s * (-q * t).exp() - k * (-r * t).exp())).max(0.0)
}

/// Within a few ulps of the upper bound (or on it: the double price rounded
/// up to it) the vol is undetermined, E is below 1e-15, and the typed error
/// is the right answer.
fn at_upper_bound(kind: OptionKind, price: f64, s: f64, k: f64, t: f64, r: f64, q: f64) -> bool {
    let bound = match kind {
        Call => s * (-q * t).exp(),
        Put => k * (-r * t).exp(),
    };
    bound - price <= 4.0 * EPS * bound
}

fn is_upper_error(e: &ImpliedVolError) -> bool {
    matches!(
        e,
        ImpliedVolError::UpperBoundUnresolved { .. } | ImpliedVolError::AboveUpperBound { .. }
    )
}

/// The issue's domain: time value above 1e-300 and above 1e-13 of the price.
fn in_domain(price: f64, time_value: f64) -> bool {
    time_value > 1e-300 && time_value > 1e-13 * price
}

#[test]
fn fixture_vols_and_prices_to_the_conditioning_bound() {
    let rows = read_fixture("implied_vol_reference.csv");
    assert!(rows.len() > 250, "{} rows", rows.len());
    let (mut checked, mut flat_ok, mut worst_p, mut worst_v) = (0, 0, 0.0f64, 0.0f64);
    for row in &rows {
        let kind = kind_of(&row["kind"]);
        let (s, k, t, r, q) = (
            num(row, "spot"),
            num(row, "strike"),
            num(row, "expiry"),
            num(row, "rate"),
            num(row, "div_yield"),
        );
        let price = num(row, "price");
        let tv = num(row, "time_value");
        let name = &row["case"];
        if !in_domain(price, tv) {
            // Outside the domain: an error, or a vol that reprices to the
            // price within the rounding of the intrinsic value.
            if let Ok(v) = implied_vol(kind, price, s, k, t, r, q) {
                let p = black_scholes::price(kind, s, k, t, r, q, v);
                assert!(
                    (p - price).abs() <= 1e-14 * price.max(s),
                    "{name}: {p} vs {price}"
                );
            }
            continue;
        }
        if at_upper_bound(kind, price, s, k, t, r, q) {
            match implied_vol(kind, price, s, k, t, r, q) {
                Err(e) => assert!(is_upper_error(&e), "{name}: {e}"),
                Ok(v) => {
                    let p = black_scholes::price(kind, s, k, t, r, q, v);
                    assert!(
                        (p / price - 1.0).abs() <= 8.0 * EPS,
                        "{name}: {p} vs {price}"
                    );
                }
            }
            continue;
        }
        let reference = num(row, "implied_vol");
        let e = num(row, "elasticity");
        let v =
            implied_vol(kind, price, s, k, t, r, q).unwrap_or_else(|err| panic!("{name}: {err}"));
        let p = black_scholes::price(kind, s, k, t, r, q, v);
        let ep = (p / price - 1.0).abs();
        let ev = (v / reference - 1.0).abs();
        let bp = PRICE_TOL.max(PRICE_COND * EPS * e);
        let bv = VOL_TOL.max(VOL_COND * EPS / e);
        assert!(
            ep <= bp,
            "{name}: price {p} vs {price}, rel {ep:e} > {bp:e} (E = {e})"
        );
        assert!(
            ev <= bv,
            "{name}: vol {v} vs {reference}, rel {ev:e} > {bv:e} (E = {e})"
        );
        if ep <= PRICE_TOL && ev <= VOL_TOL {
            flat_ok += 1;
        }
        worst_p = worst_p.max(ep / bp);
        worst_v = worst_v.max(ev / bv);
        checked += 1;
    }
    eprintln!(
        "implied vol fixture: {checked} cases in the domain, {flat_ok} within the flat targets, \
         worst error / bound: price {worst_p:.2}, vol {worst_v:.2}"
    );
    assert!(checked > 200);
}

#[test]
fn hard_cases_named_in_the_issue() {
    let rows = read_fixture("implied_vol_reference.csv");
    let find = |prefix: &str| {
        rows.iter()
            .find(|r| r["case"].starts_with(prefix))
            .unwrap_or_else(|| panic!("no case {prefix}"))
    };
    // S=100, K=150, T=1, sigma=0.04 call: price about 9.01e-25 (issue 9, mpmath).
    let row = find("hard: S=100 K=150");
    let price = num(row, "price");
    assert!((price / 9.01e-25 - 1.0).abs() < 1e-3, "{price}");
    let v = implied_vol(Call, price, 100.0, 150.0, 1.0, 0.0, 0.0).unwrap();
    assert!((v / num(row, "implied_vol") - 1.0).abs() < 1e-12, "{v}");
    // black_scholes::price keeps the digits of this tail value.
    let p = black_scholes::price(Call, 100.0, 150.0, 1.0, 0.0, 0.0, 0.04);
    assert!((p / price - 1.0).abs() < 1e-13, "{p} vs {price}");
}

#[test]
fn deep_out_of_the_money_prices_come_from_the_tails() {
    // mpmath at 100 digits (scripts/make_implied_vol_reference.py's bs()):
    // the repaired black_scholes::price against values that used to lose
    // up to 1.9e-9 relative or come out negative.
    let rows = read_fixture("implied_vol_reference.csv");
    let mut n = 0;
    for row in &rows {
        let kind = kind_of(&row["kind"]);
        let g: f64 = row["generating_vol"].parse().unwrap();
        // Only rows whose generating vol is a double exactly as written
        // matter here: price the reference price's own inputs.
        let (s, k, t, r, q) = (
            num(row, "spot"),
            num(row, "strike"),
            num(row, "expiry"),
            num(row, "rate"),
            num(row, "div_yield"),
        );
        let price = num(row, "price");
        if intrinsic(kind, s, k, t, r, q) > 0.0 || price < 1e-300 {
            continue;
        }
        let e = elasticity(kind, s, k, t, r, q, g);
        let p = black_scholes::price(kind, s, k, t, r, q, g);
        assert!(p > 0.0);
        // The generating vol is a decimal string, so the double differs from
        // it by half an ulp: allow E * eps for that, plus the conditioning.
        let bound = 1e-13f64.max((PRICE_COND + 1.0) * EPS * e);
        assert!(
            (p / price - 1.0).abs() <= bound,
            "{}: {p} vs {price} (E = {e})",
            row["case"]
        );
        n += 1;
    }
    assert!(n > 100, "{n}");
}

#[test]
fn textbook_examples() {
    // Hull, Options, Futures and Other Derivatives, the implied-volatility
    // example (from memory): a call with S = 21, K = 20, r = 10%, T = 0.25
    // priced at 1.875 has implied volatility 0.235. mpmath (50 digits,
    // findroot on the Black-Scholes price) gives 0.234512913997643787; checked to the
    // textbook's three digits and to mpmath's value.
    let v = implied_vol(Call, 1.875, 21.0, 20.0, 0.25, 0.1, 0.0).unwrap();
    assert!((v - 0.235).abs() < 5e-4, "{v}");
    // Hull example 15.6 (from memory): S = 42, K = 40, r = 10%, sigma = 20%,
    // T = 0.5 gives a call of 4.76 and a put of 0.81; inverting the rounded
    // textbook prices must give back 20% to the rounding of the prices.
    let c = implied_vol(Call, 4.76, 42.0, 40.0, 0.5, 0.1, 0.0).unwrap();
    let p = implied_vol(Put, 0.81, 42.0, 40.0, 0.5, 0.1, 0.0).unwrap();
    assert!((c - 0.2).abs() < 2e-3, "{c}");
    assert!((p - 0.2).abs() < 2e-3, "{p}");
}

#[test]
fn hull_example_agrees_with_mpmath_digits() {
    let v = implied_vol(Call, 1.875, 21.0, 20.0, 0.25, 0.1, 0.0).unwrap();
    // mpmath.findroot at 50 digits: 0.2345129139976437865
    assert!((v / HULL_21_20_MPMATH - 1.0).abs() < 1e-12, "{v}");
}

/// The mpmath implied vol of Hull's 21/20 call priced at 1.875.
const HULL_21_20_MPMATH: f64 = 0.234_512_913_997_643_8;

/// A seeded xorshift generator: every run sees the same cases.
struct Rng(u64);
impl Rng {
    fn next(&mut self) -> f64 {
        self.0 ^= self.0 << 13;
        self.0 ^= self.0 >> 7;
        self.0 ^= self.0 << 17;
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }
    fn log_uniform(&mut self, lo: f64, hi: f64) -> f64 {
        (lo.ln() + self.next() * (hi / lo).ln()).exp()
    }
}

#[test]
fn random_round_trip_price_vol_price() {
    // Identity of the theory: implied_vol inverts black_scholes::price.
    let mut rng = Rng(0x9e37_79b9_7f4a_7c15);
    let (mut checked, mut flat_ok, mut worst_p, mut worst_v) = (0u32, 0u32, 0.0f64, 0.0f64);
    for i in 0..200_000u32 {
        let kind = if i % 2 == 0 { Call } else { Put };
        let vol = rng.log_uniform(0.001, 5.0);
        let t = rng.log_uniform(1.0 / 8760.0, 30.0);
        let r = -0.01 + 0.09 * rng.next();
        let q = 0.05 * rng.next();
        let lm = -6.0 + 12.0 * rng.next();
        let s = 100.0;
        let k = s * ((r - q) * t + lm).exp();
        let price = black_scholes::price(kind, s, k, t, r, q, vol);
        let tv = price - intrinsic(kind, s, k, t, r, q);
        if !in_domain(price, tv) {
            continue;
        }
        let e = elasticity(kind, s, k, t, r, q, vol);
        let v = match implied_vol(kind, price, s, k, t, r, q) {
            Ok(v) => v,
            Err(e) if is_upper_error(&e) && at_upper_bound(kind, price, s, k, t, r, q) => continue,
            Err(err) => panic!("{kind} S={s} K={k} T={t} r={r} q={q} vol={vol}: {err}"),
        };
        let p = black_scholes::price(kind, s, k, t, r, q, v);
        let ep = (p / price - 1.0).abs();
        let ev = (v / vol - 1.0).abs();
        let bp = PRICE_TOL.max(PRICE_COND * EPS * e);
        let bv = VOL_TOL.max(VOL_COND * EPS / e);
        assert!(
            ep <= bp,
            "{kind} K={k} T={t} vol={vol}: price rel {ep:e} > {bp:e} (E={e})"
        );
        assert!(
            ev <= bv,
            "{kind} K={k} T={t} vol={vol}: vol {v} rel {ev:e} > {bv:e} (E={e})"
        );
        if ep <= PRICE_TOL && ev <= VOL_TOL {
            flat_ok += 1;
        }
        worst_p = worst_p.max(ep / bp);
        worst_v = worst_v.max(ev / bv);
        checked += 1;
    }
    eprintln!(
        "round trip: {checked} cases, {flat_ok} within the flat targets, worst error / bound: \
         price {worst_p:.2}, vol {worst_v:.2}"
    );
    assert!(checked > 40_000, "{checked}");
}

#[test]
fn batch_agrees_with_single_calls() {
    let quotes: Vec<VolQuote> = (0..5000)
        .map(|i| {
            let k = 50.0 + i as f64 * 0.03;
            let kind = if i % 3 == 0 { Put } else { Call };
            VolQuote {
                kind,
                price: black_scholes::price(kind, 100.0, k, 0.7, 0.02, 0.01, 0.25),
                spot: 100.0,
                strike: k,
                expiry: 0.7,
                rate: 0.02,
                div_yield: 0.01,
            }
        })
        .collect();
    let batch = implied_vols(&quotes);
    for (q, b) in quotes.iter().zip(&batch) {
        let one = implied_vol(
            q.kind,
            q.price,
            q.spot,
            q.strike,
            q.expiry,
            q.rate,
            q.div_yield,
        );
        assert_eq!(one.map(f64::to_bits), b.clone().map(f64::to_bits));
    }
}

#[test]
fn errors_name_the_bound_and_the_amount() {
    // Below intrinsic: a call worth less than S e^{-qT} - K e^{-rT}.
    let low = 100.0 - 90.0 * (-0.05f64).exp() - 0.5;
    let e = implied_vol(Call, low, 100.0, 90.0, 1.0, 0.05, 0.0).unwrap_err();
    assert!(
        matches!(e, ImpliedVolError::BelowLowerBound { .. }),
        "{e:?}"
    );
    let msg = e.to_string();
    assert!(msg.contains("below the lower no-arbitrage bound"), "{msg}");
    assert!(msg.contains("by 0.5"), "{msg}");
    // A negative price is below the lower bound of an out-of-the-money option (0).
    let e = implied_vol(Put, -1e-3, 100.0, 90.0, 1.0, 0.05, 0.0).unwrap_err();
    assert_eq!(
        e.to_string(),
        "price -0.001 is below the lower no-arbitrage bound 0 (the discounted intrinsic value \
         of the forward) by 0.001"
    );
    // Above the upper bound: a call worth more than the discounted spot.
    let e = implied_vol(Call, 101.0, 100.0, 90.0, 1.0, 0.05, 0.0).unwrap_err();
    assert_eq!(
        e.to_string(),
        "price 101 is not below the upper no-arbitrage bound 100 (the discounted spot); it \
         exceeds it by 1"
    );
    let kd = 90.0 * (-0.05f64).exp();
    let e = implied_vol(Put, kd, 100.0, 90.0, 1.0, 0.05, 0.0).unwrap_err();
    assert!(
        e.to_string()
            .contains("(the discounted strike); it exceeds it by 0"),
        "{e}"
    );
    // Within rounding of the upper bound.
    let e = implied_vol(Put, kd * (1.0 - 1e-16), 100.0, 90.0, 1.0, 0.05, 0.0).unwrap_err();
    assert!(
        matches!(e, ImpliedVolError::UpperBoundUnresolved { .. }),
        "{e:?}"
    );
}

#[test]
fn unresolvable_time_values_are_reported_as_such() {
    // Deep in the money with a time value below the rounding of the
    // intrinsic value (price - intrinsic = 4e-16 of it; the resolution is 4 eps (1 + |x|) of it).
    let intr = 100.0 - 50.0;
    let e = implied_vol(Call, intr + 2e-14, 100.0, 50.0, 1.0, 0.0, 0.0).unwrap_err();
    assert!(
        matches!(e, ImpliedVolError::TimeValueUnresolved { .. }),
        "{e:?}"
    );
    assert!(
        e.to_string()
            .contains("is too small for double precision to resolve a volatility"),
        "{e}"
    );
    // Exactly the intrinsic value (and a zero out-of-the-money price).
    let e = implied_vol(Call, intr, 100.0, 50.0, 1.0, 0.0, 0.0).unwrap_err();
    assert!(
        matches!(e, ImpliedVolError::TimeValueUnresolved { .. }),
        "{e:?}"
    );
    let e = implied_vol(Put, 0.0, 100.0, 50.0, 1.0, 0.0, 0.0).unwrap_err();
    assert!(
        matches!(e, ImpliedVolError::TimeValueUnresolved { .. }),
        "{e:?}"
    );
    // A subnormal price: digits already lost.
    let e = implied_vol(Put, 1e-315, 100.0, 50.0, 1.0, 0.0, 0.0).unwrap_err();
    assert!(
        matches!(e, ImpliedVolError::TimeValueUnresolved { .. }),
        "{e:?}"
    );
    // But 1e-300 is fine (issue 9: time values above 1e-300 resolve).
    let v = implied_vol(Put, 1e-300, 100.0, 50.0, 1.0, 0.0, 0.0).unwrap();
    let p = black_scholes::price(Put, 100.0, 50.0, 1.0, 0.0, 0.0, v);
    assert!((p / 1e-300 - 1.0).abs() < 1e-12, "{v} {p}");
}

#[test]
fn bad_inputs_are_named() {
    let cases: [(f64, f64, f64, f64, f64, f64, &str); 8] = [
        (
            f64::NAN,
            100.0,
            100.0,
            1.0,
            0.0,
            0.0,
            "price must be a finite number, got NaN",
        ),
        (
            1.0,
            0.0,
            100.0,
            1.0,
            0.0,
            0.0,
            "spot must be positive and finite, got 0",
        ),
        (
            1.0,
            100.0,
            -5.0,
            1.0,
            0.0,
            0.0,
            "strike must be positive and finite, got -5",
        ),
        (
            1.0,
            100.0,
            f64::INFINITY,
            1.0,
            0.0,
            0.0,
            "strike must be positive and finite, got inf",
        ),
        (
            1.0,
            100.0,
            100.0,
            0.0,
            0.0,
            0.0,
            "expiry must be positive and finite (no volatility is implied at expiry), got 0",
        ),
        (
            1.0,
            100.0,
            100.0,
            -1.0,
            0.0,
            0.0,
            "expiry must be positive and finite (no volatility is implied at expiry), got -1",
        ),
        (
            1.0,
            100.0,
            100.0,
            1.0,
            f64::NAN,
            0.0,
            "rate must be a finite number, got NaN",
        ),
        (
            1.0,
            100.0,
            100.0,
            1.0,
            0.0,
            f64::NEG_INFINITY,
            "div_yield must be a finite number, got -inf",
        ),
    ];
    for (p, s, k, t, r, q, msg) in cases {
        let e = implied_vol(Call, p, s, k, t, r, q).unwrap_err();
        assert!(matches!(e, ImpliedVolError::InvalidInput { .. }), "{e:?}");
        assert_eq!(e.to_string(), msg);
    }
}

#[test]
fn merton_with_zero_jump_rate_inverts_to_its_vol() {
    // Identity: lambda = 0 is Black-Scholes, so the implied vol of a
    // Merton price with no jumps is the diffusion vol.
    for (kind, k, t, vol) in [
        (Call, 80.0, 0.5, 0.2),
        (Put, 120.0, 2.0, 0.45),
        (Call, 100.0, 1.0 / 8760.0, 0.3),
    ] {
        let c = saltus::model::Contract::new(
            kind,
            100.0,
            k,
            t,
            0.03,
            0.01,
            vol,
            saltus::model::JumpParams {
                rate: 0.0,
                mean: -0.1,
                vol: 0.2,
            },
        )
        .unwrap();
        let p = saltus::engines::series::price(&c).unwrap().greeks.price;
        let v = implied_vol(kind, p, 100.0, k, t, 0.03, 0.01).unwrap();
        assert!((v / vol - 1.0).abs() < 1e-11, "{kind} K={k}: {v}");
    }
}

#[test]
fn put_call_parity_gives_one_vol() {
    // Identity: a call and the put of the same strike at parity have the
    // same implied vol (the inversion works on the out-of-the-money side).
    let (s, k, t, r, q, vol) = (100.0, 70.0, 0.4, 0.03, 0.01, 0.33);
    let c = black_scholes::price(Call, s, k, t, r, q, vol);
    let p = c - s * (-q * t).exp() + k * (-r * t).exp();
    let vc = implied_vol(Call, c, s, k, t, r, q).unwrap();
    let vp = implied_vol(Put, p, s, k, t, r, q).unwrap();
    assert!(
        (vc / vol - 1.0).abs() < 1e-11 && (vp / vol - 1.0).abs() < 1e-9,
        "{vc} {vp}"
    );
}
