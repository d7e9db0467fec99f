//! Writing the risk report: CSV files and one self-contained HTML page with
//! SVG charts drawn by `plotters` (no scripts, no network access needed).
//!
//! Every aggregate file has a `level` column (`underlying` or `book`), so
//! the book row can never be mistaken for an underlying that happens to be
//! named `(book)` (the book row's `underlying` field reads `(book)`), and a
//! `status` column: `ok`, `partial: ...` when some rows could not be
//! revalued in that scenario (the P&L excludes them), or `error: ...` when
//! the aggregate is not a finite number; such a value is left empty, never
//! written as `inf` or `NaN`. `scenario_failures.csv` is streamed while the
//! book runs ([`ScenarioFailureWriter`]); [`write_all`] writes the rest from
//! the accumulated [`RiskReport`].

use super::html::{esc, PALETTE};
pub use crate::reports::risk::FailedRow;
use crate::reports::risk::{Cell, CurvePoint, Group, RiskReport, ScenarioFailure, ScenarioKind};
use plotters::prelude::*;
use std::fmt::Write as _;
use std::fs;
use std::io::Write;
use std::path::Path;

/// Label of the book-level group in the `underlying` column (its `level`
/// column reads `book`).
pub const BOOK: &str = "(book)";
/// File name of the streamed list of failed scenario revaluations.
pub const SCENARIO_FAILURES_FILE: &str = "scenario_failures.csv";

fn csv_err(e: csv::Error) -> std::io::Error {
    std::io::Error::other(e)
}

fn name_of<'a>(g: &Group<'a>) -> &'a str {
    g.underlying.unwrap_or(BOOK)
}

fn level_of(g: &Group) -> &'static str {
    if g.underlying.is_some() {
        "underlying"
    } else {
        "book"
    }
}

fn display_name(g: &Group) -> String {
    match g.underlying {
        Some("") => "(no underlying)".to_string(),
        Some(u) => u.to_string(),
        None => "book total".to_string(),
    }
}

/// Writes `scenario_failures.csv` as the book streams: one line per row and
/// scenario that could not be revalued.
pub struct ScenarioFailureWriter<W: Write> {
    w: csv::Writer<W>,
}

impl<W: Write> ScenarioFailureWriter<W> {
    /// Writes the header: `line, id, underlying, scenario, spot_shock,
    /// vol_shock, jump_size, reason` (shocks and jump sizes as fractions,
    /// empty where they do not apply).
    ///
    /// # Errors
    /// Any I/O error.
    pub fn new(out: W) -> std::io::Result<Self> {
        let mut w = csv::Writer::from_writer(out);
        w.write_record([
            "line",
            "id",
            "underlying",
            "scenario",
            "spot_shock",
            "vol_shock",
            "jump_size",
            "reason",
        ])
        .map_err(csv_err)?;
        Ok(ScenarioFailureWriter { w })
    }

    /// Writes one failure.
    ///
    /// # Errors
    /// Any I/O error.
    pub fn write(&mut self, f: &ScenarioFailure) -> std::io::Result<()> {
        let (spot, vol, jump) = match f.scenario {
            ScenarioKind::Grid {
                spot_shock,
                vol_shock,
            } => (fmt(spot_shock), fmt(vol_shock), String::new()),
            ScenarioKind::GreeksVsSpot { spot_shock } => (fmt(spot_shock), fmt(0.0), String::new()),
            ScenarioKind::ModelMeanJump { jump_size } | ScenarioKind::GivenJump { jump_size } => {
                (String::new(), String::new(), fmt(jump_size))
            }
        };
        self.w
            .write_record([
                f.line.to_string().as_str(),
                &f.id,
                &f.underlying,
                f.scenario.name(),
                &spot,
                &vol,
                &jump,
                &f.reason,
            ])
            .map_err(csv_err)
    }

    /// Flushes and returns the inner writer.
    ///
    /// # Errors
    /// Any I/O error.
    pub fn finish(self) -> std::io::Result<W> {
        self.w.into_inner().map_err(|e| e.into_error())
    }
}

/// The `status` of an aggregate row: `error: ...` when some values are not
/// finite, `partial: ...` when rows were excluded, `ok` otherwise.
fn status(non_finite: &[&str], rows_failed: u64) -> String {
    let excluded = if rows_failed > 0 {
        Some(format!(
            "{rows_failed} row{} could not be revalued and {} excluded (see {SCENARIO_FAILURES_FILE})",
            if rows_failed == 1 { "" } else { "s" },
            if rows_failed == 1 { "is" } else { "are" }
        ))
    } else {
        None
    };
    if !non_finite.is_empty() {
        let mut s = format!(
            "error: {} not finite (the sum overflows)",
            non_finite.join(", ")
        );
        if let Some(e) = excluded {
            s.push_str("; ");
            s.push_str(&e);
        }
        s
    } else if let Some(e) = excluded {
        format!("partial: {e}")
    } else {
        "ok".to_string()
    }
}

/// Finite numbers in shortest round-trip form; anything else empty (the
/// row's status names it).
fn fmt(x: f64) -> String {
    if x.is_finite() {
        zmij::Buffer::new().format(x).to_string()
    } else {
        String::new()
    }
}

fn names_non_finite<'a>(values: &[(&'a str, f64)]) -> Vec<&'a str> {
    values
        .iter()
        .filter(|(_, x)| !x.is_finite())
        .map(|(n, _)| *n)
        .collect()
}

/// Writes `totals.csv`, `scenarios.csv`, `jump_scenarios.csv`,
/// `greeks_vs_spot.csv` and `report.html` into `dir`.
///
/// # Errors
/// Any I/O error.
pub fn write_all(dir: &Path, r: &RiskReport, title: &str) -> std::io::Result<()> {
    fs::create_dir_all(dir)?;
    let groups = r.groups();
    // totals.csv: delta and gamma in units of the underlying do not add up
    // across underlyings, so the book row leaves them empty.
    let mut w = csv::Writer::from_path(dir.join("totals.csv")).map_err(csv_err)?;
    let mut header = vec!["underlying", "positions"];
    header.extend(crate::reports::risk::EXPOSURE_COLUMNS);
    header.extend(["level", "status"]);
    w.write_record(&header).map_err(csv_err)?;
    for g in &groups {
        let book = g.underlying.is_none();
        let e = g.exposure;
        let mut rec = vec![name_of(g).to_string(), e.positions.to_string()];
        for (name, x) in crate::reports::risk::EXPOSURE_COLUMNS
            .iter()
            .zip(e.values())
        {
            let unit_dependent = matches!(*name, "delta" | "gamma");
            rec.push(if book && unit_dependent {
                String::new()
            } else {
                fmt(x)
            });
        }
        rec.push(level_of(g).to_string());
        rec.push(status(&e.non_finite(book), 0));
        w.write_record(&rec).map_err(csv_err)?;
    }
    w.flush()?;

    let mut w = csv::Writer::from_path(dir.join("scenarios.csv")).map_err(csv_err)?;
    w.write_record([
        "underlying",
        "spot_shock",
        "vol_shock",
        "pnl",
        "level",
        "rows_failed",
        "status",
    ])
    .map_err(csv_err)?;
    for g in &groups {
        for (i, ds) in r.spec.spot_shocks.iter().enumerate() {
            for (j, dv) in r.spec.vol_shocks.iter().enumerate() {
                let c = g.scenarios.grid[i][j];
                w.write_record([
                    name_of(g).to_string(),
                    fmt(*ds),
                    fmt(*dv),
                    fmt(c.pnl),
                    level_of(g).to_string(),
                    c.rows_failed.to_string(),
                    status(&names_non_finite(&[("pnl", c.pnl)]), c.rows_failed),
                ])
                .map_err(csv_err)?;
            }
        }
    }
    w.flush()?;

    let mut w = csv::Writer::from_path(dir.join("jump_scenarios.csv")).map_err(csv_err)?;
    w.write_record([
        "underlying",
        "scenario",
        "jump_size",
        "pnl",
        "level",
        "rows_failed",
        "status",
    ])
    .map_err(csv_err)?;
    for g in &groups {
        let s = g.scenarios;
        let rows = std::iter::once(("model_mean_jump", s.mean_model_jump, s.jumps[0])).chain(
            r.spec
                .jump_shocks
                .iter()
                .zip(&s.jumps[1..])
                .map(|(size, c)| ("given_jump", *size, *c)),
        );
        for (scenario, size, c) in rows {
            let bad = names_non_finite(&[("jump_size", size), ("pnl", c.pnl)]);
            w.write_record([
                name_of(g).to_string(),
                scenario.to_string(),
                fmt(size),
                fmt(c.pnl),
                level_of(g).to_string(),
                c.rows_failed.to_string(),
                status(&bad, c.rows_failed),
            ])
            .map_err(csv_err)?;
        }
    }
    w.flush()?;

    let mut w = csv::Writer::from_path(dir.join("greeks_vs_spot.csv")).map_err(csv_err)?;
    w.write_record([
        "underlying",
        "spot_shock",
        "delta_cash",
        "gamma_cash_1pct",
        "vega_1pt",
        "level",
        "rows_failed",
        "status",
    ])
    .map_err(csv_err)?;
    for g in &groups {
        for (i, ds) in r.spec.spot_shocks.iter().enumerate() {
            let p: CurvePoint = g.scenarios.greeks_vs_spot[i];
            let bad = names_non_finite(&[
                ("delta_cash", p.delta_cash),
                ("gamma_cash_1pct", p.gamma_cash_1pct),
                ("vega_1pt", p.vega_1pt),
            ]);
            w.write_record([
                name_of(g).to_string(),
                fmt(*ds),
                fmt(p.delta_cash),
                fmt(p.gamma_cash_1pct),
                fmt(p.vega_1pt),
                level_of(g).to_string(),
                p.rows_failed.to_string(),
                status(&bad, p.rows_failed),
            ])
            .map_err(csv_err)?;
        }
    }
    w.flush()?;

    fs::write(dir.join("report.html"), html(r, title))
}

/// Money amounts for the page; `error` for a value that is not finite.
fn money(x: f64) -> String {
    if !x.is_finite() {
        return "error".to_string();
    }
    let a = x.abs();
    let s = if a >= 1e15 {
        format!("{x:.3e}")
    } else if a >= 1e6 {
        format!("{:.2}M", x / 1e6)
    } else if a >= 1e4 {
        format!("{:.1}k", x / 1e3)
    } else {
        format!("{x:.2}")
    };
    s.replace("-", "&minus;")
}

/// One line of a chart: its label, whether it is the book total (drawn
/// black and thicker), and one value per spot shock.
type Series = (String, bool, Vec<f64>);

/// A line chart of several series against the spot shock (in percent).
/// Values that are not finite are left out (the line breaks there).
fn line_chart(title: &str, y_label: &str, xs: &[f64], series: &[Series]) -> String {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (760, 380)).into_drawing_area();
        let _ = root.fill(&WHITE);
        let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
        for (_, _, ys) in series {
            for &y in ys.iter().filter(|y| y.is_finite()) {
                lo = lo.min(y);
                hi = hi.max(y);
            }
        }
        if !(lo.is_finite() && hi.is_finite()) {
            lo = -1.0;
            hi = 1.0;
        }
        let pad = ((hi - lo).abs() * 0.08).max(1e-9 * (1.0 + hi.abs()));
        let (x0, x1) = (xs[0] * 100.0, xs[xs.len() - 1] * 100.0);
        let chart = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 18))
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(80)
            .build_cartesian_2d(x0..x1, (lo - pad)..(hi + pad));
        if let Ok(mut chart) = chart {
            let _ = chart
                .configure_mesh()
                .x_desc("spot shock (%)")
                .y_desc(y_label)
                .light_line_style(RGBColor(235, 235, 235))
                .draw();
            for (i, (name, book, ys)) in series.iter().enumerate() {
                let book = *book;
                let color = if book {
                    BLACK
                } else {
                    PALETTE[i % PALETTE.len()]
                };
                let style = ShapeStyle {
                    color: color.to_rgba(),
                    filled: false,
                    stroke_width: if book { 3 } else { 2 },
                };
                // Runs of finite points, each drawn as its own line.
                let mut runs: Vec<Vec<(f64, f64)>> = vec![Vec::new()];
                for (x, y) in xs.iter().zip(ys) {
                    if y.is_finite() {
                        if let Some(r) = runs.last_mut() {
                            r.push((x * 100.0, *y));
                        }
                    } else if runs.last().is_some_and(|r| !r.is_empty()) {
                        runs.push(Vec::new());
                    }
                }
                for (k, pts) in runs.into_iter().filter(|r| !r.is_empty()).enumerate() {
                    if let Ok(s) = chart.draw_series(LineSeries::new(pts, style)) {
                        if k == 0 {
                            s.label(name.clone()).legend(move |(x, y)| {
                                PathElement::new(vec![(x, y), (x + 18, y)], style)
                            });
                        }
                    }
                }
            }
            let _ = chart
                .configure_series_labels()
                .background_style(WHITE.mix(0.85))
                .border_style(RGBColor(200, 200, 200))
                .position(SeriesLabelPosition::UpperRight)
                .draw();
        }
        let _ = root.present();
    }
    svg
}

/// Diverging colour: red for losses, green for gains, white at zero.
fn heat(x: f64, scale: f64) -> RGBColor {
    let t = if scale > 0.0 {
        (x / scale).clamp(-1.0, 1.0)
    } else {
        0.0
    };
    let f = |a: f64| (255.0 - a * 255.0 * t.abs()).round() as u8;
    if t < 0.0 {
        RGBColor(255, f(0.75), f(0.8))
    } else {
        RGBColor(f(0.8), 255, f(0.75))
    }
}

/// The scenario grid as a heat map with the P&L written in each cell; a
/// cell that excludes rows is marked `*`, one that is not finite is grey.
fn heat_map(title: &str, spots: &[f64], vols: &[f64], grid: &[Vec<Cell>]) -> String {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (760, 420)).into_drawing_area();
        let _ = root.fill(&WHITE);
        let scale = grid
            .iter()
            .flatten()
            .filter(|c| c.pnl.is_finite())
            .fold(0.0f64, |a, c| a.max(c.pnl.abs()));
        let (ns, nv) = (spots.len(), vols.len());
        let chart = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 18))
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(70)
            .build_cartesian_2d(-0.5..ns as f64 - 0.5, -0.5..nv as f64 - 0.5);
        if let Ok(mut chart) = chart {
            let sp: Vec<String> = spots
                .iter()
                .map(|s| format!("{:+.0}%", s * 100.0))
                .collect();
            let vp: Vec<String> = vols.iter().map(|v| format!("{:+.1}", v * 100.0)).collect();
            // Cells are centred on integer coordinates; label those only.
            let label = |x: f64, names: &[String]| {
                let i = x.round();
                if (x - i).abs() < 1e-6 && i >= 0.0 && (i as usize) < names.len() {
                    names[i as usize].clone()
                } else {
                    String::new()
                }
            };
            let _ = chart
                .configure_mesh()
                .disable_mesh()
                .x_labels(ns)
                .y_labels(nv)
                .x_label_formatter(&|x| label(*x, &sp))
                .y_label_formatter(&|y| label(*y, &vp))
                .x_desc("spot shock")
                .y_desc("vol shock (points)")
                .draw();
            let cells = (0..ns).flat_map(|i| (0..nv).map(move |j| (i, j)));
            let _ = chart.draw_series(cells.clone().map(|(i, j)| {
                Rectangle::new(
                    [
                        (i as f64 - 0.5, j as f64 - 0.5),
                        (i as f64 + 0.5, j as f64 + 0.5),
                    ],
                    if grid[i][j].pnl.is_finite() {
                        heat(grid[i][j].pnl, scale).filled()
                    } else {
                        RGBColor(200, 200, 200).filled()
                    },
                )
            }));
            let _ = chart.draw_series(cells.map(|(i, j)| {
                let c = grid[i][j];
                let mark = if c.rows_failed > 0 { "*" } else { "" };
                Text::new(
                    format!("{}{mark}", money(c.pnl).replace("&minus;", "-")),
                    (i as f64 - 0.42, j as f64 + 0.12),
                    ("sans-serif", 10),
                )
            }));
        }
        let _ = root.present();
    }
    svg
}

fn exposure_table(r: &RiskReport) -> String {
    let mut t = String::from(
        "<table><thead><tr><th>underlying</th><th>positions</th><th>value</th><th>delta</th>\
         <th>cash delta</th><th>gamma</th><th>cash gamma (1%)</th><th>vega (1 pt)</th>\
         <th>theta (1 day)</th><th>rho (1%)</th><th>div rho (1%)</th><th>dV/d&lambda;</th>\
         <th>dV/d&mu;<sub>J</sub> (0.01)</th><th>dV/d&delta; (0.01)</th></tr></thead><tbody>",
    );
    for g in r.groups() {
        let book = g.underlying.is_none();
        let e = g.exposure;
        let unit = |x: f64, digits: usize| {
            if book {
                "&ndash;".to_string()
            } else if x.is_finite() {
                format!("{x:.digits$}")
            } else {
                "error".to_string()
            }
        };
        let _ = write!(
            t,
            "<tr{}><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td>\
             <td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            if book { " class=\"book\"" } else { "" },
            esc(&display_name(&g)),
            e.positions,
            money(e.value),
            unit(e.delta, 4),
            money(e.delta_cash),
            unit(e.gamma, 6),
            money(e.gamma_cash_1pct),
            money(e.vega_1pt),
            money(e.theta_1d),
            money(e.rho_1pct),
            money(e.div_rho_1pct),
            money(e.d_jump_rate),
            money(e.d_jump_mean_1pct),
            money(e.d_jump_vol_1pct),
        );
    }
    t.push_str("</tbody></table>");
    t
}

fn cell_html(c: &Cell) -> String {
    if c.rows_failed > 0 {
        format!(
            "{} <span class=\"warn\">(excl. {} row{})</span>",
            money(c.pnl),
            c.rows_failed,
            if c.rows_failed == 1 { "" } else { "s" }
        )
    } else {
        money(c.pnl)
    }
}

fn jump_table(r: &RiskReport) -> String {
    let mut t = String::from(
        "<table><thead><tr><th>underlying</th><th>model mean jump</th><th>P&amp;L</th>",
    );
    for j in &r.spec.jump_shocks {
        let _ = write!(t, "<th>jump {:+.0}%</th>", j * 100.0);
    }
    t.push_str("</tr></thead><tbody>");
    for g in r.groups() {
        let s = g.scenarios;
        let k = if s.mean_model_jump.is_finite() {
            format!("{:+.2}%", s.mean_model_jump * 100.0)
        } else {
            "error".to_string()
        };
        let _ = write!(
            t,
            "<tr{}><td>{}</td><td>{k}</td><td>{}</td>",
            if g.underlying.is_none() {
                " class=\"book\""
            } else {
                ""
            },
            esc(&display_name(&g)),
            cell_html(&s.jumps[0])
        );
        for c in &s.jumps[1..] {
            let _ = write!(t, "<td>{}</td>", cell_html(c));
        }
        t.push_str("</tr>");
    }
    t.push_str("</tbody></table>");
    t
}

/// `n thing(s)` with the right plural.
fn count(n: u64, thing: &str) -> String {
    format!("{n} {thing}{}", if n == 1 { "" } else { "s" })
}

/// A warning paragraph, a table of the first items listed (`cells` gives a
/// row's cells, already escaped) and, when the list was cut, a line saying
/// how many of the `total` items are not shown (`more` words it).
fn listed_table<T>(
    intro: String,
    headers: &[&str],
    items: &[T],
    total: u64,
    cells: impl Fn(&T) -> Vec<String>,
    more: impl Fn(u64) -> String,
) -> String {
    let mut t = format!("{intro}<table><thead><tr>");
    for h in headers {
        let _ = write!(t, "<th>{h}</th>");
    }
    t.push_str("</tr></thead><tbody>");
    for item in items {
        t.push_str("<tr>");
        for c in cells(item) {
            let _ = write!(t, "<td>{c}</td>");
        }
        t.push_str("</tr>");
    }
    t.push_str("</tbody></table>");
    let left = total.saturating_sub(items.len() as u64);
    if left > 0 {
        let _ = write!(t, "<p class=\"warn\">&hellip; and {}</p>", more(left));
    }
    t
}

fn failed_rows_html(r: &RiskReport) -> String {
    if r.failed_rows == 0 {
        return "<p>Every row of the book was priced; all are included.</p>".to_string();
    }
    let intro = format!(
        "<p class=\"warn\">{} could not be priced and {} <strong>excluded from every total and scenario</strong>:</p>",
        count(r.failed_rows, "row"),
        if r.failed_rows == 1 { "is" } else { "are" }
    );
    listed_table(
        intro,
        &["line", "id", "status"],
        &r.first_failed_rows,
        r.failed_rows,
        |f| vec![f.line.to_string(), esc(&f.id), esc(&f.status)],
        |more| {
            format!(
                "{more} more failed row{} (every row's status is in positions.csv).",
                if more == 1 { "" } else { "s" }
            )
        },
    )
}

fn scenario_failures_html(r: &RiskReport) -> String {
    if r.scenario_failures == 0 {
        return "<p>Every priced row was revalued in every scenario.</p>".to_string();
    }
    let intro = format!(
        "<p class=\"warn\">{} failed: each excludes one row from one scenario cell, whose P&amp;L then \
         covers the other rows only (marked <code>partial</code> in the CSV files, &ldquo;excl.&rdquo; \
         or <code>*</code> here). All are listed in {SCENARIO_FAILURES_FILE}.</p>",
        count(r.scenario_failures, "scenario revaluation")
    );
    listed_table(
        intro,
        &["line", "id", "underlying", "scenario", "reason"],
        &r.first_scenario_failures,
        r.scenario_failures,
        |f| {
            vec![
                f.line.to_string(),
                esc(&f.id),
                esc(&f.underlying),
                esc(&f.scenario.to_string()),
                esc(&f.reason),
            ]
        },
        |more| {
            format!(
                "{more} more failed revaluation{} (see {SCENARIO_FAILURES_FILE}).",
                if more == 1 { "" } else { "s" }
            )
        },
    )
}

fn problems_html(r: &RiskReport) -> String {
    let problems = r.aggregate_problems();
    if problems.is_empty() {
        return String::new();
    }
    let mut t = format!(
        "<h2>Aggregates that are not finite</h2><p class=\"warn\">{} overflowed (a sum of finite \
         contributions beyond the range of double precision); the CSV files leave them empty with an \
         <code>error</code> status:</p><ul>",
        count(problems.len() as u64, "aggregate")
    );
    for p in problems.iter().take(crate::reports::risk::MAX_LISTED) {
        let _ = write!(t, "<li>{}</li>", esc(p));
    }
    t.push_str("</ul>");
    if problems.len() > crate::reports::risk::MAX_LISTED {
        let _ = write!(
            t,
            "<p>&hellip; and {} more.</p>",
            problems.len() - crate::reports::risk::MAX_LISTED
        );
    }
    t
}

/// Underlyings with a heat map of their own (the book always has one).
pub const MAX_HEAT_MAPS: usize = 20;
/// Underlyings drawn in the line charts (one colour each; the book is extra).
pub const MAX_LINES: usize = PALETTE.len();

/// The groups to chart: the book and the `n` underlyings with the largest
/// absolute grid P&L (ties in name order), shown in name order.
fn charted<'a>(groups: &[Group<'a>], n: usize) -> Vec<Group<'a>> {
    let worst = |g: &Group| {
        g.scenarios
            .grid
            .iter()
            .flatten()
            .map(|c| c.pnl.abs())
            .filter(|x| x.is_finite())
            .fold(0.0f64, f64::max)
    };
    let mut ranked: Vec<(usize, f64)> = groups
        .iter()
        .enumerate()
        .filter(|(_, g)| g.underlying.is_some())
        .map(|(i, g)| (i, worst(g)))
        .collect();
    ranked.sort_by(|a, b| b.1.total_cmp(&a.1).then(a.0.cmp(&b.0)));
    let mut keep: Vec<usize> = ranked.into_iter().take(n).map(|(i, _)| i).collect();
    keep.sort_unstable();
    keep.into_iter()
        .map(|i| groups[i])
        .chain(groups.iter().filter(|g| g.underlying.is_none()).copied())
        .collect()
}

fn html(r: &RiskReport, title: &str) -> String {
    let xs = &r.spec.spot_shocks;
    let groups = r.groups();
    let n_underlyings = groups.len() - 1;
    let lines = charted(&groups, MAX_LINES);
    let zero_vol = r.spec.vol_shocks.iter().position(|v| *v == 0.0);
    let series = |with_book: bool, value: &dyn Fn(&Group) -> Vec<f64>| -> Vec<Series> {
        lines
            .iter()
            .filter(|g| with_book || g.underlying.is_some())
            .map(|g| (display_name(g), g.underlying.is_none(), value(g)))
            .collect()
    };
    let pnl_series = series(true, &|g| {
        g.scenarios
            .grid
            .iter()
            .map(|row| row[zero_vol.unwrap_or(row.len() / 2)].pnl)
            .collect()
    });
    let curve = |f: fn(&CurvePoint) -> f64| {
        move |g: &Group| {
            g.scenarios
                .greeks_vs_spot
                .iter()
                .map(f)
                .collect::<Vec<f64>>()
        }
    };
    let delta_series = series(false, &curve(|p| p.delta_cash));
    let gamma_series = series(false, &curve(|p| p.gamma_cash_1pct));
    let vega_series = series(true, &curve(|p| p.vega_1pt));
    let mut heat_maps = String::new();
    if n_underlyings > MAX_HEAT_MAPS || n_underlyings > MAX_LINES {
        let _ = write!(
            heat_maps,
            "<p class=\"note\">The book has {n_underlyings} underlyings: the line charts show the {} and the \
             heat maps the {} with the largest absolute P&amp;L on the grid, and the book; every underlying is in \
             the tables above and in the CSV files.</p>",
            n_underlyings.min(MAX_LINES),
            n_underlyings.min(MAX_HEAT_MAPS)
        );
    }
    for g in &charted(&groups, MAX_HEAT_MAPS) {
        heat_maps.push_str("<figure>");
        heat_maps.push_str(&heat_map(
            &format!("P&L by full revaluation: {}", display_name(g)),
            xs,
            &r.spec.vol_shocks,
            &g.scenarios.grid,
        ));
        heat_maps.push_str("</figure>");
    }
    let failed_html = failed_rows_html(r);
    let scenario_failures_html = scenario_failures_html(r);
    let problems = problems_html(r);
    let floored = if r.vol_floored > 0 {
        format!(
            "<p>{} position(s) have a diffusion vol below the largest negative vol shock; in those scenarios their vol is floored at 0.</p>",
            r.vol_floored
        )
    } else {
        String::new()
    };
    format!(
        r#"<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>{title}</title>
<style>
body {{ font-family: sans-serif; margin: 24px auto; max-width: 1100px; color: #222; }}
h1 {{ font-size: 22px; }} h2 {{ font-size: 18px; margin-top: 32px; border-bottom: 1px solid #ddd; }}
table {{ border-collapse: collapse; font-size: 13px; margin: 8px 0; }}
th, td {{ border: 1px solid #ddd; padding: 4px 8px; text-align: right; }}
th {{ background: #f4f4f4; }} td:first-child, th:first-child {{ text-align: left; }}
tr.book td {{ font-weight: bold; background: #fafafa; }}
.warn {{ color: #a00; }} .note {{ color: #555; font-size: 13px; }}
figure {{ margin: 12px 0; }}
</style></head><body>
<h1>{title}</h1>
<p class="note">Merton jump-diffusion, closed-form series. Exposures are sums of quantity &times; multiplier &times; Greek, in desk units: cash delta = &delta;&middot;S, cash gamma = &Gamma;&middot;S&sup2;/100 (change of cash delta for a 1% move), vega per vol point, theta per calendar day, rho and dividend rho per percentage point, jump-mean and jump-vol sensitivities per 0.01. Scenario P&amp;L is full revaluation, not a Greek approximation.
Model estimates: validate and use under your firm's model-risk policy.</p>
<h2>Rows</h2>
{failed_html}
{scenario_failures_html}
{problems}
<h2>Exposures by underlying</h2>
{exposures}
<h2>P&amp;L against spot</h2>
<figure>{pnl_chart}</figure>
<h2>Scenario grids (spot &times; vol)</h2>
{floored}
{heat_maps}
<h2>Jump scenarios (instantaneous)</h2>
<p class="note">The underlying jumps by the model's mean jump k = e<sup>&mu;<sub>J</sub>+&delta;&sup2;/2</sup> &minus; 1 of each position (the column shows the weighted mean over the group) or by the given size; all other inputs unchanged.</p>
{jumps}
<h2>Greeks against spot</h2>
<figure>{delta_chart}</figure>
<figure>{gamma_chart}</figure>
<figure>{vega_chart}</figure>
</body></html>
"#,
        title = esc(title),
        exposures = exposure_table(r),
        pnl_chart = line_chart(
            "P&L against spot shock (vol unchanged)",
            "P&L",
            xs,
            &pnl_series
        ),
        jumps = jump_table(r),
        delta_chart = line_chart(
            "Cash delta against spot shock",
            "cash delta",
            xs,
            &delta_series
        ),
        gamma_chart = line_chart(
            "Cash gamma (1%) against spot shock",
            "cash gamma",
            xs,
            &gamma_series
        ),
        vega_chart = line_chart(
            "Vega (per vol point) against spot shock",
            "vega",
            xs,
            &vega_series
        ),
    )
}
