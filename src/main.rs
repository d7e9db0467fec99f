//! The `saltus` command line: argument parsing and dispatch only; the work
//! lives in the library. Each command has its own module in `src/cmd/`.
//!
//! Exit codes: 0 every row succeeded; 1 the run completed but some rows
//! failed (or, for `crosscheck`, too many rows disagreed); 2 a fatal error
//! (unreadable file, missing column, bad option). A closed output pipe
//! (`| head`) ends the run quietly with 0.

use clap::{Parser, Subcommand};
use std::process::ExitCode;

mod cmd;

/// Price European option books under the Merton jump-diffusion model.
#[derive(Parser)]
#[command(name = "saltus", version, about, long_about = None)]
struct Cli {
    /// Worker threads (default: all cores; also RAYON_NUM_THREADS).
    #[arg(long, global = true, value_name = "N")]
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
}

fn main() -> ExitCode {
    let cli = Cli::parse();
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
