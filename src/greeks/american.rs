//! Price and Greeks of an American option under Merton jumps, as the book
//! commands write them: the PIDE engine ([`crate::engines::pide`]) gives
//! the price, its error estimate and the grid Greeks delta, gamma and
//! theta; vega, rho, div_rho and the three jump sensitivities are central
//! differences of PIDE prices ([`finite_diff::first_derivatives`], bumps
//! [`BumpSizes::grid`](finite_diff::BumpSizes::grid)), with the noise the
//! PIDE's error estimate propagates into each.
//!
//! Rows outside the PIDE's reach ([`pide_reach`]) are refused at once.
//!
//! The European series price is computed alongside: the early-exercise
//! premium is the American price minus it. American >= European is a
//! theorem, so a PIDE value below the series price (by at most its
//! discretisation error, e.g. a call without dividends, Merton 1973) is
//! reported as the series price: the true value lies above the bound, so
//! this never moves the price further from it, and the premium is never
//! negative.

use crate::engines::pide::{self, Exercise, PideConfig, PideEngine};
use crate::engines::{series, Priced, PricingEngine};
use crate::greeks::finite_diff::{self, FdConfig};
use crate::greeks::Greeks;
use crate::model::{Contract, Param};

/// Largest `lambda T` the PIDE is run for: beyond it the fixed-point
/// iteration of the jump term contracts slowly and the grid must span many
/// jumps (an American put with `lambda T = 49` ran 150 s to fail).
pub const PIDE_MAX_JUMPS: f64 = 50.0;
/// Largest `|ln(S/K)|` the PIDE is run for, in units of
/// `max(1, sd of ln S_T)`: further out the option is its asymptote to many
/// digits, and a spot of 1e-300 with a strike of 1 ran 45 s to fail.
pub const PIDE_MAX_MONEYNESS_SD: f64 = 12.0;
/// Largest standard deviation of `ln S_T` the PIDE is run for: beyond it the grid spans more than `e^{+-30}` of the spot and
/// its spacing cannot resolve the strike region within the work cap.
pub const PIDE_MAX_SD: f64 = 5.0;
/// Shortest expiry (years) the PIDE is run for, about 30
/// seconds: below it the one-step law is narrower than any grid worth
/// solving.
pub const PIDE_MIN_EXPIRY: f64 = 1e-6;

/// Why the PIDE is not run for `c` (`None`: it is): inputs where it was
/// seen to fail slowly (minutes at the work cap) or to give non-finite
/// Greeks, refused at once with the reason instead (`price`, `greeks` and
/// `risk` fail the row, `crosscheck` is inconclusive for the PIDE).
pub fn pide_reach(c: &Contract) -> Option<String> {
    let lt = c.jump_intensity();
    if lt > PIDE_MAX_JUMPS {
        return Some(format!(
            "lambda T = {lt:.3e} is beyond the PIDE's reach (at most {PIDE_MAX_JUMPS})"
        ));
    }
    if c.expiry > 0.0 && c.expiry < PIDE_MIN_EXPIRY {
        return Some(format!(
            "expiry {:.1e} is below the PIDE's reach ({PIDE_MIN_EXPIRY:e} years)",
            c.expiry
        ));
    }
    if c.vol == 0.0 && c.expiry > 0.0 {
        return Some(
            "zero diffusion vol is beyond the PIDE's reach (without diffusion its grid \
             convergence, and so its error estimate, is not reliable)"
                .to_string(),
        );
    }
    let j = &c.jumps;
    let sd = ((c.vol * c.vol + j.rate * (j.mean * j.mean + j.vol * j.vol)) * c.expiry).sqrt();
    if sd > PIDE_MAX_SD {
        return Some(format!(
            "the standard deviation of ln S_T, {sd:.3e}, is beyond the PIDE's reach (at most {PIDE_MAX_SD})"
        ));
    }
    // Each logarithm separately: S / K itself may overflow.
    let m = c.spot.ln() - c.strike.ln();
    if !m.is_finite() || m.abs() > PIDE_MAX_MONEYNESS_SD * sd.max(1.0) {
        return Some(format!(
            "ln(S/K) = {m:.3e} is beyond the PIDE's reach ({PIDE_MAX_MONEYNESS_SD} x max(1, sd of ln S_T))"
        ));
    }
    None
}

/// The parameters bumped for the Greeks the grid does not give, in
/// [`Greeks`] field order.
pub const BUMPED: [Param; 6] = [
    Param::Vol,
    Param::Rate,
    Param::DivYield,
    Param::JumpRate,
    Param::JumpMean,
    Param::JumpVol,
];

/// An American option's value, Greeks and error estimates.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct AmericanValue {
    /// Price and Greeks (vanna and volga are not computed: 0).
    pub greeks: Greeks,
    /// The PIDE's estimated absolute error of the price.
    pub error_estimate: f64,
    /// The European series price of the same contract.
    pub european: f64,
    /// `price - european`, never negative.
    pub early_exercise_premium: f64,
    /// Noise of each bumped Greek (`4 err / h`), in [`BUMPED`] order.
    pub fd_noise: [f64; 6],
}

/// Prices `c` with American exercise.
///
/// # Errors
/// A message when the series (for the premium) or the PIDE fails, or a
/// bumped contract leaves the model's domain.
pub fn price(c: &Contract, cfg: &PideConfig) -> Result<AmericanValue, String> {
    if let Some(why) = pide_reach(c) {
        return Err(format!("American exercise: {why}"));
    }
    let european = series::price(c)
        .map_err(|e| format!("series engine (European value): {e}"))?
        .greeks
        .price;
    let r = pide::price(c, Exercise::American, cfg).map_err(|e| format!("PIDE engine: {e}"))?;
    let engine = PideEngine {
        exercise: Exercise::American,
        config: *cfg,
    };
    let base = Priced {
        price: r.price,
        error: r.error_estimate,
    };
    let fd = finite_diff::first_derivatives(
        &engine,
        c,
        base,
        &FdConfig::for_engine(&engine as &dyn PricingEngine),
        &BUMPED,
    )?;
    let d = |i: usize| fd[i].0;
    let price = r.price.max(european);
    let greeks = Greeks {
        price,
        delta: r.delta,
        gamma: r.gamma,
        vega: d(0),
        theta: r.theta,
        rho: d(1),
        div_rho: d(2),
        d_jump_rate: d(3),
        d_jump_mean: d(4),
        d_jump_vol: d(5),
        vanna: 0.0,
        volga: 0.0,
    };
    let mut fd_noise = [0.0; 6];
    for (n, (_, e)) in fd_noise.iter_mut().zip(&fd) {
        *n = *e;
    }
    Ok(AmericanValue {
        greeks,
        error_estimate: r.error_estimate,
        european,
        early_exercise_premium: price - european,
        fd_noise,
    })
}
