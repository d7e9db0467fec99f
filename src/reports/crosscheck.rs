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
//!   Monte Carlo results are still reported.
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
//! - The row's verdict is `disagree: ...` if any check fails, `inconclusive: ...`
//!   if none fails but one could not decide, otherwise `agree`.

use crate::engines::fourier::{self, FourierResult};
use crate::engines::monte_carlo::{self, McConfig, McEstimate};
use crate::engines::series;
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

/// Cross-check settings.
#[derive(Debug, Clone)]
pub struct CheckConfig {
    /// Monte Carlo settings (work, seed, variance reduction).
    pub mc: McConfig,
    /// Largest accepted |z| of Monte Carlo against the series.
    pub z_max: f64,
    /// Largest accepted relative Fourier-minus-series gap.
    pub fourier_rel_tol: f64,
}

impl Default for CheckConfig {
    fn default() -> Self {
        CheckConfig {
            mc: McConfig::default(),
            z_max: 4.0,
            fourier_rel_tol: 1e-8,
        }
    }
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
    let gap = match &fourier {
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
            }
            Some(gap)
        }
    };
    let mv = mc_verdict(c, s, &m, cfg.z_max);
    let mc_z = mv.z;
    match mv.outcome {
        Outcome::Disagree => fails.extend(mv.reason),
        Outcome::Inconclusive => unsure.extend(mv.reason),
        Outcome::Agree => {}
    }
    let (outcome, verdict) = if !fails.is_empty() {
        (Outcome::Disagree, format!("disagree: {}", fails.join("; ")))
    } else if !unsure.is_empty() {
        (
            Outcome::Inconclusive,
            format!("inconclusive: {}", unsure.join("; ")),
        )
    } else {
        (Outcome::Agree, "agree".to_string())
    };
    Ok(RowCheck {
        price_series: s,
        fourier: fourier.ok(),
        mc: m,
        mc_z,
        fourier_gap: gap,
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

/// Book-level summary of a cross-check, built from per-row records sorted
/// by row so that it does not depend on the processing order.
#[derive(Debug, Clone, Default)]
pub struct CheckSummary {
    /// Rows checked.
    pub rows: u64,
    /// Rows whose verdict is `disagree`.
    pub disagree: u64,
    /// Rows whose verdict is `inconclusive`.
    pub inconclusive: u64,
    /// Mean of the defined z-scores.
    pub z_mean: f64,
    /// Sample standard deviation of the defined z-scores.
    pub z_sd: f64,
    /// Number of defined z-scores.
    pub z_count: u64,
    /// Share of defined z-scores with |z| <= 1.96 (about 0.95 if error bars are honest).
    pub z_within_196: f64,
    /// Largest |z|: (row, id, z).
    pub worst_z: Vec<(u64, String, f64)>,
    /// Largest relative Fourier gaps: (row, id, gap / price).
    pub worst_fourier: Vec<(u64, String, f64)>,
    /// Total Monte Carlo paths.
    pub mc_paths: u64,
}

/// One row's contribution to the summary.
#[derive(Debug, Clone)]
pub struct SummaryRecord {
    /// Row number.
    pub row: u64,
    /// Row id.
    pub id: String,
    /// Outcome.
    pub outcome: Outcome,
    /// z-score, if defined.
    pub z: Option<f64>,
    /// Fourier gap relative to the series price.
    pub fourier_rel_gap: f64,
    /// Monte Carlo paths.
    pub paths: u64,
}

impl CheckSummary {
    /// Builds the summary; `records` may come in any order.
    pub fn from_records(mut records: Vec<SummaryRecord>, top: usize) -> CheckSummary {
        records.sort_by_key(|r| r.row);
        let mut s = CheckSummary {
            rows: records.len() as u64,
            ..Default::default()
        };
        let zs: Vec<f64> = records.iter().filter_map(|r| r.z).collect();
        s.z_count = zs.len() as u64;
        if !zs.is_empty() {
            let n = zs.len() as f64;
            s.z_mean = zs.iter().sum::<f64>() / n;
            s.z_sd = if zs.len() > 1 {
                (zs.iter().map(|z| (z - s.z_mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt()
            } else {
                0.0
            };
            s.z_within_196 = zs.iter().filter(|z| z.abs() <= 1.96).count() as f64 / n;
        }
        for r in &records {
            match r.outcome {
                Outcome::Disagree => s.disagree += 1,
                Outcome::Inconclusive => s.inconclusive += 1,
                Outcome::Agree => {}
            }
            s.mc_paths += r.paths;
        }
        let mut by_z: Vec<&SummaryRecord> = records.iter().filter(|r| r.z.is_some()).collect();
        by_z.sort_by(|a, b| {
            b.z.unwrap()
                .abs()
                .total_cmp(&a.z.unwrap().abs())
                .then(a.row.cmp(&b.row))
        });
        s.worst_z = by_z
            .iter()
            .take(top)
            .map(|r| (r.row, r.id.clone(), r.z.unwrap()))
            .collect();
        let mut by_f: Vec<&SummaryRecord> = records.iter().collect();
        by_f.sort_by(|a, b| {
            b.fourier_rel_gap
                .abs()
                .total_cmp(&a.fourier_rel_gap.abs())
                .then(a.row.cmp(&b.row))
        });
        s.worst_fourier = by_f
            .iter()
            .take(top)
            .map(|r| (r.row, r.id.clone(), r.fourier_rel_gap))
            .collect();
        s
    }
}
