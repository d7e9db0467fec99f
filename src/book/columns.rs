//! Books held in memory as columns (one array per column), priced with the
//! same validation, engine and row contract as `saltus price` on a CSV book:
//! for bindings (the Python package) and callers that already hold their
//! data as arrays.
//!
//! # Design
//! A column is either numbers ([`Column::Numbers`], where NaN stands for an
//! empty cell, the way data-frame libraries mark a missing value) or text
//! ([`Column::Text`], parsed exactly as a CSV field is, with the same
//! messages: `strike is not a number: 'abc'`, `vol is not a number: '32%'
//! (write 0.32)`). Fields are read in the order the CSV reader reads them,
//! so a row's first problem is reported with the same words. A row that
//! cannot be priced gets NaN result values and a status `error: row N:
//! message`, `N` the row's 0-based position in the arrays; NaN never
//! appears in an `ok` row.
//!
//! Rows are cut into chunks of [`CHUNK_ROWS`] priced on the rayon pool and
//! joined in chunk order; every row is a pure function of its inputs, so the
//! result does not depend on the thread count or on how a book is split.

use super::reader::{general_number, plain_decimal};
use super::writer::non_finite_message;
use crate::engines::pide::{Exercise, PideConfig};
use crate::engines::series;
use crate::greeks::american;
use crate::greeks::RAW_COLUMNS;
use crate::market::dates::{self, Date};
use crate::market::implied_vol::implied_vol;
use crate::model::{Contract, JumpParams, OptionKind, Short};
use rayon::prelude::*;

/// Rows per unit of parallel work.
pub const CHUNK_ROWS: usize = 4096;

/// One input column.
#[derive(Debug, Clone, Copy)]
pub enum Column<'a> {
    /// Numbers; NaN is an empty cell.
    Numbers(&'a [f64]),
    /// Text as a CSV field holds it; `None` is an empty cell.
    Text(&'a [Option<String>]),
    /// Text in Arrow's layout (no object per cell): field `i` is
    /// `data[offsets[i]..offsets[i + 1]]`, empty where `null[i]`.
    Utf8 {
        /// `len + 1` byte offsets into `data`.
        offsets: &'a [i64],
        /// The UTF-8 bytes of every field.
        data: &'a [u8],
        /// One flag per row: the cell is empty (null).
        null: &'a [bool],
    },
}

impl<'a> Column<'a> {
    pub(crate) fn len(&self) -> usize {
        match self {
            Column::Numbers(v) => v.len(),
            Column::Text(v) => v.len(),
            Column::Utf8 { null, .. } => null.len(),
        }
    }

    /// Row `i` as text, surrounding ASCII spaces trimmed; `None` for an
    /// empty cell, a number, or offsets that do not fit the data.
    pub(crate) fn text(&self, i: usize) -> Option<&'a [u8]> {
        let t = match *self {
            Column::Numbers(_) => return None,
            Column::Text(v) => v[i].as_deref()?.as_bytes(),
            Column::Utf8 {
                offsets,
                data,
                null,
            } => {
                if null[i] {
                    return None;
                }
                let (a, b) = (offsets[i], offsets[i + 1]);
                data.get(usize::try_from(a).ok()?..usize::try_from(b).ok()?)?
            }
        };
        Some(t.trim_ascii()).filter(|t| !t.is_empty())
    }

    /// The value of row `i`: `Ok(None)` for an empty cell.
    fn get(&self, i: usize, name: &str) -> Result<Option<f64>, String> {
        match self {
            Column::Numbers(v) => Ok(Some(v[i]).filter(|x| !x.is_nan())),
            _ => match self.text(i) {
                None => Ok(None),
                Some(t) => plain_decimal(t)
                    .map_or_else(|| general_number(t, name), Ok)
                    .map(Some),
            },
        }
    }

    fn required(&self, i: usize, name: &str) -> Result<f64, String> {
        self.get(i, name)?
            .ok_or_else(|| format!("{name} is missing"))
    }
}

/// An optional number: the default for an empty cell; like the CSV
/// reader, a value that is not finite (`inf`, `nan` written out) is refused.
fn optional(col: &Option<Column<'_>>, i: usize, name: &str, default: f64) -> Result<f64, String> {
    let v = match col {
        Some(c) => c.get(i, name)?.unwrap_or(default),
        None => default,
    };
    if v.is_finite() {
        Ok(v)
    } else {
        Err(format!("{name} is not a finite number ({})", Short(v)))
    }
}

/// A book as columns. Every column has the same length.
#[derive(Debug, Clone)]
pub struct ColumnBook<'a> {
    /// `call` or `put`, any case, surrounding spaces ignored (a text column).
    pub kind: Column<'a>,
    /// Spot price.
    pub spot: Column<'a>,
    /// Strike.
    pub strike: Column<'a>,
    /// Years to expiry.
    pub expiry: Column<'a>,
    /// Continuously compounded rate.
    pub rate: Column<'a>,
    /// Diffusion volatility.
    pub vol: Column<'a>,
    /// Jumps per year.
    pub jump_rate: Column<'a>,
    /// Mean log jump size.
    pub jump_mean: Column<'a>,
    /// Standard deviation of the log jump size.
    pub jump_vol: Column<'a>,
    /// Dividend yield (default 0).
    pub div_yield: Option<Column<'a>>,
    /// Signed position size (checked, default 1; not used by pricing).
    pub quantity: Option<Column<'a>>,
    /// Contract multiplier (checked, default 1; not used by pricing).
    pub multiplier: Option<Column<'a>>,
    /// Per-row valuation dates `YYYY-MM-DD` (text; an empty cell takes
    /// `default_valuation`), for expiries written as dates.
    pub valuation_date: Option<Column<'a>>,
    /// The valuation date of rows without their own.
    pub default_valuation: Option<Date>,
    /// `european` (default, also empty) or `american`, any case (text).
    /// With this column the results carry `early_exercise_premium` and
    /// `error_estimate`, as `saltus price` writes them.
    pub exercise: Option<Column<'a>>,
    /// The PIDE's tolerance for American rows (`--pide-tol`).
    pub pide: PideConfig,
}

/// Why a column book cannot be priced at all.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum ColumnError {
    /// Columns of different lengths.
    #[error("column {name} has {len} rows where kind has {expected}")]
    Length {
        /// The column.
        name: &'static str,
        /// Its length.
        len: usize,
        /// The length of `kind`.
        expected: usize,
    },
    /// Text buffers whose offsets do not give one field per row.
    #[error("column {name} has malformed text buffers (offsets must number rows + 1)")]
    Malformed {
        /// The column.
        name: &'static str,
    },
}

impl<'a> ColumnBook<'a> {
    /// Number of rows.
    pub fn len(&self) -> usize {
        self.kind.len()
    }

    /// True for a book without rows.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    fn named(&self) -> Vec<(&'static str, Column<'a>)> {
        let mut v = vec![
            ("kind", self.kind),
            ("spot", self.spot),
            ("strike", self.strike),
            ("expiry", self.expiry),
            ("rate", self.rate),
            ("vol", self.vol),
            ("jump_rate", self.jump_rate),
            ("jump_mean", self.jump_mean),
            ("jump_vol", self.jump_vol),
        ];
        for (name, c) in [
            ("div_yield", &self.div_yield),
            ("quantity", &self.quantity),
            ("multiplier", &self.multiplier),
            ("valuation_date", &self.valuation_date),
            ("exercise", &self.exercise),
        ] {
            if let Some(c) = c {
                v.push((name, *c));
            }
        }
        v
    }

    /// Checks that every column has as many rows as `kind`.
    ///
    /// # Errors
    /// [`ColumnError::Length`] naming the first column that differs.
    pub fn check(&self) -> Result<(), ColumnError> {
        let expected = self.len();
        for (name, c) in self.named() {
            if let Column::Utf8 { offsets, null, .. } = c {
                if offsets.len() != null.len() + 1 {
                    return Err(ColumnError::Malformed { name });
                }
            }
            if c.len() != expected {
                return Err(ColumnError::Length {
                    name,
                    len: c.len(),
                    expected,
                });
            }
        }
        Ok(())
    }

    /// True when an expiry may be a date (a default valuation date is
    /// given or the book has a `valuation_date` column): the results then
    /// carry `expiry_years`, as the CSV commands write it.
    pub fn dated(&self) -> bool {
        self.default_valuation.is_some() || self.valuation_date.is_some()
    }

    /// The `expiry` of row `i` in years: a number, or an ISO date turned
    /// into an ACT/365 fixed year fraction from the row's valuation date
    /// (the CSV reader's rule and messages).
    fn expiry_years(&self, i: usize) -> Result<f64, String> {
        let as_number = self.expiry.get(i, "expiry");
        let field = match (&as_number, self.expiry.text(i)) {
            (Err(_), Some(t)) => String::from_utf8_lossy(t),
            _ => return as_number?.ok_or_else(|| "expiry is missing".to_string()),
        };
        if !dates::looks_like_date(&field) {
            return as_number?.ok_or_else(|| "expiry is missing".to_string());
        }
        let valuation = match self.valuation_date.as_ref().and_then(|c| c.text(i)) {
            Some(v) => dates::valuation_field(&String::from_utf8_lossy(v), self.default_valuation)?,
            None => self.default_valuation,
        };
        dates::dated_expiry("expiry", &field, valuation)
    }

    /// Row `i`'s exercise style (the CSV reader's rule and message).
    fn exercise_of(&self, i: usize) -> Result<Exercise, String> {
        let Some(col) = &self.exercise else {
            return Ok(Exercise::European);
        };
        let t = match (col, col.text(i)) {
            (Column::Numbers(v), _) if !v[i].is_nan() => {
                return Err(format!(
                    "exercise '{}' is not european or american",
                    Short(v[i])
                ))
            }
            (_, None) => return Ok(Exercise::European),
            (_, Some(t)) => String::from_utf8_lossy(t),
        };
        if t.eq_ignore_ascii_case("european") {
            Ok(Exercise::European)
        } else if t.eq_ignore_ascii_case("american") {
            Ok(Exercise::American)
        } else {
            Err(format!(
                "exercise '{}' is not european or american",
                t.escape_debug()
            ))
        }
    }

    /// Row `i` as a validated contract, or the message of its first problem
    /// (the same words the CSV reader uses, without the line).
    pub fn contract(&self, i: usize) -> Result<Contract, String> {
        self.row(i).map(|(c, _)| c)
    }

    /// Row `i` as a validated contract and its exercise style.
    pub fn row(&self, i: usize) -> Result<(Contract, Exercise), String> {
        let kind = match (self.kind, self.kind.text(i)) {
            (Column::Numbers(v), _) if !v[i].is_nan() => {
                return Err(format!("kind '{}' is not call or put", Short(v[i])))
            }
            (_, None) => return Err("kind is missing".into()),
            (_, Some(t)) => {
                let t = String::from_utf8_lossy(t);
                t.parse::<OptionKind>()
                    .map_err(|()| format!("kind '{}' is not call or put", t.escape_debug()))?
            }
        };
        let exercise = self.exercise_of(i)?;
        let spot = self.spot.required(i, "spot")?;
        let strike = self.strike.required(i, "strike")?;
        let expiry = self.expiry_years(i)?;
        let rate = self.rate.required(i, "rate")?;
        let vol = self.vol.required(i, "vol")?;
        let jump_rate = self.jump_rate.required(i, "jump_rate")?;
        let jump_mean = self.jump_mean.required(i, "jump_mean")?;
        let jump_vol = self.jump_vol.required(i, "jump_vol")?;
        let div_yield = optional(&self.div_yield, i, "div_yield", 0.0)?;
        optional(&self.quantity, i, "quantity", 1.0)?;
        optional(&self.multiplier, i, "multiplier", 1.0)?;
        let c = Contract::new(
            kind,
            spot,
            strike,
            expiry,
            rate,
            div_yield,
            vol,
            JumpParams {
                rate: jump_rate,
                mean: jump_mean,
                vol: jump_vol,
            },
        )
        .map_err(|e| e.to_string())?;
        Ok((c, exercise))
    }
}

/// Result columns of [`price_columns`], in the order `saltus price` writes them.
#[derive(Debug, Clone, PartialEq)]
pub struct PricedColumns {
    /// `price, delta, gamma, vega, theta, rho, div_rho, d_jump_rate,
    /// d_jump_mean, d_jump_vol` ([`RAW_COLUMNS`]), raw units.
    pub values: Vec<Vec<f64>>,
    /// `implied_vol`, when asked for (NaN where it does not exist; the status says why).
    pub implied_vol: Option<Vec<f64>>,
    /// `expiry_years`, the year fraction used, when the book is dated
    /// ([`ColumnBook::dated`]; NaN on a failed row).
    pub expiry_years: Option<Vec<f64>>,
    /// `early_exercise_premium` and `error_estimate`, when the book has an
    /// `exercise` column: American minus European and the PIDE's estimate on
    /// American rows; 0 and the series truncation bound on European rows.
    pub exercise: Option<(Vec<f64>, Vec<f64>)>,
    /// Series terms (NaN on a failed row).
    pub terms: Vec<f64>,
    /// `ok`, `warning: row N: ...` or `error: row N: ...`.
    pub status: Vec<String>,
}

/// Outcome of one row: values, implied vol, terms, status.
struct RowOut {
    premium: f64,
    error_estimate: f64,
    expiry_years: f64,
    values: [f64; 10],
    implied_vol: f64,
    terms: f64,
    status: String,
}

fn failed(i: usize, message: &str) -> RowOut {
    RowOut {
        premium: f64::NAN,
        error_estimate: f64::NAN,
        expiry_years: f64::NAN,
        values: [f64::NAN; 10],
        implied_vol: f64::NAN,
        terms: f64::NAN,
        status: format!("error: row {i}: {message}"),
    }
}

/// An American row: the PIDE's price and Greeks, as `saltus price` writes them.
fn american_row(book: &ColumnBook<'_>, c: &Contract, i: usize, with_iv: bool) -> RowOut {
    let a = match american::price(c, &book.pide) {
        Ok(a) => a,
        Err(m) => return failed(i, &m),
    };
    let values = a.greeks.headline();
    if let Some((j, v)) = values.iter().enumerate().find(|(_, v)| !v.is_finite()) {
        return failed(i, &non_finite_message(RAW_COLUMNS[j], *v));
    }
    let status = if with_iv {
        format!(
            "warning: row {i}: implied_vol: not defined for American exercise (the \
             Black-Scholes inversion is European)"
        )
    } else {
        "ok".to_string()
    };
    RowOut {
        premium: a.early_exercise_premium,
        error_estimate: a.error_estimate,
        expiry_years: c.expiry,
        values,
        implied_vol: f64::NAN,
        terms: f64::NAN,
        status,
    }
}

fn price_row(book: &ColumnBook<'_>, i: usize, with_iv: bool) -> RowOut {
    let c = match book.row(i) {
        Ok((c, Exercise::American)) => return american_row(book, &c, i, with_iv),
        Ok((c, Exercise::European)) => c,
        Err(m) => return failed(i, &m),
    };
    let r = match series::price(&c) {
        Ok(r) => r,
        Err(e) => return failed(i, &e.to_string()),
    };
    let values = r.greeks.headline();
    if let Some((j, v)) = values.iter().enumerate().find(|(_, v)| !v.is_finite()) {
        return failed(i, &non_finite_message(RAW_COLUMNS[j], *v));
    }
    let mut status = String::from("ok");
    let mut iv = f64::NAN;
    if with_iv {
        match implied_vol(
            c.kind,
            r.greeks.price,
            c.spot,
            c.strike,
            c.expiry,
            c.rate,
            c.div_yield,
        ) {
            Ok(v) => iv = v,
            Err(e) => status = format!("warning: row {i}: implied_vol: {e}"),
        }
    }
    RowOut {
        premium: 0.0,
        error_estimate: r.truncation_bound,
        expiry_years: c.expiry,
        values,
        implied_vol: iv,
        terms: r.terms as f64,
        status,
    }
}

/// Prices every row of `book` with the series engine and all analytic
/// Greeks (and, with `with_implied_vol`, the Black-Scholes implied
/// volatility of each Merton price), on the rayon pool.
///
/// # Errors
/// [`ColumnError`] when the columns differ in length; a bad row is not an
/// error but a row with NaN values and an `error: row N: ...` status.
pub fn price_columns(
    book: &ColumnBook<'_>,
    with_implied_vol: bool,
) -> Result<PricedColumns, ColumnError> {
    book.check()?;
    let n = book.len();
    let chunks: Vec<Vec<RowOut>> = (0..n.div_ceil(CHUNK_ROWS))
        .into_par_iter()
        .map(|k| {
            (k * CHUNK_ROWS..((k + 1) * CHUNK_ROWS).min(n))
                .map(|i| price_row(book, i, with_implied_vol))
                .collect()
        })
        .collect();
    let mut values: Vec<Vec<f64>> = (0..10).map(|_| Vec::with_capacity(n)).collect();
    let mut iv = Vec::with_capacity(if with_implied_vol { n } else { 0 });
    let dated = book.dated();
    let mut years = Vec::with_capacity(if dated { n } else { 0 });
    let with_exercise = book.exercise.is_some();
    let mut premium = Vec::with_capacity(if with_exercise { n } else { 0 });
    let mut estimate = Vec::with_capacity(if with_exercise { n } else { 0 });
    let mut terms = Vec::with_capacity(n);
    let mut status = Vec::with_capacity(n);
    for row in chunks.into_iter().flatten() {
        for (col, v) in values.iter_mut().zip(row.values) {
            col.push(v);
        }
        if with_implied_vol {
            iv.push(row.implied_vol);
        }
        if dated {
            years.push(row.expiry_years);
        }
        if with_exercise {
            premium.push(row.premium);
            estimate.push(row.error_estimate);
        }
        terms.push(row.terms);
        status.push(row.status);
    }
    Ok(PricedColumns {
        values,
        implied_vol: with_implied_vol.then_some(iv),
        expiry_years: dated.then_some(years),
        exercise: with_exercise.then_some((premium, estimate)),
        terms,
        status,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn text(v: &[&str]) -> Vec<Option<String>> {
        v.iter()
            .map(|s| (!s.is_empty()).then(|| s.to_string()))
            .collect()
    }

    #[test]
    fn bad_rows_name_row_and_column_and_keep_their_place() {
        let kind = text(&["call", "straddle", "put", "call"]);
        let strike_text = text(&["100", "100", "abc", "32%"]);
        let ones = [100.0; 4];
        let t = [0.5; 4];
        let r = [0.02; 4];
        let vol = [0.2, 0.2, 0.2, f64::NAN];
        let lam = [0.3; 4];
        let mu = [-0.1; 4];
        let dl = [0.15; 4];
        let book = ColumnBook {
            kind: Column::Text(&kind),
            spot: Column::Numbers(&ones),
            strike: Column::Text(&strike_text),
            expiry: Column::Numbers(&t),
            rate: Column::Numbers(&r),
            vol: Column::Numbers(&vol),
            jump_rate: Column::Numbers(&lam),
            jump_mean: Column::Numbers(&mu),
            jump_vol: Column::Numbers(&dl),
            div_yield: None,
            quantity: None,
            multiplier: None,
            valuation_date: None,
            default_valuation: None,
            exercise: None,
            pide: PideConfig::default(),
        };
        let out = price_columns(&book, false).unwrap();
        assert_eq!(out.status[0], "ok");
        assert_eq!(
            out.status[1],
            "error: row 1: kind 'straddle' is not call or put"
        );
        assert_eq!(out.status[2], "error: row 2: strike is not a number: 'abc'");
        assert_eq!(
            out.status[3],
            "error: row 3: strike is not a number: '32%' (write 0.32)"
        );
        assert!(out.values.iter().all(|c| c[0].is_finite() && c[1].is_nan()));
        // The same contract priced directly (same engine, same digits).
        let c = book.contract(0).unwrap();
        assert_eq!(out.values[0][0], series::price(&c).unwrap().greeks.price);
    }

    #[test]
    fn nan_is_an_empty_cell() {
        let kind = text(&["put"]);
        let x = [f64::NAN];
        let one = [1.0];
        let book = ColumnBook {
            kind: Column::Text(&kind),
            spot: Column::Numbers(&one),
            strike: Column::Numbers(&one),
            expiry: Column::Numbers(&one),
            rate: Column::Numbers(&x),
            vol: Column::Numbers(&one),
            jump_rate: Column::Numbers(&one),
            jump_mean: Column::Numbers(&one),
            jump_vol: Column::Numbers(&one),
            div_yield: Some(Column::Numbers(&x)),
            quantity: None,
            multiplier: None,
            valuation_date: None,
            default_valuation: None,
            exercise: None,
            pide: PideConfig::default(),
        };
        let out = price_columns(&book, false).unwrap();
        assert_eq!(out.status[0], "error: row 0: rate is missing");
        // Arrow-layout text reads like a list of strings.
        let data = b"put 0.5 x";
        let offsets = [0i64, 4, 8, 9];
        let null = [false, false, true];
        let col = Column::Utf8 {
            offsets: &offsets,
            data,
            null: &null,
        };
        assert_eq!(col.get(1, "strike"), Ok(Some(0.5)));
        assert_eq!(col.get(2, "strike"), Ok(None));
        assert_eq!(col.text(0), Some(&b"put"[..]));
        let short = [1.0, 2.0];
        let book = ColumnBook {
            spot: Column::Numbers(&short),
            ..book
        };
        assert_eq!(
            price_columns(&book, false).unwrap_err().to_string(),
            "column spot has 2 rows where kind has 1"
        );
    }
}
