//! Writing the risk report: CSV files and one self-contained HTML page with
//! SVG charts drawn by `plotters` (no scripts, no network access needed).

use crate::risk::{Exposure, GroupScenarios, RiskReport};
use plotters::prelude::*;
use std::fmt::Write as _;
use std::fs;
use std::path::Path;

/// Label of the book-level group in every file.
pub const BOOK: &str = "(book)";

/// A failed row, listed in the report and excluded from every total.
#[derive(Debug, Clone, PartialEq)]
pub struct FailedRow {
    /// 1-based data row.
    pub row: u64,
    /// Row id (or row number).
    pub id: String,
    /// Status text.
    pub status: String,
}

fn groups(r: &RiskReport) -> Vec<(&str, &Exposure, &GroupScenarios)> {
    let mut v: Vec<_> = r
        .by_underlying
        .iter()
        .map(|(k, (e, s))| (k.as_str(), e, s))
        .collect();
    v.push((BOOK, &r.book.0, &r.book.1));
    v
}

fn display_name(g: &str) -> &str {
    if g.is_empty() {
        "(no underlying)"
    } else {
        g
    }
}

fn csv_err(e: csv::Error) -> std::io::Error {
    std::io::Error::other(e)
}

/// Writes `totals.csv`, `scenarios.csv`, `jump_scenarios.csv`,
/// `greeks_vs_spot.csv` and `report.html` into `dir`.
///
/// # Errors
/// Any I/O error.
pub fn write_all(
    dir: &Path,
    r: &RiskReport,
    failed: &[FailedRow],
    title: &str,
) -> std::io::Result<()> {
    fs::create_dir_all(dir)?;
    // totals.csv: delta and gamma in units of the underlying do not add up
    // across underlyings, so the book row leaves them empty.
    let mut w = csv::Writer::from_path(dir.join("totals.csv")).map_err(csv_err)?;
    w.write_record([
        "underlying",
        "positions",
        "value",
        "delta",
        "delta_cash",
        "gamma",
        "gamma_cash_1pct",
        "vega_1pt",
        "theta_1d",
        "rho_1pct",
        "div_rho_1pct",
        "d_jump_rate",
        "d_jump_mean_1pct",
        "d_jump_vol_1pct",
    ])
    .map_err(csv_err)?;
    for (g, e, _) in groups(r) {
        let book = g == BOOK;
        let unit = |x: f64| if book { String::new() } else { fmt(x) };
        w.write_record([
            g.to_string(),
            e.positions.to_string(),
            fmt(e.value),
            unit(e.delta),
            fmt(e.delta_cash),
            unit(e.gamma),
            fmt(e.gamma_cash_1pct),
            fmt(e.vega_1pt),
            fmt(e.theta_1d),
            fmt(e.rho_1pct),
            fmt(e.div_rho_1pct),
            fmt(e.d_jump_rate),
            fmt(e.d_jump_mean_1pct),
            fmt(e.d_jump_vol_1pct),
        ])
        .map_err(csv_err)?;
    }
    w.flush()?;

    let mut w = csv::Writer::from_path(dir.join("scenarios.csv")).map_err(csv_err)?;
    w.write_record(["underlying", "spot_shock", "vol_shock", "pnl"])
        .map_err(csv_err)?;
    for (g, _, s) in groups(r) {
        for (i, ds) in r.spec.spot_shocks.iter().enumerate() {
            for (j, dv) in r.spec.vol_shocks.iter().enumerate() {
                w.write_record([g.to_string(), fmt(*ds), fmt(*dv), fmt(s.grid[i][j])])
                    .map_err(csv_err)?;
            }
        }
    }
    w.flush()?;

    let mut w = csv::Writer::from_path(dir.join("jump_scenarios.csv")).map_err(csv_err)?;
    w.write_record(["underlying", "scenario", "jump_size", "pnl"])
        .map_err(csv_err)?;
    for (g, _, s) in groups(r) {
        w.write_record([
            g,
            "model_mean_jump",
            &fmt(s.mean_model_jump),
            &fmt(s.jumps[0]),
        ])
        .map_err(csv_err)?;
        for (k, size) in r.spec.jump_shocks.iter().enumerate() {
            w.write_record([g, "given_jump", &fmt(*size), &fmt(s.jumps[k + 1])])
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
    ])
    .map_err(csv_err)?;
    for (g, _, s) in groups(r) {
        for (i, ds) in r.spec.spot_shocks.iter().enumerate() {
            let (d, ga, v) = s.greeks_vs_spot[i];
            w.write_record([g.to_string(), fmt(*ds), fmt(d), fmt(ga), fmt(v)])
                .map_err(csv_err)?;
        }
    }
    w.flush()?;

    fs::write(dir.join("report.html"), html(r, failed, title))
}

fn fmt(x: f64) -> String {
    zmij::Buffer::new().format(x).to_string()
}

fn money(x: f64) -> String {
    let a = x.abs();
    let s = if a >= 1e6 {
        format!("{:.2}M", x / 1e6)
    } else if a >= 1e4 {
        format!("{:.1}k", x / 1e3)
    } else {
        format!("{x:.2}")
    };
    s.replace("-", "&minus;")
}

fn esc(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

const PALETTE: [RGBColor; 8] = [
    RGBColor(31, 119, 180),
    RGBColor(255, 127, 14),
    RGBColor(44, 160, 44),
    RGBColor(214, 39, 40),
    RGBColor(148, 103, 189),
    RGBColor(140, 86, 75),
    RGBColor(227, 119, 194),
    RGBColor(23, 190, 207),
];

/// A line chart of several series against the spot shock (in percent).
fn line_chart(title: &str, y_label: &str, xs: &[f64], series: &[(String, Vec<f64>)]) -> String {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (760, 380)).into_drawing_area();
        let _ = root.fill(&WHITE);
        let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
        for (_, ys) in series {
            for &y in ys {
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
            for (i, (name, ys)) in series.iter().enumerate() {
                let book = name == BOOK;
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
                let pts: Vec<(f64, f64)> = xs
                    .iter()
                    .map(|x| x * 100.0)
                    .zip(ys.iter().copied())
                    .collect();
                if let Ok(s) = chart.draw_series(LineSeries::new(pts, style)) {
                    s.label(display_name(name).to_string())
                        .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], style));
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

/// The scenario grid as a heat map with the P&L written in each cell.
fn heat_map(title: &str, spots: &[f64], vols: &[f64], grid: &[Vec<f64>]) -> String {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (760, 420)).into_drawing_area();
        let _ = root.fill(&WHITE);
        let scale = grid.iter().flatten().fold(0.0f64, |a, x| a.max(x.abs()));
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
                    heat(grid[i][j], scale).filled(),
                )
            }));
            let _ = chart.draw_series(cells.map(|(i, j)| {
                Text::new(
                    money(grid[i][j]).replace("&minus;", "-"),
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
    for (g, e, _) in groups(r) {
        let book = g == BOOK;
        let unit = |x: f64| {
            if book {
                "&ndash;".to_string()
            } else {
                format!("{x:.4}")
            }
        };
        let _ =
            write!(
            t,
            "<tr{}><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td>\
             <td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            if book { " class=\"book\"" } else { "" },
            esc(display_name(g)),
            e.positions,
            money(e.value),
            unit(e.delta),
            money(e.delta_cash),
            if book { "&ndash;".to_string() } else { format!("{:.6}", e.gamma) },
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

fn jump_table(r: &RiskReport) -> String {
    let mut t = String::from(
        "<table><thead><tr><th>underlying</th><th>model mean jump</th><th>P&amp;L</th>",
    );
    for j in &r.spec.jump_shocks {
        let _ = write!(t, "<th>jump {:+.0}%</th>", j * 100.0);
    }
    t.push_str("</tr></thead><tbody>");
    for (g, _, s) in groups(r) {
        let _ = write!(
            t,
            "<tr{}><td>{}</td><td>{:+.2}%</td><td>{}</td>",
            if g == BOOK { " class=\"book\"" } else { "" },
            esc(display_name(g)),
            s.mean_model_jump * 100.0,
            money(s.jumps[0])
        );
        for x in &s.jumps[1..] {
            let _ = write!(t, "<td>{}</td>", money(*x));
        }
        t.push_str("</tr>");
    }
    t.push_str("</tbody></table>");
    t
}

fn html(r: &RiskReport, failed: &[FailedRow], title: &str) -> String {
    let xs = &r.spec.spot_shocks;
    let zero_vol = r.spec.vol_shocks.iter().position(|v| *v == 0.0);
    let pnl_series: Vec<(String, Vec<f64>)> = groups(r)
        .into_iter()
        .map(|(g, _, s)| {
            let ys = match zero_vol {
                Some(j) => s.grid.iter().map(|row| row[j]).collect(),
                None => s.grid.iter().map(|row| row[row.len() / 2]).collect(),
            };
            (g.to_string(), ys)
        })
        .collect();
    let delta_series: Vec<(String, Vec<f64>)> = r
        .by_underlying
        .iter()
        .map(|(g, (_, s))| (g.clone(), s.greeks_vs_spot.iter().map(|x| x.0).collect()))
        .collect();
    let gamma_series: Vec<(String, Vec<f64>)> = r
        .by_underlying
        .iter()
        .map(|(g, (_, s))| (g.clone(), s.greeks_vs_spot.iter().map(|x| x.1).collect()))
        .collect();
    let vega_series: Vec<(String, Vec<f64>)> = groups(r)
        .into_iter()
        .map(|(g, _, s)| {
            (
                g.to_string(),
                s.greeks_vs_spot.iter().map(|x| x.2).collect(),
            )
        })
        .collect();
    let mut heat_maps = String::new();
    for (g, _, s) in groups(r) {
        heat_maps.push_str("<figure>");
        heat_maps.push_str(&heat_map(
            &format!("P&L by full revaluation: {}", display_name(g)),
            xs,
            &r.spec.vol_shocks,
            &s.grid,
        ));
        heat_maps.push_str("</figure>");
    }
    let failed_html = if failed.is_empty() {
        "<p>Every row of the book was priced; all are included.</p>".to_string()
    } else {
        let mut t = format!(
            "<p class=\"warn\">{} row{} could not be priced and {} <strong>excluded from every total and scenario</strong>:</p>\
             <table><thead><tr><th>row</th><th>id</th><th>status</th></tr></thead><tbody>",
            failed.len(),
            if failed.len() == 1 { "" } else { "s" },
            if failed.len() == 1 { "is" } else { "are" }
        );
        for f in failed {
            let _ = write!(
                t,
                "<tr><td>{}</td><td>{}</td><td>{}</td></tr>",
                f.row,
                esc(&f.id),
                esc(&f.status)
            );
        }
        t.push_str("</tbody></table>");
        t
    };
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
