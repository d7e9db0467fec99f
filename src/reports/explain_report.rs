//! The HTML page of `saltus explain --report DIR`: one self-contained file
//! (inline CSS and SVG, no script, no network) with what the page is a
//! report of, two waterfall charts for the book (the full-revaluation steps
//! and the Greek attribution, side by side in the same units and scale),
//! the attribution table per underlying and for the book, the positions
//! with the largest unexplained P&L, new and expired positions and the
//! failed rows.
//!
//! The charts are drawn directly as SVG rectangles and text (a waterfall
//! is a handful of floating bars; `plotters` has no such chart). Colours
//! are the Okabe-Ito colour-blind-safe pair (blue gains, vermillion losses,
//! grey totals), and every bar carries its value as text, so the chart can
//! be read without colour. Escaping is [`crate::reports::html::esc`], as on
//! the other pages.

use super::explain::{Aggregate, BookExplain, Outcome, BOOK_NAME, STEP_ORDER};
use super::html::esc;
use std::fmt::Write as _;

/// The page's file name inside the report directory.
pub const REPORT_FILE: &str = "explain.html";
/// How many positions the "largest unexplained" table lists.
pub const TOP_UNEXPLAINED: usize = 10;
/// How many failed, new or expired positions are listed (all are in the CSV).
pub const MAX_LISTED: usize = 1000;

/// Colour of a gain (Okabe-Ito blue).
const GAIN: &str = "#0072B2";
/// Colour of a loss (Okabe-Ito vermillion).
const LOSS: &str = "#D55E00";
/// Colour of a total bar.
const TOTAL: &str = "#666666";

/// What the page is a report of.
#[derive(Debug, Clone, Default)]
pub struct PageInfo {
    /// The page title.
    pub title: String,
    /// The BEFORE book's name (path as given).
    pub before: String,
    /// The AFTER book's name.
    pub after: String,
    /// When the page was made (text, e.g. an RFC 3339 time stamp).
    pub generated: String,
}

/// An amount for the tables: two decimals, thousands separators, a true
/// minus sign (scientific form from 1e15); one rule for every column.
pub fn amount(x: f64) -> String {
    if !x.is_finite() {
        return "error".into();
    }
    let a = x.abs();
    let body = if a >= 1e15 {
        format!("{a:.3e}")
    } else {
        let t = format!("{a:.2}");
        let (int, frac) = t.split_once('.').unwrap_or((&t, "00"));
        let mut grouped = String::new();
        for (i, c) in int.chars().enumerate() {
            if i > 0 && (int.len() - i) % 3 == 0 {
                grouped.push(',');
            }
            grouped.push(c);
        }
        format!("{grouped}.{frac}")
    };
    if x < 0.0 && body.chars().any(|c| c.is_ascii_digit() && c != '0') {
        format!("\u{2212}{body}")
    } else {
        body
    }
}

/// Tick labels of one axis: one suffix (none, k, M, bn) for every tick,
/// chosen by the largest, and as many decimals as the step needs.
fn tick_label(v: f64, largest: f64, step: f64) -> String {
    let (div, suffix) = if largest >= 1e9 {
        (1e9, "bn")
    } else if largest >= 1e6 {
        (1e6, "M")
    } else if largest >= 1e3 {
        (1e3, "k")
    } else {
        (1.0, "")
    };
    let scaled_step = step / div;
    let decimals = if scaled_step >= 1.0 {
        0
    } else {
        (-scaled_step.log10().floor()) as usize
    };
    if v == 0.0 {
        return "0".into();
    }
    let t = format!("{:.*}{suffix}", decimals.min(6), (v / div).abs());
    if v < 0.0 {
        format!("\u{2212}{t}")
    } else {
        t
    }
}

/// A "nice" tick step (1, 2 or 5 times a power of ten) giving about five
/// ticks over `span`.
fn tick_step(span: f64) -> f64 {
    let raw = span / 5.0;
    let p = 10f64.powf(raw.log10().floor());
    let m = raw / p;
    p * if m <= 1.0 {
        1.0
    } else if m <= 2.0 {
        2.0
    } else if m <= 5.0 {
        5.0
    } else {
        10.0
    }
}

/// A waterfall chart: floating bars for `steps` starting from zero, then a
/// total bar. `lo`/`hi` is the value range shared by the charts drawn side
/// by side.
pub fn waterfall_svg(
    title: &str,
    steps: &[(&str, f64)],
    total: (&str, f64),
    lo: f64,
    hi: f64,
) -> String {
    let (w, h) = (560.0, 340.0);
    let (left, right, top, bottom) = (70.0, 10.0, 34.0, 48.0);
    let plot_h = h - top - bottom;
    let (mut lo, mut hi) = (lo.min(0.0), hi.max(0.0));
    if hi - lo <= 0.0 || !(hi - lo).is_finite() {
        lo = -1.0;
        hi = 1.0;
    }
    let step = tick_step(hi - lo);
    let lo = (lo / step).floor() * step;
    let hi = (hi / step).ceil() * step;
    let y = |v: f64| top + (hi - v) / (hi - lo) * plot_h;
    let n = steps.len() + 1;
    let slot = (w - left - right) / n as f64;
    let mut s = String::new();
    let _ = write!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {w} {h}" width="{w}" height="{h}" role="img" aria-label="{t}">"#,
        t = esc(title)
    );
    let _ = write!(
        s,
        r#"<text x="{x}" y="20" font-size="14" text-anchor="middle" font-family="sans-serif">{t}</text>"#,
        x = w / 2.0,
        t = esc(title)
    );
    // Grid and tick labels.
    let largest = lo.abs().max(hi.abs());
    let mut v = lo;
    let mut guard = 0;
    while v <= hi + step * 1e-9 && guard < 50 {
        let yy = y(v);
        let _ = write!(
            s,
            r##"<line x1="{left}" x2="{x2}" y1="{yy:.1}" y2="{yy:.1}" stroke="{c}" stroke-width="1"/><text x="{tx}" y="{ty:.1}" font-size="11" text-anchor="end" font-family="sans-serif">{label}</text>"##,
            x2 = w - right,
            c = if v.abs() < step * 1e-9 {
                "#444"
            } else {
                "#e6e6e6"
            },
            tx = left - 6.0,
            ty = yy + 4.0,
            label = tick_label(if v.abs() < step * 1e-9 { 0.0 } else { v }, largest, step),
        );
        v += step;
        guard += 1;
    }
    let _ = write!(
        s,
        r#"<text x="14" y="{yy}" font-size="11" text-anchor="middle" font-family="sans-serif" transform="rotate(-90 14 {yy})">P&amp;L</text>"#,
        yy = top + plot_h / 2.0
    );
    // Bar labels: whole units once the axis reaches 1,000.
    let label_of = |v: f64| {
        if largest >= 1e3 && v.abs() < 1e15 {
            let t = amount(v.round());
            t.strip_suffix(".00").unwrap_or(&t).to_string()
        } else {
            amount(v)
        }
    };
    let mut cum = 0.0;
    let bar = |s: &mut String,
               i: usize,
               from: f64,
               to: f64,
               colour: &str,
               label: &str,
               value: f64| {
        let x = left + slot * i as f64 + slot * 0.15;
        let bw = slot * 0.7;
        let (y0, y1) = (y(from.max(to)), y(from.min(to)));
        let hgt = (y1 - y0).max(1.0);
        let _ = write!(
            s,
            r#"<rect x="{x:.1}" y="{y0:.1}" width="{bw:.1}" height="{hgt:.1}" fill="{colour}"><title>{l}: {m}</title></rect>"#,
            l = esc(label),
            m = amount(value)
        );
        let ty = if value >= 0.0 {
            y0 - 4.0
        } else {
            y0 + hgt + 12.0
        };
        let _ = write!(
            s,
            r#"<text x="{cx:.1}" y="{ty:.1}" font-size="11" text-anchor="middle" font-family="sans-serif">{m}</text><text x="{cx:.1}" y="{ly:.1}" font-size="11" text-anchor="middle" font-family="sans-serif">{l}</text>"#,
            cx = x + bw / 2.0,
            m = label_of(value),
            ly = h - bottom + 16.0,
            l = esc(label)
        );
    };
    for (i, (label, v)) in steps.iter().enumerate() {
        let colour = if *v > 0.0 {
            GAIN
        } else if *v < 0.0 {
            LOSS
        } else {
            TOTAL
        };
        bar(&mut s, i, cum, cum + v, colour, label, *v);
        // Connector to the next bar.
        let yy = y(cum + v);
        let _ = write!(
            s,
            r##"<line x1="{x1:.1}" x2="{x2:.1}" y1="{yy:.1}" y2="{yy:.1}" stroke="#999" stroke-dasharray="3 2"/>"##,
            x1 = left + slot * i as f64 + slot * 0.85,
            x2 = left + slot * (i + 1) as f64 + slot * 0.15
        );
        cum += v;
    }
    bar(&mut s, steps.len(), 0.0, total.1, TOTAL, total.0, total.1);
    let _ = write!(
        s,
        r##"<text x="{x}" y="{yy}" font-size="11" text-anchor="middle" font-family="sans-serif" fill="#555">blue: gain, vermillion: loss, grey: total (each bar labelled)</text></svg>"##,
        x = w / 2.0,
        yy = h - 8.0
    );
    s
}

/// The range of the cumulative sums of `values` and of `total`.
fn range(values: &[f64], total: f64) -> (f64, f64) {
    let (mut lo, mut hi, mut cum) = (0.0f64, 0.0f64, 0.0);
    for v in values {
        cum += v;
        lo = lo.min(cum);
        hi = hi.max(cum);
    }
    (lo.min(total), hi.max(total))
}

fn td(x: f64) -> String {
    format!("<td>{}</td>", amount(x))
}

fn attribution_row(name: &str, a: &Aggregate, book: bool) -> String {
    let e = &a.explain;
    let t = &e.terms;
    let mut r = format!(
        "<tr{}><td>{}</td><td>{}</td>",
        if book { " class=\"book\"" } else { "" },
        esc(name),
        a.positions
    );
    if a.non_finite().is_some() {
        let _ = write!(
            r,
            "<td colspan=\"15\" class=\"warn\">{}</td>",
            esc(&a.status())
        );
    } else {
        for v in [
            e.value_before,
            e.value_after,
            e.change,
            t.spot(),
            t.vol(),
            t.time(),
            t.rates(),
            t.jumps(),
            t.cross(),
            e.unexplained(),
        ]
        .into_iter()
        .chain(e.steps)
        {
            r.push_str(&td(v));
        }
    }
    let _ = write!(
        r,
        "<td>{}</td><td>{}</td><td>{}</td><td class=\"status\">{}</td></tr>",
        a.new,
        a.expired,
        a.left_out,
        esc(&a.status())
    );
    r
}

fn attribution_table(r: &BookExplain) -> String {
    let mut t = String::from(
        "<div class=\"scroll\"><table><thead><tr><th rowspan=\"2\">underlying</th><th rowspan=\"2\">positions</th>\
<th rowspan=\"2\">value before</th><th rowspan=\"2\">value after</th><th rowspan=\"2\">change</th>\
<th colspan=\"7\">Greek attribution (at yesterday's inputs), currency</th><th colspan=\"5\">full-revaluation waterfall, currency</th>\
<th rowspan=\"2\">new</th><th rowspan=\"2\">expired</th><th rowspan=\"2\">left out</th><th rowspan=\"2\">status</th></tr><tr>\
<th>spot</th><th>vol</th><th>time</th><th>rates</th><th>jumps</th><th>cross</th><th>unexplained</th>",
    );
    for s in STEP_ORDER {
        let _ = write!(t, "<th>{s}</th>");
    }
    t.push_str("</tr></thead><tbody>");
    for (name, a) in &r.underlyings {
        let shown = if name.is_empty() {
            "(no underlying)"
        } else {
            name
        };
        t.push_str(&attribution_row(shown, a, false));
    }
    t.push_str(&attribution_row(BOOK_NAME, &r.book, true));
    t.push_str("</tbody></table></div>");
    t
}

fn top_unexplained(r: &BookExplain) -> String {
    let mut rows: Vec<_> = r
        .positions
        .iter()
        .filter_map(|p| match &p.outcome {
            Outcome::Explained(e, _) => Some((p, e)),
            _ => None,
        })
        .collect();
    if rows.is_empty() {
        return "<p class=\"note\">No position was explained.</p>".into();
    }
    rows.sort_by(|a, b| b.1.unexplained().abs().total_cmp(&a.1.unexplained().abs()));
    let mut t = format!(
        "<p class=\"note\">The {} positions (of {}) with the largest absolute unexplained P&amp;L.</p>\
<div class=\"scroll\"><table><thead><tr><th>id</th><th>underlying</th><th>change</th><th>explained by Greeks</th>\
<th>unexplained</th><th>unexplained / |change|</th><th>time step (days)</th></tr></thead><tbody>",
        rows.len().min(TOP_UNEXPLAINED),
        rows.len()
    );
    for (p, e) in rows.iter().take(TOP_UNEXPLAINED) {
        let dt = match p.outcome {
            Outcome::Explained(_, dt) => dt,
            _ => 0.0,
        };
        let share = if e.change != 0.0 {
            format!("{:.1}%", 100.0 * e.unexplained() / e.change.abs()).replace('-', "\u{2212}")
        } else {
            "&ndash;".into()
        };
        let _ = write!(
            t,
            "<tr><td>{}</td><td class=\"l\">{}</td>{}{}{}<td>{share}</td><td>{:.1}</td></tr>",
            esc(&p.id),
            esc(&p.underlying),
            td(e.change),
            td(e.terms.explained()),
            td(e.unexplained()),
            dt * 365.0
        );
    }
    t.push_str("</tbody></table></div>");
    t
}

fn listed(r: &BookExplain, title: &str, pick: fn(&Outcome) -> Option<f64>, value: &str) -> String {
    let rows: Vec<_> = r
        .positions
        .iter()
        .filter_map(|p| pick(&p.outcome).map(|v| (p, v)))
        .collect();
    if rows.is_empty() {
        return format!("<p>{title}: none.</p>");
    }
    let mut t = format!(
        "<p>{title}: {} (not in change; listed with their {value}).</p><div class=\"scroll\"><table><thead><tr><th>id</th><th>underlying</th><th>{value}</th></tr></thead><tbody>",
        rows.len()
    );
    for (p, v) in rows.iter().take(MAX_LISTED) {
        let _ = write!(
            t,
            "<tr><td>{}</td><td class=\"l\">{}</td>{}</tr>",
            esc(&p.id),
            esc(&p.underlying),
            td(*v)
        );
    }
    t.push_str("</tbody></table></div>");
    t
}

fn failed(r: &BookExplain) -> String {
    let rows: Vec<_> = r
        .positions
        .iter()
        .filter_map(|p| match &p.outcome {
            Outcome::Error(m) => Some((p, m)),
            _ => None,
        })
        .collect();
    if rows.is_empty() {
        return "<p>Failed positions: none.</p>".into();
    }
    let mut t = format!(
        "<p class=\"warn\">Failed positions: {} (left out of every sum{}).</p><div class=\"scroll\"><table><thead><tr><th>id</th><th>underlying</th><th>problem</th></tr></thead><tbody>",
        rows.len(),
        if rows.len() > MAX_LISTED {
            format!("; the first {MAX_LISTED} are listed, all are in the CSV")
        } else {
            String::new()
        }
    );
    for (p, m) in rows.iter().take(MAX_LISTED) {
        let _ = write!(
            t,
            "<tr><td>{}</td><td class=\"l\">{}</td><td class=\"status\">{}</td></tr>",
            esc(&p.id),
            esc(&p.underlying),
            esc(m)
        );
    }
    t.push_str("</tbody></table></div>");
    t
}

/// The whole page.
pub fn html(r: &BookExplain, info: &PageInfo) -> String {
    let b = &r.book;
    let e = &b.explain;
    let charts = if b.non_finite().is_some() {
        format!(
            "<p class=\"warn\">The book sums are not finite ({}); no chart.</p>",
            esc(&b.status())
        )
    } else {
        let steps: Vec<(&str, f64)> = STEP_ORDER.iter().copied().zip(e.steps).collect();
        let t = &e.terms;
        let greek = [
            ("spot", t.spot()),
            ("vol", t.vol()),
            ("time", t.time()),
            ("rates", t.rates()),
            ("jumps", t.jumps()),
            ("cross", t.cross()),
            ("unexpl.", e.unexplained()),
        ];
        let g: Vec<f64> = greek.iter().map(|x| x.1).collect();
        let (l1, h1) = range(&e.steps, e.change);
        let (l2, h2) = range(&g, e.change);
        let (lo, hi) = (l1.min(l2), h1.max(h2));
        format!(
            "<div class=\"charts\"><figure>{}</figure><figure>{}</figure></div>",
            waterfall_svg(
                "Book: full-revaluation waterfall",
                &steps,
                ("change", e.change),
                lo,
                hi
            ),
            waterfall_svg(
                "Book: Greek attribution",
                &greek,
                ("change", e.change),
                lo,
                hi
            )
        )
    };
    format!(
        r#"<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><meta name="viewport" content="width=device-width, initial-scale=1"><title>{title}</title>
<style>
body {{ font-family: sans-serif; margin: 24px auto; max-width: 1100px; padding: 0 12px; color: #222; }}
h1 {{ font-size: 22px; }} h2 {{ font-size: 18px; margin-top: 32px; border-bottom: 1px solid #ddd; }}
table {{ border-collapse: collapse; font-size: 13px; margin: 8px 0; }}
th, td {{ border: 1px solid #ddd; padding: 4px 8px; text-align: right; white-space: nowrap; }}
th {{ background: #f4f4f4; text-align: center; }} td:first-child {{ text-align: left; }}
td.l {{ text-align: left; }} td.status {{ text-align: left; white-space: normal; min-width: 16em; }}
tr.book td {{ font-weight: bold; background: #fafafa; }}
.warn {{ color: #a00; }} .note {{ color: #555; font-size: 13px; }}
.scroll {{ overflow-x: auto; }} figure {{ margin: 12px 0; }}
.charts {{ display: flex; flex-wrap: wrap; gap: 12px; }} .charts figure {{ flex: 1 1 420px; max-width: 560px; }}
svg {{ width: 100%; height: auto; }}
</style></head><body>
<h1>{title}</h1>
<p class="note">Before: <b>{before}</b>; after: <b>{after}</b>. {explained} positions explained, {new} new, {expired} expired, {n_failed} failed (left out of the sums). saltus {version}; made {generated}.</p>
<p class="note">Values are quantity &times; multiplier &times; the Merton series price, in the books' currency. The Greek attribution uses the Greeks at yesterday's inputs: spot = &delta;&middot;dS + &Gamma;&middot;dS&sup2;/2; vol = vega&middot;d&sigma; + volga&middot;d&sigma;&sup2;/2; time = &theta;&middot;(T<sub>before</sub> &minus; T<sub>after</sub>); rates = &rho;&middot;dr + &rho;<sub>q</sub>&middot;dq; jumps = the three jump sensitivities times the moves of jump rate, mean and vol; cross = vanna&middot;dS&middot;d&sigma;; unexplained = change &minus; all of these. The waterfall revalues in full, moving one input group at a time in the order spot, vol, time, rates, jumps; its steps add up to the change. Model estimates: validate and use under your firm's model-risk policy.</p>
<h2>Book</h2>
{charts}
<h2>Attribution by underlying</h2>
{table}
<h2>Largest unexplained</h2>
{top}
<h2>Positions outside the explain</h2>
{new_list}
{expired_list}
{failed}
</body></html>
"#,
        title = esc(&info.title),
        before = esc(&info.before),
        after = esc(&info.after),
        explained = b.positions,
        new = b.new,
        expired = b.expired,
        n_failed = b.left_out,
        version = env!("CARGO_PKG_VERSION"),
        generated = esc(&info.generated),
        table = attribution_table(r),
        top = top_unexplained(r),
        new_list = listed(
            r,
            "New positions (today's book only)",
            |o| match o {
                Outcome::New(v) => Some(*v),
                _ => None,
            },
            "value after"
        ),
        expired_list = listed(
            r,
            "Expired positions (yesterday's book only)",
            |o| match o {
                Outcome::Expired(v) => Some(*v),
                _ => None,
            },
            "value before"
        ),
        failed = failed(r),
    )
}
