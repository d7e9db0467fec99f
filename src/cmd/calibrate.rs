//! `saltus calibrate`: fit the Merton parameters per underlying to a quotes
//! file, write them (one row per underlying, or per underlying and expiry),
//! the per-quote residuals and an HTML report.
//!
//! The options are turned into a validated [`CalibrationSpec`] before any
//! work; the whole quotes file is read into memory (the fit needs all quotes
//! of an underlying at once); underlyings are fitted in parallel and written
//! in the order of their names.

use super::open_input;
use super::output::{Output, OutputDir};
use anyhow::{anyhow, bail, Context, Result};
use saltus::market::calibrate::{self, check_param, CalibrationSpec, Objective, PARAM_NAMES};
use saltus::market::quotes::read_quotes_dated;
use saltus::reports::calibration_report as report;
use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;
use std::time::Instant;

/// The files of a report directory.
const REPORT_FILES: [&str; 3] = ["report.html", "params.csv", "residuals.csv"];

/// What to minimise.
#[derive(Clone, Copy, Debug, clap::ValueEnum)]
pub enum ObjectiveArg {
    /// Implied-vol residuals in vol points.
    Vol,
    /// Price residuals divided by the Black-Scholes vega at the market vol.
    Price,
}

/// Arguments of `saltus calibrate`.
#[derive(clap::Args)]
#[command(after_help = concat!(
    "Columns read (by header name, any order, case-insensitive):\n  \
required: underlying, kind, strike, expiry (years, or YYYY-MM-DD with a valuation date), spot, rate\n  \
optional: id, div_yield (0), valuation_date (for date expiries), weight (1)\n  \
quote, exactly one per row: price (mid), or bid and ask, or implied_vol (decimal: 0.215)\n\
Columns written to PARAMS (-o), one row per underlying (with --per-expiry: per underlying and \
expiry, with `expiry` after `underlying`):\n  \
underlying, vol, jump_rate, jump_mean, jump_vol, quotes_used, rmse_vol_pts, \
max_abs_residual_vol_pts, se_vol, se_jump_rate, se_jump_mean, se_jump_vol, condition_number, \
starts_near_best, flags, status, then starts, iterations, stop_reason, objective, fixed, the six \
parameter correlations corr_A_B, quotes_excluded\n  \
flags (;-separated): weakly identified: P (SE above the value or |correlation| > 0.98), \
at bound: P, did not converge, distinct minimum: ... (a start within 1% of the best objective \
at parameters far from it)\n\
Columns written to RES (--residuals): every quote row echoed, then market_vol, model_vol, \
residual_vol_pts, market_price, model_price, status (ok, warning: ..., excluded: line N: \
arbitrage: ..., error: line N: ...)\n\
--report DIR writes report.html, params.csv and residuals.csv into DIR (replaced as a whole).\n\
Quotes violating static no-arbitrage (price outside its bounds; call prices increasing or \
puts decreasing in strike, or prices not convex in strike, within one underlying, expiry and \
kind) are flagged and excluded from the fit; --keep-arbitrage keeps the strike violations (a \
price outside its bounds has no implied vol and is always excluded).\n\
The whole quotes file is held in memory.\n\
Exit codes: 0 every row fitted and every fit converged; 1 some rows failed or were excluded, \
or a fit failed or did not converge; ",
    exit_2!()
))]
pub struct Args {
    /// The quotes (CSV); `-` reads standard input.
    pub quotes: PathBuf,
    /// Fitted parameters file [default: standard output].
    #[arg(short, long, value_name = "PARAMS.csv")]
    pub output: Option<PathBuf>,
    /// Per-quote residuals file.
    #[arg(long, value_name = "RES.csv")]
    pub residuals: Option<PathBuf>,
    /// HTML report directory (with params.csv and residuals.csv).
    #[arg(long, value_name = "DIR")]
    pub report: Option<PathBuf>,
    /// Valuation date (YYYY-MM-DD) of quotes without a valuation_date field: an
    /// expiry may then be a date, turned into calendar days / 365 (ACT/365 fixed)
    #[arg(long, value_name = "YYYY-MM-DD", value_parser = super::book_inputs::parse_valuation_date)]
    pub valuation_date: Option<saltus::market::dates::Date>,
    /// One parameter set per underlying and expiry (shows a term-structure mismatch).
    #[arg(long)]
    pub per_expiry: bool,
    /// Hold a parameter fixed, e.g. `jump_mean=-0.1` (repeatable).
    #[arg(long, value_name = "NAME=VALUE", allow_hyphen_values = true)]
    pub fix: Vec<String>,
    /// What to minimise.
    #[arg(long, value_enum, default_value = "vol")]
    pub objective: ObjectiveArg,
    /// Prior parameters for Tikhonov regularisation, e.g. `vol=0.2,jump_rate=0.1`.
    #[arg(long, value_name = "LIST", allow_hyphen_values = true)]
    pub prior: Option<String>,
    /// Weight W of the regularisation rows sqrt(W) (theta - prior).
    #[arg(
        long,
        value_name = "W",
        default_value = "0",
        allow_negative_numbers = true
    )]
    pub regularize: f64,
    /// Fit quotes that violate the strike checks too.
    #[arg(long)]
    pub keep_arbitrage: bool,
    /// Title of the HTML report.
    #[arg(long, default_value = "Calibration report")]
    pub title: String,
    /// No summary on stderr.
    #[arg(short, long)]
    pub quiet: bool,
}

/// Parses `name=value` into a parameter index and a checked value.
fn assignment(option: &str, text: &str) -> Result<(usize, f64)> {
    let (name, value) = text
        .split_once('=')
        .ok_or_else(|| anyhow!("{option}: '{}' is not NAME=VALUE", text.escape_debug()))?;
    let name = name.trim().to_ascii_lowercase();
    let j = PARAM_NAMES.iter().position(|n| *n == name).ok_or_else(|| {
        anyhow!(
            "{option}: unknown parameter '{}' (one of {})",
            name.escape_debug(),
            PARAM_NAMES.join(", ")
        )
    })?;
    let v: f64 = value.trim().parse().map_err(|_| {
        anyhow!(
            "{option}: {name} = '{}' is not a number",
            value.escape_debug()
        )
    })?;
    check_param(j, v).map_err(|e| anyhow!("{option}: {e}"))?;
    Ok((j, v))
}

/// The validated calibration request.
fn spec(args: &Args) -> Result<CalibrationSpec> {
    let mut s = CalibrationSpec {
        per_expiry: args.per_expiry,
        objective: match args.objective {
            ObjectiveArg::Vol => Objective::ImpliedVol,
            ObjectiveArg::Price => Objective::Price,
        },
        keep_arbitrage: args.keep_arbitrage,
        ..CalibrationSpec::default()
    };
    for f in &args.fix {
        let (j, v) = assignment("--fix", f)?;
        if s.fixed[j].is_some() {
            bail!("--fix: {} is given twice", PARAM_NAMES[j]);
        }
        s.fixed[j] = Some(v);
    }
    if !(args.regularize.is_finite() && args.regularize >= 0.0) {
        bail!(
            "--regularize must be a finite number >= 0, got {}",
            args.regularize
        );
    }
    s.regularize = args.regularize;
    match &args.prior {
        Some(list) => {
            for part in list.split(',') {
                let (j, v) = assignment("--prior", part)?;
                if s.prior[j].is_some() {
                    bail!("--prior: {} is given twice", PARAM_NAMES[j]);
                }
                s.prior[j] = Some(v);
            }
            if s.regularize == 0.0 {
                bail!("--prior has no effect without --regularize W (W > 0)");
            }
        }
        None if s.regularize > 0.0 => bail!("--regularize needs --prior NAME=VALUE,..."),
        None => {}
    }
    Ok(s)
}

/// Runs the command.
pub fn run(args: Args) -> Result<ExitCode> {
    let start = Instant::now();
    let spec = spec(&args)?;
    if let (Some(a), Some(b)) = (&args.output, &args.residuals) {
        if a == b && a.as_os_str() != "-" {
            bail!("-o and --residuals name the same file {}", a.display());
        }
    }
    let mut out = Output::open(args.output.as_deref(), &args.quotes)?;
    let mut res_out = match &args.residuals {
        Some(p) => Some(Output::open(Some(p), &args.quotes)?),
        None => None,
    };
    let staged = match &args.report {
        Some(dir) => Some(OutputDir::stage(dir, &args.quotes, &REPORT_FILES)?),
        None => None,
    };
    let input = open_input(&args.quotes)?;
    let sheet = read_quotes_dated(input, args.valuation_date)
        .with_context(|| format!("cannot read quotes from {}", args.quotes.display()))?;
    let fits = calibrate::calibrate(&sheet, &spec);
    let outcomes = report::outcomes(&sheet, &fits, &spec);

    report::write_params(&mut out, &sheet, &fits, &spec)?;
    out.commit()?;
    if let Some(mut r) = res_out.take() {
        report::write_residuals(&mut r, &sheet, &outcomes)?;
        r.commit()?;
    }
    if let Some(dir) = staged {
        let p = dir.path().to_path_buf();
        let write = |name: &str, bytes: &[u8]| {
            std::fs::write(p.join(name), bytes)
                .with_context(|| format!("cannot write {}", p.join(name).display()))
        };
        let mut buf = Vec::new();
        report::write_params(&mut buf, &sheet, &fits, &spec)?;
        write("params.csv", &buf)?;
        buf.clear();
        report::write_residuals(&mut buf, &sheet, &outcomes)?;
        write("residuals.csv", &buf)?;
        write(
            "report.html",
            report::html(&sheet, &fits, &outcomes, &spec, &args.title).as_bytes(),
        )?;
        dir.commit()?;
    }

    let bad_rows = outcomes.iter().filter(|o| o.status != "ok").count();
    let failed_fits = fits.iter().filter(|f| f.status.is_err()).count();
    let unconverged = fits
        .iter()
        .filter(|f| f.flags.iter().any(|x| x == "did not converge"))
        .count();
    if !args.quiet {
        let mut err = std::io::stderr().lock();
        let shown: Vec<_> = outcomes
            .iter()
            .filter(|o| o.status != "ok")
            .take(20)
            .collect();
        for o in &shown {
            let _ = writeln!(err, "saltus: quote {}", o.status);
        }
        if bad_rows > shown.len() {
            let _ = writeln!(
                err,
                "saltus: ... and {} more quote rows not fitted as given (see the residuals' status)",
                bad_rows - shown.len()
            );
        }
        for f in &fits {
            let name = match f.expiry {
                Some(e) => format!("{} expiry {e}", f.underlying),
                None => f.underlying.clone(),
            };
            match f.params {
                Some(p) if f.status.is_ok() => {
                    let _ = writeln!(
                        err,
                        "saltus: {name}: vol {:.6} jump_rate {:.6} jump_mean {:.6} jump_vol {:.6}, \
                         {} quotes, rmse {:.4} vol pts{}",
                        p[0],
                        p[1],
                        p[2],
                        p[3],
                        f.quotes_used,
                        f.rmse_vol_pts,
                        if f.flags.is_empty() {
                            String::new()
                        } else {
                            format!("; flags: {}", f.flags.join("; "))
                        }
                    );
                }
                _ => {
                    let e = f.status.as_ref().err().cloned().unwrap_or_default();
                    let _ = writeln!(err, "saltus: {name}: not fitted: {e}");
                }
            }
        }
        let _ = writeln!(
            err,
            "saltus: {} quote rows, {} fitted groups, {} rows not fitted as given, {} fits failed, in {:.3} s",
            sheet.rows.len(),
            fits.len() - failed_fits,
            bad_rows,
            failed_fits,
            start.elapsed().as_secs_f64()
        );
        if sheet.skipped > 0 {
            let _ = writeln!(
                err,
                "saltus: {} records with every field empty skipped like blank lines",
                sheet.skipped
            );
        }
    }
    Ok(if bad_rows > 0 || failed_fits > 0 || unconverged > 0 {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    })
}
