//! One module per command; shared helpers for opening books and reporting.
//!
//! Every command's help has the same layout: what it does, arguments,
//! options (defaults shown once, as `[default: ...]`), then the columns it
//! reads (`columns_read!`), what it writes, notes, and the exit codes
//! (`exit_2!` for the fatal case, shared).

/// The "Columns read" section of every command's help.
macro_rules! columns_read {
    () => {
        "Columns read (by header name, any order, case-insensitive):\n  \
required: kind, spot, strike, expiry, rate, vol, jump_rate, jump_mean, jump_vol\n  \
optional: id, underlying, div_yield (0), quantity (1), multiplier (1, risk and explain),\n  \
valuation_date (YYYY-MM-DD; empty: --valuation-date), exercise (european, or american:\n  \
priced by the PIDE engine to --pide-tol)\n\
expiry is a year fraction, or a date YYYY-MM-DD when a valuation date is known (the row's\n\
valuation_date, else --valuation-date): T = calendar days / 365 (ACT/365 fixed), written\n\
in an expiry_years column before the results whenever a valuation date can apply.\n\
With --params, vol, jump_rate, jump_mean, jump_vol come from the row's underlying's fit\n\
(the book needs underlying and may omit them; having them too needs --params-override).\n"
    };
}

/// The fatal-error exit code of every command's help.
macro_rules! exit_2 {
    () => {
        "2 fatal error (unreadable input, missing column, bad option, output refused or not \
written; no output file is then replaced)."
    };
}

pub mod book_inputs;
pub mod calibrate;
pub mod crosscheck;
pub mod explain;
pub mod greeks;
pub mod output;
pub mod pide_args;
pub mod price;
pub mod risk;

use anyhow::{Context, Result};
use saltus::book::BookSummary;
use std::fs::File;
use std::io::{self, BufReader, Read};
use std::path::Path;
use std::process::ExitCode;

/// Opens a book path, `-` meaning standard input.
pub fn open_input(path: &Path) -> Result<Box<dyn Read + Send>> {
    if path.as_os_str() == "-" {
        Ok(Box::new(BufReader::with_capacity(1 << 20, io::stdin())))
    } else {
        let f = File::open(path).with_context(|| format!("cannot open {}", path.display()))?;
        if f.metadata().is_ok_and(|m| m.is_dir()) {
            anyhow::bail!("cannot read {}: it is a directory", path.display());
        }
        Ok(Box::new(BufReader::with_capacity(1 << 20, f)))
    }
}

/// The error and its causes joined by `: `, skipping a cause whose text the
/// previous message already contains (the csv crate repeats its I/O cause).
pub fn error_chain(e: &anyhow::Error) -> String {
    let mut out: Vec<String> = Vec::new();
    for cause in e.chain() {
        let msg = cause.to_string();
        if out.last().is_some_and(|prev| prev.contains(&msg)) {
            continue;
        }
        out.push(msg);
    }
    out.join(": ")
}

/// True when the error chain holds a broken pipe (the reader went away).
pub fn is_broken_pipe(e: &anyhow::Error) -> bool {
    e.chain().any(|c| {
        c.downcast_ref::<io::Error>().is_some_and(|io| io.kind() == io::ErrorKind::BrokenPipe)
            || c.downcast_ref::<csv::Error>().is_some_and(|ce| {
                matches!(ce.kind(), csv::ErrorKind::Io(io) if io.kind() == io::ErrorKind::BrokenPipe)
            })
    })
}

/// Prints the per-row failures kept in the summary and the totals line.
pub fn report_rows(summary: &BookSummary, verb: &str, seconds: f64) {
    for e in &summary.first_errors {
        eprintln!("saltus: row failed: {e}");
    }
    if summary.failed as usize > summary.first_errors.len() {
        eprintln!(
            "saltus: ... and {} more failed rows (see the status column)",
            summary.failed as usize - summary.first_errors.len()
        );
    }
    let ok = summary.rows - summary.failed;
    let rate = if seconds > 0.0 {
        summary.rows as f64 / seconds
    } else {
        0.0
    };
    eprintln!(
        "saltus: {ok} rows {verb}, {} rows failed, {} rows in {seconds:.3} s ({rate:.0} rows/s)",
        summary.failed, summary.rows
    );
    if summary.skipped > 0 {
        eprintln!(
            "saltus: {} records with every field empty skipped like blank lines (not rows, not written)",
            summary.skipped
        );
    }
}

/// Exit code from a summary: 1 when any row failed.
pub fn rows_exit_code(summary: &BookSummary) -> ExitCode {
    if summary.failed > 0 {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    }
}
