//! The `saltus` command line: argument parsing and dispatch only; the work
//! lives in the library. Each command has its own module in `src/cmd/`.
//!
//! Exit codes: 0 every row succeeded; 1 the run completed but some rows
//! failed (or, for `crosscheck`, too many rows disagreed); 2 a fatal error
//! (unreadable file, missing column, bad option, refused or failed output).
//! A closed output pipe (`| head`) ends the run quietly with 0. SIGINT and
//! SIGTERM end it with 130 and 143 after deleting the temporary outputs, so
//! no output file is replaced by a partial one (`cmd::output`).

use clap::{Parser, Subcommand};
use std::process::ExitCode;

mod cmd;

/// Price European option books under the Merton jump-diffusion model.
#[derive(Parser)]
#[command(name = "saltus", version, about, long_about = None)]
struct Cli {
    /// Worker threads, 1 to 64 x the available cores [default: all cores, or RAYON_NUM_THREADS]
    #[arg(long, global = true, value_name = "N", value_parser = parse_threads, allow_negative_numbers = true)]
    threads: Option<usize>,
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Price every row of a book with the closed-form series and all analytic Greeks.
    Price(cmd::price::Args),
    /// Re-price every row by series, Fourier and Monte Carlo and compare (model validation).
    Crosscheck(cmd::crosscheck::Args),
    /// Greeks by analytic formula and/or bump-and-reprice on any engine, compared.
    Greeks(cmd::greeks::Args),
    /// Exposures by underlying, full-revaluation scenarios, CSV files and an HTML report.
    Risk(cmd::risk::Args),
    /// Fit the Merton parameters per underlying to option quotes, with diagnostics.
    Calibrate(cmd::calibrate::Args),
    /// Daily P&L explain between two books: Greek attribution and a revaluation waterfall.
    Explain(cmd::explain::Args),
}

/// The largest worker count accepted: 64 x the available cores (more only
/// costs memory and start-up time; 100,000 threads took minutes to start).
fn max_threads() -> usize {
    64 * std::thread::available_parallelism().map_or(1, |n| n.get())
}

fn parse_threads(s: &str) -> Result<usize, String> {
    let max = max_threads();
    match s.trim().parse::<usize>() {
        Ok(n) if (1..=max).contains(&n) => Ok(n),
        _ => Err(format!(
            "must be a whole number from 1 to {max} (64 x the {} available cores)",
            max / 64
        )),
    }
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    if cli.threads.is_none() {
        // rayon reads RAYON_NUM_THREADS itself: hold it to the same limit.
        if let Ok(v) = std::env::var("RAYON_NUM_THREADS") {
            if v.trim().parse::<usize>().is_ok_and(|n| n > max_threads()) {
                eprintln!(
                    "saltus: error: RAYON_NUM_THREADS={v}: {}",
                    parse_threads(&v).unwrap_err()
                );
                return ExitCode::from(2);
            }
        }
    }
    cmd::output::install_signal_cleanup();
    if let Some(n) = cli.threads {
        if let Err(e) = rayon::ThreadPoolBuilder::new()
            .num_threads(n)
            .build_global()
        {
            eprintln!("saltus: cannot start {n} threads: {e}");
            return ExitCode::from(2);
        }
    }
    let result = match cli.command {
        Command::Price(args) => cmd::price::run(args),
        Command::Crosscheck(args) => cmd::crosscheck::run(args),
        Command::Greeks(args) => cmd::greeks::run(args),
        Command::Risk(args) => cmd::risk::run(args),
        Command::Calibrate(args) => cmd::calibrate::run(args),
        Command::Explain(args) => cmd::explain::run(args),
    };
    match result {
        Ok(code) => code,
        Err(e) => {
            if cmd::is_broken_pipe(&e) {
                return ExitCode::SUCCESS;
            }
            eprintln!("saltus: error: {}", cmd::error_chain(&e));
            ExitCode::from(2)
        }
    }
}
