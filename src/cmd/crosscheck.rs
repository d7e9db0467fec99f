//! `saltus crosscheck`: every row priced by the series, Fourier and Monte
//! Carlo engines, with a per-row verdict and a validation summary on stderr.

use super::output::Output;
use super::{open_input, report_rows};
use anyhow::{bail, Result};
use indicatif::{ProgressBar, ProgressStyle};
use saltus::book::{run_book, PipelineOptions, StreamKeys};
use saltus::engines::monte_carlo::{
    IntensityChoice, McConfig, Work, GAMMA_RANGE, MAX_JUMP_MEAN_SHIFT, MAX_PATHS,
};
use saltus::reports::crosscheck::{check, CheckConfig, CheckSummary, Outcome, SummaryRecord};
use std::io::IsTerminal;
use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::Mutex;
use std::time::Instant;

/// Arguments of `saltus crosscheck`.
#[derive(clap::Args)]
#[command(after_help = concat!(
    columns_read!(),
    "Columns written: every input column echoed, then price_series, price_fourier, price_mc, \
mc_stderr, mc_z, fourier_gap, fourier_gap_rel, fourier_error_est, mc_method, mc_paths, mc_ess, \
mc_hits, verdict, status.\n\
fourier_gap_rel is fourier_gap / price_series (empty when the series price is 0); \
fourier_error_est is the Fourier engine's own absolute error estimate; mc_method names the \
Monte Carlo estimator (plain, jump-count, esscher, esscher+jump-count, share-measure, with \
+parity when the out-of-the-money side was simulated; exact or chernoff-bound without simulation; \
docs/engines.md); mc_paths the paths simulated; mc_ess the effective sample size of the weighted \
payoffs; mc_hits the paths that paid, counted under the sampling law before weighting.\n\
verdict is 'agree', 'inconclusive: <why>' (an engine could not resolve the price, e.g. no \
in-the-money Monte Carlo paths, or the Fourier engine failed: price_fourier and fourier_gap \
are then empty) or 'disagree: <why>'.\n\
Each row's random stream is derived from --seed and the row's id (without an id: a hash of the \
row's fields), so results do not depend on thread count, row order or how the book is split. \
Rows that repeat an id share a stream: they are counted and named in a warning (this check holds \
about 32 bytes per row in memory).\n\
Exit codes: 0 all rows checked and at most --allow-disagree disagreements; 1 otherwise; ",
    exit_2!()
))]
pub struct Args {
    /// The book (CSV); `-` reads standard input.
    pub book: PathBuf,
    /// Output file, replaced only when the run completes; `-`: standard output
    /// [default: standard output]
    #[arg(short, long, value_name = "REPORT.csv")]
    pub output: Option<PathBuf>,
    /// Monte Carlo paths per row (antithetic pairs count as two).
    #[arg(
        long,
        value_name = "N",
        conflicts_with = "target_se",
        default_value_t = 1_000_000,
        allow_negative_numbers = true
    )]
    pub paths: u64,
    /// Keep adding paths until the standard error is below X (absolute), or
    /// below X% of the price when written with a percent sign (e.g. 0.05%).
    #[arg(long, value_name = "X", allow_hyphen_values = true)]
    pub target_se: Option<String>,
    /// Path cap per row for --target-se.
    #[arg(long, value_name = "N", default_value_t = 1 << 26, allow_negative_numbers = true)]
    pub max_paths: u64,
    /// Seed of the random streams.
    #[arg(
        long,
        value_name = "S",
        default_value_t = 20_261_201,
        allow_negative_numbers = true
    )]
    pub seed: u64,
    /// Fix the jump-intensity multiplier of the importance sampling (1 = none)
    /// [default: chosen per row by a pilot run]
    #[arg(long, value_name = "G", allow_negative_numbers = true)]
    pub gamma: Option<f64>,
    /// Shift of the jump-size mean under the sampling law.
    #[arg(
        long,
        value_name = "X",
        default_value_t = 0.0,
        allow_hyphen_values = true
    )]
    pub jump_mean_shift: f64,
    /// Turn off antithetic variates.
    #[arg(long)]
    pub no_antithetic: bool,
    /// Turn off the control variate.
    #[arg(long)]
    pub no_control: bool,
    /// Largest accepted |z| of Monte Carlo against the series.
    #[arg(
        long,
        value_name = "Z",
        default_value_t = 4.0,
        allow_negative_numbers = true
    )]
    pub z_max: f64,
    /// Largest accepted relative gap between the Fourier and series prices.
    #[arg(
        long,
        value_name = "R",
        default_value = "1e-8",
        allow_negative_numbers = true
    )]
    pub fourier_tol: f64,
    /// Disagreeing rows tolerated before the exit code turns non-zero.
    #[arg(
        long,
        value_name = "N",
        default_value_t = 0,
        allow_negative_numbers = true
    )]
    pub allow_disagree: u64,
    #[command(flatten)]
    pub inputs: super::book_inputs::BookInputArgs,
    /// No progress bar and no summary on stderr.
    #[arg(short, long)]
    pub quiet: bool,
}

fn parse_target(s: &str) -> Result<Work> {
    let t = s.trim();
    let (num, rel) = match t.strip_suffix('%') {
        Some(n) => (n.trim(), true),
        None => (t, false),
    };
    let x: f64 = match num.parse() {
        Ok(x) if x > 0.0 && f64::is_finite(x) && (!rel || x <= 100.0) => x,
        _ => bail!(
            "--target-se must be a positive number, or a percentage above 0% and at most 100%, got '{s}'"
        ),
    };
    Ok(if rel {
        Work::RelativeSe(x / 100.0)
    } else {
        Work::AbsoluteSe(x)
    })
}

/// Largest accepted `--z-max`.
const MAX_Z: f64 = 100.0;

/// Turns the raw flags into a validated configuration: every numeric option
/// is checked against its documented range here, before any work, so no
/// option value can reach an engine it would break.
fn config(args: &Args) -> Result<CheckConfig> {
    let work = match &args.target_se {
        Some(t) => parse_target(t)?,
        None => {
            if !(2..=MAX_PATHS).contains(&args.paths) {
                bail!(
                    "--paths must be between 2 and {MAX_PATHS}, got {}",
                    args.paths
                );
            }
            Work::Paths(args.paths)
        }
    };
    if !(2..=MAX_PATHS).contains(&args.max_paths) {
        bail!(
            "--max-paths must be between 2 and {MAX_PATHS}, got {}",
            args.max_paths
        );
    }
    let (g_lo, g_hi) = GAMMA_RANGE;
    let intensity = match args.gamma {
        None => IntensityChoice::Auto,
        Some(g) if g.is_finite() && (g_lo..=g_hi).contains(&g) => IntensityChoice::Fixed(g),
        Some(g) => bail!("--gamma must be between {g_lo:e} and {g_hi:e}, got {g}"),
    };
    let shift = args.jump_mean_shift;
    if !(shift.is_finite() && shift.abs() <= MAX_JUMP_MEAN_SHIFT) {
        bail!(
            "--jump-mean-shift must be between -{MAX_JUMP_MEAN_SHIFT} and {MAX_JUMP_MEAN_SHIFT}, got {shift}"
        );
    }
    if !(args.z_max.is_finite() && args.z_max > 0.0 && args.z_max <= MAX_Z) {
        bail!(
            "--z-max must be a positive number up to {MAX_Z}, got {}",
            args.z_max
        );
    }
    if !(args.fourier_tol.is_finite() && args.fourier_tol > 0.0 && args.fourier_tol <= 1.0) {
        bail!(
            "--fourier-tol must be a positive number up to 1, got {}",
            args.fourier_tol
        );
    }
    let mc = McConfig {
        work,
        max_paths: args.max_paths,
        seed: args.seed,
        antithetic: !args.no_antithetic,
        control_variate: !args.no_control,
        intensity,
        jump_mean_shift: shift,
        sampling_count_mean: None,
    };
    // The library's own check (the same ranges); a failure here is a bug above.
    if let Err(e) = mc.validate() {
        bail!("invalid Monte Carlo settings: {e}");
    }
    Ok(CheckConfig {
        mc,
        z_max: args.z_max,
        fourier_rel_tol: args.fourier_tol,
    })
}

fn progress(args: &Args) -> ProgressBar {
    if args.quiet || !std::io::stderr().is_terminal() {
        return ProgressBar::hidden();
    }
    let total = if args.book.as_os_str() == "-" {
        None
    } else {
        std::fs::read(&args.book)
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
        None => ProgressBar::new_spinner(),
    }
}

/// Runs the command.
pub fn run(args: Args) -> Result<ExitCode> {
    let start = Instant::now();
    let cfg = config(&args)?;
    let columns = [
        "price_series",
        "price_fourier",
        "price_mc",
        "mc_stderr",
        "mc_z",
        "fourier_gap",
        "fourier_gap_rel",
        "fourier_error_est",
        "mc_method",
        "mc_paths",
        "mc_ess",
        "mc_hits",
        "verdict",
        "status",
    ];
    let opts = PipelineOptions {
        result_columns: columns.iter().map(|s| s.to_string()).collect(),
        inputs: args.inputs.inputs()?,
    };
    let records = Mutex::new(Vec::new());
    let bar = progress(&args);
    let input = open_input(&args.book)?;
    let mut output = Output::open(args.output.as_deref(), &args.book)?;
    let keys = StreamKeys::new(cfg.mc.seed);
    let summary = run_book(input, &mut output, &opts, |row, out| {
        let key = keys.key(row);
        let r = check(&row.contract, key, &cfg).map_err(|e| e.to_string())?;
        out.push_f64(r.price_series);
        match r.fourier {
            Some(f) => out.push_f64(f.price),
            None => out.push_empty(1),
        }
        out.push_f64(r.mc.price);
        out.push_f64(r.mc.std_error);
        match r.mc_z {
            Some(z) => out.push_f64(z),
            None => out.push_empty(1),
        }
        match r.fourier_gap {
            Some(g) => out.push_f64(g),
            None => out.push_empty(1),
        }
        match r.fourier_gap {
            Some(g) if r.price_series > 0.0 => out.push_f64(g / r.price_series),
            _ => out.push_empty(1),
        }
        match r.fourier {
            Some(f) => out.push_f64(f.error_estimate),
            None => out.push_empty(1),
        }
        out.push_str(r.mc.method.as_str());
        out.push_u64(r.mc.paths);
        out.push_f64(r.mc.ess);
        out.push_u64(r.mc.hits);
        out.push_str(&r.verdict);
        if out.non_finite().is_some() {
            return Ok(()); // the pipeline fails the row; keep it out of the summary
        }
        let rel = match r.fourier_gap {
            Some(g) if r.price_series > 0.0 => g / r.price_series,
            _ => 0.0,
        };
        records.lock().expect("records lock").push(SummaryRecord {
            row: row.row,
            id: row.id().into_owned(),
            outcome: r.outcome,
            z: r.mc_z,
            fourier_rel_gap: rel,
            paths: r.mc.paths,
        });
        bar.inc(1);
        Ok(())
    })?;
    output.commit()?;
    bar.finish_and_clear();
    let check = CheckSummary::from_records(records.into_inner().expect("records lock"), 5);
    if !args.quiet {
        print_summary(&check, &cfg);
        report_rows(&summary, "checked", start.elapsed().as_secs_f64());
        if let Some(w) = keys.duplicate_warning() {
            eprintln!("saltus: warning: {w}");
        }
    }
    let too_many = check.disagree > args.allow_disagree;
    if too_many && !args.quiet {
        eprintln!(
            "saltus: {} rows disagree, more than the {} allowed (--allow-disagree)",
            check.disagree, args.allow_disagree
        );
    }
    Ok(if summary.failed > 0 || too_many {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    })
}

fn print_summary(s: &CheckSummary, cfg: &CheckConfig) {
    let agree = s.rows - s.disagree - s.inconclusive;
    eprintln!("Cross-check of the Merton series against Fourier (Lewis) and Monte Carlo");
    eprintln!("  rows checked          {}", s.rows);
    eprintln!("  agree                 {agree}");
    eprintln!("  inconclusive          {}", s.inconclusive);
    eprintln!("  disagree (flagged)    {}", s.disagree);
    eprintln!(
        "  tolerances            |z| <= {}, |fourier gap| <= {:e} x price",
        cfg.z_max, cfg.fourier_rel_tol
    );
    eprintln!(
        "  Monte Carlo paths     {} in all, seed {}",
        s.mc_paths, cfg.mc.seed
    );
    if s.z_count > 0 {
        eprintln!(
            "  z-scores              n = {}, mean {:+.3}, sd {:.3}, share |z| <= 1.96: {:.1}% (standard normal: 0, 1, 95%)",
            s.z_count,
            s.z_mean,
            s.z_sd,
            100.0 * s.z_within_196
        );
    }
    if !s.worst_z.is_empty() {
        eprintln!(
            "  largest |z|           {}",
            fmt_list(&s.worst_z, |z| format!("{z:+.2}"))
        );
    }
    if !s.worst_fourier.is_empty() {
        eprintln!(
            "  largest Fourier gaps  {}",
            fmt_list(&s.worst_fourier, |g| format!("{g:+.1e} rel"))
        );
    }
    let _ = Outcome::Agree;
}

fn fmt_list(items: &[(u64, String, f64)], f: impl Fn(f64) -> String) -> String {
    items
        .iter()
        .map(|(row, id, x)| format!("{id} (row {row}) {}", f(*x)))
        .collect::<Vec<_>>()
        .join(", ")
}
