//! TEMPORARY Black-Scholes implied volatility, standing in for the
//! machine-precision inversion (Jäckel 2015) built on branch `ivol`; replace
//! this file with that one when it reaches main. Same signature.
//!
//! Method: safeguarded Newton on [`crate::black_scholes::greeks`], solved for
//! the out-of-the-money option (put-call parity), with a bisection bracket
//! `[0, VOL_MAX]` that shrinks on every step so it always converges.

use crate::black_scholes;
use crate::model::{OptionKind, Short};

/// Largest vol searched.
const VOL_MAX: f64 = 10.0;
/// Newton/bisection steps allowed.
const MAX_STEPS: usize = 200;

/// Why a price has no implied vol.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum ImpliedVolError {
    /// An input is not finite or not in its domain.
    #[error("{0}")]
    BadInput(String),
    /// The price is at or below the no-arbitrage lower bound.
    #[error("price {} is not above the no-arbitrage lower bound {} (by {})", Short(*.price), Short(*.bound), Short(*.bound - *.price))]
    BelowLowerBound {
        /// The price given.
        price: f64,
        /// The bound.
        bound: f64,
    },
    /// The price is at or above the no-arbitrage upper bound.
    #[error("price {} is not below the no-arbitrage upper bound {} (by {})", Short(*.price), Short(*.bound), Short(*.price - *.bound))]
    AboveUpperBound {
        /// The price given.
        price: f64,
        /// The bound.
        bound: f64,
    },
    /// The time value is too small for double precision to resolve.
    #[error("time value {} is too small to resolve an implied vol", Short(*.0))]
    Unresolvable(f64),
}

/// The Black-Scholes vol that reproduces `price`.
///
/// # Errors
/// [`ImpliedVolError`] for bad inputs, prices outside the no-arbitrage
/// bounds and time values too small to resolve.
pub fn implied_vol(
    kind: OptionKind,
    price: f64,
    spot: f64,
    strike: f64,
    expiry: f64,
    rate: f64,
    div_yield: f64,
) -> Result<f64, ImpliedVolError> {
    for (n, v) in [
        ("price", price),
        ("spot", spot),
        ("strike", strike),
        ("expiry", expiry),
        ("rate", rate),
        ("div_yield", div_yield),
    ] {
        if !v.is_finite() {
            return Err(ImpliedVolError::BadInput(format!("{n} is not finite")));
        }
    }
    if spot <= 0.0 || strike <= 0.0 || expiry <= 0.0 {
        return Err(ImpliedVolError::BadInput(
            "spot, strike and expiry must be positive".into(),
        ));
    }
    let fs = spot * (-div_yield * expiry).exp();
    let kd = strike * (-rate * expiry).exp();
    let (lower, upper) = match kind {
        OptionKind::Call => ((fs - kd).max(0.0), fs),
        OptionKind::Put => ((kd - fs).max(0.0), kd),
    };
    if price <= lower {
        return Err(ImpliedVolError::BelowLowerBound {
            price,
            bound: lower,
        });
    }
    if price >= upper {
        return Err(ImpliedVolError::AboveUpperBound {
            price,
            bound: upper,
        });
    }
    // Out-of-the-money side: a call with fs > kd becomes a put, and back.
    let (otm_kind, target) = match kind {
        OptionKind::Call if fs > kd => (OptionKind::Put, price - (fs - kd)),
        OptionKind::Put if kd > fs => (OptionKind::Call, price - (kd - fs)),
        _ => (kind, price),
    };
    if target.is_nan() || target <= 1e-300 || target < 1e-15 * price.max(f64::MIN_POSITIVE) {
        return Err(ImpliedVolError::Unresolvable(target));
    }
    let f = |s: f64| black_scholes::greeks(otm_kind, spot, strike, expiry, rate, div_yield, s);
    let (mut lo, mut hi) = (0.0_f64, VOL_MAX);
    if f(hi).price < target {
        return Err(ImpliedVolError::BadInput(format!(
            "the implied vol would be above {VOL_MAX}"
        )));
    }
    // Start at the vol of an at-the-money-like guess.
    let mut s = (2.0 * ((fs / kd).ln().abs() / expiry).max(0.0))
        .sqrt()
        .max(0.2);
    s = s.min(VOL_MAX * 0.5);
    for _ in 0..MAX_STEPS {
        let g = f(s);
        let diff = g.price - target;
        if diff > 0.0 {
            hi = s;
        } else {
            lo = s;
        }
        if diff.abs() <= 4.0 * f64::EPSILON * target {
            return Ok(s);
        }
        let newton = s - diff / g.vega;
        let next = if g.vega > 0.0 && newton > lo && newton < hi {
            newton
        } else {
            0.5 * (lo + hi)
        };
        if (next - s).abs() <= 2.0 * f64::EPSILON * s {
            return Ok(next);
        }
        s = next;
        if hi - lo <= 2.0 * f64::EPSILON * hi {
            return Ok(s);
        }
    }
    Ok(s)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trip() {
        // Identity: BS(implied_vol(BS(sigma))) = BS(sigma).
        for &(k, s, x, t, sig) in &[
            (OptionKind::Call, 100.0, 100.0, 1.0, 0.2),
            (OptionKind::Put, 100.0, 60.0, 0.25, 0.5),
            (OptionKind::Call, 100.0, 60.0, 2.0, 0.1),
            (OptionKind::Put, 100.0, 140.0, 0.5, 0.3),
        ] {
            let p = black_scholes::price(k, s, x, t, 0.03, 0.01, sig);
            let iv = implied_vol(k, p, s, x, t, 0.03, 0.01).unwrap();
            // In-the-money inputs lose digits to the parity subtraction.
            assert!((iv - sig).abs() < 1e-10 * sig, "{iv} vs {sig}");
        }
    }
}
