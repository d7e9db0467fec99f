//! Daily P&L explain: the value change of the same positions between two
//! books (yesterday's and today's market inputs), by full revaluation,
//! attributed to the Greeks and to a one-input-group-at-a-time waterfall.
//!
//! # Design
//! Both books are read whole into memory ([`read_book`]): positions are
//! matched by `id`, which needs random access. Each entry keeps its line and
//! its raw `id` and `underlying` text even when the row does not parse, so a
//! bad row is still reported against its position. [`explain_books`] walks
//! the positions (the ids of BEFORE in its order, then the ids only in AFTER
//! in theirs) and gives each one [`Outcome`]: explained, `new`, `expired`
//! or an error naming the file, line and problem (the outcomes are
//! computed on the rayon pool; the order is fixed before, so the output
//! does not depend on the thread count). [`Aggregate`] sums the
//! explained positions per underlying and for the book, in that order, and
//! counts what it leaves out.
//!
//! # Formulas
//! With `w = quantity x multiplier`, Greeks of the series engine taken at
//! the BEFORE inputs and moves `d x = x_after - x_before`:
//!
//! - `from_spot  = w (delta dS + gamma dS^2 / 2)`
//! - `from_vol   = w (vega dsigma + volga dsigma^2 / 2)`
//! - `from_time  = w theta (T_before - T_after)` (theta = -dV/dT per year;
//!   the time step is the change of the expiry's year fraction, which for a
//!   dated book is the days between the two valuation dates / 365)
//! - `from_rates = w (rho dr + div_rho dq)`
//! - `from_jumps = w (d_jump_rate dlambda + d_jump_mean dmu_J + d_jump_vol ddelta)`
//! - `from_cross = w vanna dS dsigma`
//! - `unexplained = change - (the six above)`
//!
//! This is the Taylor expansion of `V` to second order in spot and vol and
//! first order in the rest: for a joint spot/vol move of size `h` the
//! remainder is `O(h^3)`; a move of time, rates or jumps leaves second-order
//! terms (e.g. `d2V/dT2 dT^2`, `dV2/dS dT dS dT`) in `unexplained`.
//!
//! The waterfall revalues in the order spot, vol, time, rates (rate and
//! div_yield), jumps (rate, mean, vol): `step_spot = w (V(S1, rest 0) -
//! V(0))`, then each step moves one more group to its AFTER value, so the
//! last state is the AFTER contract and the steps telescope to `change`
//! (to rounding).
//!
//! # Files
//! This file: the columns, the attribution of one position
//! ([`explain_position`]); `books.rs`: reading the two books and matching
//! positions by id; `table.rs`: the aggregates and EXPLAIN.csv.

mod books;
mod table;

pub use books::{explain_books, read_book, Entry, ExplainBook, Outcome, Position, PositionExplain};
pub use table::{write_csv, Aggregate, BookExplain, BOOK_NAME};

use crate::engines::series;
use crate::greeks::Greeks;
use crate::model::{Contract, JumpParams, Short};

/// The first columns of EXPLAIN.csv, in this order (the interface).
pub const COLUMNS: [&str; 19] = [
    "level",
    "id",
    "underlying",
    "value_before",
    "value_after",
    "change",
    "from_spot",
    "from_vol",
    "from_time",
    "from_rates",
    "from_jumps",
    "from_cross",
    "unexplained",
    "step_spot",
    "step_vol",
    "step_time",
    "step_rates",
    "step_jumps",
    "status",
];

/// Further columns after `status`: the single Greek terms, the time step,
/// and on aggregate rows the counts and the values of positions outside
/// the explain.
pub const EXTRA_COLUMNS: [&str; 16] = [
    "from_delta",
    "from_gamma",
    "from_vega",
    "from_volga",
    "from_rho",
    "from_div_rho",
    "from_jump_rate",
    "from_jump_mean",
    "from_jump_vol",
    "dt_years",
    "positions",
    "left_out",
    "new",
    "expired",
    "value_new",
    "value_expired",
];

/// The order of the waterfall steps (the input groups moved one at a time).
pub const STEP_ORDER: [&str; 5] = ["spot", "vol", "time", "rates", "jumps"];

/// The weighted Greek terms of one position or group (each already
/// multiplied by `w` and by the input moves).
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Terms {
    /// `w delta dS`
    pub delta: f64,
    /// `w gamma dS^2 / 2`
    pub gamma: f64,
    /// `w vega dsigma`
    pub vega: f64,
    /// `w volga dsigma^2 / 2`
    pub volga: f64,
    /// `w vanna dS dsigma`
    pub vanna: f64,
    /// `w theta (T_before - T_after)`
    pub theta: f64,
    /// `w rho dr`
    pub rho: f64,
    /// `w div_rho dq`
    pub div_rho: f64,
    /// `w d_jump_rate dlambda`
    pub jump_rate: f64,
    /// `w d_jump_mean dmu_J`
    pub jump_mean: f64,
    /// `w d_jump_vol ddelta`
    pub jump_vol: f64,
}

impl Terms {
    fn add(&mut self, o: &Terms) {
        self.delta += o.delta;
        self.gamma += o.gamma;
        self.vega += o.vega;
        self.volga += o.volga;
        self.vanna += o.vanna;
        self.theta += o.theta;
        self.rho += o.rho;
        self.div_rho += o.div_rho;
        self.jump_rate += o.jump_rate;
        self.jump_mean += o.jump_mean;
        self.jump_vol += o.jump_vol;
    }

    /// Spot: delta and gamma.
    pub fn spot(&self) -> f64 {
        self.delta + self.gamma
    }
    /// Vol: vega and volga.
    pub fn vol(&self) -> f64 {
        self.vega + self.volga
    }
    /// Time: theta.
    pub fn time(&self) -> f64 {
        self.theta
    }
    /// Rates: rho and div_rho.
    pub fn rates(&self) -> f64 {
        self.rho + self.div_rho
    }
    /// Jumps: the three jump sensitivities.
    pub fn jumps(&self) -> f64 {
        self.jump_rate + self.jump_mean + self.jump_vol
    }
    /// The cross term: vanna.
    pub fn cross(&self) -> f64 {
        self.vanna
    }
    /// Everything the Greeks explain.
    pub fn explained(&self) -> f64 {
        self.spot() + self.vol() + self.time() + self.rates() + self.jumps() + self.cross()
    }
}

/// The explain of one position, or the sum over a group.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Explain {
    /// `w V` at the BEFORE inputs.
    pub value_before: f64,
    /// `w V` at the AFTER inputs.
    pub value_after: f64,
    /// `value_after - value_before` (for a group: the sum of the positions').
    pub change: f64,
    /// The Greek terms.
    pub terms: Terms,
    /// The waterfall steps in [`STEP_ORDER`].
    pub steps: [f64; 5],
}

impl Explain {
    /// `change` less every Greek term.
    pub fn unexplained(&self) -> f64 {
        self.change - self.terms.explained()
    }

    fn add(&mut self, o: &Explain) {
        self.value_before += o.value_before;
        self.value_after += o.value_after;
        self.change += o.change;
        self.terms.add(&o.terms);
        for (s, x) in self.steps.iter_mut().zip(o.steps) {
            *s += x;
        }
    }

    /// The first value that is not finite, by column name.
    pub fn non_finite(&self) -> Option<(&'static str, f64)> {
        let names = COLUMNS[3..18].iter().chain(&EXTRA_COLUMNS[..9]);
        let values = explain_values(self)
            .into_iter()
            .chain(term_values(&self.terms));
        names
            .zip(values)
            .find(|(_, v)| !v.is_finite())
            .map(|(n, v)| (*n, v))
    }
}

/// Series price of a contract, or the error as text.
pub(crate) fn value(c: &Contract) -> Result<Greeks, String> {
    series::price(c)
        .map(|r| r.greeks)
        .map_err(|e| e.to_string())
}

/// A contract with some inputs moved, validated (a mixed state can leave
/// the model's domain, e.g. `jump_rate x expiry`).
fn mixed(c: &Contract, step: &str) -> Result<Contract, String> {
    Contract::new(
        c.kind,
        c.spot,
        c.strike,
        c.expiry,
        c.rate,
        c.div_yield,
        c.vol,
        c.jumps,
    )
    .map_err(|e| format!("waterfall step {step}: {e}"))
}

/// Explains the change of one position of weight `w` from `before` to
/// `after` (same kind and strike; the caller checks the contract terms).
///
/// # Errors
/// A message when a contract cannot be priced, a waterfall state leaves
/// the model's domain, or a value is not finite (naming the column).
pub fn explain_position(before: &Contract, after: &Contract, w: f64) -> Result<Explain, String> {
    let g = value(before)?;
    let d_s = after.spot - before.spot;
    let d_vol = after.vol - before.vol;
    let d_t = after.expiry - before.expiry;
    let terms = Terms {
        delta: w * g.delta * d_s,
        gamma: w * 0.5 * g.gamma * d_s * d_s,
        vega: w * g.vega * d_vol,
        volga: w * 0.5 * g.volga * d_vol * d_vol,
        vanna: w * g.vanna * d_s * d_vol,
        // theta = -dV/dT: the first-order change is -dV/dT x (-dT).
        theta: w * g.theta * (-d_t),
        rho: w * g.rho * (after.rate - before.rate),
        div_rho: w * g.div_rho * (after.div_yield - before.div_yield),
        jump_rate: w * g.d_jump_rate * (after.jumps.rate - before.jumps.rate),
        jump_mean: w * g.d_jump_mean * (after.jumps.mean - before.jumps.mean),
        jump_vol: w * g.d_jump_vol * (after.jumps.vol - before.jumps.vol),
    };
    // The waterfall: move one input group at a time, in STEP_ORDER.
    let mut c = *before;
    let mut values = [0.0; 6];
    values[0] = w * g.price;
    for (i, step) in STEP_ORDER.iter().enumerate() {
        match i {
            0 => c.spot = after.spot,
            1 => c.vol = after.vol,
            2 => c.expiry = after.expiry,
            3 => {
                c.rate = after.rate;
                c.div_yield = after.div_yield;
            }
            _ => {
                c.jumps = JumpParams {
                    rate: after.jumps.rate,
                    mean: after.jumps.mean,
                    vol: after.jumps.vol,
                }
            }
        }
        let v = if i == 4 {
            value(after)?.price
        } else {
            value(&mixed(&c, step)?)
                .map_err(|e| format!("waterfall step {step}: {e}"))?
                .price
        };
        values[i + 1] = w * v;
    }
    let mut steps = [0.0; 5];
    for i in 0..5 {
        steps[i] = values[i + 1] - values[i];
    }
    let e = Explain {
        value_before: values[0],
        value_after: values[5],
        change: values[5] - values[0],
        terms,
        steps,
    };
    if let Some((col, v)) = e.non_finite() {
        return Err(format!(
            "{col} is not finite ({}): outside the range double precision can represent",
            Short(v)
        ));
    }
    Ok(e)
}

/// `value_before` to `step_jumps` (15 values).
pub(crate) fn explain_values(e: &Explain) -> [f64; 15] {
    let t = &e.terms;
    let s = e.steps;
    [
        e.value_before,
        e.value_after,
        e.change,
        t.spot(),
        t.vol(),
        t.time(),
        t.rates(),
        t.jumps(),
        t.cross(),
        e.unexplained(),
        s[0],
        s[1],
        s[2],
        s[3],
        s[4],
    ]
}

pub(crate) fn explain_fields(e: &Explain) -> Vec<String> {
    explain_values(e).map(num).to_vec()
}

/// `from_delta` to `from_jump_vol` (9 values).
pub(crate) fn term_values(t: &Terms) -> [f64; 9] {
    [
        t.delta,
        t.gamma,
        t.vega,
        t.volga,
        t.rho,
        t.div_rho,
        t.jump_rate,
        t.jump_mean,
        t.jump_vol,
    ]
}

pub(crate) fn term_fields(t: &Terms) -> Vec<String> {
    term_values(t).map(num).to_vec()
}

/// Formats a number in shortest round-trip form.
pub(crate) fn num(x: f64) -> String {
    zmij::Buffer::new().format(x).to_string()
}

#[cfg(test)]
mod tests;
