//! The risk page in a real browser (issue 11): Debian's headless Chromium
//! loads `report.html` of the demo book, and the test checks that the page
//! logs no console message, that every chart is on screen and drawn (the
//! screenshot's pixels in each chart's box, decoded with the `png` crate,
//! are not blank and hold the chart's colours), that every heat map has its
//! colour key with both ends of the scale, and that at 900 px nothing
//! sticks out of the window (tables scroll inside their box, charts
//! scale down).
//!
//! Chromium is `/usr/bin/chromium` (or `SALTUS_CHROMIUM`); `.ci/run`
//! installs it when missing. Three browser runs of about a second each.
//! The colours looked for are the published palettes the page uses:
//! ColorBrewer RdBu (heat maps) and Okabe-Ito (lines).

use crate::common::saltus;
use std::fs;
use std::path::{Path, PathBuf};
use std::process::Command;

fn chromium() -> PathBuf {
    let p = std::env::var_os("SALTUS_CHROMIUM")
        .map(PathBuf::from)
        .unwrap_or_else(|| PathBuf::from("/usr/bin/chromium"));
    assert!(
        p.exists(),
        "{} not found: install Debian's chromium (apt-get install -y chromium; .ci/run does) or set SALTUS_CHROMIUM",
        p.display()
    );
    p
}

/// Runs headless Chromium on `page` with a window `width` x `height` and
/// `args`; returns stdout and the console lines it logged.
fn browse(page: &Path, width: u32, height: u32, args: &[&str]) -> (String, Vec<String>) {
    let profile = tempfile::tempdir().unwrap();
    let out = Command::new(chromium())
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--no-first-run",
            "--hide-scrollbars",
            "--force-device-scale-factor=1",
            "--enable-logging=stderr",
            "--v=0",
        ])
        .arg(format!("--user-data-dir={}", profile.path().display()))
        .arg(format!("--window-size={width},{height}"))
        .args(args)
        .arg(format!("file://{}", page.display()))
        .output()
        .expect("chromium runs");
    assert!(
        out.status.success(),
        "chromium failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let console = String::from_utf8_lossy(&out.stderr)
        .lines()
        .filter(|l| l.contains(":CONSOLE"))
        .map(String::from)
        .collect();
    (String::from_utf8_lossy(&out.stdout).into_owned(), console)
}

/// A box on the page: kind (`chart`, `heat`, `key`) and x, y, w, h in px.
#[derive(Debug, Clone)]
struct Box4 {
    kind: String,
    x: f64,
    y: f64,
    w: f64,
    h: f64,
}

/// The page with a measuring script appended; Chromium's `--dump-dom`
/// then prints the boxes of every chart, the page height and whether the
/// page is wider than the window.
fn measure(page: &Path, width: u32) -> (Vec<Box4>, f64, f64) {
    let html = fs::read_to_string(page).unwrap();
    let script = r#"<script>
const out = [];
for (const s of document.querySelectorAll('svg')) {
  const r = s.getBoundingClientRect();
  const kind = s.classList.contains('colour-key') ? 'key'
    : (s.closest('figure.heat') ? 'heat' : 'chart');
  out.push(['box', kind, r.left + scrollX, r.top + scrollY, r.width, r.height].join(' '));
}
out.push(['page', document.documentElement.scrollWidth, document.documentElement.scrollHeight].join(' '));
const pre = document.createElement('pre'); pre.id = 'measure'; pre.textContent = out.join('\n');
document.body.append(pre);
</script></body>"#;
    let probe = page.with_file_name("probe.html");
    fs::write(&probe, html.replace("</body>", script)).unwrap();
    let (dom, _) = browse(&probe, width, 1000, &["--dump-dom"]);
    let text = dom
        .split("<pre id=\"measure\">")
        .nth(1)
        .and_then(|t| t.split("</pre>").next())
        .expect("the measuring script ran");
    let mut boxes = Vec::new();
    let (mut page_w, mut page_h) = (0.0, 0.0);
    for line in text.lines() {
        let f: Vec<&str> = line.split(' ').collect();
        let n = |i: usize| f[i].parse::<f64>().unwrap();
        match f[0] {
            "box" => boxes.push(Box4 {
                kind: f[1].to_string(),
                x: n(2),
                y: n(3),
                w: n(4),
                h: n(5),
            }),
            "page" => (page_w, page_h) = (n(1), n(2)),
            _ => {}
        }
    }
    (boxes, page_w, page_h)
}

/// RGB pixels of a PNG.
struct Image {
    w: usize,
    h: usize,
    rgb: Vec<[u8; 3]>,
}

fn decode(path: &Path) -> Image {
    let decoder = png::Decoder::new(std::io::BufReader::new(fs::File::open(path).unwrap()));
    let mut reader = decoder.read_info().unwrap();
    let mut buf = vec![0; reader.output_buffer_size().unwrap()];
    let info = reader.next_frame(&mut buf).unwrap();
    let channels = info.color_type.samples();
    assert!(channels >= 3, "an RGB screenshot");
    let rgb = buf[..info.buffer_size()]
        .chunks(channels)
        .map(|p| [p[0], p[1], p[2]])
        .collect();
    Image {
        w: info.width as usize,
        h: info.height as usize,
        rgb,
    }
}

impl Image {
    fn pixels(&self, b: &Box4) -> Vec<[u8; 3]> {
        let (x0, y0) = (b.x.max(0.0) as usize, b.y.max(0.0) as usize);
        let x1 = ((b.x + b.w) as usize).min(self.w);
        let y1 = ((b.y + b.h) as usize).min(self.h);
        let mut v = Vec::new();
        for y in y0..y1 {
            for x in x0..x1 {
                v.push(self.rgb[y * self.w + x]);
            }
        }
        v
    }
}

fn near(p: [u8; 3], c: [u8; 3], tol: i32) -> bool {
    p.iter()
        .zip(c)
        .all(|(a, b)| (i32::from(*a) - i32::from(b)).abs() <= tol)
}

#[test]
fn issue11_risk_page_renders_in_headless_chromium() {
    let dir = tempfile::tempdir().unwrap();
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR"));
    let out = dir.path().join("report");
    let run = saltus()
        .arg("risk")
        .arg(root.join("data/demo_book.csv"))
        .arg("--scenarios")
        .arg(root.join("data/demo_scenarios.csv"))
        .arg("-o")
        .arg(&out)
        .output()
        .unwrap();
    assert_eq!(run.status.code(), Some(1), "the demo book has bad rows");
    let page = out.join("report.html");

    // The console check can fail: a page that logs an error is caught.
    let bad = dir.path().join("bad.html");
    fs::write(
        &bad,
        "<html><body><script>console.error('boom')</script></body></html>",
    )
    .unwrap();
    let (_, console) = browse(&bad, 800, 600, &["--dump-dom"]);
    assert!(
        console.iter().any(|l| l.contains("boom")),
        "detector: {console:?}"
    );

    // Layout at 1400 px: every chart in the page, with a size.
    let (boxes, width, height) = measure(&page, 1400);
    let count = |k: &str| boxes.iter().filter(|b| b.kind == k).count();
    // P&L, cash delta, cash gamma, vega; three underlyings and the book.
    assert_eq!(
        (count("chart"), count("heat"), count("key")),
        (4, 4, 4),
        "{boxes:?}"
    );
    assert!(
        width <= 1400.0,
        "no horizontal overflow at 1400 px: {width}"
    );

    // The screenshot of the unmodified page, as tall as the page.
    let shot = dir.path().join("shot.png");
    let h = height.ceil() as u32;
    let (_, console) = browse(
        &page,
        1400,
        h,
        &[&format!("--screenshot={}", shot.display())],
    );
    assert!(console.is_empty(), "console messages: {console:?}");
    let img = decode(&shot);
    assert_eq!(img.w, 1400);
    let mut heat_coloured = Vec::new();
    for b in &boxes {
        assert!(b.w > 100.0 && b.h > 100.0, "visible size: {b:?}");
        assert!(
            b.y + b.h <= img.h as f64 + 1.0,
            "inside the screenshot: {b:?}"
        );
        let px = img.pixels(b);
        let non_white = px.iter().filter(|p| p.iter().any(|c| *c < 235)).count();
        let coloured = px
            .iter()
            .filter(|p| p.iter().max().unwrap() - p.iter().min().unwrap() > 40)
            .count();
        let frac = |n: usize| n as f64 / px.len() as f64;
        match b.kind.as_str() {
            "chart" => {
                assert!(
                    frac(non_white) > 0.02,
                    "blank chart {b:?}: {}",
                    frac(non_white)
                );
                // The book line (black, width 3) and an Okabe-Ito line colour.
                assert!(
                    px.iter().filter(|p| near(**p, [0, 0, 0], 30)).count() > 100,
                    "{b:?}"
                );
                assert!(
                    px.iter()
                        .any(|p| near(*p, [0, 114, 178], 30) || near(*p, [213, 94, 0], 30)),
                    "{b:?}"
                );
            }
            "heat" => {
                // Cells cover the map: even the palest (RdBu's centre,
                // 247, 247, 247) is not the page's white.
                let painted = px.iter().filter(|p| **p != [255, 255, 255]).count();
                assert!(
                    frac(painted) > 0.5,
                    "heat map not drawn {b:?}: {}",
                    frac(painted)
                );
                heat_coloured.push(frac(coloured));
            }
            _ => {
                // Both ends of ColorBrewer RdBu: (103, 0, 31) and (5, 48, 97).
                assert!(
                    px.iter().any(|p| near(*p, [103, 0, 31], 25)),
                    "no loss end {b:?}"
                );
                assert!(
                    px.iter().any(|p| near(*p, [5, 48, 97], 25)),
                    "no gain end {b:?}"
                );
            }
        }
    }

    // One scale for the page: the book's map (the last) holds the largest
    // P&L, so it shows deep colours.
    assert!(
        heat_coloured.last().is_some_and(|f| *f > 0.3),
        "{heat_coloured:?}"
    );

    // At 900 px nothing sticks out: tables scroll in their box, charts scale.
    let (boxes, width, _) = measure(&page, 900);
    assert!(width <= 900.0, "the page is {width} px wide at 900 px");
    for b in &boxes {
        assert!(b.x >= 0.0 && b.x + b.w <= 900.5, "{b:?} leaves the window");
    }
}
