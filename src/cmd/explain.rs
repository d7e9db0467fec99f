//! `saltus explain`: the daily P&L explain of a book between two sets of
//! market inputs (BEFORE.csv and AFTER.csv, positions matched by `id`).
//!
//! The flags are turned into one [`BookInputs`] per book before any work;
//! both books are read whole (matching by id needs them in memory), the
//! library explains them ([`saltus::reports::explain`]), and EXPLAIN.csv and
//! the optional page are written through [`Output`] / [`OutputDir`], so an
//! existing output is replaced only when the run completes.

use super::book_inputs::parse_valuation_date;
use super::open_input;
use super::output::{Output, OutputDir};
use anyhow::{anyhow, bail, Context, Result};
use saltus::book::BookInputs;
use saltus::market::params::FittedParams;
use saltus::reports::explain::{self, BookExplain, ExplainBook};
use saltus::reports::explain_report::{self, PageInfo, REPORT_FILE};
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::sync::Arc;

/// Arguments of `saltus explain`.
#[derive(clap::Args)]
#[command(after_help = concat!(
    columns_read!(),
    "Both books need an id column: positions are matched by id. kind, strike, quantity, \
multiplier and underlying must agree between the two books (otherwise the position is an error \
row naming what differs); spot, vol, rate, div_yield, expiry and the jump parameters are the \
day's market inputs.\n\
Columns written (one row per position, then one per underlying and one for the book):\n  \
level, id, underlying, value_before, value_after, change, from_spot, from_vol, from_time, \
from_rates, from_jumps, from_cross, unexplained, step_spot, step_vol, step_time, step_rates, \
step_jumps, status, then from_delta, from_gamma, from_vega, from_volga, from_rho, from_div_rho, \
from_jump_rate, from_jump_mean, from_jump_vol, dt_years (positions), positions, left_out, new, \
expired, value_new, value_expired (aggregate rows).\n\
Values are quantity x multiplier x price. from_* are the Greek terms at the BEFORE inputs \
(spot: delta and gamma; vol: vega and volga; time: theta x (T_before - T_after); rates: rho and \
div_rho; jumps: the three jump sensitivities; cross: vanna), unexplained = change - from_*. \
step_* is the full-revaluation waterfall moving spot, vol, time, rates, jumps in that order; the \
steps add up to change.\n\
level is position, underlying or book (the book row's underlying reads (book)). status is ok; \
new or expired for a position in one book only (its value is in value_after or value_before, \
and it is not in change); error: FILE line N: problem; on aggregates partial: N positions left \
out when error rows are excluded from the sums.\n\
explain writes no expiry_years column: dt_years holds each position's time step.\n\
Both books are held in memory.\n\
Exit codes: 0 every position explained (or new or expired); 1 some positions failed or an \
aggregate overflowed; ",
    exit_2!()
))]
pub struct Args {
    /// Yesterday's book (CSV); `-` reads standard input.
    pub before: PathBuf,
    /// Today's book (CSV); `-` reads standard input.
    pub after: PathBuf,
    /// Output file, replaced only when the run completes; `-`: standard output
    /// [default: standard output]
    #[arg(short, long, value_name = "EXPLAIN.csv")]
    pub output: Option<PathBuf>,
    /// Also write an HTML page (explain.html) into this directory, replaced as
    /// a whole when the run completes
    #[arg(long, value_name = "DIR")]
    pub report: Option<PathBuf>,
    /// Valuation dates of rows without a valuation_date field: one date for both
    /// books, or BEFORE,AFTER; an expiry may then be a date (ACT/365 fixed)
    #[arg(long, value_name = "YYYY-MM-DD[,YYYY-MM-DD]")]
    pub valuation_date: Option<String>,
    /// Take vol, jump_rate, jump_mean, jump_vol from each row's underlying's fitted
    /// set: one file for both books, or BEFORE.csv,AFTER.csv
    #[arg(long, value_name = "PARAMS.csv[,PARAMS.csv]")]
    pub params: Option<String>,
    /// With --params: use the fitted sets even when a book has model columns
    #[arg(long, requires = "params")]
    pub params_override: bool,
    /// Title of the HTML page.
    #[arg(long, default_value = "Daily P&L explain")]
    pub title: String,
    /// No summary on stderr.
    #[arg(short, long)]
    pub quiet: bool,
}

/// Splits `a` or `a,b` into the BEFORE and AFTER values.
fn pair<'a>(option: &str, text: &'a str) -> Result<(&'a str, &'a str)> {
    let parts: Vec<&str> = text.split(',').map(str::trim).collect();
    match parts[..] {
        [one] if !one.is_empty() => Ok((one, one)),
        [b, a] if !b.is_empty() && !a.is_empty() => Ok((b, a)),
        _ => bail!(
            "{option}: '{}' is not one value or two separated by a comma (BEFORE,AFTER)",
            text.escape_debug()
        ),
    }
}

/// The validated inputs of the two books.
fn book_inputs(args: &Args) -> Result<(BookInputs, BookInputs)> {
    let mut before = BookInputs::default();
    let mut after = BookInputs::default();
    if let Some(text) = &args.valuation_date {
        let (b, a) = pair("--valuation-date", text)?;
        let date = |s: &str| parse_valuation_date(s).map_err(|e| anyhow!("--valuation-date: {e}"));
        before.valuation_date = Some(date(b)?);
        after.valuation_date = Some(date(a)?);
    }
    if let Some(text) = &args.params {
        let (b, a) = pair("--params", text)?;
        let read = |s: &str| -> Result<Arc<FittedParams>> {
            Ok(Arc::new(
                FittedParams::read(Path::new(s)).map_err(|e| anyhow!("--params: {e}"))?,
            ))
        };
        let pb = read(b)?;
        let pa = if a == b { pb.clone() } else { read(a)? };
        before.params = Some(pb);
        after.params = Some(pa);
        before.params_override = args.params_override;
        after.params_override = args.params_override;
    }
    Ok((before, after))
}

fn read(path: &Path, inputs: &BookInputs) -> Result<ExplainBook> {
    let name = if path.as_os_str() == "-" {
        "standard input".to_string()
    } else {
        path.display().to_string()
    };
    let input = open_input(path)?;
    explain::read_book(input, &name, inputs).map_err(|e| anyhow!(e))
}

/// Runs the command.
pub fn run(args: Args) -> Result<ExitCode> {
    let (in_before, in_after) = book_inputs(&args)?;
    if args.before.as_os_str() == "-" && args.after.as_os_str() == "-" {
        bail!("BEFORE and AFTER cannot both be standard input");
    }
    if let Some(out) = args.output.as_deref().filter(|p| p.as_os_str() != "-") {
        if same_file::is_same_file(out, &args.after).unwrap_or(false) {
            bail!(
                "refusing to write {}: it is the input book {}",
                out.display(),
                args.after.display()
            );
        }
    }
    let mut out = Output::open(args.output.as_deref(), &args.before)?;
    let staged = match &args.report {
        Some(dir) => {
            let s = OutputDir::stage(dir, &args.before, &[REPORT_FILE])?;
            if args.after.as_os_str() != "-" {
                if let (Ok(book), Ok(d)) = (args.after.canonicalize(), dir.canonicalize()) {
                    if book.starts_with(d) {
                        bail!(
                            "refusing to write the report into {}: it holds the input book {}",
                            dir.display(),
                            args.after.display()
                        );
                    }
                }
            }
            Some(s)
        }
        None => None,
    };
    let before = read(&args.before, &in_before)?;
    let after = read(&args.after, &in_after)?;
    let result = BookExplain::new(&before, &after);
    explain::write_csv(&mut out, &result).context("cannot write the explain")?;
    out.flush()?;
    out.commit()?;
    if let Some(staged) = staged {
        let info = PageInfo {
            title: args.title.clone(),
            before: before.name.clone(),
            after: after.name.clone(),
            generated: jiff::Timestamp::now()
                .round(jiff::Unit::Second)
                .map(|t| t.to_string())
                .unwrap_or_default(),
        };
        std::fs::write(
            staged.path().join(REPORT_FILE),
            explain_report::html(&result, &info),
        )
        .context("cannot write the page")?;
        staged.commit()?;
    }
    if !args.quiet {
        summary(&result, &before, &after);
        if let Some(dir) = &args.report {
            eprintln!(
                "saltus: page written to {}",
                dir.join(REPORT_FILE).display()
            );
        }
    }
    Ok(if result.all_ok() {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(1)
    })
}

fn summary(r: &BookExplain, before: &ExplainBook, after: &ExplainBook) {
    let mut failed = 0;
    for p in &r.positions {
        if let explain::Outcome::Error(m) = &p.outcome {
            failed += 1;
            if failed <= 20 {
                eprintln!("saltus: position failed: {m}");
            }
        }
    }
    if failed > 20 {
        eprintln!(
            "saltus: ... and {} more failed positions (see the status column)",
            failed - 20
        );
    }
    let b = &r.book;
    eprintln!(
        "saltus: {} positions explained, {} new, {} expired, {} failed (left out of the sums)",
        b.positions, b.new, b.expired, b.left_out
    );
    if b.non_finite().is_none() {
        eprintln!(
            "saltus: book change {:.2} = spot {:.2} + vol {:.2} + time {:.2} + rates {:.2} + jumps {:.2} + cross {:.2} + unexplained {:.2}",
            b.explain.change,
            b.explain.terms.spot(),
            b.explain.terms.vol(),
            b.explain.terms.time(),
            b.explain.terms.rates(),
            b.explain.terms.jumps(),
            b.explain.terms.cross(),
            b.explain.unexplained(),
        );
    }
    for book in [before, after] {
        if book.skipped > 0 {
            eprintln!(
                "saltus: {}: {} records with every field empty skipped like blank lines",
                book.name, book.skipped
            );
        }
    }
}
