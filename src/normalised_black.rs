//! The normalised Black function, accurate to a few ulps in every region.
//!
//! Following Jäckel (2015, "Let's be rational", Wilmott), a Black-Scholes
//! price is written as `V = e^{-rT} sqrt(F K) b(x, s)` with the
//! log-moneyness `x = ln(F/K)`, the total volatility `s = sigma sqrt T` and
//! the normalised Black function
//!
//! `b(x, s) = e^{x/2} Phi(x/s + s/2) - e^{-x/2} Phi(x/s - s/2)` (a call).
//!
//! Only the out-of-the-money side `x <= 0` is ever evaluated: an
//! in-the-money value is the intrinsic value plus the out-of-the-money value
//! of the other kind (put-call parity, `b_put(x) = b_call(-x)`), a sum of
//! positive numbers, so deep in-the-money prices keep their digits and deep
//! out-of-the-money values are never a difference of nearly equal numbers.
//!
//! # Formula
//! With `h = x/s`, `t = s/2`, `u = -h` and the Mills ratio
//! `R(z) = Phi(-z)/phi(z)`, the identity `e^{ht} phi(h + t) = e^{-ht}
//! phi(h - t) = phi(h) e^{-t^2/2}` gives
//!
//! `b = exp(-(h^2 + t^2)/2) / sqrt(2 pi) * D`, `D = R(u - t) - R(u + t)`,
//!
//! and the vega `db/ds = exp(-(h^2 + t^2)/2) / sqrt(2 pi)` is the prefactor
//! alone. `D` is computed by region (the regions of Jäckel's paper, with
//! expansions derived here):
//! - `u - t >= 10` (far lower tail): the asymptotic series
//!   `R(z) ~ sum (-1)^n (2n-1)!! z^{-(2n+1)}` taken as a difference term by
//!   term, `a^m - c^m = (a - c) P_m` with `a = 1/(u-t)`, `c = 1/(u+t)` and
//!   `P_{m+1} = a P_m + c^m` (all terms positive: no cancellation);
//! - `t < 0.21` (short total volatility): the odd Taylor series
//!   `D = -2 sum_{k odd} R^{(k)}(u) t^k / k!` with `R' = uR - 1` and
//!   `R^{(k+1)} = u R^{(k)} + k R^{(k-1)}`;
//! - otherwise `D` as the difference of two Mills ratios (the repository's
//!   measured table, [`crate::normal::mills_ratio`]), which loses at most a
//!   factor of about 25 in relative precision at the region's edges;
//! - when `h + t > 0.85` the value is not small and `b` is taken from the
//!   two normal distribution values directly.
//!
//! The remaining error is set by the conditioning of `b` itself: the
//! exponent `(h^2 + t^2)/2` is known only to its rounding, a relative error
//! of about `eps (h^2 + t^2)/2` in `b` that no formula in double precision
//! avoids (docs/implied_vol.md).

use crate::normal::{mills_ratio, norm_cdf};

/// `ln sqrt(2 pi)`.
pub const LN_SQRT_2PI: f64 = 0.918_938_533_204_672_8;
/// `sqrt(2 pi)`.
const SQRT_2PI: f64 = 2.506_628_274_631_000_5;
/// The asymptotic series is used where `u - t` is at least this.
const ASYMPTOTIC_MIN_ARG: f64 = 10.0;
/// The Taylor series in `t` is used below this `t = s/2`.
const SMALL_T: f64 = 0.21;
/// Above this `h + t` the value comes from the normal distribution directly.
pub(crate) const CDF_FORM_MIN_H_PLUS_T: f64 = 0.85;
/// Terms of a series smaller than this relative to the sum are dropped.
const SERIES_REL_TOL: f64 = 1e-17;
/// Most terms of the asymptotic series (enough at `u - t = 10`).
const ASYMPTOTIC_MAX_TERMS: usize = 30;
/// Highest derivative order of the Taylor series (enough at `t = 0.21`).
const TAYLOR_MAX_ORDER: usize = 31;

/// Mills ratio `R(z) = Phi(-z)/phi(z)` for any sign of `z`.
#[inline]
fn mills_any(z: f64) -> f64 {
    if z >= 0.0 {
        mills_ratio(z)
    } else {
        // R(-y) = 1/phi(y) - R(y): a difference of a large and a smaller
        // number (R(y) < 1/(2 phi(y)) for y > 0), no cancellation.
        SQRT_2PI * (0.5 * z * z).exp() - mills_ratio(-z)
    }
}

/// `D(h, t) = R(-h - t) - R(-h + t)` for `h <= 0`, `t > 0`: the normalised
/// Black function divided by its vega, `b = vega * D`.
#[inline]
pub fn vega_ratio(h: f64, t: f64) -> f64 {
    let u = -h;
    if u - t >= ASYMPTOTIC_MIN_ARG {
        asymptotic(u, t)
    } else if t < SMALL_T {
        taylor(u, t)
    } else {
        mills_any(u - t) - mills_any(u + t)
    }
}

/// `D` from the asymptotic series of the Mills ratio, differenced term by term.
fn asymptotic(u: f64, t: f64) -> f64 {
    if !u.is_finite() {
        return 0.0;
    }
    let a = 1.0 / (u - t);
    let c = 1.0 / (u + t);
    let mut p = 1.0; // P_1
    let mut cp = c; // c^1
    let mut sum = 1.0;
    let mut coef = 1.0; // (-1)^n (2n-1)!!
    for n in 1..=ASYMPTOTIC_MAX_TERMS {
        p = a * p + cp; // P_{2n}
        cp *= c;
        p = a * p + cp; // P_{2n+1}
        cp *= c;
        coef *= -((2 * n - 1) as f64);
        let term = coef * p;
        sum += term;
        if term.abs() < SERIES_REL_TOL * sum {
            break;
        }
    }
    2.0 * t * a * c * sum
}

/// `D` from the odd Taylor series in `t` around `u`.
fn taylor(u: f64, t: f64) -> f64 {
    let r0 = mills_ratio(u);
    let mut prev = r0; // R^{(k-1)}
    let mut cur = u * r0 - 1.0; // R^{(k)}, k = 1
    let mut coef = t; // t^k / k!
    let mut sum = cur * coef;
    let mut k = 1;
    while k < TAYLOR_MAX_ORDER {
        // two steps: R^{(k+1)}, R^{(k+2)}
        let next = u * cur + k as f64 * prev;
        prev = cur;
        cur = next;
        k += 1;
        coef *= t / k as f64;
        let next = u * cur + k as f64 * prev;
        prev = cur;
        cur = next;
        k += 1;
        coef *= t / k as f64;
        let term = cur * coef;
        sum += term;
        if term.abs() < SERIES_REL_TOL * sum.abs() {
            break;
        }
    }
    -2.0 * sum
}

/// `(e^{x/2} - b(x, s)) / vega` for `x <= 0` and `s >= sqrt(2|x|)` (so
/// `h + t >= 0`): `R(h + t) + R(t - h)`, the distance to the upper bound in
/// units of the vega (the same identity as for `D`), from two Mills ratios
/// and no exponential.
#[inline]
pub fn complement_vega_ratio(h: f64, t: f64) -> f64 {
    mills_any(h + t) + mills_ratio(t - h)
}

/// The log-moneyness `x = ln(F/K) = ln(S/K) + (r - q) T`, with `ln(S/K)` as
/// `ln_1p((S - K)/K)` when `S/K` is within a factor of two (`S - K` is then
/// exact), so that near the money `x` carries a relative rather than an
/// absolute rounding error: there the price is most sensitive to it.
#[inline]
pub fn log_moneyness(spot: f64, strike: f64, rate: f64, div_yield: f64, t: f64) -> f64 {
    let ratio = spot / strike;
    let ln_ratio = if (0.5..=2.0).contains(&ratio) {
        ((spot - strike) / strike).ln_1p()
    } else {
        ratio.ln()
    };
    ln_ratio + (rate - div_yield) * t
}

/// `ln` of the vega of the normalised Black function,
/// `-(h^2 + t^2)/2 - ln sqrt(2 pi)`.
#[inline]
pub fn ln_vega(h: f64, t: f64) -> f64 {
    -0.5 * (h * h + t * t) - LN_SQRT_2PI
}

/// The normalised Black call `b(x, s)` for `x <= 0` (out of the money) and
/// `s >= 0`; `b(x, 0) = 0` for `x < 0`. In `[0, e^{x/2})`.
///
/// # Example
/// ```
/// // At the money b(0, s) = 1 - 2 Phi(-s/2).
/// let b = saltus::normalised_black::otm_call(0.0, 0.5);
/// // mpmath, 30 digits; the Mills-ratio difference costs about 7 ulps here.
/// assert!((b / 0.197_412_651_365_847_45 - 1.0).abs() < 4e-15);
/// ```
#[inline]
pub fn otm_call(x: f64, s: f64) -> f64 {
    debug_assert!(x <= 0.0);
    if s <= 0.0 {
        return 0.0;
    }
    let h = x / s;
    let t = 0.5 * s;
    if h + t > CDF_FORM_MIN_H_PLUS_T {
        let e = (0.5 * x).exp();
        e * norm_cdf(h + t) - norm_cdf(h - t) / e
    } else {
        ln_vega(h, t).exp() * vega_ratio(h, t)
    }
}

/// `e^{x/2} - b(x, s)` for `x <= 0`: how far the normalised call is below its
/// upper bound, `e^{x/2} Phi(-h - t) + e^{-x/2} Phi(h - t)`, a sum of
/// positive tails computed directly. `ex2` is `e^{x/2}`.
#[inline]
pub fn otm_call_complement(x: f64, s: f64, ex2: f64) -> f64 {
    let h = x / s;
    let t = 0.5 * s;
    ex2 * norm_cdf(-h - t) + norm_cdf(h - t) / ex2
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn regions_agree_at_their_borders() {
        // Each pair evaluates D on both sides of a region boundary; D is
        // smooth, so the two must agree to rounding.
        for &(h, t) in &[
            (-10.2, 0.2),
            (-10.0, 0.2099),
            (-5.0, 0.2099),
            (-0.3, 0.2099),
        ] {
            let a = taylor(-h, t);
            let b = mills_any(-h - t) - mills_any(-h + t);
            assert!((a / b - 1.0).abs() < 5e-13, "h={h} t={t}: {a} {b}");
        }
        for &(u, t) in &[(10.5, 0.5), (12.0, 2.0), (10.3, 0.3)] {
            let a = asymptotic(u, t);
            let b = mills_any(u - t) - mills_any(u + t);
            assert!((a / b - 1.0).abs() < 1e-13, "u={u} t={t}: {a} {b}");
        }
    }
}
