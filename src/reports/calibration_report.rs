//! Writing a calibration: the parameters file (one row per fitted group),
//! the per-quote residuals file and a self-contained HTML page with SVG
//! charts drawn by `plotters` (no scripts, no network access needed).
//!
//! Numbers are written in shortest round-trip form; a value that is not
//! finite (a standard error of an unidentified parameter, the condition
//! number of a singular problem) is left empty, never written as NaN/inf.

use super::chart::{xy_chart, Layer, Marks, XyChart, LINE_COLOURS};
use super::html::{esc, page, scroll};
use crate::book::writer::write_field;
use crate::market::calibrate::{model_price, model_vol, usable, CalibrationSpec, Fit, PARAM_NAMES};
use crate::market::quotes::{Quote, QuoteSheet};
use crate::model::OptionKind;
use plotters::style::RGBColor;
use std::fmt::Write as _;
use std::io::{self, Write};

/// The columns of the parameters file; with `--per-expiry`, `expiry`
/// follows `underlying`. The first sixteen (without `expiry`) are the
/// documented contract; the rest are extra diagnostics.
pub const PARAMS_COLUMNS: [&str; 28] = [
    "underlying",
    "vol",
    "jump_rate",
    "jump_mean",
    "jump_vol",
    "quotes_used",
    "rmse_vol_pts",
    "max_abs_residual_vol_pts",
    "se_vol",
    "se_jump_rate",
    "se_jump_mean",
    "se_jump_vol",
    "condition_number",
    "starts_near_best",
    "flags",
    "status",
    "starts",
    "iterations",
    "stop_reason",
    "objective",
    "fixed",
    "corr_vol_jump_rate",
    "corr_vol_jump_mean",
    "corr_vol_jump_vol",
    "corr_jump_rate_jump_mean",
    "corr_jump_rate_jump_vol",
    "corr_jump_mean_jump_vol",
    "quotes_excluded",
];

/// Columns appended to every quote row in the residuals file.
pub const RESIDUAL_COLUMNS: [&str; 6] = [
    "market_vol",
    "model_vol",
    "residual_vol_pts",
    "market_price",
    "model_price",
    "status",
];

/// One CSV line being built.
struct Line {
    buf: Vec<u8>,
    first: bool,
}

impl Line {
    fn new() -> Self {
        Line {
            buf: Vec::new(),
            first: true,
        }
    }
    fn sep(&mut self) {
        if !self.first {
            self.buf.push(b',');
        }
        self.first = false;
    }
    fn raw(&mut self, field: &[u8]) {
        self.sep();
        write_field(&mut self.buf, field);
    }
    fn str(&mut self, s: &str) {
        self.raw(s.as_bytes());
    }
    fn num(&mut self, x: Option<f64>) {
        self.sep();
        if let Some(x) = x.filter(|x| x.is_finite()) {
            let mut b = zmij::Buffer::new();
            self.buf.extend_from_slice(b.format(x).as_bytes());
        }
    }
    fn end(mut self, w: &mut impl Write) -> io::Result<()> {
        self.buf.push(b'\n');
        w.write_all(&self.buf)
    }
}

/// The `status` field of a parameters row.
pub fn fit_status(f: &Fit) -> String {
    match &f.status {
        Ok(()) => "ok".into(),
        Err(e) => format!("error: {e}"),
    }
}

/// Writes the parameters file.
///
/// # Errors
/// Any I/O error.
pub fn write_params(
    w: &mut impl Write,
    sheet: &QuoteSheet,
    fits: &[Fit],
    spec: &CalibrationSpec,
) -> io::Result<()> {
    let mut head = Line::new();
    for (i, c) in PARAMS_COLUMNS.iter().enumerate() {
        head.str(c);
        if i == 0 && spec.per_expiry {
            head.str("expiry");
        }
    }
    head.end(w)?;
    for f in fits {
        let mut l = Line::new();
        l.str(&f.underlying);
        if spec.per_expiry {
            l.num(f.expiry);
        }
        for j in 0..4 {
            l.num(f.params.map(|p| p[j]));
        }
        l.str(&f.quotes_used.to_string());
        let ok = f.params.is_some();
        l.num(ok.then_some(f.rmse_vol_pts));
        l.num(ok.then_some(f.max_abs_residual_vol_pts));
        for j in 0..4 {
            l.num(f.se[j]);
        }
        l.num(f.condition_number);
        l.str(&f.starts_near_best.to_string());
        l.str(&f.flags.join(";"));
        l.str(&fit_status(f));
        l.str(&f.starts.to_string());
        l.str(&f.iterations.to_string());
        l.str(f.stop.map_or("", |s| s.as_str()));
        l.num(ok.then_some(f.objective));
        let fixed: Vec<&str> = (0..4)
            .filter(|&j| f.fixed[j])
            .map(|j| PARAM_NAMES[j])
            .collect();
        l.str(&fixed.join(";"));
        for a in 0..4 {
            for b in a + 1..4 {
                l.num(f.corr[a][b]);
            }
        }
        l.str(&excluded_in(sheet, f, spec).to_string());
        l.end(w)?;
    }
    Ok(())
}

fn same_group(q: &Quote, f: &Fit) -> bool {
    q.underlying == f.underlying && f.expiry.is_none_or(|e| e == q.expiry)
}

/// Valid rows of the group that the fit left out (arbitrage).
fn excluded_in(sheet: &QuoteSheet, f: &Fit, spec: &CalibrationSpec) -> usize {
    sheet
        .rows
        .iter()
        .filter_map(|r| r.quote.as_ref().ok())
        .filter(|q| same_group(q, f) && !usable(q, spec.keep_arbitrage))
        .count()
}

/// What became of one quote row.
#[derive(Debug, Clone, PartialEq)]
pub struct Outcome {
    /// Market implied vol.
    pub market_vol: Option<f64>,
    /// Model implied vol.
    pub model_vol: Option<f64>,
    /// `100 (model - market)`.
    pub residual_vol_pts: Option<f64>,
    /// Market mid price.
    pub market_price: Option<f64>,
    /// Model price.
    pub model_price: Option<f64>,
    /// `ok`, `warning: ...`, `excluded: line N: ...` or `error: line N: ...`.
    pub status: String,
}

/// The outcome of every row, in input order. A row excluded from the fit
/// still gets the model's vol and price when its group was fitted.
pub fn outcomes(sheet: &QuoteSheet, fits: &[Fit], spec: &CalibrationSpec) -> Vec<Outcome> {
    sheet
        .rows
        .iter()
        .map(|row| {
            let q = match &row.quote {
                Ok(q) => q,
                Err(e) => {
                    return Outcome {
                        market_vol: None,
                        model_vol: None,
                        residual_vol_pts: None,
                        market_price: None,
                        model_price: None,
                        status: format!("error: {e}"),
                    }
                }
            };
            let fit = fits.iter().find(|f| same_group(q, f));
            let mut o = Outcome {
                market_vol: q.market_vol,
                model_vol: None,
                residual_vol_pts: None,
                market_price: Some(q.market_price),
                model_price: None,
                status: String::new(),
            };
            let params = fit.and_then(|f| f.params);
            if let Some(p) = params {
                if let Ok((v, _)) = model_price(q, &p) {
                    o.model_price = Some(v);
                    if let Ok((s, _)) = model_vol(q, v) {
                        o.model_vol = Some(s);
                        o.residual_vol_pts = q.market_vol.map(|m| 100.0 * (s - m));
                    }
                }
            }
            o.status = match (&q.arbitrage, usable(q, spec.keep_arbitrage), fit) {
                (Some(a), false, _) => format!("excluded: line {}: {a}", q.line),
                (_, _, Some(f)) if f.params.is_none() => format!(
                    "error: line {}: not fitted: the fit of {} failed: {}",
                    q.line,
                    f.underlying,
                    f.status.as_ref().err().map_or("", String::as_str)
                ),
                (Some(a), true, _) => {
                    format!("warning: line {}: kept with --keep-arbitrage: {a}", q.line)
                }
                _ if o.model_vol.is_none() => format!(
                    "error: line {}: the fitted model has no implied vol for this quote",
                    q.line
                ),
                _ => "ok".into(),
            };
            o
        })
        .collect()
}

/// Writes the residuals file: every row echoed, then [`RESIDUAL_COLUMNS`].
///
/// # Errors
/// Any I/O error.
pub fn write_residuals(
    w: &mut impl Write,
    sheet: &QuoteSheet,
    outcomes: &[Outcome],
) -> io::Result<()> {
    let mut head = Line::new();
    for h in &sheet.header {
        head.raw(h);
    }
    for c in RESIDUAL_COLUMNS {
        head.str(c);
    }
    head.end(w)?;
    for (row, o) in sheet.rows.iter().zip(outcomes) {
        let mut l = Line::new();
        for f in &row.fields {
            l.raw(f);
        }
        // Short records are padded so every line has the header's width.
        for _ in row.fields.len()..sheet.header.len() {
            l.raw(b"");
        }
        l.num(o.market_vol);
        l.num(o.model_vol);
        l.num(o.residual_vol_pts);
        l.num(o.market_price);
        l.num(o.model_price);
        l.str(&o.status);
        l.end(w)?;
    }
    Ok(())
}

/// Largest number of expiry charts per fitted group.
const MAX_CHARTS: usize = 16;
/// Strikes on the model curve of a chart.
const CURVE_POINTS: usize = 61;

fn extent(values: impl Iterator<Item = f64>) -> Option<(f64, f64)> {
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for v in values.filter(|v| v.is_finite()) {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    (lo <= hi).then_some((lo, hi))
}

/// Market vols with bid/ask bars and the model smile against strike, in %.
fn smile_chart(title: &str, quotes: &[&Quote], params: Option<[f64; 4]>) -> String {
    let Some((k0, k1)) = extent(quotes.iter().map(|q| q.strike)) else {
        return String::new();
    };
    let curve: Vec<(f64, f64)> = match params {
        Some(p) if k1 > k0 => {
            let q0 = quotes[0];
            (0..CURVE_POINTS)
                .filter_map(|i| {
                    let k = k0 + (k1 - k0) * i as f64 / (CURVE_POINTS - 1) as f64;
                    let f = q0.spot * ((q0.rate - q0.div_yield) * q0.expiry).exp();
                    let mut q = (*q0).clone();
                    q.strike = k;
                    q.kind = if k < f {
                        OptionKind::Put
                    } else {
                        OptionKind::Call
                    };
                    let (v, _) = model_price(&q, &p).ok()?;
                    let (s, _) = model_vol(&q, v).ok()?;
                    Some((k, 100.0 * s))
                })
                .collect()
        }
        _ => Vec::new(),
    };
    let bars: Vec<(f64, f64, f64)> = quotes
        .iter()
        .filter_map(|q| match q.vol_range {
            (Some(b), Some(a)) if a > b => Some((q.strike, 100.0 * b, 100.0 * a)),
            _ => None,
        })
        .collect();
    let mut layers = Vec::new();
    if !bars.is_empty() {
        layers.push(Layer {
            label: Some("bid to ask".into()),
            colour: RGBColor(150, 150, 150),
            marks: Marks::Bars(bars),
        });
    }
    layers.push(Layer {
        label: Some("market (mid)".into()),
        colour: LINE_COLOURS[0],
        marks: Marks::Dots(
            quotes
                .iter()
                .filter_map(|q| q.market_vol.map(|v| (q.strike, 100.0 * v)))
                .collect(),
        ),
    });
    if !curve.is_empty() {
        layers.push(Layer {
            label: Some("model".into()),
            colour: LINE_COLOURS[1],
            marks: Marks::Line(curve, 2),
        });
    }
    xy_chart(&XyChart {
        title,
        x_desc: "strike",
        y_desc: "implied vol (%)",
        size: (560, 320),
        layers,
        y_symmetric: false,
    })
}

/// Residuals in vol points against strike, one colour per expiry.
fn residual_chart(title: &str, points: &[(f64, f64, f64)], expiries: &[f64]) -> String {
    if points.is_empty() {
        return String::new();
    }
    let layers = expiries
        .iter()
        .enumerate()
        .map(|(i, &e)| Layer {
            label: Some(format!("T = {e}")),
            colour: LINE_COLOURS[i % LINE_COLOURS.len()],
            marks: Marks::Dots(
                points
                    .iter()
                    .filter(|p| p.0 == e)
                    .map(|p| (p.1, p.2))
                    .collect(),
            ),
        })
        .collect();
    xy_chart(&XyChart {
        title,
        x_desc: "strike",
        y_desc: "model \u{2212} market (vol points)",
        size: (1040, 340),
        layers,
        y_symmetric: true,
    })
}

fn cell(x: Option<f64>, digits: usize) -> String {
    match x.filter(|x| x.is_finite()) {
        Some(x) if x != 0.0 && (x.abs() < 1e-3 || x.abs() >= 1e6) => format!("{x:.digits$e}"),
        Some(x) => format!("{x:.digits$}"),
        None => "&ndash;".into(),
    }
}

/// `x` to three significant digits (standard errors, condition numbers).
fn sig3(x: Option<f64>) -> String {
    match x.filter(|x| x.is_finite()) {
        Some(x) if x != 0.0 && (x.abs() < 1e-4 || x.abs() >= 1e6) => format!("{x:.2e}"),
        Some(x) if x != 0.0 => {
            let d = (2 - x.abs().log10().floor() as i32).max(0) as usize;
            format!("{x:.d$}")
        }
        Some(_) => "0".into(),
        None => "&ndash;".into(),
    }
}

fn params_table(fits: &[Fit], per_expiry: bool) -> String {
    let mut t = String::from("<table><tr><th>underlying</th>");
    if per_expiry {
        t.push_str("<th>expiry</th>");
    }
    for n in PARAM_NAMES {
        let _ = write!(t, "<th>{n} (&plusmn; SE)</th>");
    }
    t.push_str(
        "<th>quotes</th><th>RMSE (vol pts)</th><th>max |residual|</th><th>condition</th>\
         <th>starts near best</th><th>flags</th><th>status</th></tr>",
    );
    for f in fits {
        let _ = write!(t, "<tr><td>{}</td>", esc(&f.underlying));
        if per_expiry {
            let _ = write!(t, "<td>{}</td>", cell(f.expiry, 4));
        }
        for j in 0..4 {
            let v = f.params.map(|p| p[j]);
            let se = if f.fixed[j] {
                "fixed".to_string()
            } else {
                format!("&plusmn; {}", sig3(f.se[j]))
            };
            let _ = write!(
                t,
                "<td>{} <span class=\"note\">{se}</span></td>",
                cell(v, 6)
            );
        }
        let ok = f.params.is_some();
        let _ = write!(
            t,
            "<td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{} of {}</td><td class=\"warn\">{}</td><td>{}</td></tr>",
            f.quotes_used,
            cell(ok.then_some(f.rmse_vol_pts), 3),
            cell(ok.then_some(f.max_abs_residual_vol_pts), 3),
            sig3(f.condition_number),
            f.starts_near_best,
            f.starts,
            esc(&f.flags.join("; ")),
            esc(&fit_status(f)),
        );
    }
    t.push_str("</table>");
    t
}

fn corr_table(f: &Fit) -> String {
    let mut t = String::from("<table><tr><th>correlation</th>");
    for n in PARAM_NAMES {
        let _ = write!(t, "<th>{n}</th>");
    }
    t.push_str("</tr>");
    for (a, name) in PARAM_NAMES.iter().enumerate() {
        let _ = write!(t, "<tr><td>{name}</td>");
        for b in 0..4 {
            let _ = write!(t, "<td>{}</td>", cell(f.corr[a][b], 3));
        }
        t.push_str("</tr>");
    }
    t.push_str("</table>");
    t
}

/// Rows that failed or were excluded (the first 200).
fn problem_rows(outcomes: &[Outcome]) -> String {
    let bad: Vec<&Outcome> = outcomes.iter().filter(|o| o.status != "ok").collect();
    if bad.is_empty() {
        return "<p>Every quote row was read and fitted.</p>".into();
    }
    let mut t = format!(
        "<p class=\"warn\">{} quote row(s) were not fitted as given (showing at most 200; the \
         residuals file has them all):</p><table><tr><th>status</th></tr>",
        bad.len()
    );
    for o in bad.iter().take(200) {
        let _ = write!(t, "<tr><td>{}</td></tr>", esc(&o.status));
    }
    t.push_str("</table>");
    t
}

/// The HTML page.
pub fn html(
    sheet: &QuoteSheet,
    fits: &[Fit],
    outcomes: &[Outcome],
    spec: &CalibrationSpec,
    title: &str,
) -> String {
    let mut sections = String::new();
    for f in fits {
        let name = match f.expiry {
            Some(e) => format!("{} (expiry {e})", f.underlying),
            None => f.underlying.clone(),
        };
        let _ = write!(sections, "<h2>{}</h2>", esc(&name));
        if let Err(e) = &f.status {
            let _ = write!(sections, "<p class=\"warn\">Not fitted: {}</p>", esc(e));
        }
        if !f.flags.is_empty() {
            let _ = write!(
                sections,
                "<p class=\"warn\">Flags: {}</p>",
                esc(&f.flags.join("; "))
            );
        }
        let _ = write!(
            sections,
            "<p class=\"note\">{} quotes fitted, stopped after {} iterations ({}); {} of {} starts within 1% of the best objective.</p>",
            f.quotes_used,
            f.iterations,
            f.stop.map_or("not run", |s| s.as_str()),
            f.starts_near_best,
            f.starts
        );
        sections.push_str(&corr_table(f));
        let quotes: Vec<&Quote> = f
            .rows
            .iter()
            .filter_map(|&i| sheet.rows[i].quote.as_ref().ok())
            .collect();
        let mut expiries: Vec<f64> = quotes.iter().map(|q| q.expiry).collect();
        expiries.sort_by(f64::total_cmp);
        expiries.dedup();
        if expiries.len() > MAX_CHARTS {
            let _ = write!(
                sections,
                "<p class=\"note\">{} expiries: the first {MAX_CHARTS} are charted; the residuals file has every quote.</p>",
                expiries.len()
            );
        }
        sections.push_str(
            "<p class=\"note\">Blue dots: market implied vol of the mid; grey bars: bid to ask; \
             vermillion line: the fitted model's implied vol.</p><div class=\"grid\">",
        );
        for &e in expiries.iter().take(MAX_CHARTS) {
            let qs: Vec<&Quote> = quotes.iter().copied().filter(|q| q.expiry == e).collect();
            let _ = write!(
                sections,
                "<figure>{}</figure>",
                smile_chart(&format!("{} T = {e}", f.underlying), &qs, f.params)
            );
        }
        sections.push_str("</div>");
        let points: Vec<(f64, f64, f64)> = quotes
            .iter()
            .zip(&f.model)
            .filter_map(|(q, (s, _))| {
                let m = q.market_vol?;
                Some((q.expiry, q.strike, 100.0 * (s - m)))
            })
            .filter(|p| p.2.is_finite())
            .collect();
        let _ = write!(
            sections,
            "<figure>{}</figure>",
            residual_chart(&format!("Residuals: {}", f.underlying), &points, &expiries)
        );
    }
    let objective = match spec.objective {
        crate::market::calibrate::Objective::ImpliedVol => "implied-vol residuals in vol points",
        crate::market::calibrate::Objective::Price => {
            "price residuals divided by Black-Scholes vega"
        }
    };
    let body = format!(
        r#"<p class="note">Merton jump-diffusion fitted by Levenberg-Marquardt with the exact Jacobian: weighted least squares of {objective}
(weight 1 / half-spread in vol for bid/ask quotes). Standard errors from (J<sup>T</sup>WJ)<sup>-1</sup> times the residual variance.
A fit is only as good as its quotes: validate and use under your firm's model-risk policy.</p>
<h2>Parameters</h2>
{params}
<h2>Quote rows</h2>
{problems}
{sections}
"#,
        params = scroll(&params_table(fits, spec.per_expiry)),
        problems = problem_rows(outcomes),
    );
    page(title, &body)
}
