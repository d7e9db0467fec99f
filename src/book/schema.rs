//! The book's columns: found by header name, in any order, case-insensitive,
//! surrounding spaces trimmed.
//!
//! What the book's columns mean can depend on inputs from outside the book
//! ([`BookInputs`]): with a valuation date an `expiry` may be a date, and
//! with fitted parameters (`--params`) the model columns `vol, jump_rate,
//! jump_mean, jump_vol` come from the row's underlying and may be omitted.

use crate::market::dates::Date;
use crate::market::params::FittedParams;
use csv::ByteRecord;
use std::sync::Arc;

/// The model columns `--params` supplies.
pub const MODEL_COLUMNS: [&str; 4] = ["vol", "jump_rate", "jump_mean", "jump_vol"];

/// Inputs from outside the book that change how its rows are read.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct BookInputs {
    /// The valuation date of rows without a `valuation_date` field
    /// (`--valuation-date`).
    pub valuation_date: Option<Date>,
    /// Fitted parameter sets by underlying (`--params`).
    pub params: Option<Arc<FittedParams>>,
    /// The fitted sets win over model columns the book also has
    /// (`--params-override`); without it such a book is refused.
    pub params_override: bool,
}

/// Columns a book must have.
pub const REQUIRED: [&str; 9] = [
    "kind",
    "spot",
    "strike",
    "expiry",
    "rate",
    "vol",
    "jump_rate",
    "jump_mean",
    "jump_vol",
];
/// Columns a book may have, with their defaults: `id` (row number),
/// `underlying` (empty), `div_yield` (0), `quantity` (1), `multiplier` (1),
/// `valuation_date` (`--valuation-date`), `exercise` (`european`).
pub const OPTIONAL: [&str; 7] = [
    "id",
    "underlying",
    "div_yield",
    "quantity",
    "multiplier",
    "valuation_date",
    EXERCISE,
];
/// The optional exercise-style column (`european`, the default, or
/// `american`). A book that has it gets the commands' exercise result
/// columns ([`crate::book::PipelineOptions::exercise_columns`]), decided
/// from the header alone since the book streams.
pub const EXERCISE: &str = "exercise";
/// Every known column: [`REQUIRED`] then [`OPTIONAL`], in that order (for
/// tests and tools that build books).
pub const COLUMNS: [&str; REQUIRED.len() + OPTIONAL.len()] = {
    let mut all = [""; REQUIRED.len() + OPTIONAL.len()];
    let mut i = 0;
    while i < all.len() {
        all[i] = if i < REQUIRED.len() {
            REQUIRED[i]
        } else {
            OPTIONAL[i - REQUIRED.len()]
        };
        i += 1;
    }
    all
};

/// A problem with the header row; reported before any output is written.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum SchemaError {
    /// A required column is absent.
    #[error("missing required column{}: {}", if .0.len() > 1 { "s" } else { "" }, .0.join(", "))]
    MissingColumns(Vec<String>),
    /// A known column name appears more than once.
    #[error("column '{0}' appears more than once in the header")]
    DuplicateColumn(String),
    /// The input has no header row at all.
    #[error("the input is empty: no header row")]
    Empty,
    /// The book has model columns and `--params` supplies them too.
    #[error(
        "the book has column{} {} and --params supplies {}: drop {} from the book, or pass \
         --params-override to use the fitted parameters instead",
        if .0.len() > 1 { "s" } else { "" }, .0.join(", "),
        if .0.len() > 1 { "them" } else { "it" }, if .0.len() > 1 { "them" } else { "it" }
    )]
    ParamsConflict(Vec<String>),
    /// `--params` without an `underlying` column to look the sets up by.
    #[error(
        "the book has no underlying column: --params takes each row's vol, jump_rate, \
             jump_mean and jump_vol from its underlying's fitted set"
    )]
    ParamsNeedUnderlying,
}

/// Positions of the known columns in the input record.
#[derive(Debug, Clone, PartialEq)]
pub struct Schema {
    /// Number of fields in the header.
    pub width: usize,
    pub(crate) kind: usize,
    pub(crate) spot: usize,
    pub(crate) strike: usize,
    pub(crate) expiry: usize,
    pub(crate) rate: usize,
    /// The model columns, `None` when the parameters come from `--params`.
    pub(crate) vol: Option<usize>,
    pub(crate) jump_rate: Option<usize>,
    pub(crate) jump_mean: Option<usize>,
    pub(crate) jump_vol: Option<usize>,
    pub(crate) id: Option<usize>,
    pub(crate) underlying: Option<usize>,
    pub(crate) div_yield: Option<usize>,
    pub(crate) quantity: Option<usize>,
    pub(crate) multiplier: Option<usize>,
    pub(crate) valuation_date: Option<usize>,
    pub(crate) exercise: Option<usize>,
    pub(crate) inputs: BookInputs,
}

fn normalise(field: &[u8]) -> String {
    String::from_utf8_lossy(field).trim().to_ascii_lowercase()
}

impl Schema {
    /// Resolves the header row.
    ///
    /// # Errors
    /// [`SchemaError`] if a required column is missing or a known one repeats.
    pub fn from_headers(headers: &ByteRecord) -> Result<Schema, SchemaError> {
        Schema::with_inputs(headers, &BookInputs::default())
    }

    /// Resolves the header row for a run with `inputs`: with fitted
    /// parameters the model columns are not required (and refused unless
    /// `params_override`), and an `underlying` column is.
    ///
    /// # Errors
    /// As [`Schema::from_headers`], and [`SchemaError::ParamsConflict`],
    /// [`SchemaError::ParamsNeedUnderlying`].
    pub fn with_inputs(headers: &ByteRecord, inputs: &BookInputs) -> Result<Schema, SchemaError> {
        if headers.is_empty() || (headers.len() == 1 && headers[0].is_empty()) {
            return Err(SchemaError::Empty);
        }
        let names: Vec<String> = headers.iter().map(normalise).collect();
        let find = |name: &str| -> Result<Option<usize>, SchemaError> {
            let mut hits = names.iter().enumerate().filter(|(_, n)| n.as_str() == name);
            let first = hits.next().map(|(i, _)| i);
            if hits.next().is_some() {
                return Err(SchemaError::DuplicateColumn(name.to_string()));
            }
            Ok(first)
        };
        let mut req = [None; 9];
        let mut missing = Vec::new();
        let fitted = inputs.params.is_some();
        for (slot, name) in req.iter_mut().zip(REQUIRED) {
            *slot = find(name)?;
            if slot.is_none() && !(fitted && MODEL_COLUMNS.contains(&name)) {
                missing.push(name.to_string());
            }
        }
        if !missing.is_empty() {
            return Err(SchemaError::MissingColumns(missing));
        }
        let underlying = find("underlying")?;
        if fitted {
            let present: Vec<String> = MODEL_COLUMNS
                .iter()
                .zip(&req[5..])
                .filter(|(_, i)| i.is_some())
                .map(|(n, _)| n.to_string())
                .collect();
            if !present.is_empty() && !inputs.params_override {
                return Err(SchemaError::ParamsConflict(present));
            }
            if underlying.is_none() {
                return Err(SchemaError::ParamsNeedUnderlying);
            }
            // The fitted sets win: the book's model columns are echoed, not read.
            req[5..].fill(None);
        }
        let at = |i: usize| req[i].expect("a required column was found");
        Ok(Schema {
            width: headers.len(),
            kind: at(0),
            spot: at(1),
            strike: at(2),
            expiry: at(3),
            rate: at(4),
            vol: req[5],
            jump_rate: req[6],
            jump_mean: req[7],
            jump_vol: req[8],
            id: find("id")?,
            underlying,
            div_yield: find("div_yield")?,
            quantity: find("quantity")?,
            multiplier: find("multiplier")?,
            valuation_date: find("valuation_date")?,
            exercise: find(EXERCISE)?,
            inputs: inputs.clone(),
        })
    }

    /// True when an `expiry` may be a date (a valuation date is given or
    /// the book has a `valuation_date` column): the pipeline then writes
    /// the year fraction used in an `expiry_years` column.
    pub fn dated(&self) -> bool {
        self.inputs.valuation_date.is_some() || self.valuation_date.is_some()
    }

    /// True when the book has an `exercise` column: the commands then write
    /// their exercise result columns for every row (European rows too).
    pub fn has_exercise(&self) -> bool {
        self.exercise.is_some()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finds_columns_in_any_order_and_case() {
        let h = ByteRecord::from(vec![
            " Jump_Vol",
            "KIND",
            "spot ",
            "strike",
            "expiry",
            "rate",
            "vol",
            "jump_rate",
            "jump_mean",
            "Quantity",
        ]);
        let s = Schema::from_headers(&h).unwrap();
        assert_eq!(
            (s.jump_vol, s.kind, s.quantity, s.id),
            (Some(0), 1, Some(9), None)
        );
    }

    #[test]
    fn reports_every_missing_column() {
        let h = ByteRecord::from(vec!["kind", "spot", "strike", "expiry", "rate", "vol"]);
        let e = Schema::from_headers(&h).unwrap_err();
        assert_eq!(
            e.to_string(),
            "missing required columns: jump_rate, jump_mean, jump_vol"
        );
    }
}
