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

/// The progress bar of a long per-row command on stderr (hidden with
/// `quiet` or when stderr is not a terminal): rows done out of the book's
/// line count, elapsed time and time left for a file; rows done and elapsed
/// time for standard input, whose length is not known in advance.
pub fn progress_bar(book: &Path, quiet: bool) -> indicatif::ProgressBar {
    use indicatif::{ProgressBar, ProgressStyle};
    use std::io::IsTerminal;
    if quiet || !io::stderr().is_terminal() {
        return ProgressBar::hidden();
    }
    let total = if book.as_os_str() == "-" {
        None
    } else {
        std::fs::read(book)
            .ok()
            .map(|b| b.iter().filter(|&&c| c == b'\n').count() as u64)
    };
    match total {
        Some(n) => ProgressBar::new(n.saturating_sub(1)).with_style(
            ProgressStyle::with_template(
                "{bar:40} {pos}/{len} rows  {elapsed} elapsed, {eta} left",
            )
            .expect("valid template"),
        ),
        None => ProgressBar::new_spinner().with_style(
            ProgressStyle::with_template("{spinner} {pos} rows done  {elapsed} elapsed")
                .expect("valid template"),
        ),
    }
}

/// Paths a row simulates for `--paths n`: the Monte Carlo engine works in
/// whole blocks of [`BLOCK_PAIRS`](saltus::engines::monte_carlo::BLOCK_PAIRS)
/// antithetic pairs (each pair two paths; one path per draw without
/// antithetics), at least one block.
pub fn simulated_paths(n: u64, antithetic: bool) -> u64 {
    let block = saltus::engines::monte_carlo::BLOCK_PAIRS * if antithetic { 2 } else { 1 };
    n.div_ceil(block).max(1) * block
}

/// The message, if any, saying that `--paths n` is below the engine's
/// minimum of one block. (A larger `n` is rounded up to whole blocks, by
/// less than one block, as `--paths`'s help says; the `mc_paths` column
/// and the report show the paths used.)
pub fn paths_rounding_message(n: u64, antithetic: bool) -> Option<String> {
    let block = simulated_paths(1, antithetic);
    (n < block).then(|| {
        format!(
            "--paths {n} is below the Monte Carlo engine's minimum of one block of {block} paths: \
             each row simulates {block} paths"
        )
    })
}

/// Prints [`paths_rounding_message`] as a warning unless `quiet`.
pub fn warn_paths_rounding(n: u64, antithetic: bool, quiet: bool) {
    if let Some(m) = paths_rounding_message(n, antithetic) {
        if !quiet {
            eprintln!("saltus: warning: {m}");
        }
    }
}
