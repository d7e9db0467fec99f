//! The Black-Scholes(-Merton) kernel with continuous dividend yield.
//!
//! This is the textbook closed form, written independently of the Merton
//! series loop so it can serve as its `lambda = 0` reference, as the
//! conditional price inside the Monte Carlo control variate, and as the
//! inner function of implied-volatility style checks.
//!
//! # Formula
//! `V = omega [S e^{-qT} N(omega d1) - K e^{-rT} N(omega d2)]`,
//! `d1 = (ln(S/K) + (r - q + sigma^2/2) T) / (sigma sqrt T)`, `d2 = d1 - sigma sqrt T`,
//! with `omega = +1` for a call and `-1` for a put.

use crate::greeks::Greeks;
use crate::model::OptionKind;
use crate::normal::{norm_cdf, norm_pdf};
use crate::normalised_black::{log_moneyness, otm_call};

/// Black-Scholes price. Exact at the edges: `T = 0` gives the intrinsic
/// value, `sigma = 0` the discounted intrinsic value of the forward.
///
/// The value is the discounted intrinsic value of the forward plus the
/// out-of-the-money time value from the normalised Black function
/// ([`crate::normalised_black`]), so deep out-of-the-money prices come from
/// the tails directly and keep their relative precision.
pub fn price(kind: OptionKind, s: f64, k: f64, t: f64, r: f64, q: f64, sigma: f64) -> f64 {
    let v = sigma * t.sqrt();
    if t == 0.0 || v == 0.0 {
        return greeks(kind, s, k, t, r, q, sigma).price;
    }
    let x = log_moneyness(s, k, r, q, t);
    otm_sum(kind.sign(), s * (-q * t).exp(), k * (-r * t).exp(), x, v)
}

/// The intrinsic value `w (se - kd)` on the in-the-money side plus the out-of-the-money
/// time value `sqrt(se kd) b(-|x|, v)`: a sum of positive numbers.
#[inline]
fn otm_sum(w: f64, se: f64, kd: f64, x: f64, v: f64) -> f64 {
    let scale = se.sqrt() * kd.sqrt();
    // The intrinsic value as 2 sqrt(se kd) sinh(x/2), not se - kd: with
    // x = ln(S/K) + (r - q) T it keeps its relative precision at the money.
    let intrinsic = if w * x > 0.0 {
        2.0 * scale * (0.5 * x.abs()).sinh()
    } else {
        0.0
    };
    intrinsic + scale * otm_call(-x.abs(), v)
}

/// Black-Scholes price and the Greeks in raw units (the jump sensitivities
/// are zero). At `T = 0` or `sigma = 0` the option is a (discounted) hockey
/// stick: delta is its slope (the average of the two one-sided slopes at the
/// kink), gamma is reported as 0 and vega as its right-derivative.
pub fn greeks(kind: OptionKind, s: f64, k: f64, t: f64, r: f64, q: f64, sigma: f64) -> Greeks {
    let w = kind.sign();
    if t == 0.0 {
        let x = w * (s - k);
        let slope = if x > 0.0 {
            w
        } else if x < 0.0 {
            0.0
        } else {
            0.5 * w
        };
        return Greeks {
            price: x.max(0.0),
            delta: slope,
            ..Greeks::default()
        };
    }
    let dq = (-q * t).exp();
    let dr = (-r * t).exp();
    let sq_t = t.sqrt();
    let v = sigma * sq_t;
    let x = log_moneyness(s, k, r, q, t);
    if v == 0.0 {
        let m = w * x;
        let (n1, n2) = if m > 0.0 {
            (1.0, 1.0)
        } else if m < 0.0 {
            (0.0, 0.0)
        } else {
            (0.5, 0.5)
        };
        let price = (w * (s * dq * n1 - k * dr * n2)).max(0.0);
        let vega = if x == 0.0 {
            s * dq * norm_pdf(0.0) * sq_t
        } else {
            0.0
        };
        return Greeks {
            price,
            delta: w * dq * n1,
            vega,
            theta: w * (q * s * dq * n1 - r * k * dr * n2),
            rho: w * k * t * dr * n2,
            div_rho: -w * s * t * dq * n1,
            ..Greeks::default()
        };
    }
    let d1 = (x + 0.5 * v * v) / v;
    let d2 = d1 - v;
    let n1 = norm_cdf(w * d1);
    let n2 = norm_cdf(w * d2);
    let pdf = norm_pdf(d1);
    let se = s * dq;
    let kd = k * dr;
    Greeks {
        price: otm_sum(w, se, kd, x, v),
        delta: w * dq * n1,
        gamma: dq * pdf / (s * v),
        vega: se * pdf * sq_t,
        theta: -se * pdf * sigma / (2.0 * sq_t) - w * r * kd * n2 + w * q * se * n1,
        rho: w * kd * t * n2,
        div_rho: -w * se * t * n1,
        vanna: -dq * pdf * d2 / sigma,
        volga: se * pdf * sq_t * d1 * d2 / sigma,
        ..Greeks::default()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hull_example_42_40() {
        // Hull, Options, Futures and Other Derivatives, example 15.6 (from
        // memory): S=42, K=40, r=10%, sigma=20%, T=0.5: call 4.76, put 0.81.
        let c = price(OptionKind::Call, 42.0, 40.0, 0.5, 0.1, 0.0, 0.2);
        let p = price(OptionKind::Put, 42.0, 40.0, 0.5, 0.1, 0.0, 0.2);
        assert!((c - 4.76).abs() < 0.005, "{c}");
        assert!((p - 0.81).abs() < 0.005, "{p}");
    }

    #[test]
    fn zero_vol_is_discounted_forward_intrinsic() {
        let g = greeks(OptionKind::Call, 100.0, 90.0, 1.0, 0.05, 0.01, 0.0);
        let expect = 100.0 * (-0.01f64).exp() - 90.0 * (-0.05f64).exp();
        assert!((g.price - expect).abs() < 1e-13);
        // theta of a forward contract: -dV/dT = q S e^{-qT} - r K e^{-rT}.
        let theta = -(-0.01 * 100.0 * (-0.01f64).exp() + 0.05 * 90.0 * (-0.05f64).exp());
        assert!((g.theta - theta).abs() < 1e-12, "{} {}", g.theta, theta);
    }
}
