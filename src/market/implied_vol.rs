//! Black-Scholes implied volatility to machine precision.
//!
//! The method is Jäckel's (2015, "Let's be rational", Wilmott 2015(75)):
//! the price is normalised to `beta = V / (e^{-rT} sqrt(F K))`, an
//! in-the-money price is turned into the out-of-the-money time value of the
//! other kind (put-call parity), so that only `b(x, s)` with `x = -|ln(F/K)|
//! <= 0` is ever inverted, and the total volatility `s = sigma sqrt T` is
//! found by third-order Householder steps from a regime-wise initial guess:
//!
//! - below the inflection point `s_c = sqrt(2|x|)` (small prices) the
//!   objective is `ln b(s) - ln beta`, with `d ln b / ds = 1 / D`
//!   ([`crate::normalised_black::vega_ratio`]) so nothing underflows down to
//!   prices of 1e-300; the start is the fixed point of the leading
//!   asymptotic `ln b ~ -(h^2 + t^2)/2 - ln sqrt(2 pi) + ln D`;
//! - above it the objective is `ln(e^{x/2} - b(s)) - ln(e^{x/2} - beta)`,
//!   the distance to the upper bound computed from tails, started from the
//!   at-the-money inversion `e^{x/2} - b ~ (e^{x/2} + e^{-x/2}) Phi(-s/2)`.
//!
//! Both logarithmic objectives are nearly linear in `s` on their side,
//! Householder's method converges cubically, and every step is kept inside
//! a bracket (bisection otherwise), so two to four steps reach the
//! rounding level. The achievable accuracy is set by the conditioning of
//! the price in the volatility (docs/implied_vol.md).

use crate::model::OptionKind;
use crate::normalised_black::{
    complement_vega_ratio, ln_vega, log_moneyness, otm_call, vega_ratio,
};
use std::fmt;

/// A time value at most this many ulps of the intrinsic value (times
/// `1 + |x|`) cannot be told from the rounding of the intrinsic value.
const TIME_VALUE_ULPS: f64 = 4.0;
/// Householder iterations stop after a step below this relative size (the
/// next error is of the order of its cube).
const STEP_REL_TOL: f64 = 1e-8;
/// Most Householder / bisection steps (two to four are usual).
const MAX_STEPS: usize = 40;
/// Above this fraction of its upper bound `e^{x/2}` a normalised price is
/// inverted through its distance to the bound (which then keeps more digits
/// than the price); below it through its logarithm.
const UPPER_OBJECTIVE_FRACTION: f64 = 0.5;
/// Where the normalised Black function switches to its direct form.
const CDF_FORM_MIN_H_PLUS_T: f64 = crate::normalised_black::CDF_FORM_MIN_H_PLUS_T;

/// Why no implied volatility could be returned.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum ImpliedVolError {
    /// An input is not a valid number for its role.
    #[error("{name} must be {requirement}, got {}", Num(*.value))]
    InvalidInput {
        /// The input's name (`spot`, `strike`, `expiry`, ...).
        name: &'static str,
        /// What it must be.
        requirement: &'static str,
        /// The value given.
        value: f64,
    },
    /// The price is below the discounted intrinsic value of the forward.
    #[error(
        "price {} is below the lower no-arbitrage bound {} (the discounted intrinsic value \
         of the forward) by {}",
        Num(*.price), Num(*.bound), Num(*.bound - *.price)
    )]
    BelowLowerBound {
        /// The price given.
        price: f64,
        /// `max(omega (S e^{-qT} - K e^{-rT}), 0)` (computed as
        /// `2 sqrt(S e^{-qT} K e^{-rT}) sinh(|x|/2)` on the in-the-money side).
        bound: f64,
    },
    /// The price is at or above the upper bound (a call is worth less than
    /// the discounted spot, a put less than the discounted strike).
    #[error(
        "price {} is not below the upper no-arbitrage bound {} (the {}); it exceeds it by {}",
        Num(*.price), Num(*.bound), .bound_name, Num(*.price - *.bound)
    )]
    AboveUpperBound {
        /// The price given.
        price: f64,
        /// `S e^{-qT}` for a call, `K e^{-rT}` for a put.
        bound: f64,
        /// `discounted spot` or `discounted strike`.
        bound_name: &'static str,
    },
    /// The time value (price minus intrinsic value) is too small for double
    /// precision to resolve a volatility from it.
    #[error(
        "time value {} (price {} less intrinsic value {}) is too small for double precision \
         to resolve a volatility: it must exceed {}",
        Num(*.time_value), Num(*.price), Num(*.price - *.time_value), Num(*.resolution)
    )]
    TimeValueUnresolved {
        /// The price given.
        price: f64,
        /// Price less the discounted intrinsic value.
        time_value: f64,
        /// The smallest time value that can be resolved at these inputs.
        resolution: f64,
    },
    /// The price is so close below the upper bound that the volatility (very
    /// large) cannot be resolved in double precision.
    #[error(
        "price {} is within rounding of the upper no-arbitrage bound {}: the volatility is \
         too large for double precision to resolve",
        Num(*.price), Num(*.bound)
    )]
    UpperBoundUnresolved {
        /// The price given.
        price: f64,
        /// The upper bound.
        bound: f64,
    },
}

/// A number in an error message: plain for moderate magnitudes, scientific
/// otherwise (never a long decimal expansion).
struct Num(f64);

impl fmt::Display for Num {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let a = self.0.abs();
        if a == 0.0 || (1e-4..1e15).contains(&a) || !a.is_finite() {
            write!(f, "{}", self.0)
        } else {
            write!(f, "{:e}", self.0)
        }
    }
}

/// One quote to invert with [`implied_vols`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct VolQuote {
    /// Call or put.
    pub kind: OptionKind,
    /// Option price.
    pub price: f64,
    /// Spot `S`.
    pub spot: f64,
    /// Strike `K`.
    pub strike: f64,
    /// Expiry `T` in years.
    pub expiry: f64,
    /// Continuously compounded rate `r`.
    pub rate: f64,
    /// Continuous dividend yield `q`.
    pub div_yield: f64,
}

/// The Black-Scholes volatility that reproduces `price`.
///
/// # Formula
/// Solves `black_scholes::price(kind, spot, strike, expiry, rate, div_yield,
/// sigma) = price` for `sigma` by Jäckel's method (module doc).
///
/// # Errors
/// [`ImpliedVolError`]: an input that is not finite or out of its domain
/// (spot, strike and expiry must be positive), a price outside the
/// no-arbitrage bounds (saying which and by how much), or a time value (or
/// distance to the upper bound) below what double precision resolves.
///
/// # Example
/// ```
/// use saltus::model::OptionKind;
/// use saltus::market::implied_vol::implied_vol;
/// let p = saltus::black_scholes::price(OptionKind::Call, 100.0, 150.0, 1.0, 0.0, 0.0, 0.04);
/// let v = implied_vol(OptionKind::Call, p, 100.0, 150.0, 1.0, 0.0, 0.0).unwrap();
/// assert!((v / 0.04 - 1.0).abs() < 1e-12);
/// ```
pub fn implied_vol(
    kind: OptionKind,
    price: f64,
    spot: f64,
    strike: f64,
    expiry: f64,
    rate: f64,
    div_yield: f64,
) -> Result<f64, ImpliedVolError> {
    let bad = |name, requirement, value| ImpliedVolError::InvalidInput {
        name,
        requirement,
        value,
    };
    if price.is_nan() || price.is_infinite() {
        return Err(bad("price", "a finite number", price));
    }
    if !(spot.is_finite() && spot > 0.0) {
        return Err(bad("spot", "positive and finite", spot));
    }
    if !(strike.is_finite() && strike > 0.0) {
        return Err(bad("strike", "positive and finite", strike));
    }
    if !(expiry.is_finite() && expiry > 0.0) {
        return Err(bad(
            "expiry",
            "positive and finite (no volatility is implied at expiry)",
            expiry,
        ));
    }
    if !rate.is_finite() {
        return Err(bad("rate", "a finite number", rate));
    }
    if !div_yield.is_finite() {
        return Err(bad("div_yield", "a finite number", div_yield));
    }
    let se = spot * (-div_yield * expiry).exp();
    let kd = strike * (-rate * expiry).exp();
    if !(se.is_normal() && se.is_finite()) {
        return Err(bad(
            "spot",
            "such that the discounted spot S e^{-qT} is a normal finite number",
            spot,
        ));
    }
    if !(kd.is_normal() && kd.is_finite()) {
        return Err(bad(
            "strike",
            "such that the discounted strike K e^{-rT} is a normal finite number",
            strike,
        ));
    }
    let w = kind.sign();
    // ln(F/K) from the inputs, not ln(se/kd): near the money the rounding of
    // the two discount factors would dominate it.
    let x = log_moneyness(spot, strike, rate, div_yield, expiry);
    let scale = se.sqrt() * kd.sqrt();
    let (upper, bound_name) = match kind {
        OptionKind::Call => (se, "discounted spot"),
        OptionKind::Put => (kd, "discounted strike"),
    };
    if price >= upper {
        return Err(ImpliedVolError::AboveUpperBound {
            price,
            bound: upper,
            bound_name,
        });
    }
    let itm = w * x > 0.0;
    // 2 sqrt(se kd) sinh(|x|/2) = w (se - kd), without the cancellation.
    let intrinsic = if itm {
        2.0 * scale * (0.5 * x.abs()).sinh()
    } else {
        0.0
    };
    // The intrinsic value is known to a few ulps, more for a large |x|
    // (whose own rounding sinh amplifies by |x|/2).
    let resolution = TIME_VALUE_ULPS * f64::EPSILON * intrinsic * (1.0 + x.abs());
    let time_value = price - intrinsic;
    if time_value < -resolution {
        return Err(ImpliedVolError::BelowLowerBound {
            price,
            bound: intrinsic,
        });
    }
    let beta = time_value / scale;
    // beta must be a normal number for its digits to be meaningful.
    let resolution = resolution.max(f64::MIN_POSITIVE * scale);
    if time_value <= resolution || !beta.is_normal() {
        return Err(ImpliedVolError::TimeValueUnresolved {
            price,
            time_value,
            resolution,
        });
    }
    let xn = -x.abs();
    let ex2 = (0.5 * xn).exp();
    let gap = ex2 - beta;
    if gap <= 2.0 * f64::EPSILON * ex2 {
        return Err(ImpliedVolError::UpperBoundUnresolved {
            price,
            bound: upper,
        });
    }
    let s = total_vol(xn, beta, ex2);
    Ok(s / expiry.sqrt())
}

/// Inverts many quotes on the rayon pool: element `i` of the result is
/// `implied_vol` of `quotes[i]` (each is a pure function of its quote, so
/// the results do not depend on the thread count).
pub fn implied_vols(quotes: &[VolQuote]) -> Vec<Result<f64, ImpliedVolError>> {
    use rayon::prelude::*;
    quotes
        .par_iter()
        .with_min_len(1024)
        .map(|q| {
            implied_vol(
                q.kind,
                q.price,
                q.spot,
                q.strike,
                q.expiry,
                q.rate,
                q.div_yield,
            )
        })
        .collect()
}

/// The total volatility `s` with `b(x, s) = beta`, for `x <= 0` and
/// `0 < beta < e^{x/2} = ex2`.
///
/// # Panics
/// Never on valid arguments (checked by the caller).
pub fn total_vol(x: f64, beta: f64, ex2: f64) -> f64 {
    let sc = (-2.0 * x).sqrt();
    let bc = if sc > 0.0 { otm_call(x, sc) } else { 0.0 };
    if beta <= bc {
        log_price_branch(x, beta, ex2, lower_start(x, beta, sc), 0.0, sc)
    } else if beta <= UPPER_OBJECTIVE_FRACTION * ex2 {
        log_price_branch(
            x,
            beta,
            ex2,
            upper_start(x, beta, ex2, sc),
            sc,
            f64::INFINITY,
        )
    } else {
        upper_branch(x, beta, ex2, sc)
    }
}

/// Householder step of order three for an objective with value `g`, first
/// derivative `g1` and ratios `h2 = g''/g'`, `h3 = g'''/g'`.
#[inline]
fn householder(g: f64, g1: f64, h2: f64, h3: f64) -> f64 {
    let nu = -g / g1;
    nu * (1.0 + 0.5 * h2 * nu) / (1.0 + nu * (h2 + nu * h3 / 6.0))
}

/// `b''/b'` and `b'''/b'` as functions of `s` (derivatives of the vega's
/// exponent).
#[inline]
fn vega_log_derivatives(x: f64, s: f64) -> (f64, f64) {
    let x2 = x * x;
    let s2 = s * s;
    let a = x2 / (s2 * s) - 0.25 * s;
    let b = a * a - 3.0 * x2 / (s2 * s2) - 0.25;
    (a, b)
}

/// Start below the inflection point: two passes of the fixed point of
/// `ln beta = ln_vega(h, t) + ln D(h, t)` solved for `h^2`.
fn lower_start(x: f64, beta: f64, sc: f64) -> f64 {
    let ln_beta = beta.ln();
    let mut s = sc;
    for _ in 0..2 {
        let t = 0.5 * s;
        let d = vega_ratio(x / s, t);
        let h2 = 2.0 * (d.ln() - ln_beta - crate::normalised_black::LN_SQRT_2PI) - t * t;
        let next = -x / h2.sqrt();
        if next.is_finite() && next > 0.0 && next < sc {
            s = next;
        }
    }
    s
}

/// Start above the inflection point: the at-the-money inversion
/// `e^{x/2} - b ~ (e^{x/2} + e^{-x/2}) Phi(-s/2)`.
fn upper_start(x: f64, beta: f64, ex2: f64, sc: f64) -> f64 {
    let _ = x;
    let q = (ex2 - beta) / (ex2 + 1.0 / ex2);
    (-2.0 * inverse_normal_start(q)).max(sc)
}

/// The next iterate after a Householder `step` from `s` inside the bracket
/// `(lo, hi)`, or `None` when the step is below the tolerance (the caller
/// then returns `s + step`) or the bracket has shrunk to rounding. A step
/// leaving the bracket is replaced by bisection (doubling while `hi` is
/// unbounded).
#[inline]
fn next_iterate(s: f64, step: f64, lo: f64, hi: f64) -> Option<f64> {
    if step.abs() <= STEP_REL_TOL * s {
        return None;
    }
    let next = s + step;
    if next > lo && next < hi {
        Some(next)
    } else if hi.is_finite() {
        if hi - lo <= 2.0 * f64::EPSILON * hi {
            return None;
        }
        Some(0.5 * (lo + hi))
    } else {
        Some(2.0 * s.max(1.0))
    }
}

/// Solve `ln b(s) = ln beta` from `s` inside the bracket `(lo, hi)`.
fn log_price_branch(x: f64, beta: f64, ex2: f64, mut s: f64, mut lo: f64, mut hi: f64) -> f64 {
    let ln_beta = beta.ln();
    for _ in 0..MAX_STEPS {
        let h = x / s;
        let t = 0.5 * s;
        let lv = ln_vega(h, t);
        // ln b and r = b'/b: from D while b may be tiny, directly otherwise.
        let (ln_b, r) = if h + t <= CDF_FORM_MIN_H_PLUS_T {
            let d = vega_ratio(h, t);
            (lv + d.ln(), 1.0 / d)
        } else {
            // b = e^{x/2} - vega (R(h+t) + R(t-h)): not small here.
            let vega = lv.exp();
            let b = ex2 - vega * complement_vega_ratio(h, t);
            (b.ln(), vega / b)
        };
        let g = ln_b - ln_beta;
        if g == 0.0 {
            break;
        }
        if g > 0.0 {
            hi = hi.min(s);
        } else {
            lo = lo.max(s);
        }
        let (a, b) = vega_log_derivatives(x, s);
        let step = householder(g, r, a - r, b - 3.0 * a * r + 2.0 * r * r);
        s = match next_iterate(s, step, lo, hi) {
            Some(next) => next,
            None => return s + step,
        };
    }
    s
}

/// Above the inflection point: solve `ln(e^{x/2} - b(s)) = ln(e^{x/2} -
/// beta)` on `[sc, inf)`.
fn upper_branch(x: f64, beta: f64, ex2: f64, sc: f64) -> f64 {
    let target = ex2 - beta;
    let ln_target = target.ln();
    let mut s = upper_start(x, beta, ex2, sc);
    let (mut lo, mut hi) = (sc, f64::INFINITY);
    for _ in 0..MAX_STEPS {
        let h = x / s;
        let t = 0.5 * s;
        // c = e^{x/2} - b = vega * m, so ln c and c'/c = -1/m need no exponential.
        let m = complement_vega_ratio(h, t);
        let g = ln_vega(h, t) + m.ln() - ln_target;
        if g == 0.0 {
            break;
        }
        if g < 0.0 {
            hi = hi.min(s);
        } else {
            lo = lo.max(s);
        }
        let r = -1.0 / m;
        let (a, b) = vega_log_derivatives(x, s);
        let step = householder(g, r, a - r, b - 3.0 * a * r + 2.0 * r * r);
        s = match next_iterate(s, step, lo, hi) {
            Some(next) => next,
            None => return s + step,
        };
    }
    s
}

/// A start value for `Phi^{-1}(p)`, `0 < p <= 1/2`: Abramowitz and Stegun
/// 26.2.23 (absolute error below 4.5e-4), refined by the iteration.
fn inverse_normal_start(p: f64) -> f64 {
    let w = (-2.0 * p.min(0.5).ln()).sqrt();
    let num = 2.515_517 + w * (0.802_853 + w * 0.010_328);
    let den = 1.0 + w * (1.432_788 + w * (0.189_269 + w * 0.001_308));
    -(w - num / den)
}
