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

use crate::book::reader::{parse_row, text};
use crate::book::records::{Record, RecordReader};
use crate::book::schema::{BookInputs, Schema};
use crate::engines::series;
use crate::greeks::Greeks;
use crate::model::{Contract, JumpParams, Short};
use std::collections::{BTreeMap, HashMap};
use std::io::Read;

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
fn value(c: &Contract) -> Result<Greeks, String> {
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

/// One position as read from a book.
#[derive(Debug, Clone, PartialEq)]
pub struct Position {
    /// The `underlying` field (trimmed; empty when absent).
    pub underlying: String,
    /// The validated contract (market inputs and terms).
    pub contract: Contract,
    /// Signed size.
    pub quantity: f64,
    /// Contract multiplier.
    pub multiplier: f64,
}

impl Position {
    /// `quantity x multiplier`.
    pub fn weight(&self) -> f64 {
        self.quantity * self.multiplier
    }
}

/// One record of a book: its line, its raw id and underlying text (when
/// the record has those fields and they are text), and the position or why
/// it could not be read.
#[derive(Debug, Clone, PartialEq)]
pub struct Entry {
    /// Line where the record starts.
    pub line: u64,
    /// The `id` field, spaces trimmed (`None`: missing or not UTF-8).
    pub id: Option<String>,
    /// The `underlying` field, spaces trimmed, if readable.
    pub underlying: Option<String>,
    /// The position, or the problem (`column: problem`, without the line).
    pub position: Result<Position, String>,
}

/// A whole book read for the explain.
#[derive(Debug, Clone, PartialEq)]
pub struct ExplainBook {
    /// The name used in messages (the path as given).
    pub name: String,
    /// Every record, in order.
    pub entries: Vec<Entry>,
    /// Records skipped because every field was empty.
    pub skipped: u64,
}

/// Reads a book for the explain. Fatal problems (a bad header, no `id`
/// column, an I/O error) are returned as `Err`, naming the file; a record
/// that does not parse is kept as an [`Entry`] with its problem.
///
/// # Errors
/// The message of the fatal problem.
pub fn read_book<R: Read>(
    input: R,
    name: &str,
    inputs: &BookInputs,
) -> Result<ExplainBook, String> {
    let io = |e: std::io::Error| format!("cannot read {name}: {e}");
    let mut reader = RecordReader::new(input);
    let mut header = Record::default();
    reader.read_record(&mut header).map_err(io)?;
    let headers: csv::ByteRecord = header.iter().collect();
    let schema = Schema::with_inputs(&headers, inputs).map_err(|e| format!("{name}: {e}"))?;
    let Some(id_col) = schema.id else {
        return Err(format!(
            "{name} line 1: the book has no id column: the explain matches positions by id, \
             so both books need one"
        ));
    };
    let mut entries = Vec::new();
    let mut rec = Record::default();
    let mut row = 0;
    while let Some(line) = reader.read_record(&mut rec).map_err(io)? {
        row += 1;
        let field = |i: Option<usize>| {
            i.and_then(|i| rec.get(i))
                .and_then(|f| text(f).ok())
                .map(str::to_string)
        };
        let id = field(Some(id_col));
        let underlying = field(schema.underlying);
        let position = parse_row(&schema, &rec, row, line)
            .map(|r| Position {
                underlying: r.underlying.to_string(),
                contract: r.contract,
                quantity: r.quantity,
                multiplier: r.multiplier,
            })
            .map_err(|e| e.message);
        entries.push(Entry {
            line,
            id,
            underlying,
            position,
        });
    }
    Ok(ExplainBook {
        name: name.to_string(),
        entries,
        skipped: reader.skipped(),
    })
}

/// What became of one position.
#[derive(Debug, Clone, PartialEq)]
pub enum Outcome {
    /// In both books and explained; the time step `T_before - T_after` in years.
    Explained(Explain, f64),
    /// In AFTER only: its value at the AFTER inputs.
    New(f64),
    /// In BEFORE only: its value at the BEFORE inputs.
    Expired(f64),
    /// Could not be explained: the message names file, line and problem.
    Error(String),
}

/// One position row of the explain.
#[derive(Debug, Clone, PartialEq)]
pub struct PositionExplain {
    /// The id (empty when the record had none).
    pub id: String,
    /// The underlying (from AFTER when readable, else BEFORE; may be empty).
    pub underlying: String,
    /// The result.
    pub outcome: Outcome,
}

impl PositionExplain {
    /// The `status` field: `ok`, `new`, `expired` or `error: ...`.
    pub fn status(&self) -> String {
        match &self.outcome {
            Outcome::Explained(..) => "ok".into(),
            Outcome::New(_) => "new".into(),
            Outcome::Expired(_) => "expired".into(),
            Outcome::Error(m) => format!("error: {m}"),
        }
    }
}

/// The contract terms that must agree between the two books, named.
fn term_differences(b: &Position, a: &Position) -> Vec<String> {
    let mut out = Vec::new();
    if b.contract.kind != a.contract.kind {
        out.push(format!("kind {} vs {}", b.contract.kind, a.contract.kind));
    }
    let mut num = |name: &str, x: f64, y: f64| {
        if x != y {
            out.push(format!("{name} {} vs {}", Short(x), Short(y)));
        }
    };
    num("strike", b.contract.strike, a.contract.strike);
    num("quantity", b.quantity, a.quantity);
    num("multiplier", b.multiplier, a.multiplier);
    if b.underlying != a.underlying {
        out.push(format!(
            "underlying '{}' vs '{}'",
            b.underlying, a.underlying
        ));
    }
    out
}

/// The lines of `id` in a book.
fn index(book: &ExplainBook) -> HashMap<&str, Vec<usize>> {
    let mut m: HashMap<&str, Vec<usize>> = HashMap::new();
    for (i, e) in book.entries.iter().enumerate() {
        if let Some(id) = e.id.as_deref().filter(|s| !s.is_empty()) {
            m.entry(id).or_default().push(i);
        }
    }
    m
}

fn lines_of(book: &ExplainBook, at: &[usize]) -> String {
    let lines: Vec<String> = at
        .iter()
        .map(|&i| book.entries[i].line.to_string())
        .collect();
    lines.join(", ")
}

/// Why an entry without a usable id cannot be matched.
fn no_id(book: &ExplainBook, e: &Entry) -> String {
    let why = match (&e.id, &e.position) {
        (None, Err(m)) => m.clone(),
        (None, Ok(_)) => "id is not valid UTF-8".to_string(),
        (Some(_), _) => "id is empty: positions are matched by id".to_string(),
    };
    format!("{} line {}: {why}", book.name, e.line)
}

/// Explains every position: the ids of BEFORE in its order, then those only
/// in AFTER in theirs. Records without a usable id, repeated ids and rows
/// that do not parse become error rows; nothing is dropped.
pub fn explain_books(before: &ExplainBook, after: &ExplainBook) -> Vec<PositionExplain> {
    use rayon::prelude::*;
    let ib = index(before);
    let ia = index(after);
    // First the list of positions in output order (cheap, sequential), then
    // their outcomes on the rayon pool; `collect` keeps the order, and each
    // outcome depends on its own position only.
    enum Job<'a> {
        NoId(&'a ExplainBook, &'a Entry),
        Id(&'a str),
    }
    let mut jobs = Vec::new();
    let mut done: std::collections::HashSet<&str> = std::collections::HashSet::new();
    for (book, first) in [(before, true), (after, false)] {
        for e in &book.entries {
            match e.id.as_deref().filter(|s| !s.is_empty()) {
                None => jobs.push(Job::NoId(book, e)),
                Some(id) => {
                    if (first || !ib.contains_key(id)) && done.insert(id) {
                        jobs.push(Job::Id(id));
                    }
                }
            }
        }
    }
    let underlying_of = |e: &Entry| -> String {
        match &e.position {
            Ok(p) => p.underlying.clone(),
            Err(_) => e.underlying.clone().unwrap_or_default(),
        }
    };
    jobs.par_iter()
        .with_min_len(64)
        .map(|job| match *job {
            Job::NoId(book, e) => PositionExplain {
                id: String::new(),
                underlying: underlying_of(e),
                outcome: Outcome::Error(no_id(book, e)),
            },
            Job::Id(id) => {
                let b_at = ib.get(id).map(Vec::as_slice).unwrap_or(&[]);
                let a_at = ia.get(id).map(Vec::as_slice).unwrap_or(&[]);
                let b_entry = b_at.first().map(|&i| &before.entries[i]);
                let a_entry = a_at.first().map(|&i| &after.entries[i]);
                PositionExplain {
                    id: id.to_string(),
                    underlying: a_entry.or(b_entry).map(underlying_of).unwrap_or_default(),
                    outcome: outcome(before, after, id, b_at, a_at, b_entry, a_entry),
                }
            }
        })
        .collect()
}

fn outcome(
    before: &ExplainBook,
    after: &ExplainBook,
    id: &str,
    b_at: &[usize],
    a_at: &[usize],
    b_entry: Option<&Entry>,
    a_entry: Option<&Entry>,
) -> Outcome {
    let mut problems = Vec::new();
    for (book, at) in [(before, b_at), (after, a_at)] {
        if at.len() > 1 {
            problems.push(format!(
                "{}: id '{id}' is repeated on lines {}: a position must appear once in each book",
                book.name,
                lines_of(book, at)
            ));
        }
    }
    if !problems.is_empty() {
        return Outcome::Error(problems.join("; "));
    }
    for (book, e) in [(before, b_entry), (after, a_entry)] {
        if let Some(Entry {
            line,
            position: Err(m),
            ..
        }) = e
        {
            problems.push(format!("{} line {line}: {m}", book.name));
        }
    }
    if !problems.is_empty() {
        return Outcome::Error(problems.join("; "));
    }
    fn pos(e: Option<&Entry>) -> Option<&Position> {
        e.and_then(|e| e.position.as_ref().ok())
    }
    match (pos(b_entry), pos(a_entry)) {
        (Some(b), Some(a)) => {
            let (lb, la) = (b_entry.unwrap().line, a_entry.unwrap().line);
            let diff = term_differences(b, a);
            if !diff.is_empty() {
                return Outcome::Error(format!(
                    "contract terms differ between {} line {lb} and {} line {la}: {}",
                    before.name,
                    after.name,
                    diff.join(", ")
                ));
            }
            match explain_position(&b.contract, &a.contract, b.weight()) {
                Ok(e) => Outcome::Explained(e, b.contract.expiry - a.contract.expiry),
                Err(m) => Outcome::Error(format!(
                    "{} line {lb} / {} line {la}: {m}",
                    before.name, after.name
                )),
            }
        }
        (Some(b), None) => one_side(
            b,
            before,
            b_entry.unwrap().line,
            "value_before",
            Outcome::Expired,
        ),
        (None, Some(a)) => one_side(a, after, a_entry.unwrap().line, "value_after", Outcome::New),
        (None, None) => unreachable!("an id comes from one of the books"),
    }
}

fn one_side(
    p: &Position,
    book: &ExplainBook,
    line: u64,
    column: &str,
    make: fn(f64) -> Outcome,
) -> Outcome {
    match value(&p.contract) {
        Ok(g) if (p.weight() * g.price).is_finite() => make(p.weight() * g.price),
        Ok(g) => Outcome::Error(format!(
            "{} line {line}: {column} is not finite ({}): outside the range double precision can represent",
            book.name,
            Short(p.weight() * g.price)
        )),
        Err(m) => Outcome::Error(format!("{} line {line}: {m}", book.name)),
    }
}

/// The sum over a group of positions (an underlying or the book).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Aggregate {
    /// Sum over the explained positions.
    pub explain: Explain,
    /// Positions explained (in the sum).
    pub positions: u64,
    /// Positions left out because of an error.
    pub left_out: u64,
    /// New positions (not in `change`).
    pub new: u64,
    /// Expired positions (not in `change`).
    pub expired: u64,
    /// Sum of the new positions' values (AFTER inputs).
    pub value_new: f64,
    /// Sum of the expired positions' values (BEFORE inputs).
    pub value_expired: f64,
}

impl Aggregate {
    fn add(&mut self, p: &PositionExplain) {
        match &p.outcome {
            Outcome::Explained(e, _) => {
                self.explain.add(e);
                self.positions += 1;
            }
            Outcome::New(v) => {
                self.new += 1;
                self.value_new += v;
            }
            Outcome::Expired(v) => {
                self.expired += 1;
                self.value_expired += v;
            }
            Outcome::Error(_) => self.left_out += 1,
        }
    }

    /// The first aggregate that is not finite (the sum overflowed).
    pub fn non_finite(&self) -> Option<(&'static str, f64)> {
        self.explain.non_finite().or_else(|| {
            [
                ("value_new", self.value_new),
                ("value_expired", self.value_expired),
            ]
            .into_iter()
            .find(|(_, v)| !v.is_finite())
        })
    }

    /// `ok`, `partial: N positions left out ...`, or `error: ... not finite`.
    pub fn status(&self) -> String {
        if let Some((col, _)) = self.non_finite() {
            return format!("error: {col} is not finite (the sum overflows)");
        }
        if self.left_out > 0 {
            return format!(
                "partial: {} position{} left out (error rows, see their status); the sums are over the other {}",
                self.left_out,
                if self.left_out == 1 { "" } else { "s" },
                self.positions
            );
        }
        "ok".into()
    }
}

/// The explain of a whole book: positions, then aggregates per underlying
/// (by name) and for the book.
#[derive(Debug, Clone, PartialEq)]
pub struct BookExplain {
    /// One row per position.
    pub positions: Vec<PositionExplain>,
    /// Per underlying, sorted by name.
    pub underlyings: Vec<(String, Aggregate)>,
    /// The whole book.
    pub book: Aggregate,
}

impl BookExplain {
    /// Explains and aggregates two books.
    pub fn new(before: &ExplainBook, after: &ExplainBook) -> BookExplain {
        let positions = explain_books(before, after);
        let mut by: BTreeMap<&str, Aggregate> = BTreeMap::new();
        let mut book = Aggregate::default();
        for p in &positions {
            by.entry(p.underlying.as_str()).or_default().add(p);
            book.add(p);
        }
        let underlyings = by.into_iter().map(|(k, v)| (k.to_string(), v)).collect();
        BookExplain {
            positions,
            underlyings,
            book,
        }
    }

    /// True when every position was explained or is new/expired and every
    /// aggregate is finite.
    pub fn all_ok(&self) -> bool {
        self.book.left_out == 0
            && self.book.non_finite().is_none()
            && self
                .underlyings
                .iter()
                .all(|(_, a)| a.non_finite().is_none())
    }
}

/// Formats a number in shortest round-trip form.
fn num(x: f64) -> String {
    zmij::Buffer::new().format(x).to_string()
}

/// The book row's `underlying` field (as in the risk report's CSVs).
pub const BOOK_NAME: &str = "(book)";

/// Writes EXPLAIN.csv: [`COLUMNS`] then [`EXTRA_COLUMNS`].
///
/// # Errors
/// I/O errors of `out`.
pub fn write_csv<W: std::io::Write>(out: W, r: &BookExplain) -> std::io::Result<()> {
    let mut w = csv::Writer::from_writer(out);
    let to_io = |e: csv::Error| std::io::Error::other(e.to_string());
    let header: Vec<&str> = COLUMNS
        .iter()
        .chain(EXTRA_COLUMNS.iter())
        .copied()
        .collect();
    w.write_record(&header).map_err(to_io)?;
    let empty = String::new;
    for p in &r.positions {
        let mut f: Vec<String> = vec!["position".into(), p.id.clone(), p.underlying.clone()];
        match &p.outcome {
            Outcome::Explained(e, dt) => {
                f.extend(explain_fields(e));
                f.push(p.status());
                f.extend(term_fields(&e.terms));
                f.push(num(*dt));
                f.extend((0..6).map(|_| empty()));
            }
            Outcome::New(v) | Outcome::Expired(v) => {
                let new = matches!(p.outcome, Outcome::New(_));
                f.push(if new { empty() } else { num(*v) });
                f.push(if new { num(*v) } else { empty() });
                f.extend((0..13).map(|_| empty()));
                f.push(p.status());
                f.extend((0..EXTRA_COLUMNS.len()).map(|_| empty()));
            }
            Outcome::Error(_) => {
                f.extend((0..15).map(|_| empty()));
                f.push(p.status());
                f.extend((0..EXTRA_COLUMNS.len()).map(|_| empty()));
            }
        }
        w.write_record(&f).map_err(to_io)?;
    }
    let groups = r
        .underlyings
        .iter()
        .map(|(n, a)| ("underlying", n.as_str(), a))
        .chain(std::iter::once(("book", BOOK_NAME, &r.book)));
    for (level, name, a) in groups {
        let mut f: Vec<String> = vec![level.into(), empty(), name.into()];
        let ok = a.non_finite().is_none();
        if ok {
            f.extend(explain_fields(&a.explain));
        } else {
            f.extend((0..15).map(|_| empty()));
        }
        f.push(a.status());
        if ok {
            f.extend(term_fields(&a.explain.terms));
        } else {
            f.extend((0..9).map(|_| empty()));
        }
        f.push(empty());
        f.extend([a.positions, a.left_out, a.new, a.expired].map(|n| n.to_string()));
        f.push(if ok { num(a.value_new) } else { empty() });
        f.push(if ok { num(a.value_expired) } else { empty() });
        w.write_record(&f).map_err(to_io)?;
    }
    w.flush()
}

/// `value_before` to `step_jumps` (15 values).
fn explain_values(e: &Explain) -> [f64; 15] {
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

fn explain_fields(e: &Explain) -> Vec<String> {
    explain_values(e).map(num).to_vec()
}

/// `from_delta` to `from_jump_vol` (9 values).
fn term_values(t: &Terms) -> [f64; 9] {
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

fn term_fields(t: &Terms) -> Vec<String> {
    term_values(t).map(num).to_vec()
}

#[cfg(test)]
#[path = "explain_tests.rs"]
mod tests;
