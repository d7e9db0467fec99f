//! Fitting the Merton parameters `vol, jump_rate, jump_mean, jump_vol` to a
//! quote sheet, per underlying (or per underlying and expiry), with the
//! diagnostics a validator needs.
//!
//! # Objective
//! Weighted least squares of implied-vol residuals in vol points,
//! `r_i = w_i * 100 * (sigma_model_i - sigma_market_i)`, where
//! `sigma_model_i` is the Black-Scholes implied vol of the series price and
//! `w_i` the quote's [`Quote::fit_weight`] (1 / half-spread in vol points for
//! bid/ask quotes). With [`Objective::Price`] the residual is the price
//! error divided by the Black-Scholes vega at the market vol (vega-weighted
//! price residuals, in approximate vol points). Optional Tikhonov rows
//! `sqrt(W) (theta_j - prior_j)` pull toward a prior (Cont & Tankov 2004).
//!
//! # Jacobian
//! Exact: the series engine gives `dV/dtheta` (vega and the three jump
//! sensitivities) and `d sigma_model / d theta = (dV/dtheta) / vega_BS`
//! at the model implied vol.
//!
//! # Bounds
//! Smooth transformations, so the solver works unconstrained:
//! `vol = 5 s(u)`, `jump_rate = 100 s(u)`, `jump_vol = 5 s(u)` with the
//! logistic `s`, and `jump_mean = 5 tanh(u)` (inside the model's documented
//! domain `|jump_mean| <= 20`, see [`crate::model`]). A parameter within
//! [`AT_BOUND_REL`] of an end of its range is flagged `at bound`.
//!
//! # Starts
//! [`start_points`] gives six deterministic starts scaled by the
//! at-the-money implied vol; the best objective wins, and the number of
//! starts within 1% of it is reported, with a warning when one of them sits
//! at parameters far from the best (a second, distinct minimum).

use crate::black_scholes;
use crate::engines::series;
use crate::market::diagnostics::{covariance, Covariance};
use crate::market::implied_vol::implied_vol;
use crate::market::lm::{self, LmOptions, Problem, StopReason};
use crate::market::quotes::{Quote, QuoteSheet};
use crate::model::{Contract, JumpParams, Short};
use rayon::prelude::*;
use std::collections::BTreeMap;

/// Parameter names, in the order of every parameter array here.
pub const PARAM_NAMES: [&str; 4] = ["vol", "jump_rate", "jump_mean", "jump_vol"];
/// Upper ends of the searched ranges (lower ends 0, or `-5` for jump_mean).
pub const PARAM_MAX: [f64; 4] = [5.0, 100.0, 5.0, 5.0];
/// A parameter this close (relative to its range) to an end is `at bound`.
pub const AT_BOUND_REL: f64 = 1e-6;
/// Starts whose objective is within this fraction of the best are "near".
pub const NEAR_BEST_REL: f64 = 0.01;
/// ... with this absolute floor per residual (for zero-residual fits).
pub const NEAR_BEST_ABS: f64 = 1e-16;
/// A near-best start is a distinct minimum when a parameter differs from
/// the best by more than this, relative to `|best| + 0.01`.
pub const DISTINCT_REL: f64 = 0.1;
/// Correlation beyond which both parameters are weakly identified.
pub const WEAK_CORRELATION: f64 = 0.98;

/// What is minimised.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Objective {
    /// Implied-vol residuals in vol points (default).
    ImpliedVol,
    /// Price residuals divided by the Black-Scholes vega at the market vol.
    Price,
}

/// A validated calibration request.
#[derive(Debug, Clone, PartialEq)]
pub struct CalibrationSpec {
    /// One fit per underlying and expiry instead of per underlying.
    pub per_expiry: bool,
    /// Parameters held at a value.
    pub fixed: [Option<f64>; 4],
    /// The objective.
    pub objective: Objective,
    /// Prior values for Tikhonov regularisation.
    pub prior: [Option<f64>; 4],
    /// Regularisation weight `W` (0: none).
    pub regularize: f64,
    /// Fit quotes that violate the strike checks too.
    pub keep_arbitrage: bool,
}

impl Default for CalibrationSpec {
    fn default() -> Self {
        CalibrationSpec {
            per_expiry: false,
            fixed: [None; 4],
            objective: Objective::ImpliedVol,
            prior: [None; 4],
            regularize: 0.0,
            keep_arbitrage: false,
        }
    }
}

/// Checks a parameter value against the searched range.
///
/// # Errors
/// A message naming the parameter and its range.
pub fn check_param(j: usize, v: f64) -> Result<(), String> {
    let (lo, hi) = if j == 2 {
        (-PARAM_MAX[2], PARAM_MAX[2])
    } else {
        (0.0, PARAM_MAX[j])
    };
    if v.is_finite() && v > lo && v < hi || ((j == 1 || j == 3) && v == 0.0) {
        Ok(())
    } else {
        Err(format!(
            "{} = {} is outside the calibrated range ({} to {}{})",
            PARAM_NAMES[j],
            Short(v),
            lo,
            hi,
            if j == 1 {
                ", 0 allowed"
            } else {
                ", ends excluded"
            }
        ))
    }
}

fn logistic(u: f64) -> f64 {
    1.0 / (1.0 + (-u).exp())
}

/// Natural parameter and its derivative from the unconstrained `u`.
fn to_param(j: usize, u: f64) -> (f64, f64) {
    let m = PARAM_MAX[j];
    if j == 2 {
        let t = u.tanh();
        (m * t, m * (1.0 - t * t))
    } else {
        let s = logistic(u);
        (m * s, m * s * (1.0 - s))
    }
}

fn from_param(j: usize, p: f64) -> f64 {
    let m = PARAM_MAX[j];
    if j == 2 {
        (p / m).clamp(-1.0 + 1e-15, 1.0 - 1e-15).atanh()
    } else {
        let s = (p / m).clamp(1e-300, 1.0 - 1e-15);
        (s / (1.0 - s)).ln()
    }
}

fn at_bound(j: usize, p: f64) -> bool {
    let m = PARAM_MAX[j];
    if j == 2 {
        p.abs() >= m * (1.0 - AT_BOUND_REL)
    } else {
        p <= m * AT_BOUND_REL || p >= m * (1.0 - AT_BOUND_REL)
    }
}

/// The model price of a quote and `dV/dtheta` for the four parameters.
///
/// # Errors
/// The series engine's or the model's message.
pub fn model_price(q: &Quote, theta: &[f64; 4]) -> Result<(f64, [f64; 4]), String> {
    let c = Contract::new(
        q.kind,
        q.spot,
        q.strike,
        q.expiry,
        q.rate,
        q.div_yield,
        theta[0],
        JumpParams {
            rate: theta[1],
            mean: theta[2],
            vol: theta[3],
        },
    )
    .map_err(|e| e.to_string())?;
    let g = series::price(&c).map_err(|e| e.to_string())?.greeks;
    Ok((
        g.price,
        [g.vega, g.d_jump_rate, g.d_jump_mean, g.d_jump_vol],
    ))
}

/// The model's implied vol for a quote and its Black-Scholes vega there.
///
/// # Errors
/// When the model price has no implied vol (its time value is below what
/// double precision resolves).
pub fn model_vol(q: &Quote, price: f64) -> Result<(f64, f64), String> {
    let v = implied_vol(
        q.kind,
        price,
        q.spot,
        q.strike,
        q.expiry,
        q.rate,
        q.div_yield,
    )
    .map_err(|e| format!("model price has no implied vol: {e}"))?;
    let vega =
        black_scholes::greeks(q.kind, q.spot, q.strike, q.expiry, q.rate, q.div_yield, v).vega;
    if vega > 0.0 && vega.is_finite() {
        Ok((v, vega))
    } else {
        Err("model implied vol has no vega".into())
    }
}

/// The least-squares problem of one group of quotes.
struct Fitting<'a> {
    quotes: Vec<&'a Quote>,
    /// Black-Scholes vega at the market vol (price objective).
    market_vega: Vec<f64>,
    spec: &'a CalibrationSpec,
    free: Vec<usize>,
    base: [f64; 4],
}

impl Fitting<'_> {
    fn theta(&self, u: &[f64]) -> ([f64; 4], [f64; 4]) {
        let mut theta = self.base;
        let mut dtheta = [0.0; 4];
        for (k, &j) in self.free.iter().enumerate() {
            let (p, d) = to_param(j, u[k]);
            theta[j] = p;
            dtheta[j] = d;
        }
        (theta, dtheta)
    }

    fn prior_rows(&self) -> Vec<usize> {
        if self.spec.regularize > 0.0 {
            self.free
                .iter()
                .copied()
                .filter(|&j| self.spec.prior[j].is_some())
                .collect()
        } else {
            Vec::new()
        }
    }

    /// Residuals and the Jacobian in natural parameters (free columns only).
    fn eval_natural(&self, theta: &[f64; 4], r: &mut Vec<f64>, jac: &mut Vec<f64>) -> bool {
        let n = self.free.len();
        r.clear();
        jac.clear();
        for (i, q) in self.quotes.iter().enumerate() {
            let Ok((v, dv)) = model_price(q, theta) else {
                return false;
            };
            let w = 100.0 * q.fit_weight();
            let (res, denom) = match self.spec.objective {
                Objective::ImpliedVol => {
                    let Ok((sigma, vega)) = model_vol(q, v) else {
                        return false;
                    };
                    (sigma - q.market_vol.unwrap_or(f64::NAN), vega)
                }
                Objective::Price => {
                    let vega = self.market_vega[i];
                    ((v - q.market_price) / vega, vega)
                }
            };
            r.push(w * res);
            for &j in &self.free {
                jac.push(w * dv[j] / denom);
            }
        }
        let sw = self.spec.regularize.sqrt();
        for j in self.prior_rows() {
            r.push(sw * (theta[j] - self.spec.prior[j].unwrap_or(0.0)));
            for &k in &self.free {
                jac.push(if k == j { sw } else { 0.0 });
            }
        }
        debug_assert_eq!(jac.len(), r.len() * n);
        r.iter().chain(jac.iter()).all(|x| x.is_finite())
    }
}

impl Problem for Fitting<'_> {
    fn eval(&self, u: &[f64], r: &mut Vec<f64>, jac: &mut Vec<f64>) -> bool {
        let (theta, dtheta) = self.theta(u);
        if !self.eval_natural(&theta, r, jac) {
            return false;
        }
        let n = self.free.len();
        for row in jac.chunks_mut(n) {
            for (k, &j) in self.free.iter().enumerate() {
                row[k] *= dtheta[j];
            }
        }
        true
    }
}

/// The six deterministic starting points, scaled by the at-the-money vol.
pub fn start_points(atm_vol: f64) -> Vec<[f64; 4]> {
    let s = atm_vol.clamp(0.01, 2.0);
    vec![
        [0.9 * s, 0.1, -0.1, 0.1],
        [0.8 * s, 0.5, -0.2, 0.15],
        [0.7 * s, 0.1, -0.8, 0.4],
        [0.95 * s, 1.0, 0.05, 0.1],
        [0.9 * s, 0.2, 0.3, 0.2],
        [0.6 * s, 3.0, -0.05, 0.05],
    ]
}

/// One fitted group.
#[derive(Debug, Clone, PartialEq)]
pub struct Fit {
    /// The underlying.
    pub underlying: String,
    /// The expiry with `per_expiry`.
    pub expiry: Option<f64>,
    /// Indices into the sheet's rows of the quotes fitted.
    pub rows: Vec<usize>,
    /// The fitted (or fixed) parameters; `None` when the fit failed.
    pub params: Option<[f64; 4]>,
    /// Which parameters were held fixed.
    pub fixed: [bool; 4],
    /// Quotes used.
    pub quotes_used: usize,
    /// Root mean square of `model_vol - market_vol` in vol points.
    pub rmse_vol_pts: f64,
    /// Largest absolute residual in vol points.
    pub max_abs_residual_vol_pts: f64,
    /// Standard errors (`None` for fixed or unidentified parameters).
    pub se: [Option<f64>; 4],
    /// Parameter correlations.
    pub corr: [[Option<f64>; 4]; 4],
    /// Condition number of the unit-diagonal `J^T W J`.
    pub condition_number: Option<f64>,
    /// Starts tried.
    pub starts: usize,
    /// Starts within 1% of the best objective.
    pub starts_near_best: usize,
    /// Iterations of the best start.
    pub iterations: usize,
    /// Stopping reason of the best start.
    pub stop: Option<StopReason>,
    /// Weighted sum of squared residuals (the objective) at the optimum.
    pub objective: f64,
    /// Warnings: `weakly identified: P`, `at bound: P`, `did not converge`,
    /// `distinct minimum: ...`.
    pub flags: Vec<String>,
    /// `Err(why)` when no parameters could be fitted.
    pub status: Result<(), String>,
    /// Per fitted quote (same order as `rows`): model vol and model price.
    pub model: Vec<(f64, f64)>,
}

impl Fit {
    fn failed(underlying: String, expiry: Option<f64>, rows: Vec<usize>, why: String) -> Fit {
        Fit {
            underlying,
            expiry,
            quotes_used: rows.len(),
            rows,
            params: None,
            fixed: [false; 4],
            rmse_vol_pts: f64::NAN,
            max_abs_residual_vol_pts: f64::NAN,
            se: [None; 4],
            corr: [[None; 4]; 4],
            condition_number: None,
            starts: 0,
            starts_near_best: 0,
            iterations: 0,
            stop: None,
            objective: f64::NAN,
            flags: Vec::new(),
            status: Err(why),
            model: Vec::new(),
        }
    }
}

/// Whether a row's quote takes part in the fit.
pub fn usable(q: &Quote, keep_arbitrage: bool) -> bool {
    !q.outside_bounds() && (q.arbitrage.is_none() || keep_arbitrage)
}

/// Calibrates every group of the sheet (in parallel; the result is in the
/// order of underlying, then expiry, whatever the thread count).
pub fn calibrate(sheet: &QuoteSheet, spec: &CalibrationSpec) -> Vec<Fit> {
    let mut groups: BTreeMap<(String, Option<u64>), Vec<usize>> = BTreeMap::new();
    for (i, row) in sheet.rows.iter().enumerate() {
        if let Ok(q) = &row.quote {
            let expiry = spec.per_expiry.then(|| q.expiry.to_bits());
            let e = groups.entry((q.underlying.clone(), expiry)).or_default();
            if usable(q, spec.keep_arbitrage) {
                e.push(i);
            }
        }
    }
    let mut groups: Vec<_> = groups.into_iter().collect();
    // Positive doubles order like their bits.
    groups.sort_by(|a, b| a.0.cmp(&b.0));
    groups
        .into_par_iter()
        .map(|((u, e), rows)| {
            let quotes: Vec<&Quote> = rows
                .iter()
                .map(|&i| sheet.rows[i].quote.as_ref().expect("usable"))
                .collect();
            fit_group(u, e.map(f64::from_bits), rows, &quotes, spec)
        })
        .collect()
}

/// The at-the-money vol: the market vol of the quote nearest the forward
/// in standardised log-moneyness.
fn atm_vol(quotes: &[&Quote]) -> f64 {
    quotes
        .iter()
        .filter_map(|q| {
            let f = q.spot * ((q.rate - q.div_yield) * q.expiry).exp();
            let x = (q.strike / f).ln().abs() / q.expiry.sqrt();
            q.market_vol.map(|v| (x, v))
        })
        .min_by(|a, b| a.0.total_cmp(&b.0))
        .map_or(0.2, |(_, v)| v)
}

/// Fits one group of usable quotes.
pub fn fit_group(
    underlying: String,
    expiry: Option<f64>,
    rows: Vec<usize>,
    quotes: &[&Quote],
    spec: &CalibrationSpec,
) -> Fit {
    let free: Vec<usize> = (0..4).filter(|&j| spec.fixed[j].is_none()).collect();
    if quotes.is_empty() {
        return Fit::failed(
            underlying,
            expiry,
            rows,
            "no usable quotes (every row failed or was excluded)".into(),
        );
    }
    if quotes.len() < free.len() {
        let n = quotes.len();
        return Fit::failed(
            underlying,
            expiry,
            rows,
            format!(
                "{n} usable quote{} for {} free parameters",
                if n == 1 { "" } else { "s" },
                free.len()
            ),
        );
    }
    let market_vega: Vec<f64> = quotes
        .iter()
        .map(|q| {
            black_scholes::greeks(
                q.kind,
                q.spot,
                q.strike,
                q.expiry,
                q.rate,
                q.div_yield,
                q.market_vol.unwrap_or(0.2),
            )
            .vega
        })
        .collect();
    let base = spec.fixed.map(|v| v.unwrap_or(0.0));
    let problem = Fitting {
        quotes: quotes.to_vec(),
        market_vega,
        spec,
        free: free.clone(),
        base,
    };
    let opts = LmOptions::default();
    let starts = start_points(atm_vol(quotes));
    let results: Vec<lm::LmResult> = starts
        .iter()
        .map(|s| {
            let u0: Vec<f64> = free.iter().map(|&j| from_param(j, s[j])).collect();
            lm::minimise(&problem, &u0, &opts)
        })
        .collect();
    let best = results
        .iter()
        .enumerate()
        .filter(|(_, r)| r.objective.is_finite())
        .min_by(|a, b| a.1.objective.total_cmp(&b.1.objective).then(a.0.cmp(&b.0)))
        .map(|(i, _)| i);
    let Some(best) = best else {
        return Fit::failed(
            underlying,
            expiry,
            rows,
            "the model could not be evaluated from any starting point".into(),
        );
    };
    let b = &results[best];
    let (theta, _) = problem.theta(&b.x);
    let near_limit = b.objective * (1.0 + NEAR_BEST_REL) + NEAR_BEST_ABS * quotes.len() as f64;
    let near: Vec<[f64; 4]> = results
        .iter()
        .filter(|r| r.objective <= near_limit)
        .map(|r| problem.theta(&r.x).0)
        .collect();
    let mut flags = Vec::new();
    if !b.stop.converged() {
        flags.push("did not converge".to_string());
    }
    for &j in &free {
        if at_bound(j, theta[j]) {
            flags.push(format!("at bound: {}", PARAM_NAMES[j]));
        }
    }
    // Diagnostics in natural parameters.
    let (mut r, mut jac) = (Vec::new(), Vec::new());
    if !problem.eval_natural(&theta, &mut r, &mut jac) {
        return Fit::failed(
            underlying,
            expiry,
            rows,
            "the model could not be evaluated at the fitted parameters".into(),
        );
    }
    let m = quotes.len();
    let ssr: f64 = r[..m].iter().map(|x| x * x).sum();
    let cov: Covariance = covariance(&jac, r.len(), free.len(), ssr, m);
    let mut se = [None; 4];
    let mut corr = [[None; 4]; 4];
    for (a, &ja) in free.iter().enumerate() {
        se[ja] = cov.se[a];
        for (bb, &jb) in free.iter().enumerate() {
            corr[ja][jb] = cov.corr[a][bb];
        }
    }
    for (a, &j) in free.iter().enumerate() {
        let weak_se = match se[j] {
            Some(s) => s > theta[j].abs(),
            None => true,
        };
        let weak_corr = free
            .iter()
            .enumerate()
            .any(|(bb, _)| bb != a && cov.corr[a][bb].is_some_and(|c| c.abs() > WEAK_CORRELATION));
        if weak_se || weak_corr {
            flags.push(format!("weakly identified: {}", PARAM_NAMES[j]));
        }
    }
    if let Some(far) = near.iter().find(|t| {
        free.iter()
            .any(|&j| (t[j] - theta[j]).abs() > DISTINCT_REL * (theta[j].abs() + 0.01))
    }) {
        flags.push(format!(
            "distinct minimum: {}",
            free.iter()
                .map(|&j| format!("{}={:.4}", PARAM_NAMES[j], far[j]))
                .collect::<Vec<_>>()
                .join(" ")
        ));
    }
    let mut model = Vec::with_capacity(m);
    let (mut sum2, mut max_abs) = (0.0_f64, 0.0_f64);
    for q in quotes {
        let (v, _) = model_price(q, &theta).expect("evaluated above");
        let (sigma, _) = model_vol(q, v).unwrap_or((f64::NAN, 0.0));
        let d = 100.0 * (sigma - q.market_vol.unwrap_or(f64::NAN));
        sum2 += d * d;
        max_abs = max_abs.max(d.abs());
        model.push((sigma, v));
    }
    Fit {
        underlying,
        expiry,
        rows,
        params: Some(theta),
        fixed: [0, 1, 2, 3].map(|j| spec.fixed[j].is_some()),
        quotes_used: m,
        rmse_vol_pts: (sum2 / m as f64).sqrt(),
        max_abs_residual_vol_pts: max_abs,
        se,
        corr,
        condition_number: cov.condition_number,
        starts: starts.len(),
        starts_near_best: near.len(),
        iterations: b.iterations,
        stop: Some(b.stop),
        objective: b.objective,
        flags,
        status: Ok(()),
        model,
    }
}
