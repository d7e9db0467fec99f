//! `saltus greeks`: analytic Greeks, bump-and-reprice Greeks on any engine,
//! or both side by side with their differences flagged (the validator's
//! Greeks check).
//!
//! American rows (book column `exercise`) have no closed form: their
//! reference Greeks are the PIDE grid's delta, gamma and theta, and their
//! finite differences always reprice with the American PIDE, whatever
//! `--engine` says.

use super::output::Output;
use super::{open_input, report_rows};
use anyhow::{bail, Result};
use saltus::book::{run_book, PipelineOptions, StreamKeys};
use saltus::engines::monte_carlo::{McConfig, Work, MAX_PATHS};
use saltus::engines::pide::{self, Exercise, PideEngine};
use saltus::engines::series;
use saltus::engines::{FourierEngine, MonteCarloEngine, PricingEngine, SeriesEngine};
use saltus::greeks::finite_diff::{self, FdConfig};
use saltus::greeks::SENSITIVITY_NAMES;
use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::Instant;

/// Which engine the finite differences reprice with.
#[derive(Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum EngineChoice {
    /// The closed-form series.
    Series,
    /// The Fourier (Lewis) engine.
    Fourier,
    /// Monte Carlo on common random numbers.
    Mc,
    /// The PIDE (European exercise on European rows).
    Pide,
}

/// Which Greeks to write.
#[derive(Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Method {
    /// Closed-form partial derivatives of the series.
    Analytic,
    /// Bump and reprice with the chosen engine.
    Fd,
    /// Both, with absolute and relative differences and a flag.
    Both,
}

/// Arguments of `saltus greeks`.
#[derive(clap::Args)]
#[command(after_help = concat!(
    columns_read!(),
    "Columns written: every input column echoed, then\n  \
--method analytic|fd: price, the 11 Greeks, status\n  \
--method both: for each Greek G: G_analytic, G_fd, G_abs_diff, G_rel_diff, G_flag (ok, DIFF or \
n/a), then price, flagged (the names of flagged Greeks), fd_note, status.\n\
Where a finite difference is not defined (an expired row at the strike, zero variance with the \
forward at the strike, a point of a lattice law at the strike: the price has a kink within the \
bumps) every G_flag is n/a, G_fd and the differences are empty, and fd_note says why; such a row \
is not flagged.\n\
American rows (column exercise): no closed form; the reference (`analytic`) values are the PIDE \
grid's delta, gamma and theta (the other G_analytic, G_abs_diff, G_rel_diff, G_flag are empty), \
and the finite differences reprice with the American PIDE (to --pide-tol) whatever --engine says. \
With --method analytic such a row gets price, delta, gamma, theta, the other Greeks empty and a \
warning status (not ok).\n\
The Greeks, in raw units (per 1.00 of each input; theta = -dV/dT per year): delta gamma vega \
theta rho div_rho d_jump_rate d_jump_mean d_jump_vol vanna volga.\n\
With --engine mc each row's random stream is derived from --seed and the row's id (without an id: \
a hash of the row's fields), never from its position; rows that repeat an id share a stream and \
are named in a warning (this check holds about 32 bytes per row in memory).\n\
A Greek is flagged when |fd - analytic| > rel_tol x |analytic| + floor + noise, where noise is \
the engine's error propagated through the difference (see docs/risk.md).\n\
Exit codes: 0 no row failed and nothing flagged; 1 otherwise; ",
    exit_2!()
))]
pub struct Args {
    /// The book (CSV); `-` reads standard input.
    pub book: PathBuf,
    /// Output file, replaced only when the run completes; `-`: standard output
    /// [default: standard output]
    #[arg(short, long, value_name = "OUT.csv")]
    pub output: Option<PathBuf>,
    /// Engine the finite differences reprice with: series (the closed form),
    /// fourier (Lewis), mc (Monte Carlo on common random numbers), pide (the
    /// PIDE grid, to --pide-tol; American rows always use it).
    #[arg(
        long,
        value_enum,
        default_value = "series",
        hide_possible_values = true
    )]
    pub engine: EngineChoice,
    /// Which Greeks: analytic (closed form), fd (bump and reprice with
    /// --engine), both (side by side, differences flagged).
    #[arg(long, value_enum, default_value = "both", hide_possible_values = true)]
    pub method: Method,
    /// Relative tolerance for --method both [default: 1e-6 series, 1e-5 fourier, 0.05 mc,
    /// 1e-3 pide and American rows]
    #[arg(long, value_name = "R", allow_negative_numbers = true)]
    pub rel_tol: Option<f64>,
    /// Spot bump as a fraction of the one-sd move S min(1, s sqrt T)
    /// [default: 1e-3 series, 3e-3 fourier, 0.2 mc, 1e-2 pide]
    #[arg(long, value_name = "H", allow_negative_numbers = true)]
    pub spot_bump: Option<f64>,
    /// Absolute vol bump [default: 1e-3 series, 3e-3 fourier, 1e-2 mc, 1e-2 pide]
    #[arg(long, value_name = "H", allow_negative_numbers = true)]
    pub vol_bump: Option<f64>,
    /// Turn Richardson extrapolation off (it is used with series and fourier, never with mc or pide).
    #[arg(long)]
    pub no_richardson: bool,
    /// Monte Carlo paths per repricing (--engine mc), rounded up to whole
    /// blocks of 16384; below one block a warning says so.
    #[arg(
        long,
        value_name = "N",
        default_value_t = 1_000_000,
        allow_negative_numbers = true
    )]
    pub paths: u64,
    /// Monte Carlo seed (--engine mc).
    #[arg(
        long,
        value_name = "S",
        default_value_t = 20_261_201,
        allow_negative_numbers = true
    )]
    pub seed: u64,
    #[command(flatten)]
    pub inputs: super::book_inputs::BookInputArgs,
    #[command(flatten)]
    pub pide: super::pide_args::PideArgs,
    /// No progress bar and no summary on stderr.
    #[arg(short, long)]
    pub quiet: bool,
}

/// Absolute floor of the comparison per Greek, in units of spot `s`: the
/// same 1e-9 relative scale as the accuracy target of the analytic Greeks.
fn floor(name: &str, s: f64) -> f64 {
    match name {
        "delta" | "vanna" => 1e-9,
        "gamma" => 1e-9 / s,
        _ => 1e-9 * s,
    }
}

/// Default relative tolerance of the comparison when the finite
/// differences reprice with the PIDE (its error, 1e-6 of spot by default,
/// divided by bumps of 1e-2 to 1e-3, is of this order; the propagated noise
/// is added on top).
const PIDE_REL_TOL: f64 = 1e-3;

/// Greeks the PIDE grid gives for an American row (the reference of the
/// comparison), by index in `SENSITIVITY_NAMES`: delta, gamma, theta.
const GRID_GREEKS: [usize; 3] = [0, 1, 3];

/// Runs the command.
pub fn run(args: Args) -> Result<ExitCode> {
    let start = Instant::now();
    let rel_tol = args.rel_tol.unwrap_or(match args.engine {
        EngineChoice::Series => 1e-6,
        EngineChoice::Fourier => 1e-5,
        EngineChoice::Mc => 0.05,
        EngineChoice::Pide => PIDE_REL_TOL,
    });
    let american_rel_tol = args.rel_tol.unwrap_or(PIDE_REL_TOL);
    let pide_cfg = args.pide.config()?;
    // Every option is validated here, before any work.
    if !(rel_tol > 0.0 && rel_tol <= 1.0) {
        bail!("--rel-tol must be a positive number up to 1, got {rel_tol}");
    }
    let (lo, hi) = finite_diff::BUMP_RANGE;
    for (name, v) in [
        ("--spot-bump", args.spot_bump),
        ("--vol-bump", args.vol_bump),
    ] {
        if let Some(h) = v {
            if !(h >= lo && h <= hi) {
                bail!(
                    "{name} must be between {lo:e} and {hi} (a smaller bump measures rounding, \
                     a larger one no longer a derivative), got {h}"
                );
            }
        }
    }
    if !(2..=MAX_PATHS).contains(&args.paths) {
        bail!(
            "--paths must be between 2 and {MAX_PATHS}, got {}",
            args.paths
        );
    }
    let mut columns: Vec<String> = Vec::new();
    match args.method {
        Method::Analytic | Method::Fd => {
            columns.push("price".into());
            columns.extend(SENSITIVITY_NAMES.iter().map(|g| g.to_string()));
        }
        Method::Both => {
            for g in SENSITIVITY_NAMES {
                for suffix in ["analytic", "fd", "abs_diff", "rel_diff", "flag"] {
                    columns.push(format!("{g}_{suffix}"));
                }
            }
            columns.push("price".into());
            columns.push("flagged".into());
            columns.push("fd_note".into());
        }
    }
    columns.push("status".into());
    let opts = PipelineOptions {
        result_columns: columns,
        inputs: args.inputs.inputs()?,
        exercise_columns: None,
    };
    let flagged_rows = AtomicU64::new(0);
    let mc_cfg = McConfig {
        work: Work::Paths(args.paths),
        seed: args.seed,
        ..McConfig::default()
    };
    if args.engine == EngineChoice::Mc && args.method != Method::Analytic {
        super::warn_paths_rounding(args.paths, mc_cfg.antithetic, args.quiet);
    }
    let mc_probe = MonteCarloEngine {
        config: mc_cfg.clone(),
        key: 0,
    };
    let pide_probe = PideEngine {
        exercise: Exercise::European,
        config: pide_cfg,
    };
    let bar = super::progress_bar(&args.book, args.quiet);
    let input = open_input(&args.book)?;
    let mut output = Output::open(args.output.as_deref(), &args.book)?;
    let keys = StreamKeys::new(args.seed);
    let summary = run_book(input, &mut output, &opts, |row, out| {
        let c = &row.contract;
        let american = row.exercise == Exercise::American;
        let fd_config = |engine: &dyn PricingEngine| {
            let mut cfg = FdConfig::for_engine(engine);
            if let Some(h) = args.spot_bump {
                cfg.bumps.spot_rel = h;
            }
            if let Some(h) = args.vol_bump {
                cfg.bumps.vol = h;
            }
            if args.no_richardson {
                cfg.richardson = false;
            }
            cfg
        };
        let fd = |_: ()| -> Result<finite_diff::FdGreeks, String> {
            let mc;
            let pide_engine;
            let engine: &dyn PricingEngine = match args.engine {
                _ if american => {
                    pide_engine = PideEngine {
                        exercise: Exercise::American,
                        config: pide_cfg,
                    };
                    &pide_engine
                }
                EngineChoice::Series => &SeriesEngine,
                EngineChoice::Fourier => &FourierEngine,
                EngineChoice::Pide => {
                    pide_engine = PideEngine {
                        exercise: Exercise::European,
                        config: pide_cfg,
                    };
                    &pide_engine
                }
                EngineChoice::Mc => {
                    mc = finite_diff::crn_monte_carlo(c, keys.key(row), &mc_cfg);
                    &mc
                }
            };
            finite_diff::greeks(engine, c, &fd_config(engine))
        };
        if american {
            return american_row(
                out,
                c,
                &pide_cfg,
                args.method,
                american_rel_tol,
                || fd(()),
                &flagged_rows,
            );
        }
        match args.method {
            Method::Analytic => {
                let g = series::price(c).map_err(|e| e.to_string())?.greeks;
                out.push_f64(g.price);
                for v in g.sensitivities() {
                    out.push_f64(v);
                }
            }
            Method::Fd => {
                let g = fd(())?.greeks;
                out.push_f64(g.price);
                for v in g.sensitivities() {
                    out.push_f64(v);
                }
            }
            Method::Both => {
                let a = series::price(c).map_err(|e| e.to_string())?.greeks;
                // The bumps depend on the engine's kind only, not on its state.
                let probe: &dyn PricingEngine = match args.engine {
                    EngineChoice::Series => &SeriesEngine,
                    EngineChoice::Fourier => &FourierEngine,
                    EngineChoice::Mc => &mc_probe,
                    EngineChoice::Pide => &pide_probe,
                };
                if let Some(reason) = finite_diff::undefined_reason(c, &fd_config(probe)) {
                    for ga in a.sensitivities() {
                        out.push_f64(ga);
                        out.push_empty(3);
                        out.push_str("n/a");
                    }
                    out.push_f64(a.price);
                    out.push_empty(1);
                    out.push_str(&reason);
                    bar.inc(1);
                    return Ok(());
                }
                let f = fd(())?;
                let mut flagged = Vec::new();
                for (i, ((ga, gf), noise)) in a
                    .sensitivities()
                    .into_iter()
                    .zip(f.greeks.sensitivities())
                    .zip(f.noise.sensitivities())
                    .enumerate()
                {
                    let diff = gf - ga;
                    let tol = rel_tol * ga.abs() + floor(SENSITIVITY_NAMES[i], c.spot) + noise;
                    let bad = diff.is_nan() || diff.abs() > tol;
                    out.push_f64(ga);
                    out.push_f64(gf);
                    out.push_f64(diff.abs());
                    // (Empty when undefined or beyond double range, e.g. an
                    // analytic Greek of 1e-319.)
                    let rel = diff.abs() / ga.abs();
                    if ga != 0.0 && rel.is_finite() {
                        out.push_f64(rel);
                    } else {
                        out.push_empty(1);
                    }
                    out.push_str(if bad { "DIFF" } else { "ok" });
                    if bad {
                        flagged.push(SENSITIVITY_NAMES[i]);
                    }
                }
                out.push_f64(a.price);
                out.push_str(&flagged.join(" "));
                out.push_empty(1);
                if !flagged.is_empty() && out.non_finite().is_none() {
                    flagged_rows.fetch_add(1, Ordering::Relaxed);
                }
            }
        }
        bar.inc(1);
        Ok(())
    })?;
    bar.finish_and_clear();
    output.commit()?;
    let flagged = flagged_rows.load(Ordering::Relaxed);
    if !args.quiet {
        report_rows(&summary, "done", start.elapsed().as_secs_f64());
        if let Some(w) = keys.duplicate_warning() {
            eprintln!("saltus: warning: {w}");
        }
        if args.method == Method::Both {
            eprintln!(
                "saltus: {flagged} rows with Greeks flagged (finite differences on the {} engine vs analytic, rel tol {rel_tol:e}; American rows: the PIDE vs its grid)",
                match args.engine {
                    EngineChoice::Series => "series",
                    EngineChoice::Fourier => "fourier",
                    EngineChoice::Mc => "mc",
                    EngineChoice::Pide => "pide",
                }
            );
        }
    }
    Ok(if summary.failed > 0 || flagged > 0 {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    })
}

/// The columns of an American row: the PIDE grid's price, delta, gamma and
/// theta as the reference, finite differences of American PIDE prices.
fn american_row(
    out: &mut saltus::book::writer::RowWriter,
    c: &saltus::model::Contract,
    cfg: &pide::PideConfig,
    method: Method,
    rel_tol: f64,
    fd: impl Fn() -> Result<finite_diff::FdGreeks, String>,
    flagged_rows: &AtomicU64,
) -> Result<(), String> {
    if let Some(why) = saltus::greeks::american::pide_reach(c) {
        return Err(format!("American exercise: {why}"));
    }
    let grid = pide::price(c, Exercise::American, cfg).map_err(|e| format!("PIDE engine: {e}"))?;
    let reference = |i: usize| match i {
        0 => Some((grid.delta, grid.greek_errors[0])),
        1 => Some((grid.gamma, grid.greek_errors[1])),
        3 => Some((grid.theta, grid.greek_errors[2])),
        _ => None,
    };
    match method {
        Method::Analytic => {
            out.push_f64(grid.price);
            for i in 0..SENSITIVITY_NAMES.len() {
                match reference(i) {
                    Some((v, _)) => out.push_f64(v),
                    None => out.push_empty(1),
                }
            }
            out.set_warning(
                "American exercise has no closed form: delta, gamma and theta come from the \
                 PIDE grid; the other Greeks need --method fd or both"
                    .into(),
            );
        }
        Method::Fd => {
            let g = fd()?.greeks;
            out.push_f64(g.price);
            for v in g.sensitivities() {
                out.push_f64(v);
            }
        }
        Method::Both => {
            let f = fd()?;
            let mut flagged = Vec::new();
            for (i, (gf, noise)) in f
                .greeks
                .sensitivities()
                .into_iter()
                .zip(f.noise.sensitivities())
                .enumerate()
            {
                let Some((ga, grid_err)) = reference(i) else {
                    out.push_empty(1);
                    out.push_f64(gf);
                    out.push_empty(3);
                    continue;
                };
                debug_assert!(GRID_GREEKS.contains(&i));
                let diff = gf - ga;
                let tol =
                    rel_tol * ga.abs() + floor(SENSITIVITY_NAMES[i], c.spot) + noise + grid_err;
                let bad = diff.is_nan() || diff.abs() > tol;
                out.push_f64(ga);
                out.push_f64(gf);
                out.push_f64(diff.abs());
                let rel = diff.abs() / ga.abs();
                if ga != 0.0 && rel.is_finite() {
                    out.push_f64(rel);
                } else {
                    out.push_empty(1);
                }
                out.push_str(if bad { "DIFF" } else { "ok" });
                if bad {
                    flagged.push(SENSITIVITY_NAMES[i]);
                }
            }
            out.push_f64(grid.price);
            out.push_str(&flagged.join(" "));
            out.push_empty(1); // fd_note: the grid's Greeks are defined here
            if !flagged.is_empty() && out.non_finite().is_none() {
                flagged_rows.fetch_add(1, Ordering::Relaxed);
            }
        }
    }
    Ok(())
}
