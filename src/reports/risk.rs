//! Book risk: exposures aggregated by underlying and scenario P&L by full
//! revaluation, accumulated while the book streams.
//!
//! Every position is scaled by `quantity x multiplier`. Exposures are in
//! desk units (see [`Exposure`]). Scenarios reprice every position with the
//! series engine at shocked inputs, never through a Greek approximation:
//! a grid of spot shocks (relative) crossed with vol shocks (absolute vol
//! points, the shocked vol floored at 0), instantaneous jumps of the
//! underlying (by each position's model mean jump `k`, and by each
//! `--jump-shock` size), and the named scenarios of a scenario file
//! ([`crate::reports::user_scenarios`], each a [`Shock`] per underlying).
//! Every shock goes through one revaluation function, [`revalue_shocked`].
//!
//! # Design: constant memory, fixed summation order
//!
//! Nothing per row is kept. A [`RiskAccumulator`] holds, per underlying and
//! for the book, the exposure sums, one cell per scenario and one point per
//! Greek-versus-spot curve, plus the first [`MAX_LISTED`] failed rows and
//! scenario failures; its size depends on the number of underlyings and on
//! the scenario grid, not on the number of rows. The book pipeline
//! ([`crate::book::run_book_with_state`]) gives each chunk of
//! [`CHUNK_ROWS`] rows a fresh accumulator, which its rows
//! add to in row order ([`RiskAccumulator::add`], run in parallel across
//! chunks), and merges the chunk accumulators in chunk order
//! ([`RiskAccumulator::merge`]). The chunks do not depend on the thread count,
//! so every sum has the same digits on any number of threads. [`build`] runs
//! the same chunked order over positions held in memory.
//!
//! # The per-row contract
//!
//! A row whose base price, Greeks or exposure is not a finite number is a
//! row error ([`exposure_of`]): it is excluded from everything. A row that
//! prices but whose shocked copy cannot be revalued (say vol 9.95 shocked by
//! +10 points leaves the model's domain) is excluded from that scenario cell
//! only: the cell counts it in `rows_failed` and a [`ScenarioFailure`] names
//! the row, the cell and the reason. A sum of finite contributions can still
//! overflow; [`RiskReport::aggregate_problems`] lists every aggregate that is
//! not finite.

use crate::book::pipeline::CHUNK_ROWS;
use crate::book::{ChunkState, FailedRecord};
use crate::engines::pide::{self, Exercise, PideConfig, PideEngine};
use crate::engines::{series, Priced};
use crate::greeks::finite_diff::{self, FdConfig};
use crate::greeks::{Greeks, DAYS_PER_YEAR, DESK_COLUMNS};
use crate::model::{Contract, JumpParams};
use crate::reports::user_scenarios::UserScenario;
use std::collections::BTreeMap;
use std::fmt;

/// How many failed rows, scenario failures and aggregate problems are kept
/// for the report (all failed rows are in `positions.csv`, all scenario
/// failures in `scenario_failures.csv`; the counts are always complete).
pub const MAX_LISTED: usize = 1000;
/// Largest relative spot (and jump) shock accepted: +1000%.
pub const MAX_SPOT_SHOCK: f64 = 10.0;
/// Largest absolute vol shock accepted, either sign: 100 vol points (1.00).
pub const MAX_VOL_SHOCK: f64 = 1.0;
/// Most shocks accepted in one list (spot, vol or jump).
pub const MAX_SHOCKS: usize = 100;

/// One priced position of a book (owned; see [`PositionRef`] for the
/// borrowed form used while streaming).
#[derive(Debug, Clone)]
pub struct Position {
    /// 1-based data row.
    pub row: u64,
    /// Line of the record in the input.
    pub line: u64,
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

    /// The borrowed view.
    pub fn as_ref(&self) -> PositionRef<'_> {
        PositionRef {
            row: self.row,
            line: self.line,
            id: &self.id,
            underlying: &self.underlying,
            contract: self.contract,
            weight: self.weight(),
            greeks: self.greeks,
            american: None,
        }
    }
}

/// A priced position borrowing its text from the input record.
#[derive(Debug, Clone, Copy)]
pub struct PositionRef<'a> {
    /// 1-based data row.
    pub row: u64,
    /// Line of the record in the input.
    pub line: u64,
    /// Row id.
    pub id: &'a str,
    /// Grouping key.
    pub underlying: &'a str,
    /// The option.
    pub contract: Contract,
    /// `quantity x multiplier`.
    pub weight: f64,
    /// Analytic price and Greeks per unit.
    pub greeks: Greeks,
    /// `Some(settings)`: American exercise, revalued in every scenario by
    /// the PIDE with these settings; `None`: European, by the series.
    pub american: Option<PideConfig>,
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

/// Names of the [`Exposure`] sums, in [`Exposure::values`] order (the
/// columns of `totals.csv` after `positions`).
/// The value and the spot Greeks with their cash forms, then the desk-unit
/// columns of `price --desk-units` from `vega_1pt` on.
pub const EXPOSURE_COLUMNS: [&str; 12] = {
    const HEAD: [&str; 5] = ["value", "delta", "delta_cash", "gamma", "gamma_cash_1pct"];
    // DESK_COLUMNS after price, delta and gamma.
    const SKIP: usize = 3;
    let mut all = [""; 12];
    let mut i = 0;
    while i < all.len() {
        all[i] = if i < HEAD.len() {
            HEAD[i]
        } else {
            DESK_COLUMNS[i - HEAD.len() + SKIP]
        };
        i += 1;
    }
    all
};

impl Exposure {
    /// Exposure of one position (not checked; see [`exposure_of`]).
    pub fn of(p: &Position) -> Exposure {
        Exposure::of_ref(&p.as_ref())
    }

    fn of_ref(p: &PositionRef) -> Exposure {
        let w = p.weight;
        let g = &p.greeks;
        let s = p.contract.spot;
        Exposure {
            positions: 1,
            value: w * g.price,
            delta: w * g.delta,
            delta_cash: w * g.delta * s,
            gamma: w * g.gamma,
            // gamma S is of the order of delta: multiplying by S in two
            // steps keeps S^2 from overflowing on its own.
            gamma_cash_1pct: w * (g.gamma * s) * s * 0.01,
            vega_1pt: w * g.vega * 0.01,
            theta_1d: w * g.theta / DAYS_PER_YEAR,
            rho_1pct: w * g.rho * 0.01,
            div_rho_1pct: w * g.div_rho * 0.01,
            d_jump_rate: w * g.d_jump_rate,
            d_jump_mean_1pct: w * g.d_jump_mean * 0.01,
            d_jump_vol_1pct: w * g.d_jump_vol * 0.01,
        }
    }

    /// The twelve sums in [`EXPOSURE_COLUMNS`] order.
    pub fn values(&self) -> [f64; 12] {
        [
            self.value,
            self.delta,
            self.delta_cash,
            self.gamma,
            self.gamma_cash_1pct,
            self.vega_1pt,
            self.theta_1d,
            self.rho_1pct,
            self.div_rho_1pct,
            self.d_jump_rate,
            self.d_jump_mean_1pct,
            self.d_jump_vol_1pct,
        ]
    }

    /// Names of the sums that are not finite. The book level skips `delta`
    /// and `gamma`, which it does not report (units differ across underlyings).
    pub fn non_finite(&self, book: bool) -> Vec<&'static str> {
        EXPOSURE_COLUMNS
            .iter()
            .zip(self.values())
            .filter(|(name, x)| {
                let reported = !(book && matches!(**name, "delta" | "gamma"));
                reported && !x.is_finite()
            })
            .map(|(name, _)| *name)
            .collect()
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

/// The exposure of one position, checked: the weight, the price, every
/// Greek and every exposure contribution must be finite.
///
/// # Errors
/// A message naming the first value that is not finite.
pub fn exposure_of(p: &PositionRef) -> Result<Exposure, String> {
    if !p.weight.is_finite() {
        return Err("quantity x multiplier is not finite (overflow)".into());
    }
    for (name, x) in crate::greeks::DESK_COLUMNS
        .iter()
        .zip(p.greeks.desk_units())
    {
        if !x.is_finite() {
            return Err(format!("{name} is not finite"));
        }
    }
    let e = Exposure::of_ref(p);
    if let Some(name) = e.non_finite(false).first() {
        let what = if *name == "value" {
            "position_value".to_string()
        } else {
            format!("the exposure {name}")
        };
        return Err(format!(
            "{what} is not finite: quantity x multiplier x {} overflows",
            if *name == "value" { "price" } else { "Greek" }
        ));
    }
    Ok(e)
}

/// The scenarios to run. Build it with [`ScenarioSpec::new`], which
/// validates every value; the fractions are the flag values divided by 100
/// (the same division as a scenario file's, so equal shocks give equal
/// digits).
#[derive(Debug, Clone, PartialEq)]
pub struct ScenarioSpec {
    /// Relative spot shocks (e.g. -0.3 .. 0.3), ascending.
    pub spot_shocks: Vec<f64>,
    /// Absolute vol shocks (0.01 = one vol point), ascending.
    pub vol_shocks: Vec<f64>,
    /// Instantaneous relative jumps of every underlying, as given.
    pub jump_shocks: Vec<f64>,
    /// `spot_shocks` in percent, as given.
    pub spot_shocks_pct: Vec<f64>,
    /// `vol_shocks` in vol points, as given.
    pub vol_shocks_pts: Vec<f64>,
    /// `jump_shocks` in percent, as given.
    pub jump_shocks_pct: Vec<f64>,
    /// Named scenarios of a scenario file (those with a bad row are listed
    /// but not computed).
    pub user: Vec<UserScenario>,
}

impl Default for ScenarioSpec {
    fn default() -> Self {
        ScenarioSpec::new(
            (-6..=6).map(|i| f64::from(i) * 5.0).collect(),
            (-4..=4).map(|i| f64::from(i) * 2.5).collect(),
            vec![-20.0, 15.0],
        )
        .expect("the default shocks are valid")
    }
}

/// The shocks of one scenario for one position, as fractions: the spot is
/// multiplied by `1 + spot`, `vol` is added to the diffusion vol (the
/// result floored at 0), the jump rate multiplied by `jump_rate_mult`,
/// the shifts added to the jump mean and vol, `rate_shift` added to the rate.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Shock {
    /// Relative spot shock.
    pub spot: f64,
    /// Absolute vol shock.
    pub vol: f64,
    /// Multiplier of the jump rate.
    pub jump_rate_mult: f64,
    /// Added to the mean log jump.
    pub jump_mean_shift: f64,
    /// Added to the log-jump vol.
    pub jump_vol_shift: f64,
    /// Added to the rate (0.0001 = one basis point).
    pub rate_shift: f64,
}

impl Shock {
    /// No change.
    pub const NONE: Shock = Shock {
        spot: 0.0,
        vol: 0.0,
        jump_rate_mult: 1.0,
        jump_mean_shift: 0.0,
        jump_vol_shift: 0.0,
        rate_shift: 0.0,
    };

    /// A spot and vol shock only.
    pub fn spot_vol(spot: f64, vol: f64) -> Shock {
        Shock {
            spot,
            vol,
            ..Shock::NONE
        }
    }
}

/// Why a relative spot or jump shock is refused (`None`: accepted).
pub fn spot_shock_problem(x: f64) -> Option<&'static str> {
    if !x.is_finite() {
        Some("is not a finite number")
    } else if x > -1.0 && x <= MAX_SPOT_SHOCK {
        None
    } else {
        Some("is outside the accepted range: above -100% and at most +1000%")
    }
}

/// Why an absolute vol shock is refused (`None`: accepted).
pub fn vol_shock_problem(x: f64) -> Option<&'static str> {
    if !x.is_finite() {
        Some("is not a finite number")
    } else if x.abs() <= MAX_VOL_SHOCK {
        None
    } else {
        Some("is outside the accepted range: -100 to +100 vol points")
    }
}

/// A refused scenario definition.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{list}: {problem}")]
pub struct SpecError {
    /// Which list: `spot shocks`, `vol shocks` or `jump shocks`.
    pub list: &'static str,
    /// What is wrong.
    pub problem: String,
}

impl ScenarioSpec {
    /// Validates and builds a scenario definition. Spot and vol shocks are
    /// sorted ascending; jump shocks keep their order.
    ///
    /// # Errors
    /// [`SpecError`] for an empty spot or vol list, more than [`MAX_SHOCKS`]
    /// values in a list, a value repeated, or a value outside its range
    /// ([`spot_shock_problem`], [`vol_shock_problem`]).
    /// Values are in the flags' units: spot and jump shocks in percent, vol
    /// shocks in vol points.
    pub fn new(
        spot_shocks_pct: Vec<f64>,
        vol_shocks_pts: Vec<f64>,
        jump_shocks_pct: Vec<f64>,
    ) -> Result<ScenarioSpec, SpecError> {
        let frac = |xs: &[f64]| xs.iter().map(|x| x / 100.0).collect::<Vec<f64>>();
        let (spot_shocks, vol_shocks, jump_shocks) = (
            frac(&spot_shocks_pct),
            frac(&vol_shocks_pts),
            frac(&jump_shocks_pct),
        );
        let check = |list: &'static str,
                     xs: &[f64],
                     allow_empty: bool,
                     scale: (f64, &str),
                     problem: fn(f64) -> Option<&'static str>|
         -> Result<(), SpecError> {
            let err = |problem: String| SpecError { list, problem };
            if xs.is_empty() && !allow_empty {
                return Err(err("the list is empty".into()));
            }
            if xs.len() > MAX_SHOCKS {
                return Err(err(format!(
                    "{} values, at most {MAX_SHOCKS} are accepted",
                    xs.len()
                )));
            }
            for (i, &x) in xs.iter().enumerate() {
                let shown = format!("{}{}", short(x * scale.0), scale.1);
                if let Some(p) = problem(x) {
                    return Err(err(format!("{shown} {p}")));
                }
                if xs[..i].contains(&x) {
                    return Err(err(format!("{shown} is given twice")));
                }
            }
            Ok(())
        };
        check(
            "spot shocks",
            &spot_shocks,
            false,
            (100.0, "%"),
            spot_shock_problem,
        )?;
        check(
            "vol shocks",
            &vol_shocks,
            false,
            (100.0, " vol points"),
            vol_shock_problem,
        )?;
        check(
            "jump shocks",
            &jump_shocks,
            true,
            (100.0, "%"),
            spot_shock_problem,
        )?;
        let sorted = |mut xs: Vec<f64>| {
            for x in xs.iter_mut() {
                *x += 0.0; // -0 is 0
            }
            xs.sort_by(f64::total_cmp);
            xs
        };
        let (spot_shocks_pct, vol_shocks_pts) = (sorted(spot_shocks_pct), sorted(vol_shocks_pts));
        Ok(ScenarioSpec {
            spot_shocks: frac(&spot_shocks_pct),
            vol_shocks: frac(&vol_shocks_pts),
            jump_shocks,
            spot_shocks_pct,
            vol_shocks_pts,
            jump_shocks_pct,
            user: Vec::new(),
        })
    }

    /// The same spec with the named scenarios of a scenario file.
    pub fn with_user(mut self, user: Vec<UserScenario>) -> ScenarioSpec {
        self.user = user;
        self
    }

    fn cells(&self) -> usize {
        self.spot_shocks.len() * self.vol_shocks.len()
    }
}

/// Short form of a number for messages: 12 significant digits (so a shock
/// of 0.07 reads 7%, not 7.000000000000001%), scientific when very large or
/// small.
fn short(x: f64) -> String {
    let x = format!("{x:.11e}").parse::<f64>().unwrap_or(x);
    if x != 0.0 && (x.abs() >= 1e9 || x.abs() < 1e-6) {
        format!("{x:e}")
    } else {
        let s = zmij::Buffer::new().format(x).to_string();
        match s.strip_suffix(".0") {
            Some(integer) => integer.to_string(),
            None => s,
        }
    }
}

/// One aggregated scenario P&L: the sum over the rows that could be
/// revalued, and how many could not.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Cell {
    /// Sum of `w (V_shocked - V_base)` over the rows revalued.
    pub pnl: f64,
    /// Rows of the group excluded from `pnl` (their revaluation failed).
    pub rows_failed: u64,
}

/// Aggregated Greeks at one spot shock (vol unshocked).
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct CurvePoint {
    /// Sum of `w delta S'` at the shocked spot `S'`.
    pub delta_cash: f64,
    /// Sum of `w gamma S'^2 / 100`.
    pub gamma_cash_1pct: f64,
    /// Sum of `w vega / 100`.
    pub vega_1pt: f64,
    /// Rows of the group excluded from this point.
    pub rows_failed: u64,
}

/// Results of the scenario runs for one group (an underlying or the book).
#[derive(Debug, Clone, PartialEq)]
pub struct GroupScenarios {
    /// P&L on the grid, `grid[i][j]` for spot shock `i` and vol shock `j`.
    pub grid: Vec<Vec<Cell>>,
    /// P&L of each jump scenario: the model mean jump first (each position
    /// by its own `k`), then each `--jump-shock` size.
    pub jumps: Vec<Cell>,
    /// Weighted mean of `k` over the group's positions (weights `|w|`, for
    /// display; meaningless for the book, whose underlyings jump by their own).
    pub mean_model_jump: f64,
    /// Smallest and largest `k` of the group's positions (equal when they
    /// share the jump parameters); `(inf, -inf)` for an empty group.
    pub model_jump_range: (f64, f64),
    /// P&L of each named scenario of [`ScenarioSpec::user`] (zero, with no
    /// row counted, for a scenario not computed).
    pub user: Vec<Cell>,
    /// Cash delta, gamma and vega per vol point at each spot shock.
    pub greeks_vs_spot: Vec<CurvePoint>,
}

/// Which scenario a [`ScenarioFailure`] belongs to.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum ScenarioKind {
    /// A cell of the spot x vol grid.
    Grid {
        /// Relative spot shock.
        spot_shock: f64,
        /// Absolute vol shock.
        vol_shock: f64,
    },
    /// A point of the Greeks-against-spot curves.
    GreeksVsSpot {
        /// Relative spot shock.
        spot_shock: f64,
    },
    /// The jump by the row's own model mean jump `k`.
    ModelMeanJump {
        /// The row's `k`.
        jump_size: f64,
    },
    /// A jump by a `--jump-shock` size.
    GivenJump {
        /// The relative jump.
        jump_size: f64,
    },
    /// A named scenario of the scenario file.
    User {
        /// Its place in [`ScenarioSpec::user`].
        index: usize,
        /// The row's relative spot shock in that scenario.
        spot_shock: f64,
        /// The row's absolute vol shock in that scenario.
        vol_shock: f64,
    },
}

impl ScenarioKind {
    /// Name as written in the `scenario` column.
    pub fn name(&self) -> &'static str {
        match self {
            ScenarioKind::Grid { .. } => "grid",
            ScenarioKind::GreeksVsSpot { .. } => "greeks_vs_spot",
            ScenarioKind::ModelMeanJump { .. } => "model_mean_jump",
            ScenarioKind::GivenJump { .. } => "given_jump",
            ScenarioKind::User { .. } => "user",
        }
    }
}

impl fmt::Display for ScenarioKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let pct = |x: f64| {
            let sign = if x > 0.0 { "+" } else { "" };
            format!("{sign}{}%", short(x * 100.0))
        };
        match *self {
            ScenarioKind::Grid {
                spot_shock,
                vol_shock,
            } => write!(
                f,
                "grid: spot {}, vol {} points",
                pct(spot_shock),
                short(vol_shock * 100.0)
            ),
            ScenarioKind::GreeksVsSpot { spot_shock } => {
                write!(f, "Greeks at spot {}", pct(spot_shock))
            }
            ScenarioKind::ModelMeanJump { jump_size } => {
                write!(f, "model mean jump ({})", pct(jump_size))
            }
            ScenarioKind::GivenJump { jump_size } => write!(f, "jump {}", pct(jump_size)),
            ScenarioKind::User { index, .. } => write!(f, "user scenario {}", index + 1),
        }
    }
}

/// A row's scenario revaluation that failed: the row is excluded from that
/// one cell (or curve point).
#[derive(Debug, Clone, PartialEq)]
pub struct ScenarioFailure {
    /// 1-based data row.
    pub row: u64,
    /// Line of the record in the input.
    pub line: u64,
    /// Row id.
    pub id: String,
    /// The row's underlying.
    pub underlying: String,
    /// The scenario.
    pub scenario: ScenarioKind,
    /// Why the shocked copy could not be revalued.
    pub reason: String,
}

/// A row that could not be priced, listed in the report and excluded from
/// every total.
#[derive(Debug, Clone, PartialEq)]
pub struct FailedRow {
    /// 1-based data row.
    pub row: u64,
    /// Line of the record in the input.
    pub line: u64,
    /// Row id (lossy-decoded for display), empty when the book has no `id`
    /// column (the line is the row's reference).
    pub id: String,
    /// Status text.
    pub status: String,
}

/// A position whose diffusion vol is below the largest negative vol shock:
/// its shocked vol is floored at 0 in those scenarios.
#[derive(Debug, Clone, PartialEq)]
pub struct FlooredPosition {
    /// Line of the record in the input.
    pub line: u64,
    /// The `id` field (empty when the book has none).
    pub id: String,
    /// The row's underlying.
    pub underlying: String,
    /// Its diffusion vol.
    pub vol: f64,
}

/// Sums for one group while accumulating.
#[derive(Debug, Clone)]
struct GroupAcc {
    exposure: Exposure,
    grid: Vec<Cell>,
    jumps: Vec<Cell>,
    curve: Vec<CurvePoint>,
    user: Vec<Cell>,
    abs_weight_k: f64,
    abs_weight: f64,
    k_min: f64,
    k_max: f64,
}

impl GroupAcc {
    fn new(spec: &ScenarioSpec) -> GroupAcc {
        GroupAcc {
            exposure: Exposure::default(),
            grid: vec![Cell::default(); spec.cells()],
            jumps: vec![Cell::default(); spec.jump_shocks.len() + 1],
            curve: vec![CurvePoint::default(); spec.spot_shocks.len()],
            user: vec![Cell::default(); spec.user.len()],
            abs_weight_k: 0.0,
            abs_weight: 0.0,
            k_min: f64::INFINITY,
            k_max: f64::NEG_INFINITY,
        }
    }

    fn add_row(&mut self, r: &RowScenarios) {
        self.exposure = self.exposure.add(&r.exposure);
        let add_cell = |acc: &mut Cell, x: &Option<f64>| match x {
            Some(v) => acc.pnl += v,
            None => acc.rows_failed += 1,
        };
        for (a, x) in self.grid.iter_mut().zip(&r.grid) {
            add_cell(a, x);
        }
        for (a, x) in self.jumps.iter_mut().zip(&r.jumps) {
            add_cell(a, x);
        }
        for (a, x) in self.user.iter_mut().zip(&r.user) {
            add_cell(a, x);
        }
        for (a, x) in self.curve.iter_mut().zip(&r.curve) {
            match x {
                Some((d, g, v)) => {
                    a.delta_cash += d;
                    a.gamma_cash_1pct += g;
                    a.vega_1pt += v;
                }
                None => a.rows_failed += 1,
            }
        }
        self.abs_weight_k += r.abs_weight * r.k;
        self.abs_weight += r.abs_weight;
        self.k_min = self.k_min.min(r.k);
        self.k_max = self.k_max.max(r.k);
    }

    fn merge(&mut self, o: &GroupAcc) {
        self.exposure = self.exposure.add(&o.exposure);
        for (a, b) in self
            .grid
            .iter_mut()
            .zip(&o.grid)
            .chain(self.jumps.iter_mut().zip(&o.jumps))
            .chain(self.user.iter_mut().zip(&o.user))
        {
            a.pnl += b.pnl;
            a.rows_failed += b.rows_failed;
        }
        for (a, b) in self.curve.iter_mut().zip(&o.curve) {
            a.delta_cash += b.delta_cash;
            a.gamma_cash_1pct += b.gamma_cash_1pct;
            a.vega_1pt += b.vega_1pt;
            a.rows_failed += b.rows_failed;
        }
        self.abs_weight_k += o.abs_weight_k;
        self.abs_weight += o.abs_weight;
        self.k_min = self.k_min.min(o.k_min);
        self.k_max = self.k_max.max(o.k_max);
    }

    fn finish(self, spec: &ScenarioSpec) -> (Exposure, GroupScenarios) {
        let nv = spec.vol_shocks.len();
        let grid = self.grid.chunks(nv.max(1)).map(<[Cell]>::to_vec).collect();
        let mean_model_jump = if self.abs_weight > 0.0 {
            self.abs_weight_k / self.abs_weight
        } else {
            0.0
        };
        (
            self.exposure,
            GroupScenarios {
                grid,
                jumps: self.jumps,
                mean_model_jump,
                model_jump_range: (self.k_min, self.k_max),
                user: self.user,
                greeks_vs_spot: self.curve,
            },
        )
    }
}

/// One row's contributions; `None` where the revaluation failed.
struct RowScenarios {
    exposure: Exposure,
    grid: Vec<Option<f64>>,
    jumps: Vec<Option<f64>>,
    curve: Vec<Option<(f64, f64, f64)>>,
    user: Vec<Option<f64>>,
    abs_weight: f64,
    k: f64,
}

fn revalue(
    c: &Contract,
    american: Option<&PideConfig>,
    spot_shock: f64,
    vol_shock: f64,
) -> Result<Greeks, String> {
    revalue_as(c, american, &Shock::spot_vol(spot_shock, vol_shock))
}

/// Full revaluation of `c` under `shock` (see [`Shock`]): the one place
/// where every scenario of the report is priced (European exercise; see
/// [`revalue_as`] for American rows).
///
/// # Errors
/// A message when the shocked contract leaves the model's domain or the
/// engine fails.
pub fn revalue_shocked(c: &Contract, shock: &Shock) -> Result<Greeks, String> {
    revalue_as(c, None, shock)
}

/// [`revalue_shocked`] for either exercise style: `american` = `Some(settings)`
/// revalues by the American PIDE ([`revalue_american`]), `None` by the series.
///
/// # Errors
/// As [`revalue_shocked`].
pub fn revalue_as(
    c: &Contract,
    american: Option<&PideConfig>,
    shock: &Shock,
) -> Result<Greeks, String> {
    let shocked = Contract::new(
        c.kind,
        c.spot * (1.0 + shock.spot),
        c.strike,
        c.expiry,
        c.rate + shock.rate_shift,
        c.div_yield,
        (c.vol + shock.vol).max(0.0),
        JumpParams {
            rate: c.jumps.rate * shock.jump_rate_mult,
            mean: c.jumps.mean + shock.jump_mean_shift,
            vol: c.jumps.vol + shock.jump_vol_shift,
        },
    )
    .map_err(|e| format!("shocked contract: {e}"))?;
    match american {
        Some(cfg) => revalue_american(&shocked, cfg, shock.vol == 0.0),
        None => series::price(&shocked)
            .map(|r| r.greeks)
            .map_err(|e| format!("series engine: {e}")),
    }
}

/// An American revaluation by the PIDE, as `price` values the row (at least
/// the European series value): price, delta, gamma and theta from the grid; vega (central difference of PIDE prices) only when `vega` is
/// asked for, since only the unshocked-vol cells feed the Greeks-against-
/// spot curve; the other Greeks are not used by the scenarios (0).
fn revalue_american(c: &Contract, cfg: &PideConfig, vega: bool) -> Result<Greeks, String> {
    if let Some(why) = crate::greeks::american::pide_reach(c) {
        return Err(format!("American exercise: {why}"));
    }
    let r = pide::price(c, Exercise::American, cfg).map_err(|e| format!("PIDE engine: {e}"))?;
    let vega = if vega {
        let engine = PideEngine {
            exercise: Exercise::American,
            config: *cfg,
        };
        let base = Priced {
            price: r.price,
            error: r.error_estimate,
        };
        let fd = FdConfig::for_engine(&engine);
        finite_diff::first_derivatives(&engine, c, base, &fd, &[crate::model::Param::Vol])?[0].0
    } else {
        0.0
    };
    // As `price` writes it: never below the European value (a theorem).
    let european = series::price(c)
        .map_err(|e| format!("series engine (European value): {e}"))?
        .greeks
        .price;
    Ok(Greeks {
        price: r.price.max(european),
        delta: r.delta,
        gamma: r.gamma,
        vega,
        theta: r.theta,
        ..Greeks::default()
    })
}

/// Accumulated risk of part of a book (one chunk while streaming) or of the
/// whole book once the chunks are merged. See the module documentation.
#[derive(Debug, Clone, Default)]
pub struct RiskAccumulator {
    groups: BTreeMap<String, GroupAcc>,
    book: Option<GroupAcc>,
    vol_floored: u64,
    first_floored: Vec<FlooredPosition>,
    failed_rows: u64,
    first_failed_rows: Vec<FailedRow>,
    scenario_failures: u64,
    /// Of a chunk: all its failures (streamed by the caller before merging).
    /// Of a merged total: the first [`MAX_LISTED`].
    failures: Vec<ScenarioFailure>,
}

impl ChunkState for RiskAccumulator {
    fn row_failed(&mut self, f: &FailedRecord<'_>) {
        self.failed_rows += 1;
        if self.first_failed_rows.len() < MAX_LISTED {
            // The line is the row's reference; no id column, no id.
            let id = match f.id {
                Some(raw) => String::from_utf8_lossy(raw).trim().to_string(),
                None => String::new(),
            };
            self.first_failed_rows.push(FailedRow {
                row: f.row,
                line: f.line,
                id,
                status: f.status.to_string(),
            });
        }
    }
}

impl RiskAccumulator {
    /// Adds one position: its exposure (from [`exposure_of`]) and its full
    /// revaluation in every scenario. A failed revaluation excludes the row
    /// from that cell only and is recorded as a [`ScenarioFailure`].
    pub fn add(&mut self, spec: &ScenarioSpec, p: &PositionRef, exposure: &Exposure) {
        let w = p.weight;
        let v0 = p.greeks.price;
        let c = &p.contract;
        let mut failures = Vec::new();
        let mut fail = |scenario: ScenarioKind, reason: String| {
            failures.push((scenario, reason));
        };
        let pnl = |shocked: Result<Greeks, String>| -> Result<f64, String> {
            let x = w * (shocked?.price - v0);
            if x.is_finite() {
                Ok(x)
            } else {
                Err("P&L is not finite: quantity x multiplier x price change overflows".into())
            }
        };
        let zero_vol = spec.vol_shocks.iter().position(|v| *v == 0.0);
        let mut grid = Vec::with_capacity(spec.cells());
        let mut curve = Vec::with_capacity(spec.spot_shocks.len());
        for &s in &spec.spot_shocks {
            let mut at_zero = None;
            for (j, &v) in spec.vol_shocks.iter().enumerate() {
                let g = revalue(c, p.american.as_ref(), s, v);
                if Some(j) == zero_vol {
                    at_zero = Some(g.clone());
                }
                match pnl(g) {
                    Ok(x) => grid.push(Some(x)),
                    Err(reason) => {
                        grid.push(None);
                        fail(
                            ScenarioKind::Grid {
                                spot_shock: s,
                                vol_shock: v,
                            },
                            reason,
                        );
                    }
                }
            }
            let g = at_zero.unwrap_or_else(|| revalue(c, p.american.as_ref(), s, 0.0));
            let point = g.and_then(|g| {
                let spot = c.spot * (1.0 + s);
                let point = (
                    w * g.delta * spot,
                    w * (g.gamma * spot) * spot * 0.01,
                    w * g.vega * 0.01,
                );
                if point.0.is_finite() && point.1.is_finite() && point.2.is_finite() {
                    Ok(point)
                } else {
                    Err("cash delta, cash gamma or vega is not finite (overflow)".to_string())
                }
            });
            match point {
                Ok(x) => curve.push(Some(x)),
                Err(reason) => {
                    curve.push(None);
                    fail(ScenarioKind::GreeksVsSpot { spot_shock: s }, reason);
                }
            }
        }
        let k = c.jumps.k();
        let mut jumps = Vec::with_capacity(spec.jump_shocks.len() + 1);
        for (i, size) in std::iter::once(k)
            .chain(spec.jump_shocks.iter().copied())
            .enumerate()
        {
            match pnl(revalue(c, p.american.as_ref(), size, 0.0)) {
                Ok(x) => jumps.push(Some(x)),
                Err(reason) => {
                    jumps.push(None);
                    let scenario = if i == 0 {
                        ScenarioKind::ModelMeanJump { jump_size: size }
                    } else {
                        ScenarioKind::GivenJump { jump_size: size }
                    };
                    fail(scenario, reason);
                }
            }
        }
        let mut user = Vec::with_capacity(spec.user.len());
        for (index, scenario) in spec.user.iter().enumerate() {
            let row = scenario
                .row_for(p.underlying)
                .filter(|_| scenario.is_valid());
            match row {
                // Not computed, or nothing moves for this underlying.
                None => user.push(Some(0.0)),
                Some(r) => match pnl(revalue_as(c, p.american.as_ref(), &r.shock)) {
                    Ok(x) => user.push(Some(x)),
                    Err(reason) => {
                        user.push(None);
                        fail(
                            ScenarioKind::User {
                                index,
                                spot_shock: r.shock.spot,
                                vol_shock: r.shock.vol,
                            },
                            reason,
                        );
                    }
                },
            }
        }
        let min_vol_shock = spec.vol_shocks.iter().copied().fold(0.0, f64::min);
        if c.vol + min_vol_shock < 0.0 {
            self.vol_floored += 1;
            if self.first_floored.len() < MAX_LISTED {
                self.first_floored.push(FlooredPosition {
                    line: p.line,
                    id: p.id.to_string(),
                    underlying: p.underlying.to_string(),
                    vol: c.vol,
                });
            }
        }
        let row = RowScenarios {
            exposure: *exposure,
            grid,
            jumps,
            curve,
            user,
            abs_weight: w.abs(),
            k,
        };
        match self.groups.get_mut(p.underlying) {
            Some(g) => g.add_row(&row),
            None => {
                let mut g = GroupAcc::new(spec);
                g.add_row(&row);
                self.groups.insert(p.underlying.to_string(), g);
            }
        }
        self.book
            .get_or_insert_with(|| GroupAcc::new(spec))
            .add_row(&row);
        self.scenario_failures += failures.len() as u64;
        for (scenario, reason) in failures {
            self.failures.push(ScenarioFailure {
                row: p.row,
                line: p.line,
                id: p.id.to_string(),
                underlying: p.underlying.to_string(),
                scenario,
                reason,
            });
        }
    }

    /// The scenario failures recorded (of a chunk: all of them, in row
    /// order), for the caller to stream out before merging the chunk.
    pub fn scenario_failure_list(&self) -> &[ScenarioFailure] {
        &self.failures
    }

    /// Adds `o` (the next chunk, in chunk order) to `self`. Lists are kept up
    /// to [`MAX_LISTED`] entries; counts are complete.
    pub fn merge(&mut self, mut o: RiskAccumulator) {
        for (name, g) in std::mem::take(&mut o.groups) {
            match self.groups.get_mut(&name) {
                Some(acc) => acc.merge(&g),
                None => {
                    self.groups.insert(name, g);
                }
            }
        }
        match (&mut self.book, o.book.take()) {
            (Some(acc), Some(b)) => acc.merge(&b),
            (None, Some(b)) => self.book = Some(b),
            _ => {}
        }
        self.vol_floored += o.vol_floored;
        let room = MAX_LISTED.saturating_sub(self.first_floored.len());
        self.first_floored
            .extend(o.first_floored.into_iter().take(room));
        self.failed_rows += o.failed_rows;
        let room = MAX_LISTED.saturating_sub(self.first_failed_rows.len());
        self.first_failed_rows
            .extend(o.first_failed_rows.into_iter().take(room));
        self.scenario_failures += o.scenario_failures;
        let room = MAX_LISTED.saturating_sub(self.failures.len());
        self.failures.extend(o.failures.into_iter().take(room));
    }

    /// The report.
    pub fn finish(self, spec: ScenarioSpec) -> RiskReport {
        let by_underlying = self
            .groups
            .into_iter()
            .map(|(k, g)| (k, g.finish(&spec)))
            .collect();
        let book = self
            .book
            .unwrap_or_else(|| GroupAcc::new(&spec))
            .finish(&spec);
        let mut first_scenario_failures = self.failures;
        first_scenario_failures.truncate(MAX_LISTED);
        RiskReport {
            spec,
            by_underlying,
            book,
            vol_floored: self.vol_floored,
            first_floored: self.first_floored,
            failed_rows: self.failed_rows,
            first_failed_rows: self.first_failed_rows,
            scenario_failures: self.scenario_failures,
            first_scenario_failures,
        }
    }
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
    /// The first [`MAX_LISTED`] of them, in row order.
    pub first_floored: Vec<FlooredPosition>,
    /// Rows that could not be priced (excluded from everything).
    pub failed_rows: u64,
    /// The first [`MAX_LISTED`] of them, in row order.
    pub first_failed_rows: Vec<FailedRow>,
    /// Scenario revaluations that failed (each excludes one row from one cell).
    pub scenario_failures: u64,
    /// The first [`MAX_LISTED`] of them, in row order.
    pub first_scenario_failures: Vec<ScenarioFailure>,
}

/// One group of a report, in output order.
#[derive(Debug, Clone, Copy)]
pub struct Group<'a> {
    /// The underlying, or `None` for the book level.
    pub underlying: Option<&'a str>,
    /// Its exposure.
    pub exposure: &'a Exposure,
    /// Its scenarios.
    pub scenarios: &'a GroupScenarios,
}

impl RiskReport {
    /// The underlyings in name order, then the book.
    pub fn groups(&self) -> Vec<Group<'_>> {
        self.by_underlying
            .iter()
            .map(|(k, (e, s))| Group {
                underlying: Some(k.as_str()),
                exposure: e,
                scenarios: s,
            })
            .chain(std::iter::once(Group {
                underlying: None,
                exposure: &self.book.0,
                scenarios: &self.book.1,
            }))
            .collect()
    }

    /// Every aggregate that is not a finite number (a sum of finite
    /// contributions that overflowed), as `file group: what`. Empty when all
    /// are finite.
    pub fn aggregate_problems(&self) -> Vec<String> {
        let mut out = Vec::new();
        for g in self.groups() {
            let name = match g.underlying {
                Some(u) => format!("underlying '{u}'"),
                None => "the book".to_string(),
            };
            let bad = g.exposure.non_finite(g.underlying.is_none());
            if !bad.is_empty() {
                out.push(format!("totals.csv, {name}: {} not finite", bad.join(", ")));
            }
            let s = g.scenarios;
            for (i, ds) in self.spec.spot_shocks.iter().enumerate() {
                for (j, dv) in self.spec.vol_shocks.iter().enumerate() {
                    if !s.grid[i][j].pnl.is_finite() {
                        out.push(format!(
                            "scenarios.csv, {name}, {}: pnl not finite",
                            ScenarioKind::Grid {
                                spot_shock: *ds,
                                vol_shock: *dv
                            }
                        ));
                    }
                }
                let p = &s.greeks_vs_spot[i];
                if !(p.delta_cash.is_finite()
                    && p.gamma_cash_1pct.is_finite()
                    && p.vega_1pt.is_finite())
                {
                    out.push(format!(
                        "greeks_vs_spot.csv, {name}, spot shock {}%: not finite",
                        short(ds * 100.0)
                    ));
                }
            }
            let k_shown = g.underlying.is_some() && !s.mean_model_jump.is_finite();
            if k_shown || !s.jumps[0].pnl.is_finite() {
                out.push(format!(
                    "jump_scenarios.csv, {name}, model mean jump: not finite"
                ));
            }
            for (k, j) in self.spec.jump_shocks.iter().enumerate() {
                if !s.jumps[k + 1].pnl.is_finite() {
                    out.push(format!(
                        "jump_scenarios.csv, {name}, jump {}%: pnl not finite",
                        short(j * 100.0)
                    ));
                }
            }
            for (u, c) in self.spec.user.iter().zip(&s.user) {
                if !c.pnl.is_finite() {
                    out.push(format!(
                        "scenarios_user.csv, {name}, scenario '{}': pnl not finite",
                        u.name
                    ));
                }
            }
        }
        out
    }
}

/// Builds the report from positions held in memory: sorted by row, added in
/// chunks of [`CHUNK_ROWS`] positions merged in order, like the streaming
/// command (whose chunks also count failed rows, so its digits agree when no
/// row failed). `positions` may be in any order; failed rows are not positions.
///
/// # Errors
/// A message naming the row when a position's exposure is not finite.
pub fn build(mut positions: Vec<Position>, spec: ScenarioSpec) -> Result<RiskReport, String> {
    positions.sort_by_key(|p| p.row);
    let mut total = RiskAccumulator::default();
    for chunk in positions.chunks(CHUNK_ROWS) {
        let mut acc = RiskAccumulator::default();
        for p in chunk {
            let p = p.as_ref();
            let e = exposure_of(&p).map_err(|e| format!("row {} ({}): {e}", p.row, p.id))?;
            acc.add(&spec, &p, &e);
        }
        total.merge(acc);
    }
    Ok(total.finish(spec))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn spec_refuses_bad_values() {
        let d = ScenarioSpec::default();
        // Flag units: percent and vol points.
        assert!(ScenarioSpec::new(
            d.spot_shocks_pct.clone(),
            d.vol_shocks_pts.clone(),
            vec![-20.0]
        )
        .is_ok());
        assert_eq!(d.spot_shocks[0], -30.0 / 100.0);
        let bad = [
            (vec![], vec![0.0], vec![], "empty"),
            (vec![0.1, 0.1], vec![0.0], vec![], "twice"),
            (vec![f64::NAN], vec![0.0], vec![], "not a finite number"),
            (vec![1e306], vec![0.0], vec![], "outside"),
            (vec![-100.0], vec![0.0], vec![], "outside"),
            (vec![0.0], vec![995.0], vec![], "-100 to +100 vol points"),
            (vec![0.0], vec![0.0], vec![f64::INFINITY], "not a finite"),
            (vec![0.0], vec![0.0], vec![0.1, 0.1], "twice"),
        ];
        for (s, v, j, want) in bad {
            let e = ScenarioSpec::new(s.clone(), v.clone(), j.clone()).unwrap_err();
            assert!(e.to_string().contains(want), "{s:?} {v:?} {j:?}: {e}");
        }
        let e = ScenarioSpec::new(vec![0.0; 101], vec![0.0], vec![]).unwrap_err();
        assert!(e.to_string().contains("at most 100"), "{e}");
    }

    #[test]
    fn short_numbers_stay_short() {
        assert_eq!(short(1e308), "1e308");
        assert_eq!(short(99500.0), "99500");
        assert_eq!(short(0.05), "0.05");
        assert_eq!(short(-20.0), "-20");
        assert_eq!(short(0.07 * 100.0), "7");
        let k = ScenarioKind::Grid {
            spot_shock: 0.05,
            vol_shock: -0.1,
        };
        assert_eq!(k.to_string(), "grid: spot +5%, vol -10 points");
    }
}
