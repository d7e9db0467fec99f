//! The cross-check's validation page (`crosscheck --report DIR`): one
//! self-contained HTML file with inline SVG charts (no scripts, no network),
//! meant to be attached to a validation record as it is.
//!
//! # Design
//! The page is drawn from the bounded [`CheckAccumulator`] only, never
//! from the rows, so it costs the same for any book: the z-score histogram
//! against the standard normal density and a normal quantile plot (from
//! the fine histogram), the largest Fourier gap per bin of moneyness and of
//! expiry against the tolerance, the coverage of the Monte Carlo 95%
//! intervals by regime, the flagged rows (the first
//! [`super::crosscheck_summary::KEEP_FLAGGED`]) and the run's settings. The
//! charts are drawn by `plotters` here, in the palette and style of the
//! risk page ([`super::html`]).

use super::chart::LINE_COLOURS as PALETTE;
use super::crosscheck::{Outcome, ABS_FLOOR};
use super::crosscheck_summary::{
    CheckAccumulator, GapBin, COVERAGE_EXPIRY, COVERAGE_MONEYNESS, EXPIRY_BINS, KEEP_FLAGGED,
    MONEYNESS_BINS, Z_BIN, Z_RANGE,
};
use super::html::esc;
use crate::normal::{norm_cdf, norm_pdf};
use plotters::prelude::*;
use std::fmt::Write as _;

/// Name of the page in the report directory.
pub const REPORT_FILE: &str = "report.html";

/// What the page says about the run (filled in by the command).
#[derive(Debug, Clone, Default)]
pub struct RunSettings {
    /// The input book as given (`-`: standard input).
    pub input: String,
    /// The command line, as typed.
    pub command_line: String,
    /// Monte Carlo work per row, in words.
    pub work: String,
    /// Seed of the random streams.
    pub seed: u64,
    /// saltus version.
    pub version: String,
    /// Date and time of the run, UTC.
    pub date: String,
    /// Largest accepted `|z|`.
    pub z_max: f64,
    /// Largest accepted relative Fourier gap.
    pub fourier_rel_tol: f64,
    /// Absolute floor of the comparisons, as a fraction of spot.
    pub abs_floor: f64,
    /// Worker threads.
    pub threads: usize,
    /// Rows in the book, rows that failed (not checked) and the first failures.
    pub rows_read: u64,
    /// Rows written with an error status.
    pub rows_failed: u64,
    /// The first failures, `line N: problem`.
    pub first_errors: Vec<String>,
    /// Wall time, seconds.
    pub seconds: f64,
}

/// Standard normal quantile by bisection on the distribution function
/// (the page needs a few hundred, to about 1e-12).
fn norm_quantile(p: f64) -> f64 {
    let (mut lo, mut hi) = (-40.0f64, 40.0f64);
    for _ in 0..100 {
        let mid = 0.5 * (lo + hi);
        if norm_cdf(mid) < p {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

const W: u32 = 760;
const H: u32 = 360;
const GREY: RGBColor = RGBColor(235, 235, 235);

/// The z-score histogram (bins of 0.25 on [-5, 5], as a density) with the
/// standard normal density.
fn z_histogram(a: &CheckAccumulator) -> String {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (W, H)).into_drawing_area();
        let _ = root.fill(&WHITE);
        let per = (0.25 / Z_BIN).round() as usize;
        let first = ((Z_RANGE - 5.0) / Z_BIN).round() as usize;
        let n = a.z_count.max(1) as f64;
        let bars: Vec<(f64, f64)> = (0..40)
            .map(|i| {
                let s: u64 = a.z_hist[first + i * per..first + (i + 1) * per]
                    .iter()
                    .sum();
                (-5.0 + 0.25 * i as f64, s as f64 / n / 0.25)
            })
            .collect();
        let top = bars.iter().map(|b| b.1).fold(norm_pdf(0.0), f64::max) * 1.1;
        let chart = ChartBuilder::on(&root)
            .caption(
                "z-scores of Monte Carlo against the series",
                ("sans-serif", 18),
            )
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(60)
            .build_cartesian_2d(-5.0..5.0, 0.0..top);
        if let Ok(mut chart) = chart {
            let _ = chart
                .configure_mesh()
                .x_desc("z = (price_mc - price_series) / mc_stderr")
                .y_desc("density")
                .light_line_style(GREY)
                .draw();
            let fill = PALETTE[0].mix(0.45).filled();
            if let Ok(s) = chart.draw_series(
                bars.iter()
                    .map(|&(x, y)| Rectangle::new([(x, 0.0), (x + 0.25, y)], fill)),
            ) {
                s.label(format!("rows (n = {})", a.z_count))
                    .legend(move |(x, y)| Rectangle::new([(x, y - 5), (x + 14, y + 5)], fill));
            }
            let curve = (0..=400).map(|i| {
                let x = -5.0 + 0.025 * i as f64;
                (x, norm_pdf(x))
            });
            let style = ShapeStyle {
                color: PALETTE[3].to_rgba(),
                filled: false,
                stroke_width: 2,
            };
            if let Ok(s) = chart.draw_series(LineSeries::new(curve, style)) {
                s.label("standard normal density")
                    .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], style));
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

/// Normal quantile plot: the empirical quantile of the z-scores at each
/// edge of the fine histogram against the standard normal quantile of the
/// same probability, with the line `y = x` and the `+/- z_max` band.
fn z_quantile_plot(a: &CheckAccumulator, z_max: f64) -> String {
    let n = a.z_count as f64;
    let mut pts = Vec::new();
    let mut below = a.z_outside.0;
    for (i, &c) in a.z_hist.iter().enumerate() {
        below += c;
        if c == 0 {
            continue;
        }
        let p = below as f64 / (n + 1.0);
        let edge = -Z_RANGE + Z_BIN * (i + 1) as f64;
        pts.push((norm_quantile(p), edge));
    }
    let lim = pts
        .iter()
        .flat_map(|p| [p.0.abs(), p.1.abs()])
        .fold(z_max.min(Z_RANGE), f64::max)
        .ceil()
        + 0.5;
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (W, H)).into_drawing_area();
        let _ = root.fill(&WHITE);
        let chart = ChartBuilder::on(&root)
            .caption("Normal quantile plot of the z-scores", ("sans-serif", 18))
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(60)
            .build_cartesian_2d(-lim..lim, -lim..lim);
        if let Ok(mut chart) = chart {
            let _ = chart
                .configure_mesh()
                .x_desc("standard normal quantile")
                .y_desc("z-score quantile (histogram edge)")
                .light_line_style(GREY)
                .draw();
            let band = PALETTE[3].mix(0.12).filled();
            let _ = chart.draw_series([
                Rectangle::new([(-lim, z_max), (lim, lim)], band),
                Rectangle::new([(-lim, -lim), (lim, -z_max)], band),
            ]);
            let diag = ShapeStyle {
                color: RGBColor(120, 120, 120).to_rgba(),
                filled: false,
                stroke_width: 1,
            };
            if let Ok(s) = chart.draw_series(LineSeries::new([(-lim, -lim), (lim, lim)], diag)) {
                s.label("y = x (honest error bars)")
                    .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], diag));
            }
            let dot = PALETTE[0].filled();
            if let Ok(s) = chart.draw_series(pts.iter().map(|&p| Circle::new(p, 3, dot))) {
                s.label(format!("rows; shaded: |z| > {z_max}"))
                    .legend(move |(x, y)| Circle::new((x + 8, y), 3, dot));
            }
            let _ = chart
                .configure_series_labels()
                .background_style(WHITE.mix(0.85))
                .border_style(RGBColor(200, 200, 200))
                .position(SeriesLabelPosition::UpperLeft)
                .draw();
        }
        let _ = root.present();
    }
    svg
}

/// Smallest gap drawn, in tolerance units (a gap of exactly 0 is drawn here).
const GAP_FLOOR: f64 = 1e-8;

/// Largest Fourier gap and error estimate per bin in units of the row's
/// tolerance, on a log scale, against the tolerance (1).
fn gap_chart(
    title: &str,
    x_desc: &str,
    bins: &[GapBin],
    (lo, width, _): (f64, f64, usize),
    rel_tol: f64,
) -> String {
    let centre = |i: usize| lo + width * (i as f64 + 0.5);
    let lg = |x: f64| x.max(GAP_FLOOR).log10();
    let gaps: Vec<(f64, f64)> = bins
        .iter()
        .enumerate()
        .filter(|(_, b)| b.rows > 0)
        .map(|(i, b)| (centre(i), lg(b.max_gap_tol)))
        .collect();
    let ests: Vec<(f64, f64)> = bins
        .iter()
        .enumerate()
        .filter(|(_, b)| b.rows > 0)
        .map(|(i, b)| (centre(i), lg(b.max_estimate_tol)))
        .collect();
    let unresolved: Vec<(f64, u64)> = bins
        .iter()
        .enumerate()
        .filter(|(_, b)| b.unresolved > 0)
        .map(|(i, b)| (centre(i), b.unresolved))
        .collect();
    let y_hi = gaps.iter().chain(&ests).map(|p| p.1).fold(0.0, f64::max) + 1.0;
    let y_lo = GAP_FLOOR.log10() - 0.5;
    let x_hi = lo + width * bins.len() as f64;
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (W, H)).into_drawing_area();
        let _ = root.fill(&WHITE);
        let chart = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 18))
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(60)
            .build_cartesian_2d(lo..x_hi, y_lo..y_hi);
        if let Ok(mut chart) = chart {
            let _ = chart
                .configure_mesh()
                .x_desc(x_desc)
                .y_desc("log10 of |gap| / tolerance")
                .light_line_style(GREY)
                .draw();
            let tol_style = ShapeStyle {
                color: PALETTE[3].to_rgba(),
                filled: false,
                stroke_width: 2,
            };
            if let Ok(s) = chart.draw_series(LineSeries::new([(lo, 0.0), (x_hi, 0.0)], tol_style)) {
                s.label(format!(
                    "tolerance: {rel_tol:e} x price_series, at least {ABS_FLOOR:e} x spot"
                ))
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], tol_style));
            }
            let dot = PALETTE[0].filled();
            if let Ok(s) = chart.draw_series(gaps.iter().map(|&p| Circle::new(p, 4, dot))) {
                s.label("largest |gap| in the bin")
                    .legend(move |(x, y)| Circle::new((x + 8, y), 4, dot));
            }
            let est = PALETTE[1].stroke_width(2);
            if let Ok(s) = chart.draw_series(ests.iter().map(|&p| Cross::new(p, 4, est))) {
                s.label("largest Fourier error estimate")
                    .legend(move |(x, y)| Cross::new((x + 8, y), 4, est));
            }
            let warn = PALETTE[3].filled();
            if let Ok(s) = chart.draw_series(
                unresolved
                    .iter()
                    .map(|&(x, _)| TriangleMarker::new((x, y_lo + 0.6), 5, warn)),
            ) {
                s.label("bin with an inconclusive Fourier check")
                    .legend(move |(x, y)| TriangleMarker::new((x + 8, y), 5, warn));
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

/// Coverage of the 95% intervals by moneyness (rows) and expiry (columns).
/// A share outside the binomial 99.9% band of a correct engine
/// (`0.95 +/- 3.29 sqrt(0.95 * 0.05 / n)`) is marked.
fn coverage_table(a: &CheckAccumulator) -> String {
    let cell = |rows: u64, covered: u64| -> String {
        if rows == 0 {
            return "<td class=\"note\">&ndash;</td>".to_string();
        }
        let share = covered as f64 / rows as f64;
        let band = 3.29 * (0.95 * 0.05 / rows as f64).sqrt();
        let off = (share - 0.95).abs() > band;
        format!(
            "<td{}>{:.1}% <span class=\"note\">of {rows}</span></td>",
            if off { " class=\"warn\"" } else { "" },
            100.0 * share
        )
    };
    let mut t = String::from("<table><tr><th>ln(K/F) \\ expiry</th>");
    for (_, name) in COVERAGE_EXPIRY {
        let _ = write!(t, "<th>{}</th>", esc(name));
    }
    t.push_str("<th>all expiries</th></tr>");
    let mut col_tot = [(0u64, 0u64); 5];
    for (i, (_, name)) in COVERAGE_MONEYNESS.iter().enumerate() {
        let _ = write!(t, "<tr><td>{}</td>", esc(name));
        let (mut rr, mut cc) = (0, 0);
        for (j, c) in a.coverage[i].iter().enumerate() {
            t.push_str(&cell(c.rows, c.covered));
            rr += c.rows;
            cc += c.covered;
            col_tot[j].0 += c.rows;
            col_tot[j].1 += c.covered;
        }
        t.push_str(&cell(rr, cc));
        t.push_str("</tr>");
    }
    t.push_str("<tr class=\"book\"><td>all</td>");
    for (r, c) in col_tot {
        t.push_str(&cell(r, c));
    }
    let (r, c) = col_tot.iter().fold((0, 0), |(r, c), x| (r + x.0, c + x.1));
    t.push_str(&cell(r, c));
    t.push_str("</tr></table>");
    t
}

fn opt(x: Option<f64>, f: impl Fn(f64) -> String) -> String {
    x.map(f).unwrap_or_else(|| "&ndash;".to_string())
}

fn flagged_table(a: &CheckAccumulator) -> String {
    let n = a.inconclusive + a.disagree;
    if n == 0 {
        return "<p>No row was flagged: every checked row agrees.</p>".to_string();
    }
    let mut t = String::from(
        "<table class=\"flagged\"><tr><th>line</th><th>id</th><th>kind</th><th>ln(K/F)</th>\
         <th>expiry (y)</th><th>price_series</th><th>mc_z</th><th>fourier_gap_rel</th>\
         <th>mc_method</th><th>verdict</th></tr>",
    );
    // Disagreements first, then inconclusive rows, each in input order.
    for outcome in [Outcome::Disagree, Outcome::Inconclusive] {
        for f in a.flagged_with(outcome) {
            let _ = write!(
                t,
                "<tr><td>{}</td><td>{}</td><td>{}</td><td>{:.3}</td><td>{:.4}</td><td>{:.6e}</td>\
                 <td>{}</td><td>{}</td><td>{}</td><td class=\"verdict{}\">{}</td></tr>",
                f.line,
                esc(&f.id),
                f.kind,
                f.log_moneyness,
                f.expiry,
                f.price_series,
                opt(f.z, |z| format!("{z:+.2}")),
                opt(f.fourier_gap_rel, |g| format!("{g:+.1e}")),
                f.mc_method,
                if outcome == Outcome::Disagree {
                    " warn"
                } else {
                    ""
                },
                esc(&f.verdict)
            );
        }
    }
    t.push_str("</table>");
    if a.flagged_more > 0 {
        let _ = write!(
            t,
            "<p class=\"note\">The table holds the first {KEEP_FLAGGED} flagged rows of the book; \
             {} more are flagged (see the verdict column of the CSV output).</p>",
            a.flagged_more
        );
    }
    t
}

fn settings_table(s: &RunSettings) -> String {
    let mut t = String::from("<table>");
    let mut row = |k: &str, v: String| {
        let _ = write!(t, "<tr><td>{k}</td><td class=\"left\">{v}</td></tr>");
    };
    row("input file", esc(&s.input));
    row(
        "command line",
        format!("<code>{}</code>", esc(&s.command_line)),
    );
    row("saltus version", esc(&s.version));
    row("run at (UTC)", esc(&s.date));
    row("Monte Carlo work per row", esc(&s.work));
    row("seed", s.seed.to_string());
    row(
        "tolerances",
        format!(
            "Monte Carlo: |z| &le; {} standard errors; Fourier: |gap| &le; {:e} &times; price_series \
             (relative), and never below {:e} &times; spot (absolute, price units)",
            s.z_max, s.fourier_rel_tol, s.abs_floor
        ),
    );
    row("threads", s.threads.to_string());
    row("wall time", format!("{:.1} s", s.seconds));
    t.push_str("</table>");
    t
}

/// The page.
pub fn html(a: &CheckAccumulator, s: &RunSettings) -> String {
    let title = "Cross-check validation report";
    let n_flag = a.inconclusive + a.disagree;
    let mut failed = String::new();
    if s.rows_failed > 0 {
        let _ = write!(
            failed,
            "<p class=\"warn\">{} rows could not be checked (their status column says why):</p><ul>",
            s.rows_failed
        );
        for e in &s.first_errors {
            let _ = write!(failed, "<li>{}</li>", esc(e));
        }
        if s.rows_failed as usize > s.first_errors.len() {
            let _ = write!(
                failed,
                "<li>and {} more</li>",
                s.rows_failed as usize - s.first_errors.len()
            );
        }
        failed.push_str("</ul>");
    }
    let methods = a
        .methods
        .iter()
        .map(|(m, n)| format!("{m}: {n}"))
        .collect::<Vec<_>>()
        .join(", ");
    let verdict_line = if a.disagree > 0 {
        format!("<p class=\"warn\"><b>{} rows disagree.</b></p>", a.disagree)
    } else if a.inconclusive > 0 {
        format!(
            "<p><b>No row disagrees; {} rows reached no verdict.</b></p>",
            a.inconclusive
        )
    } else if s.rows_failed > 0 {
        "<p><b>Every checked row agrees; some rows could not be checked.</b></p>".to_string()
    } else {
        "<p><b>Every row agrees.</b></p>".to_string()
    };
    let worst = |list: &[(u64, String, f64)], f: &dyn Fn(f64) -> String| -> String {
        if list.is_empty() {
            return "&ndash;".to_string();
        }
        list.iter()
            .map(|(line, id, x)| {
                if id.is_empty() {
                    format!("line {line} {}", f(*x))
                } else {
                    format!("{} (line {line}) {}", esc(id), f(*x))
                }
            })
            .collect::<Vec<_>>()
            .join(", ")
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
td.left, td.verdict {{ text-align: left; }}
table.flagged td {{ white-space: nowrap; }} table.flagged td.verdict {{ white-space: normal; }}
table.flagged td:nth-child(2), table.flagged th:nth-child(2), table.flagged th:last-child {{ text-align: left; }}
tr.book td {{ font-weight: bold; background: #fafafa; }}
.warn {{ color: #a00; }} .note {{ color: #555; font-size: 13px; }}
figure {{ margin: 12px 0; }}
</style></head><body>
<h1>{title}</h1>
<p class="note">Each row priced by the Merton closed-form series and by independent engines: the Fourier (Lewis) integral, Monte Carlo with exact terminal sampling and the PIDE. A row disagrees when any engine is outside its tolerance of the series; otherwise it agrees when Fourier or Monte Carlo is within tolerance (the others' reasons for giving no verdict are kept in the verdict), and is inconclusive when neither could decide. Model estimates: validate and use under your firm's model-risk policy.</p>
<h2>Verdicts</h2>
{verdict_line}
<table>
<tr><td>rows in the book</td><td>{rows_read}</td></tr>
<tr><td>rows checked</td><td>{rows}</td></tr>
<tr><td>agree</td><td>{agree}</td></tr>
<tr><td>inconclusive</td><td>{inconclusive}</td></tr>
<tr><td>disagree</td><td>{disagree}</td></tr>
<tr><td>rows not checked (error status)</td><td>{rows_failed}</td></tr>
<tr><td>Monte Carlo paths in all</td><td>{paths}</td></tr>
<tr><td>Monte Carlo estimators</td><td class="left">{methods}</td></tr>
<tr><td>largest |z|</td><td class="left">{worst_z}</td></tr>
<tr><td>largest Fourier gaps (in tolerances)</td><td class="left">{worst_f}</td></tr>
</table>
{failed}
<h2>Monte Carlo z-scores</h2>
<p>With honest standard errors the z-scores of the rows with a defined score are close to standard normal. Here: n = {zn}, mean {zmean:+.3}, standard deviation {zsd:.3}, share with |z| &le; 1.96 {zshare:.1}% (standard normal: 0, 1, 95%){zout}.</p>
<figure>{hist}</figure>
<figure>{qq}</figure>
<h2>Coverage of the 95% intervals</h2>
<p class="note">Share of rows whose Monte Carlo 95% interval holds the series price, by regime; about 95% each for honest error bars. A share outside 0.95 &plusmn; 3.29&radic;(0.95&middot;0.05/n) (where a correct engine falls once in a thousand regimes) is marked in red.</p>
{coverage}
<h2>Fourier gap against moneyness and expiry</h2>
<p class="note">The largest |price_fourier &minus; price_series| in each bin, in units of the row's tolerance (max({rel_tol:e} &times; price_series, {floor:e} &times; spot): a point above 1 is a disagreement; a gap of 0 is drawn at 10<sup>&minus;8</sup>), with the Fourier engine's own largest error estimate in the same units (above 1: the row is inconclusive). The end bins take every row beyond them. Rows at expiry are left out.</p>
<figure>{gap_m}</figure>
<figure>{gap_t}</figure>
<h2>Flagged rows ({n_flag})</h2>
<p class="note">Rows are named by their line in the input file.</p>
{flagged}
<h2>Run settings</h2>
{settings}
</body></html>
"#,
        rows_read = s.rows_read,
        rows = a.rows,
        agree = a.agree,
        inconclusive = a.inconclusive,
        disagree = a.disagree,
        rows_failed = s.rows_failed,
        paths = a.mc_paths,
        worst_z = worst(&a.worst_z, &|z| format!("{z:+.2}")),
        worst_f = worst(&a.worst_fourier, &|g| format!("{g:+.2e}")),
        rel_tol = s.fourier_rel_tol,
        floor = s.abs_floor,
        zn = a.z_count,
        zmean = a.z_mean(),
        zsd = a.z_sd(),
        zshare = 100.0 * a.z_share_within_196(),
        zout = if a.z_outside.0 + a.z_outside.1 > 0 {
            format!(
                "; {} scores beyond &plusmn;{Z_RANGE} are counted but not drawn",
                a.z_outside.0 + a.z_outside.1
            )
        } else {
            String::new()
        },
        hist = z_histogram(a),
        qq = z_quantile_plot(a, s.z_max),
        coverage = coverage_table(a),
        gap_m = gap_chart(
            "Fourier gap against moneyness",
            "ln(K/F)",
            &a.gap_by_moneyness,
            MONEYNESS_BINS,
            s.fourier_rel_tol
        ),
        gap_t = gap_chart(
            "Fourier gap against expiry",
            "log10 of expiry in years",
            &a.gap_by_expiry,
            EXPIRY_BINS,
            s.fourier_rel_tol
        ),
        flagged = flagged_table(a),
        settings = settings_table(s),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quantile_inverts_the_distribution_function() {
        // Standard normal quantiles, from memory of the usual tables:
        // 0.975 -> 1.959964, 0.5 -> 0, 0.001 -> -3.090232.
        assert!((norm_quantile(0.975) - 1.959964).abs() < 1e-6);
        assert!(norm_quantile(0.5).abs() < 1e-12);
        assert!((norm_quantile(0.001) + 3.090232).abs() < 1e-6);
    }
}
