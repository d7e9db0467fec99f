//! Writing the risk report: CSV files and one self-contained HTML page with
//! SVG charts drawn by `plotters` (no scripts, no network access needed).
//!
//! Every aggregate file has a `level` column (`underlying` or `book`), so
//! the book row can never be mistaken for an underlying that happens to be
//! named `(book)` (the book row's `underlying` field reads `(book)`), and a
//! `status` column: `ok`, `partial: ...` when some rows could not be
//! revalued in that scenario (the P&L excludes them), or `error: ...` when
//! the aggregate is not a finite number; such a value is left empty, never
//! written as `inf` or `NaN`. Shocks are written in the flags' units with
//! the unit in the column name (`spot_shock_pct`, `vol_shock_pts`,
//! `jump_size_pct`). `scenario_failures.csv` is streamed while the book
//! runs ([`ScenarioFailureWriter`]); [`write_all`] writes the rest from the
//! accumulated [`RiskReport`].
//!
//! The page ([`html`]) is built from the shared pieces in
//! [`super::html`], [`super::chart`] and [`super::format`]: a block saying
//! what it is a report of, tables with units in every header and one
//! number format, line charts with the book drawn as a thick black line,
//! and heat maps that share one colour scale with a key beside each.

use super::chart::{colour_key, heat_map, xy_chart, HeatMap, Layer, XyChart, LINE_COLOURS};
use super::format::{compact, grouped, signed_short};
use super::html::{esc, facts, made_at, page, scroll, th};
pub use crate::reports::risk::FailedRow;
use crate::reports::risk::{Cell, CurvePoint, Group, RiskReport, ScenarioFailure, ScenarioKind};
use crate::reports::user_scenarios::RowProblem;
use std::fmt::Write as _;
use std::fs;
use std::io::Write;
use std::path::Path;

/// Label of the book-level group in the `underlying` column (its `level`
/// column reads `book`).
pub const BOOK: &str = "(book)";
/// File name of the streamed list of failed scenario revaluations.
pub const SCENARIO_FAILURES_FILE: &str = "scenario_failures.csv";
/// File name of the named scenarios' P&L (written with `--scenarios`).
pub const USER_SCENARIOS_FILE: &str = "scenarios_user.csv";

/// What the page says the report is of (the header block).
#[derive(Debug, Clone, Default)]
pub struct ReportMeta {
    /// Title of the page.
    pub title: String,
    /// The book as named on the command line.
    pub input: String,
    /// Valuation date of rows without their own, when one was given.
    pub valuation_date: Option<String>,
    /// The fitted parameter file, with `--params`.
    pub params: Option<String>,
    /// The scenario file, with `--scenarios`.
    pub scenario_file: Option<String>,
    /// Bad rows of the scenario file.
    pub scenario_problems: Vec<RowProblem>,
    /// Underlyings named in the scenario file but absent from the book.
    pub scenario_unknown_underlyings: Vec<String>,
}

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
    names: Vec<String>,
}

impl<W: Write> ScenarioFailureWriter<W> {
    /// Writes the header: `line, id, underlying, scenario, spot_shock_pct,
    /// vol_shock_pts, jump_size_pct, reason, user_scenario` (shocks in
    /// percent and vol points, empty where they do not apply;
    /// `user_scenario` the name of a named scenario, from `names` in
    /// [`crate::reports::risk::ScenarioSpec::user`] order).
    ///
    /// # Errors
    /// Any I/O error.
    pub fn new(out: W, names: Vec<String>) -> std::io::Result<Self> {
        let mut w = csv::Writer::from_writer(out);
        w.write_record([
            "line",
            "id",
            "underlying",
            "scenario",
            "spot_shock_pct",
            "vol_shock_pts",
            "jump_size_pct",
            "reason",
            "user_scenario",
        ])
        .map_err(csv_err)?;
        Ok(ScenarioFailureWriter { w, names })
    }

    /// Writes one failure.
    ///
    /// # Errors
    /// Any I/O error.
    pub fn write(&mut self, f: &ScenarioFailure) -> std::io::Result<()> {
        let mut user = String::new();
        let (spot, vol, jump) = match f.scenario {
            ScenarioKind::Grid {
                spot_shock,
                vol_shock,
            }
            | ScenarioKind::User {
                spot_shock,
                vol_shock,
                ..
            } => (pct(spot_shock), pct(vol_shock), String::new()),
            ScenarioKind::GreeksVsSpot { spot_shock } => (pct(spot_shock), fmt(0.0), String::new()),
            ScenarioKind::ModelMeanJump { jump_size } | ScenarioKind::GivenJump { jump_size } => {
                (String::new(), String::new(), pct(jump_size))
            }
        };
        if let ScenarioKind::User { index, .. } = f.scenario {
            user = self.names.get(index).cloned().unwrap_or_default();
        }
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
                &user,
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

/// A fraction written in percent (or vol points): 12 significant digits,
/// so a shock of 0.07 reads `7.0`, not `7.000000000000001`.
fn pct(x: f64) -> String {
    let y = x * 100.0;
    fmt(format!("{y:.11e}").parse().unwrap_or(y) + 0.0)
}

fn names_non_finite<'a>(values: &[(&'a str, f64)]) -> Vec<&'a str> {
    values
        .iter()
        .filter(|(_, x)| !x.is_finite())
        .map(|(n, _)| *n)
        .collect()
}

/// Writes `totals.csv`, `scenarios.csv`, `jump_scenarios.csv`,
/// `greeks_vs_spot.csv`, `scenarios_user.csv` (when the spec has named
/// scenarios) and `report.html` into `dir`.
///
/// # Errors
/// Any I/O error.
pub fn write_all(dir: &Path, r: &RiskReport, meta: &ReportMeta) -> std::io::Result<()> {
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
        "spot_shock_pct",
        "vol_shock_pts",
        "pnl",
        "level",
        "rows_failed",
        "status",
    ])
    .map_err(csv_err)?;
    for g in &groups {
        for (i, ds) in r.spec.spot_shocks_pct.iter().enumerate() {
            for (j, dv) in r.spec.vol_shocks_pts.iter().enumerate() {
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
        "jump_size_pct",
        "pnl",
        "level",
        "rows_failed",
        "status",
    ])
    .map_err(csv_err)?;
    for g in &groups {
        let s = g.scenarios;
        // The book's underlyings each jump by their own model mean jump:
        // no one size to write.
        let k = if g.underlying.is_some() {
            Some(s.mean_model_jump * 100.0)
        } else {
            None
        };
        let rows = std::iter::once(("model_mean_jump", k, s.jumps[0])).chain(
            r.spec
                .jump_shocks_pct
                .iter()
                .zip(&s.jumps[1..])
                .map(|(size, c)| ("given_jump", Some(*size), *c)),
        );
        for (scenario, size, c) in rows {
            let bad = names_non_finite(&[("jump_size_pct", size.unwrap_or(0.0)), ("pnl", c.pnl)]);
            w.write_record([
                name_of(g).to_string(),
                scenario.to_string(),
                size.map(fmt).unwrap_or_default(),
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
        "spot_shock_pct",
        "delta_cash",
        "gamma_cash_1pct",
        "vega_1pt",
        "level",
        "rows_failed",
        "status",
    ])
    .map_err(csv_err)?;
    for g in &groups {
        for (i, ds) in r.spec.spot_shocks_pct.iter().enumerate() {
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

    if !r.spec.user.is_empty() {
        let mut w = csv::Writer::from_path(dir.join(USER_SCENARIOS_FILE)).map_err(csv_err)?;
        w.write_record([
            "scenario",
            "underlying",
            "pnl",
            "level",
            "rows_failed",
            "status",
        ])
        .map_err(csv_err)?;
        for (k, u) in r.spec.user.iter().enumerate() {
            for g in &groups {
                let c = g.scenarios.user[k];
                let (pnl, st) = if u.is_valid() {
                    (
                        fmt(c.pnl),
                        status(&names_non_finite(&[("pnl", c.pnl)]), c.rows_failed),
                    )
                } else {
                    (
                        String::new(),
                        format!("error: not computed: {}", u.problems.join("; ")),
                    )
                };
                w.write_record([
                    u.name.clone(),
                    name_of(g).to_string(),
                    pnl,
                    level_of(g).to_string(),
                    c.rows_failed.to_string(),
                    st,
                ])
                .map_err(csv_err)?;
            }
        }
        w.flush()?;
    }

    fs::write(dir.join("report.html"), html(r, meta))
}

/// An amount on the page (see [`compact`]); `&ndash;` where it does not apply.
fn amount(x: f64) -> String {
    compact(x)
}

/// A P&L cell, with the rows it excludes.
fn cell_html(c: &Cell) -> String {
    if c.rows_failed > 0 {
        format!(
            "{} <span class=\"warn\">(excl. {} row{})</span>",
            amount(c.pnl),
            grouped(c.rows_failed),
            if c.rows_failed == 1 { "" } else { "s" }
        )
    } else {
        amount(c.pnl)
    }
}

/// A fraction as a signed percentage (`+5%`, `−20%`).
fn pct_label(x: f64) -> String {
    format!("{}%", signed_short(x * 100.0))
}

/// `n thing(s)` with the right plural and thousands separators.
fn count(n: u64, thing: &str) -> String {
    format!("{} {thing}{}", grouped(n), if n == 1 { "" } else { "s" })
}

/// Units of the exposure columns, in [`crate::reports::risk::EXPOSURE_COLUMNS`] order.
const EXPOSURE_HEADERS: [(&str, &str); 12] = [
    ("value", "ccy"),
    ("delta", "units of underlying"),
    ("cash delta", "ccy (delta \u{00d7} spot)"),
    ("gamma", "units per 1 ccy of spot"),
    ("cash gamma", "ccy per 1% spot move"),
    ("vega", "ccy per vol point"),
    ("theta", "ccy per calendar day"),
    ("rho", "ccy per 1% of rate"),
    ("div rho", "ccy per 1% of yield"),
    ("dV/d\u{03bb}", "ccy per jump a year"),
    ("dV/d\u{03bc}J", "ccy per 0.01 of jump mean"),
    ("dV/d\u{03b4}", "ccy per 0.01 of jump vol"),
];

fn exposure_table(r: &RiskReport) -> String {
    let mut t = String::from("<table><thead><tr>");
    t.push_str(&th("underlying", ""));
    t.push_str(&th("positions", "count"));
    for (name, unit) in EXPOSURE_HEADERS {
        t.push_str(&th(name, unit));
    }
    t.push_str("</tr></thead><tbody>");
    for g in r.groups() {
        let book = g.underlying.is_none();
        let _ = write!(
            t,
            "<tr{}><td>{}</td><td>{}</td>",
            if book { " class=\"book\"" } else { "" },
            esc(&display_name(&g)),
            grouped(g.exposure.positions)
        );
        for ((name, _), x) in EXPOSURE_HEADERS.iter().zip(g.exposure.values()) {
            let mixed_units = book && matches!(*name, "delta" | "gamma");
            let shown = if mixed_units {
                "&ndash;".to_string()
            } else {
                amount(x)
            };
            let _ = write!(t, "<td>{shown}</td>");
        }
        t.push_str("</tr>");
    }
    t.push_str("</tbody></table>");
    scroll(&t)
}

fn jump_table(r: &RiskReport) -> String {
    let mut t = String::from("<table><thead><tr>");
    t.push_str(&th("underlying", ""));
    t.push_str(&th("model mean jump k", "% (|quantity|-weighted)"));
    t.push_str(&th("P&L, jump by k", "ccy"));
    for j in &r.spec.jump_shocks {
        t.push_str(&th(&format!("P&L, jump {}", pct_label(*j)), "ccy"));
    }
    t.push_str("</tr></thead><tbody>");
    for g in r.groups() {
        let s = g.scenarios;
        let (name, k) = match g.underlying {
            None => (
                "book: every underlying by its own k".to_string(),
                "each its own".to_string(),
            ),
            Some(_) => {
                let (lo, hi) = s.model_jump_range;
                let mut k = format!("{}%", compact(s.mean_model_jump * 100.0));
                if lo < hi {
                    let _ = write!(
                        k,
                        " (positions differ: {}% to {}%)",
                        compact(lo * 100.0),
                        compact(hi * 100.0)
                    );
                }
                (display_name(&g), k)
            }
        };
        let _ = write!(
            t,
            "<tr{}><td>{}</td><td>{k}</td>",
            if g.underlying.is_none() {
                " class=\"book\""
            } else {
                ""
            },
            esc(&name),
        );
        for c in &s.jumps {
            let _ = write!(t, "<td>{}</td>", cell_html(c));
        }
        t.push_str("</tr>");
    }
    t.push_str("</tbody></table>");
    scroll(&t)
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
    let mut t = String::from("<table><thead><tr>");
    for h in headers {
        let _ = write!(t, "<th class=\"text\">{h}</th>");
    }
    t.push_str("</tr></thead><tbody>");
    for item in items {
        t.push_str("<tr>");
        for c in cells(item) {
            let _ = write!(t, "<td class=\"text\">{c}</td>");
        }
        t.push_str("</tr>");
    }
    t.push_str("</tbody></table>");
    let mut out = intro;
    out.push_str(&scroll(&t));
    let left = total.saturating_sub(items.len() as u64);
    if left > 0 {
        let _ = write!(out, "<p class=\"warn\">&hellip; and {}</p>", more(left));
    }
    out
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
        &["input line", "id", "status"],
        &r.first_failed_rows,
        r.failed_rows,
        |f| vec![f.line.to_string(), esc(&f.id), esc(&f.status)],
        |more| {
            format!(
                "{} more failed row{} (every row's status is in positions.csv).",
                grouped(more),
                if more == 1 { "" } else { "s" }
            )
        },
    )
}

fn scenario_name(r: &RiskReport, k: &ScenarioKind) -> String {
    match k {
        ScenarioKind::User { index, .. } => format!(
            "scenario '{}'",
            r.spec.user.get(*index).map_or("", |u| u.name.as_str())
        ),
        other => other.to_string(),
    }
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
        &["input line", "id", "underlying", "scenario", "reason"],
        &r.first_scenario_failures,
        r.scenario_failures,
        |f| {
            vec![
                f.line.to_string(),
                esc(&f.id),
                esc(&f.underlying),
                esc(&scenario_name(r, &f.scenario)),
                esc(&f.reason),
            ]
        },
        |more| {
            format!(
                "{} more failed revaluation{} (see {SCENARIO_FAILURES_FILE}).",
                grouped(more),
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
            grouped((problems.len() - crate::reports::risk::MAX_LISTED) as u64)
        );
    }
    t
}

fn floored_html(r: &RiskReport) -> String {
    if r.vol_floored == 0 {
        return String::new();
    }
    let lowest = r.spec.vol_shocks_pts.first().copied().unwrap_or(0.0);
    let intro = format!(
        "<p class=\"warn\">{} a diffusion vol below the largest negative vol shock ({} points): in the \
         grid cells of that shock (and any below the vol) the shocked vol is floored at 0.</p>",
        if r.vol_floored == 1 {
            "1 position has".to_string()
        } else {
            format!("{} positions have", grouped(r.vol_floored))
        },
        signed_short(lowest)
    );
    listed_table(
        intro,
        &["input line", "id", "underlying", "vol (%)"],
        &r.first_floored,
        r.vol_floored,
        |f| {
            vec![
                f.line.to_string(),
                esc(&f.id),
                esc(&f.underlying),
                compact(f.vol * 100.0),
            ]
        },
        |more| format!("{} more positions.", grouped(more)),
    )
}

fn user_scenarios_html(r: &RiskReport, meta: &ReportMeta) -> String {
    let Some(file) = &meta.scenario_file else {
        return String::new();
    };
    let groups = r.groups();
    let mut s = format!(
        "<h2>Named scenarios</h2><p class=\"note\">From {}: each scenario shocks each underlying by its \
         own row, or by the <code>*</code> row, or not at all; every P&amp;L is a full revaluation (ccy). \
         Also in {USER_SCENARIOS_FILE}.</p>",
        esc(file)
    );
    if !meta.scenario_problems.is_empty() {
        let _ = write!(
            s,
            "<p class=\"warn\">{} of the scenario file {} bad; a scenario with a bad row is not computed \
             (its cells read &ndash;):</p><ul>",
            count(meta.scenario_problems.len() as u64, "row"),
            if meta.scenario_problems.len() == 1 {
                "is"
            } else {
                "are"
            }
        );
        for p in &meta.scenario_problems {
            let _ = write!(s, "<li>{}</li>", esc(&p.message));
        }
        s.push_str("</ul>");
    }
    if !meta.scenario_unknown_underlyings.is_empty() {
        let _ = write!(
            s,
            "<p class=\"warn\">The scenario file names underlyings that are not in the book (their rows move nothing): {}.</p>",
            esc(&meta.scenario_unknown_underlyings.join(", "))
        );
    }
    let mut t = String::from("<table><thead><tr>");
    t.push_str(&th("scenario", ""));
    t.push_str("<th class=\"text\">shocks</th>");
    for g in &groups {
        let (name, unit) = match g.underlying {
            Some(_) => (display_name(g), "P&L, ccy".to_string()),
            None => ("book".to_string(), "P&L, ccy".to_string()),
        };
        t.push_str(&th(&name, &unit));
    }
    t.push_str("<th class=\"text\">status</th></tr></thead><tbody>");
    for (k, u) in r.spec.user.iter().enumerate() {
        let _ = write!(
            t,
            "<tr><td>{}</td><td class=\"text\">{}</td>",
            esc(&u.name),
            esc(&describe(u))
        );
        for g in &groups {
            let c = &g.scenarios.user[k];
            let v = if u.is_valid() {
                cell_html(c)
            } else {
                "&ndash;".to_string()
            };
            let _ = write!(
                t,
                "<td{}>{v}</td>",
                if g.underlying.is_none() {
                    " style=\"font-weight:bold\""
                } else {
                    ""
                }
            );
        }
        let st = if u.is_valid() {
            "ok".to_string()
        } else {
            format!(
                "<span class=\"warn\">not computed: {}</span>",
                esc(&u.problems.join("; "))
            )
        };
        let _ = write!(t, "<td class=\"text\">{st}</td></tr>");
    }
    t.push_str("</tbody></table>");
    s.push_str(&scroll(&t));
    s
}

/// What a named scenario does, row by row: `* spot −12%, vol +6 pts;
/// ZEPHYRA-IDX spot −15%, vol +8 pts`.
fn describe(u: &crate::reports::user_scenarios::UserScenario) -> String {
    let one = |who: &str, r: &crate::reports::user_scenarios::ShockRow| {
        let mut parts = Vec::new();
        if r.spot_shock_pct != 0.0 {
            parts.push(format!("spot {}%", signed_short(r.spot_shock_pct)));
        }
        if r.vol_shock_pts != 0.0 {
            parts.push(format!("vol {} pts", signed_short(r.vol_shock_pts)));
        }
        let k = &r.shock;
        if k.jump_rate_mult != 1.0 {
            let m = signed_short(k.jump_rate_mult);
            parts.push(format!("jump rate \u{00d7}{}", m.trim_start_matches('+')));
        }
        if k.jump_mean_shift != 0.0 {
            parts.push(format!("jump mean {}", signed_short(k.jump_mean_shift)));
        }
        if k.jump_vol_shift != 0.0 {
            parts.push(format!("jump vol {}", signed_short(k.jump_vol_shift)));
        }
        if k.rate_shift != 0.0 {
            parts.push(format!("rate {} bp", signed_short(k.rate_shift * 1e4)));
        }
        if parts.is_empty() {
            parts.push("no change".to_string());
        }
        format!("{who}: {}", parts.join(", "))
    };
    let mut rows: Vec<String> = Vec::new();
    if let Some(r) = &u.all {
        let who = if u.by_underlying.is_empty() {
            "every underlying"
        } else {
            "every other underlying"
        };
        rows.push(one(who, r));
    }
    for (name, r) in &u.by_underlying {
        rows.push(one(name, r));
    }
    rows.join("; ")
}

/// Underlyings with a heat map of their own (the book always has one).
pub const MAX_HEAT_MAPS: usize = 20;
/// Underlyings drawn in the line charts (one colour each; the book is extra).
pub const MAX_LINES: usize = LINE_COLOURS.len();

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

/// A line chart against the spot shock, one line per charted group (the
/// book thick and black).
fn spot_chart(
    title: &str,
    y_desc: &str,
    xs_pct: &[f64],
    groups: &[Group],
    value: &dyn Fn(&Group) -> Vec<f64>,
) -> String {
    let mut layers = Vec::new();
    let mut colour = 0;
    for g in groups {
        let book = g.underlying.is_none();
        let points = xs_pct.iter().copied().zip(value(g)).collect();
        let label = if book {
            "book".to_string()
        } else {
            display_name(g)
        };
        layers.push(Layer::line(&label, colour, book, points));
        if !book {
            colour += 1;
        }
    }
    xy_chart(&XyChart {
        title,
        x_desc: "spot shock (%)",
        y_desc,
        size: (900, 380),
        layers,
        y_symmetric: false,
    })
}

/// The book's headline figures: value, worst and best grid cell, worst jump.
fn at_a_glance(r: &RiskReport) -> String {
    let (e, s) = &r.book;
    if e.positions == 0 {
        return "<p class=\"warn\">No position of the book could be priced: every figure below is 0.</p>"
            .to_string();
    }
    let mut worst: Option<(f64, usize, usize)> = None;
    let mut best: Option<(f64, usize, usize)> = None;
    for (i, row) in s.grid.iter().enumerate() {
        for (j, c) in row.iter().enumerate() {
            if !c.pnl.is_finite() {
                continue;
            }
            if worst.is_none_or(|w| c.pnl < w.0) {
                worst = Some((c.pnl, i, j));
            }
            if best.is_none_or(|b| c.pnl > b.0) {
                best = Some((c.pnl, i, j));
            }
        }
    }
    let at = |x: Option<(f64, usize, usize)>| match x {
        Some((v, i, j)) => format!(
            "{} at spot {}%, vol {} points",
            amount(v),
            signed_short(r.spec.spot_shocks_pct[i]),
            signed_short(r.spec.vol_shocks_pts[j])
        ),
        None => "&ndash;".to_string(),
    };
    let mut items = vec![
        ("Book value", format!("{} ccy", amount(e.value))),
        ("Cash delta", format!("{} ccy", amount(e.delta_cash))),
        ("Vega", format!("{} ccy per vol point", amount(e.vega_1pt))),
        ("Worst grid P&L", at(worst)),
        ("Best grid P&L", at(best)),
    ];
    let mut jumps: Vec<(String, f64)> = vec![(
        "every underlying by its own model mean jump".into(),
        s.jumps[0].pnl,
    )];
    for (j, c) in r.spec.jump_shocks.iter().zip(&s.jumps[1..]) {
        jumps.push((format!("every underlying jumps {}", pct_label(*j)), c.pnl));
    }
    if let Some((what, v)) = jumps
        .into_iter()
        .filter(|j| j.1.is_finite())
        .min_by(|a, b| a.1.total_cmp(&b.1))
    {
        items.push(("Worst jump P&L", format!("{} ({what})", amount(v))));
    }
    facts(&items)
}

/// The list of shocks as given, `−30, −25, ... +30` with the unit.
fn shock_list(xs: &[f64], unit: &str) -> String {
    let v: Vec<String> = xs.iter().map(|x| signed_short(*x)).collect();
    format!("{} {unit}", v.join(", "))
}

/// A Greek-against-spot chart: title, y-axis description, the value.
type GreekChart = (&'static str, &'static str, fn(&CurvePoint) -> f64);

/// The page.
fn html(r: &RiskReport, meta: &ReportMeta) -> String {
    let xs = &r.spec.spot_shocks_pct;
    let groups = r.groups();
    let n_underlyings = groups.len() - 1;
    let lines = charted(&groups, MAX_LINES);
    let zero_vol = r.spec.vol_shocks.iter().position(|v| *v == 0.0);
    let pnl_note = match zero_vol {
        Some(_) => "vol unchanged",
        None => "at the middle vol shock (no zero vol shock in the grid)",
    };
    let pnl_chart = spot_chart(
        &format!("P&L against spot shock ({pnl_note})"),
        "P&L (ccy)",
        xs,
        &lines,
        &|g| {
            g.scenarios
                .grid
                .iter()
                .map(|row| row[zero_vol.unwrap_or(row.len() / 2)].pnl)
                .collect()
        },
    );
    let curve = |f: fn(&CurvePoint) -> f64| {
        move |g: &Group| {
            g.scenarios
                .greeks_vs_spot
                .iter()
                .map(f)
                .collect::<Vec<f64>>()
        }
    };
    let greek_charts: [GreekChart; 3] = [
        ("Cash delta against spot shock", "cash delta (ccy)", |p| {
            p.delta_cash
        }),
        (
            "Cash gamma against spot shock",
            "cash gamma (ccy per 1% move)",
            |p| p.gamma_cash_1pct,
        ),
        ("Vega against spot shock", "vega (ccy per vol point)", |p| {
            p.vega_1pt
        }),
    ];
    let greek_charts: String = greek_charts
        .iter()
        .map(|(title, y, f)| {
            format!(
                "<figure>{}</figure>",
                spot_chart(title, y, xs, &lines, &curve(*f))
            )
        })
        .collect();
    let mut heat_maps = String::new();
    if n_underlyings > MAX_HEAT_MAPS || n_underlyings > MAX_LINES {
        let _ = write!(
            heat_maps,
            "<p class=\"note\">The book has {n_underlyings} underlyings: the line charts show the {} and the \
             heat maps the {} with the largest absolute P&amp;L on the grid, and the book; every underlying is in \
             the tables and in the CSV files.</p>",
            n_underlyings.min(MAX_LINES),
            n_underlyings.min(MAX_HEAT_MAPS)
        );
    }
    let mapped = charted(&groups, MAX_HEAT_MAPS);
    // One colour scale for every map of the page.
    let scale = mapped
        .iter()
        .flat_map(|g| g.scenarios.grid.iter().flatten())
        .filter(|c| c.pnl.is_finite())
        .fold(0.0f64, |a, c| a.max(c.pnl.abs()));
    let x_labels: Vec<String> = xs
        .iter()
        .map(|s| format!("{}%", signed_short(*s)))
        .collect();
    let y_labels: Vec<String> = r
        .spec
        .vol_shocks_pts
        .iter()
        .map(|v| signed_short(*v))
        .collect();
    let key = colour_key(scale, "P&L (ccy)", "one scale, every grid");
    for g in &mapped {
        let largest = g
            .scenarios
            .grid
            .iter()
            .flatten()
            .filter(|c| c.pnl.is_finite())
            .fold(0.0f64, |a, c| a.max(c.pnl.abs()));
        let title = format!(
            "P&L by full revaluation: {} (largest |P&L| {})",
            match g.underlying {
                Some(_) => display_name(g),
                None => "book".to_string(),
            },
            compact(largest)
        );
        let map = heat_map(&HeatMap {
            title: &title,
            x_labels: &x_labels,
            y_labels: &y_labels,
            x_desc: "spot shock",
            y_desc: "vol shock (points)",
            values: g
                .scenarios
                .grid
                .iter()
                .map(|row| row.iter().map(|c| c.pnl).collect())
                .collect(),
            marked: g
                .scenarios
                .grid
                .iter()
                .map(|row| row.iter().map(|c| c.rows_failed > 0).collect())
                .collect(),
            scale,
        });
        let _ = write!(heat_maps, "<figure class=\"heat\">{map}{key}</figure>");
    }
    let params = match &meta.params {
        Some(p) => format!("vol and jump parameters from {}", esc(p)),
        None => "from the book's columns".to_string(),
    };
    let mut settings = vec![
        ("Report of", format!("<code>{}</code>", esc(&meta.input))),
        (
            "Rows",
            format!(
                "{} priced, {} failed{}",
                grouped(r.book.0.positions),
                grouped(r.failed_rows),
                if r.failed_rows > 0 {
                    " (excluded from everything, listed below)"
                } else {
                    ""
                }
            ),
        ),
        (
            "Valuation date",
            match &meta.valuation_date {
                Some(d) => format!("{} (rows with their own valuation_date use it)", esc(d)),
                None => {
                    "not given: expiries in years (or dated rows with their own valuation_date)"
                        .to_string()
                }
            },
        ),
        (
            "Model",
            format!("Merton jump-diffusion, closed-form series; {params}"),
        ),
        ("Spot shocks", shock_list(xs, "%")),
        (
            "Vol shocks",
            shock_list(&r.spec.vol_shocks_pts, "vol points"),
        ),
        (
            "Jump scenarios",
            format!(
                "each underlying by its own model mean jump; every underlying by {}",
                shock_list(&r.spec.jump_shocks_pct, "%")
            ),
        ),
    ];
    if let Some(f) = &meta.scenario_file {
        settings.push((
            "Scenario file",
            format!(
                "<code>{}</code> ({})",
                esc(f),
                count(r.spec.user.len() as u64, "named scenario")
            ),
        ));
    }
    settings.push((
        "Made",
        format!("{}, saltus {}", made_at(), env!("CARGO_PKG_VERSION")),
    ));
    let body = format!(
        r#"{header}
<p class="note">Amounts are in <strong>ccy</strong>, the currency the book's prices are in, and scaled by quantity &times; multiplier. Numbers are rounded to three significant digits (k = thousand, M = million, bn = billion); the CSV files beside this page hold every digit. Scenario P&amp;L is a full revaluation, not a Greek approximation. Model estimates: validate and use under your firm's model-risk policy.</p>
<h2>At a glance</h2>
{glance}
<h2>Rows</h2>
{failed}
{scenario_failures}
{problems}
<h2>Exposures by underlying</h2>
<p class="note">Cash gamma is the change of cash delta for a 1% spot move. The book row leaves delta and gamma empty: they are in units of each underlying and do not add up.</p>
{exposures}
<h2>P&amp;L against spot</h2>
<figure>{pnl_chart}</figure>
<h2>Scenario grids (spot &times; vol)</h2>
<p class="note">Every grid uses the same colours for the same P&amp;L (key beside each grid): red is a loss, blue a gain, near white about zero. A cell marked * excludes rows that could not be revalued (listed under Rows).</p>
{floored}
{heat_maps}
<h2>Jump scenarios (instantaneous)</h2>
<p class="note">The underlying jumps by the model's mean jump k = e<sup>&mu;<sub>J</sub>+&delta;&sup2;/2</sup> &minus; 1 of each position, or by each given size (every underlying at once on the book row); all other inputs unchanged. P&amp;L in ccy.</p>
{jumps}
{user}
<h2>Greeks against spot</h2>
<p class="note">Vol unchanged; each curve is the sum over the underlying's positions at the shocked spot; the thick black line is the book.</p>
{greek_charts}"#,
        header = facts(&settings),
        glance = at_a_glance(r),
        failed = failed_rows_html(r),
        scenario_failures = scenario_failures_html(r),
        problems = problems_html(r),
        exposures = exposure_table(r),
        floored = floored_html(r),
        jumps = jump_table(r),
        user = user_scenarios_html(r, meta),
    );
    page(&meta.title, &body)
}
