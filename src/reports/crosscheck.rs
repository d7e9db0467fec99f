//! Model validation: one contract priced by the series, Fourier and Monte
//! Carlo engines, the differences measured against each engine's own error
//! estimate, and a verdict.
//!
//! # Verdict rules
//! - Fourier agrees when `|price_fourier - price_series| <= tol`, with
//!   `tol = max(fourier_rel_tol * price_series, ABS_FLOOR * spot)`. When the
//!   Fourier engine's own error estimate exceeds `tol`, the Fourier check is
//!   *inconclusive* (short expiries without diffusion, far wings) rather
//!   than failed. When the Fourier engine fails (its panel budget runs out,
//!   or the row's scale is outside double precision for it), the Fourier
//!   check is inconclusive with the engine's reason, and the series and
//!   Monte Carlo results are still reported. A lattice law (no diffusion,
//!   no jump vol), outside the Fourier engine's claim, makes the check
//!   inconclusive with `fourier not applicable: ...`.
//! - Monte Carlo agrees when `|z| <= z_max`,
//!   `z = (price_mc - price_series) / sqrt(mc_stderr^2 + rounding^2)` with
//!   `rounding` [`ROUNDING_ULPS`] units in the last place of the two prices.
//!   The engine simulates the out-of-the-money side (deep in-the-money rows
//!   by put-call parity) under the change of measure its pilot picked
//!   (`mc_method`, docs/engines.md). Its standard error is trusted when:
//!   - at least [`MIN_MC_HITS`] simulated paths paid, counted under the
//!     sampling law (a tilt makes them plentiful), and the effective sample
//!     size of the weighted payoffs `(sum w f)^2 / sum (w f)^2` is at least
//!     [`MIN_MC_ESS`] (no handful of heavy paths carries the estimate);
//!   - for an estimator whose weighted payoff is not bounded by construction
//!     (an untilted call side, a jump-count factor below 1, a shifted jump
//!     mean), the simulated discounted terminal price also meets its known
//!     mean within 5 standard errors (martingale test): otherwise the sample
//!     misses the paths that carry the forward (extremely heavy tails), and
//!     so it is when that z-score is not a finite number (every simulated
//!     discounted terminal price alike but off its mean, or the simulated
//!     prices overflow). A bounded estimator needs no such test: its sample
//!     variance is an honest error bar whatever the tails of `S_T`.
//!
//!   Otherwise the check is inconclusive with the reason. A degenerate
//!   standard error (every sampled term alike: a law with one possible
//!   outcome on the paying side, or a control that replicates every
//!   simulated payoff) agrees within the absolute floor and is inconclusive
//!   otherwise. Rows priced without simulation (`mc_method` `exact`: expiry
//!   0, or a lattice law whose support cannot reach the strike;
//!   `chernoff-bound`: a rigorous bound puts the out-of-the-money value
//!   below 1e-15 of spot, and `mc_stderr` is that bound) agree within
//!   `max(floor, 1e-10 x price, z_max x bound)` and disagree otherwise; they
//!   have no z-score.
//! - The PIDE (European exercise, [`CheckConfig::pide`]) agrees when
//!   `|price_pide - price_series| <= max(pide_error_est, tol) + ABS_FLOOR * spot`,
//!   `tol` the PIDE tolerance asked for (`--pide-tol` x spot): the gap is
//!   judged against what the PIDE was asked for and its own estimate. A row outside
//!   the PIDE's reach ([`pide_reach`](crate::greeks::american::pide_reach): huge `lambda T`, a huge spread of
//!   `ln S_T`, an expiry or a moneyness the grid cannot resolve) or one where the engine does not
//!   reach its tolerance within [`PIDE_MAX_WORK`] is inconclusive for the
//!   PIDE, with the reason; the other engines still decide.
//! - The row's verdict is `disagree: ...` if any check fails. Otherwise it
//!   is `agree` when every engine agreed, `agree by <engines> (no verdict
//!   from the others: <why>)` when Fourier or Monte Carlo agreed and another
//!   engine could not decide or does not apply (a lattice law for Fourier,
//!   a row beyond the PIDE's reach), and `inconclusive: <why>` when neither
//!   Fourier nor Monte Carlo agreed. The PIDE can make a row disagree but
//!   does not carry an `agree` alone (its tolerance, about 1e-5 of spot,
//!   says little about a price far below it).
//!
//! American rows ([`check_american`]) have no series, Fourier or Monte
//! Carlo value to compare with; they are checked by the PIDE's grid
//! convergence (its error estimate within the tolerance) and the bounds of
//! early exercise: American >= European series, >= intrinsic value, and
//! equal to the European value for a call with `q = 0` and `r >= 0`
//! (Merton 1973), each within the PIDE's estimate.

use crate::engines::fourier::{self, FourierResult};
use crate::engines::monte_carlo::{self, McConfig, McEstimate};
use crate::engines::pide::{self, Exercise, PideConfig};
use crate::engines::series;
use crate::greeks::american::pide_reach;
use crate::model::Contract;

/// Smallest number of paying Monte Carlo paths, counted under the sampling
/// law before weighting, for a verdict (common practice: a sample standard
/// error from fewer paying paths is itself too noisy to judge by).
pub const MIN_MC_HITS: u64 = 100;
/// Smallest effective sample size of the weighted payoffs for a verdict.
pub const MIN_MC_ESS: f64 = monte_carlo::MIN_ESS;
/// Units in the last place of the two prices counted in the z-score's scale.
pub const ROUNDING_ULPS: f64 = 4.0;
/// Absolute floor of every comparison, as a fraction of spot (rounding level).
pub const ABS_FLOOR: f64 = 1e-12;
/// Default PIDE tolerance of a cross-check, as a fraction of spot: ten
/// times the pricing default, so that the fourth engine costs about as
/// much as the other three on an ordinary book (the gap is still judged
/// against the engine's own estimate).
pub const CROSSCHECK_PIDE_TOL: f64 = 1e-5;
/// Work cap of the cross-check's PIDE (nodes x time steps of the finest
/// level): about a second per row; a row that needs more is inconclusive
/// for the PIDE rather than slow.
pub const PIDE_MAX_WORK: f64 = 1e7;
/// Cross-check settings.
#[derive(Debug, Clone)]
pub struct CheckConfig {
    /// Monte Carlo settings (work, seed, variance reduction).
    pub mc: McConfig,
    /// Largest accepted |z| of Monte Carlo against the series.
    pub z_max: f64,
    /// Largest accepted relative Fourier-minus-series gap.
    pub fourier_rel_tol: f64,
    /// The PIDE engine's settings (tolerance as a fraction of spot).
    pub pide: PideConfig,
}

impl Default for CheckConfig {
    fn default() -> Self {
        CheckConfig {
            mc: McConfig::default(),
            z_max: 4.0,
            fourier_rel_tol: 1e-8,
            pide: PideConfig {
                tol_spot: CROSSCHECK_PIDE_TOL,
            },
        }
    }
}

/// The PIDE's part of a cross-check.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PideCheck {
    /// The PIDE price.
    pub price: f64,
    /// Its error estimate.
    pub error_estimate: f64,
}

/// The PIDE price of `c` for a cross-check, or why there is none.
///
/// # Errors
/// The reason, for an inconclusive verdict.
pub fn pide_price(c: &Contract, exercise: Exercise, cfg: &PideConfig) -> Result<PideCheck, String> {
    if let Some(why) = pide_reach(c) {
        return Err(format!("pide not run: {why}"));
    }
    let r = pide::price_capped(c, exercise, cfg, PIDE_MAX_WORK)
        .map_err(|e| format!("pide engine: {e}"))?;
    if !(r.price.is_finite() && r.error_estimate.is_finite()) {
        return Err("pide engine: the price is not a finite number".into());
    }
    Ok(PideCheck {
        price: r.price,
        error_estimate: r.error_estimate,
    })
}

/// Outcome of one check.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Outcome {
    /// Within tolerance.
    Agree,
    /// The engine could not resolve the price well enough to decide.
    Inconclusive,
    /// Outside tolerance.
    Disagree,
}

/// Everything the cross-check found for one contract.
#[derive(Debug, Clone, PartialEq)]
pub struct RowCheck {
    /// Series price.
    pub price_series: f64,
    /// Fourier result (`None`: the Fourier engine failed; the verdict says why).
    pub fourier: Option<FourierResult>,
    /// Monte Carlo result.
    pub mc: McEstimate,
    /// `(price_mc - price_series) / mc_stderr`, when defined.
    pub mc_z: Option<f64>,
    /// `price_fourier - price_series` (`None` without a Fourier result).
    pub fourier_gap: Option<f64>,
    /// The European PIDE price and estimate (`None`: not run or failed;
    /// the verdict says why).
    pub pide: Option<PideCheck>,
    /// Worst of the two outcomes.
    pub outcome: Outcome,
    /// `agree`, `inconclusive: ...` or `disagree: ...`.
    pub verdict: String,
}

/// Why a row could not be cross-checked.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum CheckError {
    /// The series engine failed (overflow for inputs outside the supported range).
    #[error(transparent)]
    Series(#[from] series::SeriesError),
}

/// Prices a contract with the three engines and compares them.
///
/// # Errors
/// [`CheckError`] when the series engine fails (a Fourier failure makes
/// the verdict inconclusive instead).
pub fn check(c: &Contract, key: u64, cfg: &CheckConfig) -> Result<RowCheck, CheckError> {
    let s = series::price(c)?.greeks.price;
    let fourier = fourier::price(c);
    let m = monte_carlo::price(c, key, &cfg.mc);
    let floor = ABS_FLOOR * c.spot;
    let tol = (cfg.fourier_rel_tol * s).max(floor);
    let mut fails = Vec::new();
    let mut unsure = Vec::new();
    // The engines whose agreement can carry a row: Fourier and Monte Carlo.
    // The PIDE (to a tolerance of about 1e-5 of spot) can make a row
    // disagree but does not carry one alone: its tolerance says little about
    // a price far below it.
    let mut agreed: Vec<&str> = Vec::new();
    let gap = match &fourier {
        Err(e @ fourier::FourierError::Lattice) => {
            unsure.push(format!("fourier not applicable: {e}"));
            None
        }
        Err(e) => {
            unsure.push(format!("fourier engine failed: {e}"));
            None
        }
        Ok(f) => {
            let gap = f.price - s;
            if f.error_estimate > tol {
                unsure.push(format!(
                    "fourier error estimate {:.1e} above tolerance {tol:.1e}",
                    f.error_estimate
                ));
            } else if gap.abs() > tol {
                fails.push(format!("fourier gap {gap:.3e} beyond {tol:.1e}"));
            } else {
                agreed.push("fourier");
            }
            Some(gap)
        }
    };
    let pide = match pide_price(c, Exercise::European, &cfg.pide) {
        Err(why) => {
            unsure.push(why);
            None
        }
        Ok(p) => {
            // The PIDE was asked for `tol_spot x spot`; its own estimate is
            // usually far smaller. A gap within either is the PIDE meeting
            // what it was asked for (an estimate a little below the true
            // error was seen on a far out-of-the-money put: 4.0e-6 for a
            // gap of 4.3e-6, with a tolerance of 1e-3).
            let gap = p.price - s;
            let allowed = p.error_estimate.max(cfg.pide.tol_spot * c.spot) + floor;
            if gap.abs() > allowed {
                fails.push(format!(
                    "pide gap {gap:.3e} beyond its error estimate {:.1e} and its tolerance {:.1e}",
                    p.error_estimate,
                    cfg.pide.tol_spot * c.spot
                ));
            }
            Some(p)
        }
    };
    let mv = mc_verdict(c, s, &m, cfg.z_max);
    let mc_z = mv.z;
    match mv.outcome {
        Outcome::Disagree => fails.extend(mv.reason),
        Outcome::Inconclusive => unsure.extend(mv.reason),
        Outcome::Agree => agreed.push("mc"),
    }
    let (outcome, verdict) = if !fails.is_empty() {
        (Outcome::Disagree, format!("disagree: {}", fails.join("; ")))
    } else if agreed.is_empty() {
        (
            Outcome::Inconclusive,
            format!("inconclusive: {}", unsure.join("; ")),
        )
    } else if unsure.is_empty() {
        (Outcome::Agree, "agree".to_string())
    } else {
        // Decided by the engines that agreed; the others say why they could not.
        (
            Outcome::Agree,
            format!(
                "agree by {} (no verdict from the others: {})",
                agreed.join(" and "),
                unsure.join("; ")
            ),
        )
    };
    Ok(RowCheck {
        price_series: s,
        fourier: fourier.ok(),
        mc: m,
        mc_z,
        fourier_gap: gap,
        pide,
        outcome,
        verdict,
    })
}

/// The Monte Carlo side of a row's verdict.
#[derive(Debug, Clone, PartialEq)]
pub struct McVerdict {
    /// Agree, inconclusive or disagree.
    pub outcome: Outcome,
    /// Why, when not `Agree`.
    pub reason: Option<String>,
    /// The z-score, when defined (simulated rows only).
    pub z: Option<f64>,
}

/// Judges a Monte Carlo estimate `m` of contract `c` against the series
/// price `s` by the rules in the module doc.
pub fn mc_verdict(c: &Contract, s: f64, m: &McEstimate, z_max: f64) -> McVerdict {
    let floor = ABS_FLOOR * c.spot;
    let mut fails: Option<String> = None;
    let mut unsure: Option<String> = None;
    let diff = m.price - s;
    // A z-score that overflows (a standard error far below the difference)
    // is not reported as a number.
    // The z-score's scale is the standard error and the rounding of the two
    // prices (a few units in their last place): a tiny out-of-the-money
    // estimate plus a large parity term is not known better than that.
    let rounding = ROUNDING_ULPS * f64::EPSILON * (s.abs() + m.price.abs());
    let mc_z = if m.std_error > 0.0 && m.paths > 0 {
        Some(diff / m.std_error.hypot(rounding)).filter(|z| z.is_finite())
    } else {
        None
    };
    // A relative standard error below 1e-9 with a million paths would need a
    // variance reduction of 1e18: only a control that replicates every
    // simulated payoff does that.
    // (Only an exact zero, or a control that took out all the variance:
    // a tilted estimate of a tiny out-of-the-money value plus a large
    // forward intrinsic has a genuinely tiny standard error.)
    let degenerate_se = m.std_error == 0.0 || (m.beta != 0.0 && m.std_error <= 1e-9 * s.max(floor));
    let simulated = c.expiry > 0.0 && m.paths > 0;
    let needs_forward = simulated && !m.bounded;
    if needs_forward && !m.martingale_z.is_finite() {
        // The z-score itself is undefined: say why instead of printing it.
        unsure = Some(
            if m.martingale_z.is_nan() {
                "mc martingale test undefined (the simulated terminal prices overflow)"
            } else {
                "mc sample misses the paths that carry the forward (martingale test: \
                 every simulated terminal price alike, off its known mean)"
            }
            .to_string(),
        );
    } else if needs_forward && m.martingale_z.abs() > 5.0 {
        unsure = Some(format!(
            "mc sample misses the paths that carry the forward (martingale test z = {:.1})",
            m.martingale_z
        ));
    } else if simulated && m.hits < MIN_MC_HITS {
        unsure = Some(format!(
            "mc saw {} paying paths under its sampling law ({})",
            m.hits,
            m.method.as_str()
        ));
    } else if simulated && m.misses < MIN_MC_HITS {
        unsure = Some(format!(
            "mc saw {} paths on the non-paying side of the strike ({}): the other side's \
             rare paths are not represented",
            m.misses,
            m.method.as_str()
        ));
    } else if simulated && m.ess < MIN_MC_ESS {
        unsure = Some(format!(
            "mc effective sample size {:.0} of the weighted payoffs ({})",
            m.ess,
            m.method.as_str()
        ));
    } else if !simulated {
        // Exact (expiry 0, or a side that cannot pay) or a Chernoff bound
        // (std_error is the bound): within the floor or the bound.
        let tol = floor.max(1e-10 * s).max(z_max * m.std_error);
        if diff.abs() > tol {
            fails = Some(format!(
                "mc {} value differs by {diff:.3e} (tolerance {tol:.1e})",
                m.method.as_str()
            ));
        }
    } else if degenerate_se {
        // The control replicated every simulated payoff: the paths that
        // would differ were never drawn, so the error bar says nothing.
        if diff.abs() > floor.max(1e-10 * s) {
            unsure = Some(format!(
                "mc standard error {:.1e} is degenerate (every sampled payoff alike, or \
                 replicated by the control)",
                m.std_error
            ));
        }
    } else if let Some(z) = mc_z {
        if z.abs() > z_max && diff.abs() > floor {
            fails = Some(format!("mc z = {z:.2} beyond {}", z_max));
        }
    } else if m.std_error > 0.0 && diff.abs() > floor {
        fails = Some(format!(
            "mc differs by {diff:.3e} with a standard error of {:.1e} (z beyond double range)",
            m.std_error
        ));
    }
    let (outcome, reason) = match (fails, unsure) {
        (Some(f), _) => (Outcome::Disagree, Some(f)),
        (None, Some(u)) => (Outcome::Inconclusive, Some(u)),
        (None, None) => (Outcome::Agree, None),
    };
    McVerdict {
        outcome,
        reason,
        z: mc_z,
    }
}

/// What the cross-check found for an American row.
#[derive(Debug, Clone, PartialEq)]
pub struct AmericanCheck {
    /// The European series price (the lower bound).
    pub price_series: f64,
    /// The American PIDE price and estimate (`None`: not run or failed).
    pub pide: Option<PideCheck>,
    /// Outcome.
    pub outcome: Outcome,
    /// `agree: ...`, `inconclusive: ...` or `disagree: ...`, naming the checks.
    pub verdict: String,
}

/// Checks an American row by the PIDE's grid convergence and the bounds
/// of early exercise (module documentation).
///
/// # Errors
/// [`CheckError`] when the series engine fails.
pub fn check_american(c: &Contract, cfg: &CheckConfig) -> Result<AmericanCheck, CheckError> {
    let s = series::price(c)?.greeks.price;
    let tol = cfg.pide.tol_spot * c.spot;
    let (pide, outcome, verdict) = match pide_price(c, Exercise::American, &cfg.pide) {
        Err(why) => (
            None,
            Outcome::Inconclusive,
            format!("inconclusive: American, {why}"),
        ),
        Ok(p) => {
            let e = p.error_estimate + ABS_FLOOR * c.spot;
            let intrinsic = c.kind.payoff(c.spot, c.strike);
            let mut fails = Vec::new();
            if p.price < s - e {
                fails.push(format!(
                    "American {:.6e} below the European series {s:.6e}",
                    p.price
                ));
            }
            if p.price < intrinsic - e {
                fails.push(format!(
                    "American {:.6e} below the intrinsic value {intrinsic:.6e}",
                    p.price
                ));
            }
            let worthless = pide::early_exercise_is_worthless(c);
            if worthless && (p.price - s).abs() > e {
                fails.push(format!(
                    "American call {:.6e} differs from the European {s:.6e} with q = 0, r >= 0",
                    p.price
                ));
            }
            let checks = format!(
                "American, by PIDE grid convergence (estimate {:.1e} <= tolerance {tol:.1e}) and \
                 bounds (>= European series, >= intrinsic{})",
                p.error_estimate,
                if worthless {
                    ", = European call as q = 0 and r >= 0"
                } else {
                    ""
                }
            );
            if fails.is_empty() {
                (Some(p), Outcome::Agree, format!("agree: {checks}"))
            } else {
                (
                    Some(p),
                    Outcome::Disagree,
                    format!("disagree: {checks}: {}", fails.join("; ")),
                )
            }
        }
    };
    Ok(AmericanCheck {
        price_series: s,
        pide,
        outcome,
        verdict,
    })
}
