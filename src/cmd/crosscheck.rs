//! `saltus crosscheck`: every row priced by the series, Fourier and Monte
//! Carlo engines, with a per-row verdict and a validation summary on stderr.

use super::output::{Output, OutputDir};
use super::{open_input, report_rows};
use anyhow::{bail, Result};
use saltus::book::{run_book_with_state, PipelineOptions, StreamKeys};
use saltus::engines::monte_carlo::{
    IntensityChoice, McConfig, Work, GAMMA_RANGE, MAX_JUMP_MEAN_SHIFT, MAX_PATHS,
};
use saltus::engines::pide::Exercise;
use saltus::reports::crosscheck::{
    check, check_american, CheckConfig, Outcome, ABS_FLOOR, CROSSCHECK_PIDE_TOL,
};
use saltus::reports::crosscheck_report::{self, RunSettings, REPORT_FILE};
use saltus::reports::crosscheck_summary::{CheckAccumulator, FlaggedRow};
use std::path::PathBuf;
use std::process::ExitCode;
use std::time::Instant;

/// Arguments of `saltus crosscheck`.
#[derive(clap::Args)]
#[command(after_help = concat!(
    columns_read!(),
    "Columns written: every input column echoed, then price_series, price_fourier, price_mc, \
mc_stderr, mc_z, fourier_gap, fourier_gap_rel, fourier_error_est, mc_method, mc_paths, mc_ess, \
mc_hits, price_pide, pide_gap, pide_error_est, verdict, status.\n\
fourier_gap_rel is fourier_gap / price_series (empty when the series price is 0); \
fourier_error_est is the Fourier engine's own absolute error estimate; mc_method names the \
Monte Carlo estimator (plain, jump-count, esscher, esscher+jump-count, share-measure, with \
+parity when the out-of-the-money side was simulated; exact or chernoff-bound without simulation; \
docs/engines.md); mc_paths the paths simulated; mc_ess the effective sample size of the weighted \
payoffs; mc_hits the paths that paid, counted under the sampling law before weighting.\n\
price_pide is the European PIDE price (a fourth independent engine, to --pide-tol), pide_gap \
price_pide - price_series, pide_error_est the PIDE's own error estimate; the PIDE agrees when \
|pide_gap| <= max(pide_error_est, the PIDE tolerance). Rows outside its reach (zero vol, lambda T above 50, a standard deviation \
of ln S_T above 5, expiry below 1e-6 years, |ln(S/K)| beyond 12 x max(1, sd of ln S_T)) or needing more than 1e7 node-steps are inconclusive for it.\n\
American rows (column exercise) are checked by PIDE grid convergence and the bounds of early \
exercise (>= European series, >= intrinsic, = European for a call with q = 0 and r >= 0): \
price_series is the European series price, price_pide the American PIDE price, pide_gap empty, \
the Fourier and Monte Carlo columns empty, and the verdict names the checks.\n\
verdict is 'agree' (every engine agreed), 'agree by <engines> (no verdict from the others: \
<why>)' (Fourier or Monte Carlo agreed; another engine could not decide or does not apply, as \
Fourier to a lattice law with zero vol and zero jump vol, or the PIDE beyond its reach), \
'inconclusive: <why>' (neither Fourier nor Monte Carlo could decide) or 'disagree: <why>' (any \
engine outside its tolerance). The PIDE can make a row disagree but does not carry an agree alone.\n\
Each row's random stream is derived from --seed and the row's id (without an id: a hash of the \
row's fields), so results do not depend on thread count, row order or how the book is split. \
Rows that repeat an id share a stream: they are counted and named in a warning (this check holds \
about 32 bytes per row in memory; everything else the summary and the report need is bounded: \
fixed tables and the first 1000 flagged rows).\n\
Rows are named by their input line everywhere (summary, report, errors). The summary on stderr \
lists the inconclusive and disagreeing rows (the first 10 of each) with their reasons.\n\
--report DIR writes DIR/report.html, a self-contained validation page (inline SVG, no scripts \
or network): z-score histogram and normal quantile plot, coverage of the 95% intervals by \
moneyness and expiry, Fourier gap against moneyness and expiry, the flagged rows, the run's \
settings. DIR is replaced as a whole when the run completes (an existing DIR may hold only \
report.html).\n\
Exit codes: 0 all rows checked, at most --allow-disagree disagreements and, with \
--fail-on-inconclusive, no inconclusive row; 1 otherwise; ",
    exit_2!()
))]
pub struct Args {
    /// The book (CSV); `-` reads standard input.
    pub book: PathBuf,
    /// Output file, replaced only when the run completes; `-`: standard output
    /// [default: standard output]
    #[arg(short, long, value_name = "REPORT.csv")]
    pub output: Option<PathBuf>,
    /// Monte Carlo paths per row (antithetic pairs count as two), rounded up
    /// to whole blocks of 16384 (8192 with --no-antithetic); below one block
    /// a warning says so. mc_paths shows the paths used.
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
    /// Count inconclusive rows toward the exit code (exit 1 when any row
    /// reaches no verdict).
    #[arg(long)]
    pub fail_on_inconclusive: bool,
    /// Also write a self-contained HTML validation page, DIR/report.html.
    #[arg(long, value_name = "DIR")]
    pub report: Option<PathBuf>,
    /// PIDE tolerance: absolute price error as a fraction of spot (1e-5 is
    /// 0.001 at spot 100; ten times looser than price's default, so the
    /// fourth engine costs about what the other three do)
    #[arg(long, value_name = "F", default_value_t = CROSSCHECK_PIDE_TOL, allow_negative_numbers = true)]
    pub pide_tol: f64,
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
        pide: super::pide_args::pide_config(args.pide_tol)?,
    })
}

/// Rows of each kind listed on stderr before "and N more".
const LISTED: usize = 10;

/// Runs the command.
pub fn run(args: Args) -> Result<ExitCode> {
    let start = Instant::now();
    let cfg = config(&args)?;
    if let Work::Paths(p) = cfg.mc.work {
        super::warn_paths_rounding(p, cfg.mc.antithetic, args.quiet);
    }
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
        "price_pide",
        "pide_gap",
        "pide_error_est",
        "verdict",
        "status",
    ];
    let opts = PipelineOptions {
        result_columns: columns.iter().map(|s| s.to_string()).collect(),
        inputs: args.inputs.inputs()?,
        exercise_columns: None,
    };
    // The report directory is staged before any work, so a refused
    // directory stops the run before the book is read.
    let staged = match &args.report {
        Some(dir) => Some(OutputDir::stage(dir, &args.book, &[REPORT_FILE])?),
        None => None,
    };
    let bar = super::progress_bar(&args.book, args.quiet);
    let input = open_input(&args.book)?;
    let mut output = Output::open(args.output.as_deref(), &args.book)?;
    let keys = StreamKeys::new(cfg.mc.seed);
    let mut acc = CheckAccumulator::default();
    let summary = run_book_with_state(
        input,
        &mut output,
        &opts,
        |row, out, chunk: &mut CheckAccumulator| {
            let key = keys.key(row);
            if row.exercise == Exercise::American {
                let a = check_american(&row.contract, &cfg).map_err(|e| e.to_string())?;
                out.push_f64(a.price_series);
                out.push_empty(11); // Fourier and Monte Carlo: European engines
                match a.pide {
                    Some(p) => {
                        out.push_f64(p.price);
                        out.push_empty(1);
                        out.push_f64(p.error_estimate);
                    }
                    None => out.push_empty(3),
                }
                out.push_str(&a.verdict);
                bar.inc(1);
                if out.non_finite().is_some() {
                    return Ok(());
                }
                chunk.add_american(row.line, row.explicit_id().unwrap_or(""), &row.contract, &a);
                return Ok(());
            }
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
            match r.pide {
                Some(p) => {
                    out.push_f64(p.price);
                    out.push_f64(p.price - r.price_series);
                    out.push_f64(p.error_estimate);
                }
                None => out.push_empty(3),
            }
            out.push_str(&r.verdict);
            bar.inc(1);
            if out.non_finite().is_some() {
                return Ok(()); // the pipeline fails the row; keep it out of the summary
            }
            // Rows are named by input line; an id only when the book has one
            // (the row-number fallback of `BookRow::id` would be a second scheme).
            chunk.add(
                row.line,
                row.explicit_id().unwrap_or(""),
                &row.contract,
                &r,
                &cfg,
            );
            Ok(())
        },
        |chunk| {
            acc.merge(chunk);
            Ok(())
        },
    )?;
    bar.finish_and_clear();
    let seconds = start.elapsed().as_secs_f64();
    if let (Some(staged), Some(dir)) = (staged, &args.report) {
        let settings = RunSettings {
            input: args.book.display().to_string(),
            command_line: std::env::args().collect::<Vec<_>>().join(" "),
            work: match cfg.mc.work {
                Work::Paths(p) => {
                    let sim = super::simulated_paths(p, cfg.mc.antithetic);
                    if sim == p {
                        format!("{p} paths")
                    } else {
                        format!("{sim} paths (--paths {p}, rounded up to whole blocks)")
                    }
                }
                Work::AbsoluteSe(x) => format!(
                    "until the standard error is below {x} (at most {} paths)",
                    cfg.mc.max_paths
                ),
                Work::RelativeSe(x) => format!(
                    "until the standard error is below {}% of the price (at most {} paths)",
                    100.0 * x,
                    cfg.mc.max_paths
                ),
            },
            seed: cfg.mc.seed,
            version: env!("CARGO_PKG_VERSION").to_string(),
            date: jiff::Timestamp::now()
                .strftime("%Y-%m-%d %H:%M:%S UTC")
                .to_string(),
            z_max: cfg.z_max,
            fourier_rel_tol: cfg.fourier_rel_tol,
            abs_floor: ABS_FLOOR,
            threads: rayon::current_num_threads(),
            rows_read: summary.rows,
            rows_failed: summary.failed,
            first_errors: summary.first_errors.clone(),
            seconds,
        };
        std::fs::write(
            staged.path().join(REPORT_FILE),
            crosscheck_report::html(&acc, &settings),
        )?;
        output.commit()?;
        staged.commit()?;
        if !args.quiet {
            eprintln!(
                "saltus: validation page written to {}",
                dir.join(REPORT_FILE).display()
            );
        }
    } else {
        output.commit()?;
    }
    if !args.quiet {
        print_summary(&acc, &cfg);
        report_rows(&summary, "checked", seconds);
        if let Some(w) = keys.duplicate_warning() {
            eprintln!("saltus: warning: {w}");
        }
    }
    let too_many = acc.disagree > args.allow_disagree;
    if too_many && !args.quiet {
        eprintln!(
            "saltus: {} rows disagree, more than the {} allowed (--allow-disagree)",
            acc.disagree, args.allow_disagree
        );
    }
    let unsure = args.fail_on_inconclusive && acc.inconclusive > 0;
    if unsure && !args.quiet {
        eprintln!(
            "saltus: {} rows reached no verdict (--fail-on-inconclusive)",
            acc.inconclusive
        );
    }
    Ok(if summary.failed > 0 || too_many || unsure {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    })
}

fn print_summary(s: &CheckAccumulator, cfg: &CheckConfig) {
    eprintln!("Cross-check of the Merton series against Fourier (Lewis), Monte Carlo and the PIDE");
    eprintln!("  rows checked          {}", s.rows);
    eprintln!("  agree                 {}", s.agree);
    eprintln!("  inconclusive          {}", s.inconclusive);
    eprintln!("  disagree (flagged)    {}", s.disagree);
    eprintln!(
        "  tolerances            Monte Carlo |z| <= {} (standard errors); Fourier |gap| <= {:e} x price_series \
         (relative), at least {:e} x spot (absolute, price units); PIDE |gap| <= the larger of its own error estimate and \
         its tolerance {:e} x spot (price units)",
        cfg.z_max, cfg.fourier_rel_tol, ABS_FLOOR, cfg.pide.tol_spot
    );
    eprintln!(
        "  Monte Carlo paths     {} in all, seed {}",
        s.mc_paths, cfg.mc.seed
    );
    if s.z_count > 0 {
        eprintln!(
            "  z-scores              n = {}, mean {:+.3}, sd {:.3}, share |z| <= 1.96: {:.1}% (standard normal: 0, 1, 95%)",
            s.z_count,
            s.z_mean(),
            s.z_sd(),
            100.0 * s.z_share_within_196()
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
            fmt_list(&s.worst_fourier, |g| format!("{g:+.2e} x tolerance"))
        );
    }
    for (outcome, count, name) in [
        (Outcome::Disagree, s.disagree, "disagreeing rows"),
        (Outcome::Inconclusive, s.inconclusive, "inconclusive rows"),
    ] {
        if count == 0 {
            continue;
        }
        eprintln!("  {name}:");
        let listed: Vec<&FlaggedRow> = s.flagged_with(outcome).take(LISTED).collect();
        for f in &listed {
            if f.id.is_empty() {
                eprintln!("    line {}: {}", f.line, f.verdict);
            } else {
                eprintln!("    line {} (id {}): {}", f.line, f.id, f.verdict);
            }
        }
        if count > listed.len() as u64 {
            eprintln!(
                "    ... and {} more (see the verdict column)",
                count - listed.len() as u64
            );
        }
    }
}

fn fmt_list(items: &[(u64, String, f64)], f: impl Fn(f64) -> String) -> String {
    items
        .iter()
        .map(|(line, id, x)| {
            if id.is_empty() {
                format!("line {line} {}", f(*x))
            } else {
                format!("{id} (line {line}) {}", f(*x))
            }
        })
        .collect::<Vec<_>>()
        .join(", ")
}
