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
use saltus::reports::risk_report::{self, ScenarioFailureWriter, SCENARIO_FAILURES_FILE};
use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::PathBuf;
use std::process::ExitCode;
use std::time::Instant;

/// The files of a report: an existing output directory holding anything
/// else is refused, since it is replaced as a whole.
const REPORT_FILES: [&str; 7] = [
    "positions.csv",
    SCENARIO_FAILURES_FILE,
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
scenarios.csv          underlying, spot_shock, vol_shock, pnl, level, rows_failed, status: \
full-revaluation P&L on the spot x vol grid\n  \
jump_scenarios.csv     underlying, scenario, jump_size, pnl, level, rows_failed, status: an instantaneous \
jump by the model mean jump and by each --jump-shock\n  \
greeks_vs_spot.csv     underlying, spot_shock, delta_cash, gamma_cash_1pct, vega_1pt, level, rows_failed, \
status\n  \
scenario_failures.csv  line, id, underlying, scenario, spot_shock, vol_shock, jump_size, reason: every \
scenario revaluation that failed\n  \
report.html            all of the above with SVG charts, self-contained\n\
American rows (column exercise) are priced as by price (the PIDE, to --pide-tol) and revalued \
by the PIDE in every scenario (about 130 PIDE prices per row with the default shocks: slow).\n\
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
Exit codes: 0 every row priced and revalued; 1 some rows or scenario revaluations failed, or an \
aggregate overflowed; ",
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
    /// Instantaneous jump sizes of the underlying in percent (repeatable).
    #[arg(long, value_name = "PCT", default_values = ["-20"], allow_hyphen_values = true)]
    pub jump_shock: Vec<String>,
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

/// Parses a comma-separated list of numbers in percent (or vol points) and
/// checks each value, as a fraction, with `problem`.
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
        let frac = x / 100.0;
        if let Some(why) = problem(frac) {
            bail!("{option}: {p}{unit} {why}");
        }
        if let Some((_, q)) = seen.iter().find(|(y, _)| *y == frac) {
            bail!("{option}: {p} is given twice (also as {q})");
        }
        seen.push((frac, p));
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
        args.jump_shock.iter().map(String::as_str),
        "%",
        risk::spot_shock_problem,
    )?;
    ScenarioSpec::new(spot, vol, jump).map_err(|e| anyhow!("{e}"))
}

/// Runs the command.
pub fn run(args: Args) -> Result<ExitCode> {
    let start = Instant::now();
    let spec = scenario_spec(&args)?;
    let pide_cfg = args.pide.config()?;
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
    let mut failures_out = ScenarioFailureWriter::new(BufWriter::new(
        File::create(&failures_path)
            .with_context(|| format!("cannot create {}", failures_path.display()))?,
    ))?;
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
            let id = row.id();
            let p = PositionRef {
                row: row.row,
                line: row.line,
                id: &id,
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
    risk_report::write_all(&out_dir, &report, &args.title)?;
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
            "saltus: report written to {} (report.html, totals.csv, scenarios.csv, jump_scenarios.csv, greeks_vs_spot.csv, {SCENARIO_FAILURES_FILE}, positions.csv)",
            args.output.display()
        );
    }
    Ok(
        if summary.failed > 0 || report.scenario_failures > 0 || !problems.is_empty() {
            ExitCode::from(1)
        } else {
            ExitCode::SUCCESS
        },
    )
}
