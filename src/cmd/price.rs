//! `saltus price`: every row of a book priced by the closed-form series, with
//! all analytic Greeks, streamed in constant memory; American rows (book
//! column `exercise`) by the PIDE engine ([`saltus::greeks::american`]).
//!
//! The result columns depend on the header only (the book streams): a book
//! with an `exercise` column gets `early_exercise_premium` and
//! `error_estimate` before `terms` on every row; one without it is written
//! exactly as before the column existed.

use super::output::Output;
use super::{open_input, report_rows, rows_exit_code};
use anyhow::Result;
use saltus::book::writer::RowWriter;
use saltus::book::{run_book, PipelineOptions};
use saltus::engines::pide::Exercise;
use saltus::engines::series;
use saltus::greeks::american;
use saltus::greeks::{DESK_COLUMNS, RAW_COLUMNS};
use saltus::market::implied_vol::implied_vol;
use saltus::model::Contract;
use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::Instant;

/// Arguments of `saltus price`.
#[derive(clap::Args)]
#[command(after_help = concat!(
    columns_read!(),
    "Columns written: every input column echoed, then price, delta, gamma, vega, theta, rho, \
div_rho, d_jump_rate, d_jump_mean, d_jump_vol, terms, status.\n\
--with-bound adds truncation_bound and --implied-vol adds implied_vol, in that order, before terms.\n\
implied_vol is the Black-Scholes volatility of the row's Merton price (the model smile). Where\n\
it does not exist in double precision (a time value below what double precision resolves,\n\
a price at the upper bound) the field is empty, the price and Greeks are kept and the status\n\
reads `warning: line N: implied_vol: <reason>`; such rows count as not ok (exit code 1).\n\
Greeks are raw partial derivatives per unit (vega per 1.00 of vol, theta per year);\n\
--desk-units writes vega_1pt, theta_1d, rho_1pct, div_rho_1pct, d_jump_mean_1pct, d_jump_vol_1pct.\n\
American rows (optional column exercise: european, the default, or american, any case) are\n\
priced by the PIDE engine to --pide-tol: delta, gamma, theta from its grid, the other Greeks by\n\
central differences of PIDE prices; terms and truncation_bound are empty for them, and so is\n\
implied_vol (with a warning: the inversion is European). When the\n\
book has an exercise column, every row also gets early_exercise_premium (American minus the\n\
European series price; 0 on European rows) and error_estimate (the PIDE's error estimate on\n\
American rows, the series truncation bound on European rows), after implied_vol, before terms.\n\
The book is streamed: memory does not grow with its size.\n\
Exit codes: 0 every row priced; 1 some rows failed; ",
    exit_2!()
))]
pub struct Args {
    /// The book (CSV); `-` reads standard input.
    pub book: PathBuf,
    /// Output file, replaced only when the run completes; `-`: standard output
    /// [default: standard output]
    #[arg(short, long, value_name = "OUT.csv")]
    pub output: Option<PathBuf>,
    /// Write vega per vol point, theta per calendar day, rho per percentage point
    /// (the columns are renamed accordingly).
    #[arg(long)]
    pub desk_units: bool,
    /// Also write `truncation_bound`, the rigorous bound on the series truncation error.
    #[arg(long)]
    pub with_bound: bool,
    /// Also write `implied_vol`, the Black-Scholes volatility of each Merton
    /// price (the model smile), before `terms`.
    #[arg(long)]
    pub implied_vol: bool,
    #[command(flatten)]
    pub inputs: super::book_inputs::BookInputArgs,
    #[command(flatten)]
    pub pide: super::pide_args::PideArgs,
    /// No summary on stderr.
    #[arg(short, long)]
    pub quiet: bool,
}

/// Writes `implied_vol` of `price`, or leaves it empty with a warning.
fn push_implied_vol(out: &mut RowWriter, c: &Contract, price: f64) {
    match implied_vol(
        c.kind,
        price,
        c.spot,
        c.strike,
        c.expiry,
        c.rate,
        c.div_yield,
    ) {
        Ok(v) => out.push_f64(v),
        Err(e) => {
            out.push_empty(1);
            out.set_warning(format!("implied_vol: {e}"));
        }
    }
}

/// Runs the command.
pub fn run(args: Args) -> Result<ExitCode> {
    let start = Instant::now();
    let names = if args.desk_units {
        DESK_COLUMNS
    } else {
        RAW_COLUMNS
    };
    let mut result_columns: Vec<String> = names.iter().map(|s| s.to_string()).collect();
    if args.with_bound {
        result_columns.push("truncation_bound".into());
    }
    if args.implied_vol {
        result_columns.push("implied_vol".into());
    }
    // With an exercise column: the premium and the error estimate before terms.
    let mut exercise_columns = result_columns.clone();
    exercise_columns.push("early_exercise_premium".into());
    exercise_columns.push("error_estimate".into());
    for c in [&mut result_columns, &mut exercise_columns] {
        c.push("terms".into());
        c.push("status".into());
    }
    let pide_cfg = args.pide.config()?;
    let opts = PipelineOptions {
        result_columns,
        inputs: args.inputs.inputs()?,
        exercise_columns: Some(exercise_columns),
    };
    let worst_rel_bound = AtomicU64::new(0);
    let input = open_input(&args.book)?;
    let mut output = Output::open(args.output.as_deref(), &args.book)?;
    let desk = args.desk_units;
    let with_bound = args.with_bound;
    let with_implied_vol = args.implied_vol;
    let summary = run_book(input, &mut output, &opts, |row, out| {
        if row.exercise == Exercise::American {
            let a = american::price(&row.contract, &pide_cfg)?;
            let values = if desk {
                a.greeks.desk_units()
            } else {
                a.greeks.headline()
            };
            for v in values {
                out.push_f64(v);
            }
            if with_bound {
                out.push_empty(1);
            }
            if with_implied_vol {
                // A Black-Scholes inversion is a European notion.
                out.push_empty(1);
                out.set_warning(
                    "implied_vol: not defined for American exercise (the Black-Scholes \
                     inversion is European)"
                        .into(),
                );
            }
            out.push_f64(a.early_exercise_premium);
            out.push_f64(a.error_estimate);
            out.push_empty(1); // terms: no series
            return Ok(());
        }
        let r = series::price(&row.contract).map_err(|e| e.to_string())?;
        let values = if desk {
            r.greeks.desk_units()
        } else {
            r.greeks.headline()
        };
        for v in values {
            out.push_f64(v);
        }
        if with_bound {
            out.push_f64(r.truncation_bound);
        }
        if with_implied_vol {
            push_implied_vol(out, &row.contract, r.greeks.price);
        }
        if row.exercise_column {
            // A European option has no early-exercise right: premium 0.
            out.push_f64(0.0);
            out.push_f64(r.truncation_bound);
        }
        out.push_u64(r.terms as u64);
        // Prices below 1e-250 of spot are only resolved to the absolute floor.
        if r.greeks.price > 1e-250 * row.contract.spot {
            let rel = r.truncation_bound / r.greeks.price;
            // Read first: a read-modify-write on every row would bounce the
            // cache line between the workers.
            if rel.to_bits() > worst_rel_bound.load(Ordering::Relaxed) {
                worst_rel_bound.fetch_max(rel.to_bits(), Ordering::Relaxed);
            }
        }
        Ok(())
    })?;
    output.commit()?;
    if !args.quiet {
        report_rows(&summary, "priced", start.elapsed().as_secs_f64());
        let worst = f64::from_bits(worst_rel_bound.load(Ordering::Relaxed));
        eprintln!(
            "saltus: largest series truncation bound relative to price: {worst:.1e} (prices above 1e-250 x spot)"
        );
    }
    Ok(rows_exit_code(&summary))
}
