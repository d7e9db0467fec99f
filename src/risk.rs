//! Book risk: exposures aggregated by underlying and scenario P&L by full
//! revaluation.
//!
//! Every position is scaled by `quantity x multiplier`. Exposures are in
//! desk units (see [`Exposure`]). Scenarios reprice every position with the
//! series engine at shocked inputs, never through a Greek approximation:
//! a grid of spot shocks (relative) crossed with vol shocks (absolute vol
//! points, the shocked vol floored at 0), and instantaneous jumps of the
//! underlying (by each position's model mean jump `k`, and by user-given
//! sizes). All aggregation runs over positions sorted by row, so totals do
//! not depend on the thread count.

use crate::greeks::{Greeks, DAYS_PER_YEAR};
use crate::model::Contract;
use crate::series;
use rayon::prelude::*;
use std::collections::BTreeMap;

/// One priced position of a book.
#[derive(Debug, Clone)]
pub struct Position {
    /// 1-based data row.
    pub row: u64,
    /// Row id.
    pub id: String,
    /// Grouping key.
    pub underlying: String,
    /// The option.
    pub contract: Contract,
    /// Signed size.
    pub quantity: f64,
    /// Contract multiplier.
    pub multiplier: f64,
    /// Analytic price and Greeks per unit.
    pub greeks: Greeks,
}

impl Position {
    /// `quantity x multiplier`.
    pub fn weight(&self) -> f64 {
        self.quantity * self.multiplier
    }
}

/// Aggregated exposure of a set of positions, in desk units.
#[derive(Debug, Clone, Copy, Default, PartialEq, serde::Serialize)]
pub struct Exposure {
    /// Number of positions.
    pub positions: u64,
    /// Sum of `w V`.
    pub value: f64,
    /// Sum of `w delta` (units of the underlying).
    pub delta: f64,
    /// Sum of `w delta S` (cash delta).
    pub delta_cash: f64,
    /// Sum of `w gamma`.
    pub gamma: f64,
    /// Sum of `w gamma S^2 / 100`: change of cash delta for a 1% spot move.
    pub gamma_cash_1pct: f64,
    /// Sum of `w vega / 100` (per vol point).
    pub vega_1pt: f64,
    /// Sum of `w theta / 365` (per calendar day).
    pub theta_1d: f64,
    /// Sum of `w rho / 100` (per percentage point of rate).
    pub rho_1pct: f64,
    /// Sum of `w div_rho / 100` (per percentage point of yield).
    pub div_rho_1pct: f64,
    /// Sum of `w dV/dlambda` (per jump per year).
    pub d_jump_rate: f64,
    /// Sum of `w dV/dmu_J / 100` (per 0.01 of mean log jump).
    pub d_jump_mean_1pct: f64,
    /// Sum of `w dV/ddelta / 100` (per 0.01 of log jump vol).
    pub d_jump_vol_1pct: f64,
}

impl Exposure {
    /// Exposure of one position.
    pub fn of(p: &Position) -> Exposure {
        let w = p.weight();
        let g = &p.greeks;
        let s = p.contract.spot;
        Exposure {
            positions: 1,
            value: w * g.price,
            delta: w * g.delta,
            delta_cash: w * g.delta * s,
            gamma: w * g.gamma,
            gamma_cash_1pct: w * g.gamma * s * s * 0.01,
            vega_1pt: w * g.vega * 0.01,
            theta_1d: w * g.theta / DAYS_PER_YEAR,
            rho_1pct: w * g.rho * 0.01,
            div_rho_1pct: w * g.div_rho * 0.01,
            d_jump_rate: w * g.d_jump_rate,
            d_jump_mean_1pct: w * g.d_jump_mean * 0.01,
            d_jump_vol_1pct: w * g.d_jump_vol * 0.01,
        }
    }

    /// Field-by-field sum.
    pub fn add(&self, o: &Exposure) -> Exposure {
        Exposure {
            positions: self.positions + o.positions,
            value: self.value + o.value,
            delta: self.delta + o.delta,
            delta_cash: self.delta_cash + o.delta_cash,
            gamma: self.gamma + o.gamma,
            gamma_cash_1pct: self.gamma_cash_1pct + o.gamma_cash_1pct,
            vega_1pt: self.vega_1pt + o.vega_1pt,
            theta_1d: self.theta_1d + o.theta_1d,
            rho_1pct: self.rho_1pct + o.rho_1pct,
            div_rho_1pct: self.div_rho_1pct + o.div_rho_1pct,
            d_jump_rate: self.d_jump_rate + o.d_jump_rate,
            d_jump_mean_1pct: self.d_jump_mean_1pct + o.d_jump_mean_1pct,
            d_jump_vol_1pct: self.d_jump_vol_1pct + o.d_jump_vol_1pct,
        }
    }
}

/// The scenarios to run.
#[derive(Debug, Clone, PartialEq)]
pub struct ScenarioSpec {
    /// Relative spot shocks (e.g. -0.3 .. 0.3).
    pub spot_shocks: Vec<f64>,
    /// Absolute vol shocks (0.01 = one vol point).
    pub vol_shocks: Vec<f64>,
    /// User-given instantaneous relative jumps of the underlying.
    pub jump_shocks: Vec<f64>,
}

impl Default for ScenarioSpec {
    fn default() -> Self {
        ScenarioSpec {
            spot_shocks: (-6..=6).map(|i| i as f64 * 0.05).collect(),
            vol_shocks: (-4..=4).map(|i| i as f64 * 0.025).collect(),
            jump_shocks: vec![-0.2],
        }
    }
}

/// Results of the scenario runs for one group (an underlying or the book).
#[derive(Debug, Clone, PartialEq)]
pub struct GroupScenarios {
    /// P&L on the grid, `pnl[i][j]` for spot shock `i` and vol shock `j`.
    pub grid: Vec<Vec<f64>>,
    /// P&L of each jump scenario: the model mean jump first, then the user sizes.
    pub jumps: Vec<f64>,
    /// Weighted mean of `k` over the group's positions (for display).
    pub mean_model_jump: f64,
    /// Cash delta, gamma and vega per vol point at each spot shock (vol unshocked).
    pub greeks_vs_spot: Vec<(f64, f64, f64)>,
}

/// The whole risk report: exposures and scenarios by underlying and for the book.
#[derive(Debug, Clone)]
pub struct RiskReport {
    /// Scenario definitions.
    pub spec: ScenarioSpec,
    /// Per underlying (sorted by name).
    pub by_underlying: BTreeMap<String, (Exposure, GroupScenarios)>,
    /// Book total.
    pub book: (Exposure, GroupScenarios),
    /// Positions whose vol was floored at 0 in some scenario.
    pub vol_floored: u64,
}

fn revalue(c: &Contract, spot_shock: f64, vol_shock: f64) -> Result<Greeks, String> {
    let shocked = Contract::new(
        c.kind,
        c.spot * (1.0 + spot_shock),
        c.strike,
        c.expiry,
        c.rate,
        c.div_yield,
        (c.vol + vol_shock).max(0.0),
        c.jumps,
    )
    .map_err(|e| e.to_string())?;
    series::price(&shocked)
        .map(|r| r.greeks)
        .map_err(|e| e.to_string())
}

/// Per-position scenario results, in the same shapes as [`GroupScenarios`].
fn position_scenarios(p: &Position, spec: &ScenarioSpec) -> Result<GroupScenarios, String> {
    let w = p.weight();
    let v0 = p.greeks.price;
    let mut grid = Vec::with_capacity(spec.spot_shocks.len());
    let mut greeks_vs_spot = Vec::with_capacity(spec.spot_shocks.len());
    for &s in &spec.spot_shocks {
        let mut row = Vec::with_capacity(spec.vol_shocks.len());
        for &v in &spec.vol_shocks {
            let g = revalue(&p.contract, s, v)?;
            row.push(w * (g.price - v0));
        }
        grid.push(row);
        let g = revalue(&p.contract, s, 0.0)?;
        let spot = p.contract.spot * (1.0 + s);
        greeks_vs_spot.push((
            w * g.delta * spot,
            w * g.gamma * spot * spot * 0.01,
            w * g.vega * 0.01,
        ));
    }
    let k = p.contract.jumps.k();
    let mut jumps = vec![w * (revalue(&p.contract, k, 0.0)?.price - v0)];
    for &j in &spec.jump_shocks {
        jumps.push(w * (revalue(&p.contract, j, 0.0)?.price - v0));
    }
    Ok(GroupScenarios {
        grid,
        jumps,
        mean_model_jump: k,
        greeks_vs_spot,
    })
}

fn add_scenarios(a: &mut GroupScenarios, b: &GroupScenarios) {
    for (ra, rb) in a.grid.iter_mut().zip(&b.grid) {
        for (x, y) in ra.iter_mut().zip(rb) {
            *x += y;
        }
    }
    for (x, y) in a.jumps.iter_mut().zip(&b.jumps) {
        *x += y;
    }
    for (x, y) in a.greeks_vs_spot.iter_mut().zip(&b.greeks_vs_spot) {
        x.0 += y.0;
        x.1 += y.1;
        x.2 += y.2;
    }
}

fn empty(spec: &ScenarioSpec) -> GroupScenarios {
    GroupScenarios {
        grid: vec![vec![0.0; spec.vol_shocks.len()]; spec.spot_shocks.len()],
        jumps: vec![0.0; spec.jump_shocks.len() + 1],
        mean_model_jump: 0.0,
        greeks_vs_spot: vec![(0.0, 0.0, 0.0); spec.spot_shocks.len()],
    }
}

/// Builds the report. `positions` may be in any order; failed rows are not
/// positions (the caller lists them separately).
///
/// # Errors
/// A message naming the row if a shocked contract cannot be priced (a spot
/// shock of -100% or below, say).
pub fn build(mut positions: Vec<Position>, spec: ScenarioSpec) -> Result<RiskReport, String> {
    positions.sort_by_key(|p| p.row);
    let per: Vec<Result<GroupScenarios, String>> = positions
        .par_iter()
        .map(|p| position_scenarios(p, &spec))
        .collect();
    let mut by_underlying: BTreeMap<String, (Exposure, GroupScenarios, f64, f64)> = BTreeMap::new();
    let mut book = (Exposure::default(), empty(&spec), 0.0, 0.0);
    let mut vol_floored = 0;
    let min_vol_shock = spec.vol_shocks.iter().cloned().fold(0.0, f64::min);
    for (p, sc) in positions.iter().zip(per) {
        let sc =
            sc.map_err(|e| format!("row {} ({}): scenario repricing failed: {e}", p.row, p.id))?;
        let e = Exposure::of(p);
        if p.contract.vol + min_vol_shock < 0.0 {
            vol_floored += 1;
        }
        let w = p.weight().abs();
        let entry = by_underlying
            .entry(p.underlying.clone())
            .or_insert_with(|| (Exposure::default(), empty(&spec), 0.0, 0.0));
        for acc in [&mut *entry, &mut book] {
            acc.0 = acc.0.add(&e);
            add_scenarios(&mut acc.1, &sc);
            acc.2 += w * sc.mean_model_jump;
            acc.3 += w;
        }
    }
    let finish = |(e, mut s, kw, w): (Exposure, GroupScenarios, f64, f64)| {
        s.mean_model_jump = if w > 0.0 { kw / w } else { 0.0 };
        (e, s)
    };
    Ok(RiskReport {
        spec,
        by_underlying: by_underlying
            .into_iter()
            .map(|(k, v)| (k, finish(v)))
            .collect(),
        book: finish(book),
        vol_floored,
    })
}
