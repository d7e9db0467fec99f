//! `saltus risk`: exposures by underlying, full-revaluation scenario P&L,
//! CSV files and a self-contained HTML page.

use super::output::OutputDir;
use super::{open_input, report_rows};
use anyhow::{bail, Context, Result};
use saltus::book::{run_book, PipelineOptions};
use saltus::greeks::DESK_COLUMNS;
use saltus::report::{self, FailedRow};
use saltus::risk::{self, Position, ScenarioSpec};
use saltus::series;
use std::fs::File;
use std::io::BufWriter;
use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::Mutex;
use std::time::Instant;

/// The files of a report: an existing output directory holding anything
/// else is refused, since it is replaced as a whole.
const REPORT_FILES: [&str; 6] = [
    "positions.csv",
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
directory beside DIR, which replaces DIR as a whole when the run completes):\n  \
positions.csv       every input row echoed, then price, delta, gamma, vega_1pt, theta_1d, rho_1pct, \
div_rho_1pct, d_jump_rate, d_jump_mean_1pct, d_jump_vol_1pct, position_value, status\n  \
totals.csv          exposures by underlying and for the book ((book) row), desk units\n  \
scenarios.csv       full-revaluation P&L on the spot x vol grid\n  \
jump_scenarios.csv  P&L of an instantaneous jump by the model mean jump and by --jump-shock\n  \
greeks_vs_spot.csv  cash delta, cash gamma and vega at each spot shock\n  \
report.html         all of the above with SVG charts, self-contained\n\
An existing DIR holding any other file is refused, never replaced.\n\
Positions are quantity x multiplier and grouped by `underlying`.\n\
Rows that fail keep their status in positions.csv, are listed in the report and excluded from \
every total. The priced positions are held in memory for the scenarios.\n\
Exit codes: 0 every row priced; 1 some rows failed; ",
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
    #[arg(long, value_name = "PCT", default_values_t = [-20.0], allow_hyphen_values = true)]
    pub jump_shock: Vec<f64>,
    /// Title of the HTML report.
    #[arg(long, default_value = "Book risk report")]
    pub title: String,
    /// No summary on stderr.
    #[arg(short, long)]
    pub quiet: bool,
}

fn parse_list(name: &str, s: &str, scale: f64) -> Result<Vec<f64>> {
    let mut v = Vec::new();
    for part in s.split(',') {
        let x: f64 = part
            .trim()
            .parse()
            .with_context(|| format!("{name}: '{}' is not a number", part.trim()))?;
        if !x.is_finite() {
            bail!("{name}: '{}' is not finite", part.trim());
        }
        v.push(x * scale);
    }
    if v.is_empty() {
        bail!("{name} is empty");
    }
    v.sort_by(f64::total_cmp);
    v.dedup();
    Ok(v)
}

/// Runs the command.
pub fn run(args: Args) -> Result<ExitCode> {
    let start = Instant::now();
    let spot_shocks = parse_list("--spot-shocks", &args.spot_shocks, 0.01)?;
    if spot_shocks.iter().any(|s| *s <= -1.0) {
        bail!("--spot-shocks must be above -100%");
    }
    let vol_shocks = parse_list("--vol-shocks", &args.vol_shocks, 0.01)?;
    let jump_shocks: Vec<f64> = args.jump_shock.iter().map(|j| j * 0.01).collect();
    if jump_shocks.iter().any(|j| !j.is_finite() || *j <= -1.0) {
        bail!("--jump-shock must be above -100%");
    }
    // Everything is written into a staging directory, swapped in at the end.
    let staged = OutputDir::stage(&args.output, &args.book, &REPORT_FILES)?;
    let out_dir = staged.path().to_path_buf();
    let positions_path = out_dir.join("positions.csv");
    let mut columns: Vec<String> = DESK_COLUMNS.iter().map(|s| s.to_string()).collect();
    columns.push("position_value".into());
    columns.push("status".into());
    let opts = PipelineOptions {
        result_columns: columns,
    };
    let positions = Mutex::new(Vec::new());
    let input = open_input(&args.book)?;
    let out = BufWriter::new(
        File::create(&positions_path)
            .with_context(|| format!("cannot create {}", positions_path.display()))?,
    );
    let summary = run_book(input, out, &opts, |row, w| {
        let g = series::price(&row.contract)
            .map_err(|e| e.to_string())?
            .greeks;
        for v in g.desk_units() {
            w.push_f64(v);
        }
        w.push_f64(row.quantity * row.multiplier * g.price);
        if w.non_finite().is_some() {
            return Ok(()); // the pipeline fails the row; keep it out of the totals
        }
        positions.lock().expect("positions lock").push(Position {
            row: row.row,
            id: row.id().into_owned(),
            underlying: row.underlying.to_string(),
            contract: row.contract,
            quantity: row.quantity,
            multiplier: row.multiplier,
            greeks: g,
        });
        Ok(())
    })?;
    // The failed rows, from the file just written (it holds every row, in order).
    let mut failed = Vec::new();
    let mut rdr = csv::Reader::from_path(&positions_path)?;
    let headers = rdr.headers()?.clone();
    let id_col = headers
        .iter()
        .position(|h| h.trim().eq_ignore_ascii_case("id"));
    let status_col = headers.len() - 1;
    for (i, rec) in rdr.records().enumerate() {
        let rec = rec?;
        let status = rec.get(status_col).unwrap_or("");
        if status != "ok" {
            let row = i as u64 + 1;
            let id = id_col
                .and_then(|c| rec.get(c))
                .map(str::to_string)
                .unwrap_or(row.to_string());
            failed.push(FailedRow {
                row,
                id,
                status: status.to_string(),
            });
        }
    }
    let spec = ScenarioSpec {
        spot_shocks,
        vol_shocks,
        jump_shocks,
    };
    let report = risk::build(positions.into_inner().expect("positions lock"), spec)
        .map_err(anyhow::Error::msg)?;
    report::write_all(&out_dir, &report, &failed, &args.title)?;
    staged.commit()?;
    if !args.quiet {
        report_rows(&summary, "priced", start.elapsed().as_secs_f64());
        if !failed.is_empty() {
            eprintln!(
                "saltus: {} failed rows are excluded from the totals and scenarios",
                failed.len()
            );
        }
        eprintln!(
            "saltus: report written to {} (report.html, totals.csv, scenarios.csv, jump_scenarios.csv, greeks_vs_spot.csv, positions.csv)",
            args.output.display()
        );
    }
    Ok(if summary.failed > 0 {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    })
}
