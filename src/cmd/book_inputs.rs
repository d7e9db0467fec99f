//! The options every book command shares for inputs from outside the book:
//! `--valuation-date` (dates as expiries) and `--params` /
//! `--params-override` (model parameters from a calibration), turned into
//! the library's [`BookInputs`] before any work starts.

use anyhow::Result;
use saltus::book::BookInputs;
use saltus::market::dates::{self, Date};
use saltus::market::params::FittedParams;
use std::path::PathBuf;
use std::sync::Arc;

/// Flattened into each book command's arguments.
#[derive(clap::Args, Debug, Clone)]
pub struct BookInputArgs {
    /// Valuation date (YYYY-MM-DD) of rows without a valuation_date field: an
    /// expiry may then be a date, turned into calendar days / 365 (ACT/365 fixed)
    #[arg(long, value_name = "YYYY-MM-DD", value_parser = parse_valuation_date)]
    pub valuation_date: Option<Date>,
    /// Take vol, jump_rate, jump_mean, jump_vol from each row's underlying's
    /// fitted set in this file (written by calibrate); the book may omit them
    #[arg(long, value_name = "PARAMS.csv")]
    pub params: Option<PathBuf>,
    /// With --params: use the fitted sets even when the book has model columns
    /// (they are then echoed but not read)
    #[arg(long, requires = "params")]
    pub params_override: bool,
}

/// Parses `--valuation-date` (shared with `calibrate`).
pub fn parse_valuation_date(text: &str) -> Result<Date, String> {
    dates::parse_date(text).map_err(|e| format!("'{}' {e}", text.escape_debug()))
}

impl BookInputArgs {
    /// Reads the params file (fatal errors name file, line and column).
    ///
    /// # Errors
    /// A params file that cannot be read or is malformed.
    pub fn inputs(&self) -> Result<BookInputs> {
        let params = match &self.params {
            Some(p) => Some(Arc::new(
                FittedParams::read(p).map_err(|e| anyhow::anyhow!("--params: {e}"))?,
            )),
            None => None,
        };
        Ok(BookInputs {
            valuation_date: self.valuation_date,
            params,
            params_override: self.params_override,
        })
    }
}
