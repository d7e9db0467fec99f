//! `saltus risk`: exposures by underlying, full-revaluation scenario P&L,
//! CSV files and a self-contained HTML page.
//!
//! The options are turned into a validated [`ScenarioSpec`] before any work.
//! The book streams through the pipeline once: positions.csv and
//! scenario_failures.csv are written as it goes, and only the per-underlying
//! accumulators ([`RiskAccumulator`], merged in chunk order) stay in memory.

use super::output::OutputDir;
use super::{open_input, report_rows};
use anyhow::{anyhow, bail, Context, Result};
use saltus::book::{run_book_with_state, PipelineOptions};
use saltus::engines::pide::Exercise;
use saltus::engines::series;
use saltus::greeks::DESK_COLUMNS;
use saltus::reports::risk::{self, PositionRef, RiskAccumulator, ScenarioSpec};
use saltus::reports::risk_report::{
    self, ReportMeta, ScenarioFailureWriter, SCENARIO_FAILURES_FILE, USER_SCENARIOS_FILE,
};
use saltus::reports::user_scenarios::ScenarioFile;
use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::PathBuf;
use std::process::ExitCode;
use std::time::Instant;

/// The files of a report: an existing output directory holding anything
/// else is refused, since it is replaced as a whole.
const REPORT_FILES: [&str; 8] = [
    "positions.csv",
    SCENARIO_FAILURES_FILE,
    USER_SCENARIOS_FILE,
    "totals.csv",
    "scenarios.csv",
    "jump_scenarios.csv",
    "greeks_vs_spot.csv",
    "report.html",
];

/// Arguments of `saltus risk`.
#[derive(clap::Args)]
#[command(after_help = concat!(
    columns_read!(),
    "Writes into DIR (all files of a run or none: they are written into a hidden staging \
directory beside DIR, which replaces DIR as a whole when the run completes; an existing DIR \
holding any other file is refused, never replaced):\n  \
positions.csv          every input row echoed, then price, delta, gamma, vega_1pt, theta_1d, rho_1pct, \
div_rho_1pct, d_jump_rate, d_jump_mean_1pct, d_jump_vol_1pct, position_value, status\n  \
totals.csv             underlying, positions, value, delta, delta_cash, gamma, gamma_cash_1pct, vega_1pt, \
theta_1d, rho_1pct, div_rho_1pct, d_jump_rate, d_jump_mean_1pct, d_jump_vol_1pct, level, status \
(desk units; one row per underlying, then the book row)\n  \
scenarios.csv          underlying, spot_shock_pct, vol_shock_pts, pnl, level, rows_failed, status: \
full-revaluation P&L on the spot x vol grid\n  \
jump_scenarios.csv     underlying, scenario, jump_size_pct, pnl, level, rows_failed, status: an \
instantaneous jump by the model mean jump (the book row: each underlying by its own, jump_size_pct \
empty) and by each --jump-shock\n  \
greeks_vs_spot.csv     underlying, spot_shock_pct, delta_cash, gamma_cash_1pct, vega_1pt, level, \
rows_failed, status\n  \
scenarios_user.csv     scenario, underlying, pnl, level, rows_failed, status: each named scenario of \
--scenarios, per underlying and for the book\n  \
scenario_failures.csv  line, id, underlying, scenario, spot_shock_pct, vol_shock_pts, jump_size_pct, \
reason, user_scenario: every scenario revaluation that failed\n  \
report.html            all of the above with SVG charts, self-contained\n\
Shocks are written in the units of the options: percent (_pct) and vol points (_pts).\n\
The scenario file (--scenarios): columns scenario, underlying (a name, or * for every underlying), \
spot_shock_pct, vol_shock_pts, and optionally jump_rate_mult, jump_mean_shift, jump_vol_shift, \
rate_shift_bp; an empty field is no change; rows with one scenario name make one scenario, and an \
underlying's own row wins over *. A bad row is reported with its line and column and its scenario \
is not computed.\n\
American rows (column exercise) are priced as by price (the PIDE, to --pide-tol) and revalued \
by the PIDE in every scenario (about 150 PIDE prices per row with the default shocks: slow).\n\
Positions are quantity x multiplier (optional columns, default 1) and grouped by `underlying`.\n\
level is `underlying` or `book`; the book row's underlying field reads (book), so use level to tell it \
from an underlying of that name. Book-row delta and gamma are empty (units differ across underlyings).\n\
status is `ok`; `partial: N rows could not be revalued...` when rows of the group failed in that \
scenario (the P&L excludes them; scenario_failures.csv says why); or `error: ...` when the aggregate \
overflowed (the value is left empty).\n\
Rows that fail keep their status in positions.csv, are listed in the report (the first 1000) and \
excluded from every total. Memory depends on the number of underlyings and scenarios, not rows.\n\
Accepted shocks: spot and jump above -100% and at most +1000%; vol -100 to +100 points; \
at most 100 values per list, none repeated.\n\
Exit codes: 0 every row priced and revalued; 1 some rows or scenario revaluations failed, an \
aggregate overflowed, or the scenario file has bad rows; ",
    exit_2!()
))]
pub struct Args {
    /// The book (CSV); `-` reads standard input.
    pub book: PathBuf,
    /// Output directory, created or replaced as a whole when the run completes.
    #[arg(short, long, value_name = "DIR", default_value = "report")]
    pub output: PathBuf,
    /// Spot shocks in percent, comma-separated.
    #[arg(
        long,
        value_name = "LIST",
        default_value = "-30,-25,-20,-15,-10,-5,0,5,10,15,20,25,30",
        allow_hyphen_values = true
    )]
    pub spot_shocks: String,
    /// Vol shocks in vol points, comma-separated.
    #[arg(
        long,
        value_name = "LIST",
        default_value = "-10,-7.5,-5,-2.5,0,2.5,5,7.5,10",
        allow_hyphen_values = true
    )]
    pub vol_shocks: String,
    /// Instantaneous jumps of every underlying in percent, comma-separated
    /// (repeatable).
    #[arg(
        long,
        value_name = "LIST",
        default_values = ["-20,+15"],
        allow_hyphen_values = true
    )]
    pub jump_shock: Vec<String>,
    /// Named scenarios to revalue (CSV: scenario, underlying, spot_shock_pct,
    /// vol_shock_pts, ...; see below).
    #[arg(long, value_name = "SCEN.csv")]
    pub scenarios: Option<PathBuf>,
    /// Title of the HTML report.
    #[arg(long, default_value = "Book risk report")]
    pub title: String,
    #[command(flatten)]
    pub inputs: super::book_inputs::BookInputArgs,
    #[command(flatten)]
    pub pide: super::pide_args::PideArgs,
    /// No summary on stderr.
    #[arg(short, long)]
    pub quiet: bool,
}

/// Parses a comma-separated list of numbers in percent (or vol points),
/// returned in those units, and checks each value, as a fraction, with
/// `problem`.
fn parse_list<'a>(
    option: &str,
    parts: impl Iterator<Item = &'a str>,
    unit: &str,
    problem: fn(f64) -> Option<&'static str>,
) -> Result<Vec<f64>> {
    let mut seen: Vec<(f64, &str)> = Vec::new();
    for part in parts {
        let p = part.trim();
        if p.is_empty() {
            bail!("{option}: empty value (two commas in a row, or a comma at an end)");
        }
        let x: f64 = p
            .parse()
            .map_err(|_| anyhow!("{option}: '{}' is not a number", p.escape_debug()))?;
        if let Some(why) = problem(x / 100.0) {
            bail!("{option}: {p}{unit} {why}");
        }
        if let Some((_, q)) = seen.iter().find(|(y, _)| *y == x) {
            bail!("{option}: {p} is given twice (also as {q})");
        }
        seen.push((x, p));
    }
    Ok(seen.into_iter().map(|(x, _)| x).collect())
}

/// The validated scenario definition.
fn scenario_spec(args: &Args) -> Result<ScenarioSpec> {
    let list = |option: &str, text: &str| {
        if text.trim().is_empty() {
            bail!("{option} is empty: give at least one value");
        }
        Ok(())
    };
    list("--spot-shocks", &args.spot_shocks)?;
    list("--vol-shocks", &args.vol_shocks)?;
    let spot = parse_list(
        "--spot-shocks",
        args.spot_shocks.split(','),
        "%",
        risk::spot_shock_problem,
    )?;
    let vol = parse_list(
        "--vol-shocks",
        args.vol_shocks.split(','),
        " vol points",
        risk::vol_shock_problem,
    )?;
    let jump = parse_list(
        "--jump-shock",
        args.jump_shock.iter().flat_map(|s| s.split(',')),
        "%",
        risk::spot_shock_problem,
    )?;
    ScenarioSpec::new(spot, vol, jump).map_err(|e| anyhow!("{e}"))
}

/// Runs the command.
pub fn run(args: Args) -> Result<ExitCode> {
    let start = Instant::now();
    let mut spec = scenario_spec(&args)?;
    let pide_cfg = args.pide.config()?;
    let scenario_file = match &args.scenarios {
        Some(p) => Some(ScenarioFile::read(p).map_err(|e| anyhow!("--scenarios: {e}"))?),
        None => None,
    };
    if let Some(f) = &scenario_file {
        spec = spec.with_user(f.scenarios.clone());
    }
    // Everything is written into a staging directory, swapped in at the end.
    let staged = OutputDir::stage(&args.output, &args.book, &REPORT_FILES)?;
    let out_dir = staged.path().to_path_buf();
    let positions_path = out_dir.join("positions.csv");
    let failures_path = out_dir.join(SCENARIO_FAILURES_FILE);
    let mut columns: Vec<String> = DESK_COLUMNS.iter().map(|s| s.to_string()).collect();
    columns.push("position_value".into());
    columns.push("status".into());
    let opts = PipelineOptions {
        result_columns: columns,
        inputs: args.inputs.inputs()?,
        exercise_columns: None,
    };
    let input = open_input(&args.book)?;
    let out = BufWriter::new(
        File::create(&positions_path)
            .with_context(|| format!("cannot create {}", positions_path.display()))?,
    );
    let mut failures_out = ScenarioFailureWriter::new(
        BufWriter::new(
            File::create(&failures_path)
                .with_context(|| format!("cannot create {}", failures_path.display()))?,
        ),
        spec.user.iter().map(|u| u.name.clone()).collect(),
    )?;
    let mut total = RiskAccumulator::default();
    let spec_ref = &spec;
    let summary = run_book_with_state(
        input,
        out,
        &opts,
        |row, w, acc: &mut RiskAccumulator| {
            let american = (row.exercise == Exercise::American).then_some(pide_cfg);
            let g = match american {
                Some(cfg) => saltus::greeks::american::price(&row.contract, &cfg)?.greeks,
                None => {
                    series::price(&row.contract)
                        .map_err(|e| e.to_string())?
                        .greeks
                }
            };
            // The line is the row's reference; the id only when the book has one.
            let p = PositionRef {
                row: row.row,
                line: row.line,
                id: row.explicit_id().unwrap_or(""),
                underlying: row.underlying,
                contract: row.contract,
                weight: row.quantity * row.multiplier,
                greeks: g,
                american,
            };
            // Every value written below is checked finite first, so the row
            // is either an error here or counted in full.
            let e = risk::exposure_of(&p)?;
            for v in g.desk_units() {
                w.push_f64(v);
            }
            w.push_f64(e.value);
            acc.add(spec_ref, &p, &e);
            Ok(())
        },
        |chunk: RiskAccumulator| {
            for f in chunk.scenario_failure_list() {
                failures_out.write(f)?;
            }
            total.merge(chunk);
            Ok(())
        },
    )?;
    failures_out
        .finish()?
        .flush()
        .with_context(|| format!("cannot write {}", failures_path.display()))?;
    let report = total.finish(spec);
    let mut meta = ReportMeta {
        title: args.title.clone(),
        input: args.book.display().to_string(),
        valuation_date: args.inputs.valuation_date.map(|d| d.to_string()),
        params: args.inputs.params.as_ref().map(|p| p.display().to_string()),
        ..ReportMeta::default()
    };
    if let Some(f) = &scenario_file {
        meta.scenario_file = Some(f.source.clone());
        meta.scenario_problems = f.problems.clone();
        let mut unknown: Vec<String> = f
            .scenarios
            .iter()
            .flat_map(|s| s.by_underlying.keys())
            .filter(|u| !report.by_underlying.contains_key(*u))
            .cloned()
            .collect();
        unknown.sort();
        unknown.dedup();
        meta.scenario_unknown_underlyings = unknown;
    }
    risk_report::write_all(&out_dir, &report, &meta)?;
    staged.commit()?;
    let problems = report.aggregate_problems();
    if !args.quiet {
        report_rows(&summary, "priced", start.elapsed().as_secs_f64());
        if report.failed_rows > 0 {
            eprintln!(
                "saltus: {} failed rows are excluded from the totals and scenarios",
                report.failed_rows
            );
        }
        if report.scenario_failures > 0 {
            eprintln!(
                "saltus: {} scenario revaluations failed; those cells exclude the rows (status partial, see {})",
                report.scenario_failures,
                args.output.join(SCENARIO_FAILURES_FILE).display()
            );
        }
        for p in meta.scenario_problems.iter().take(20) {
            eprintln!(
                "saltus: {}: {}",
                meta.scenario_file.as_deref().unwrap_or(""),
                p.message
            );
        }
        if meta.scenario_problems.len() > 20 {
            eprintln!(
                "saltus: ... and {} more bad scenario rows",
                meta.scenario_problems.len() - 20
            );
        }
        if !meta.scenario_unknown_underlyings.is_empty() {
            eprintln!(
                "saltus: the scenario file names underlyings not in the book: {}",
                meta.scenario_unknown_underlyings.join(", ")
            );
        }
        for p in problems.iter().take(20) {
            eprintln!("saltus: aggregate not finite: {p}");
        }
        if problems.len() > 20 {
            eprintln!(
                "saltus: ... and {} more aggregates not finite",
                problems.len() - 20
            );
        }
        eprintln!(
            "saltus: report written to {} (report.html, totals.csv, scenarios.csv, jump_scenarios.csv, greeks_vs_spot.csv, {}{SCENARIO_FAILURES_FILE}, positions.csv)",
            args.output.display(),
            if meta.scenario_file.is_some() {
                format!("{USER_SCENARIOS_FILE}, ")
            } else {
                String::new()
            }
        );
    }
    Ok(
        if summary.failed > 0
            || report.scenario_failures > 0
            || !problems.is_empty()
            || !meta.scenario_problems.is_empty()
        {
            ExitCode::from(1)
        } else {
            ExitCode::SUCCESS
        },
    )
}
