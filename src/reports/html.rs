//! Pieces shared by the self-contained HTML pages (risk, calibration and
//! any new report): text escaping, the page frame with its one style sheet,
//! the "what this is a report of" block, and tables that scroll sideways on
//! a narrow screen.
//!
//! Design: a page is plain HTML with SVG charts inline ([`super::chart`]);
//! no script, no web font, nothing fetched. The style sheet makes charts
//! scale down with the window and wraps every table in a box that scrolls
//! horizontally ([`scroll`]), so nothing is cut off at 900 px.

/// Escapes text for HTML element content and attribute values.
pub fn esc(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

/// The style sheet of every page.
pub const STYLE: &str = "\
body { font-family: sans-serif; font-size: 14px; margin: 24px auto; max-width: 1180px; padding: 0 16px; color: #222; }
h1 { font-size: 22px; margin-bottom: 4px; } h2 { font-size: 18px; margin-top: 32px; border-bottom: 1px solid #ddd; }
table { border-collapse: collapse; font-size: 13px; margin: 8px 0; font-variant-numeric: tabular-nums; }
th, td { border: 1px solid #ddd; padding: 4px 8px; text-align: right; white-space: nowrap; }
th { background: #f4f4f4; vertical-align: bottom; white-space: normal; max-width: 8.5em; } td:first-child, th:first-child { text-align: left; }
th .unit { display: block; font-weight: normal; color: #555; font-size: 12px; }
td.text, th.text { text-align: left; white-space: normal; }
tr.book td { font-weight: bold; background: #f7f7f7; }
.scroll { overflow-x: auto; max-width: 100%; }
.warn { color: #a00; } .note { color: #555; font-size: 13px; }
.facts { display: grid; grid-template-columns: max-content 1fr; gap: 2px 16px; font-size: 13px; margin: 8px 0 16px; }
.facts dt { color: #555; } .facts dd { margin: 0; }
figure { margin: 12px 0; } svg { max-width: 100%; height: auto; }
.heat { display: flex; flex-wrap: wrap; align-items: flex-start; gap: 8px; }
.grid { display: flex; flex-wrap: wrap; gap: 8px; }
";

/// A whole page: `title` (escaped here) as the title and first heading,
/// then `body` (already HTML).
pub fn page(title: &str, body: &str) -> String {
    let title = esc(title);
    format!(
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\
         <title>{title}</title>\n<style>\n{STYLE}</style></head><body>\n<h1>{title}</h1>\n{body}\n</body></html>\n"
    )
}

/// A table (already HTML) in a box that scrolls horizontally when the
/// window is narrower than the table.
pub fn scroll(table: &str) -> String {
    format!("<div class=\"scroll\">{table}</div>")
}

/// The block saying what a page is a report of: `(label, value)` pairs,
/// values already HTML.
pub fn facts(items: &[(&str, String)]) -> String {
    let mut s = String::from("<dl class=\"facts\">");
    for (k, v) in items {
        s.push_str(&format!("<dt>{}</dt><dd>{v}</dd>", esc(k)));
    }
    s.push_str("</dl>");
    s
}

/// A table header cell: `name` with its unit on a second line (both
/// escaped here; an empty unit adds no line).
pub fn th(name: &str, unit: &str) -> String {
    if unit.is_empty() {
        format!("<th>{}</th>", esc(name))
    } else {
        format!(
            "<th>{}<span class=\"unit\">{}</span></th>",
            esc(name),
            esc(unit)
        )
    }
}

/// The time a page was made, UTC, to the second (`2026-12-02 17:05:12 UTC`).
pub fn made_at() -> String {
    let now = jiff::Timestamp::now();
    format!("{} UTC", now.strftime("%Y-%m-%d %H:%M:%S"))
}
