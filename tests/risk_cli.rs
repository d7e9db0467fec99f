//! The `risk` and `greeks` commands: totals, scenarios, the HTML page.

use crate::common::merton;
use assert_cmd::Command;
use saltus::model::OptionKind::{Call, Put};
use saltus::risk::{self, Position, ScenarioSpec};
use saltus::series;
use std::collections::HashMap;
use std::fs;

fn demo() -> &'static str {
    concat!(env!("CARGO_MANIFEST_DIR"), "/data/demo_book.csv")
}

fn records(path: &std::path::Path) -> (csv::StringRecord, Vec<csv::StringRecord>) {
    let mut r = csv::Reader::from_path(path).unwrap();
    let h = r.headers().unwrap().clone();
    (h, r.records().map(|x| x.unwrap()).collect())
}

fn col(h: &csv::StringRecord, name: &str) -> usize {
    h.iter()
        .position(|x| x == name)
        .unwrap_or_else(|| panic!("no column {name}"))
}

fn run_demo() -> tempfile::TempDir {
    let dir = tempfile::tempdir().unwrap();
    let out = Command::cargo_bin("saltus")
        .unwrap()
        .args(["risk", demo(), "-o"])
        .arg(dir.path())
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1), "the demo book has bad rows");
    dir
}

#[test]
fn totals_are_sums_of_quantity_times_greek() {
    let dir = run_demo();
    // Recompute from the input book with the library, independently of the report.
    let (h, rows) = records(std::path::Path::new(demo()));
    let mut want: HashMap<String, [f64; 4]> = HashMap::new();
    for r in &rows {
        let num = |k: &str| r[col(&h, k)].parse::<f64>();
        let (Ok(s), Ok(k), Ok(t), Ok(rate), Ok(q), Ok(v), Ok(l), Ok(m), Ok(d), Ok(qty)) = (
            num("spot"),
            num("strike"),
            num("expiry"),
            num("rate"),
            num("div_yield"),
            num("vol"),
            num("jump_rate"),
            num("jump_mean"),
            num("jump_vol"),
            num("quantity"),
        ) else {
            continue;
        };
        let Ok(kind) = r[col(&h, "kind")].parse() else {
            continue;
        };
        let Ok(c) = saltus::model::Contract::new(
            kind,
            s,
            k,
            t,
            rate,
            q,
            v,
            saltus::model::JumpParams {
                rate: l,
                mean: m,
                vol: d,
            },
        ) else {
            continue;
        };
        let g = series::price(&c).unwrap().greeks;
        let e = want
            .entry(r[col(&h, "underlying")].to_string())
            .or_default();
        e[0] += qty * g.price;
        e[1] += qty * g.delta;
        e[2] += qty * g.vega * 0.01;
        e[3] += qty * g.d_jump_rate;
    }
    let (th, totals) = records(&dir.path().join("totals.csv"));
    for t in &totals {
        let u = &t[0];
        if u == "(book)" {
            let v: f64 = t[col(&th, "value")].parse().unwrap();
            let sum: f64 = want.values().map(|x| x[0]).sum();
            assert!((v - sum).abs() < 1e-9 * sum.abs());
            assert!(
                t[col(&th, "delta")].is_empty(),
                "book delta in mixed units is left empty"
            );
            continue;
        }
        let w = want[u];
        for (i, name) in ["value", "delta", "vega_1pt", "d_jump_rate"]
            .iter()
            .enumerate()
        {
            let got: f64 = t[col(&th, name)].parse().unwrap();
            assert!(
                (got - w[i]).abs() <= 1e-9 * w[i].abs().max(1.0),
                "{u} {name}: {got} vs {}",
                w[i]
            );
        }
    }
    assert_eq!(totals.len(), 4, "three underlyings and the book");
}

#[test]
fn zero_shock_has_zero_pnl_and_failed_rows_are_listed() {
    let dir = run_demo();
    let (h, rows) = records(&dir.path().join("scenarios.csv"));
    let zero: Vec<_> = rows
        .iter()
        .filter(|r| &r[1] == "0.0" && &r[2] == "0.0")
        .collect();
    assert_eq!(zero.len(), 4);
    for r in zero {
        assert_eq!(r[col(&h, "pnl")].parse::<f64>().unwrap(), 0.0);
    }
    let html = fs::read_to_string(dir.path().join("report.html")).unwrap();
    assert!(html.contains("3 rows could not be priced"));
    for id in ["BAD-001", "BAD-002", "BAD-003"] {
        assert!(html.contains(id));
    }
    let (ph, pos) = records(&dir.path().join("positions.csv"));
    assert_eq!(pos.len(), 41);
    assert_eq!(
        pos.iter()
            .filter(|r| &r[col(&ph, "status")] != "ok")
            .count(),
        3
    );
}

#[test]
fn small_shocks_match_delta_gamma_to_second_order() {
    // Taylor: V(S + dS) - V(S) = delta dS + gamma dS^2 / 2 + O(dS^3); halving
    // dS must cut the remainder about eightfold.
    let mk = |c: saltus::model::Contract, row: u64, qty: f64| Position {
        row,
        id: row.to_string(),
        underlying: "X".into(),
        contract: c,
        quantity: qty,
        multiplier: 10.0,
        greeks: series::price(&c).unwrap().greeks,
    };
    let positions = vec![
        mk(
            merton(Call, 100.0, 105.0, 0.5, 0.03, 0.01, 0.2, 0.5, -0.1, 0.15),
            1,
            3.0,
        ),
        mk(
            merton(Put, 100.0, 90.0, 1.0, 0.03, 0.01, 0.25, 0.3, -0.3, 0.2),
            2,
            -2.0,
        ),
    ];
    let remainder = |eps: f64| {
        let spec = ScenarioSpec {
            spot_shocks: vec![eps],
            vol_shocks: vec![0.0],
            jump_shocks: vec![],
        };
        let r = risk::build(positions.clone(), spec).unwrap();
        let (e, s) = &r.by_underlying["X"];
        let ds = 100.0 * eps;
        (s.grid[0][0] - (e.delta * ds + 0.5 * e.gamma * ds * ds)).abs()
    };
    let (r1, r2) = (remainder(0.002), remainder(0.001));
    assert!(r1 < 1e-3, "{r1}");
    assert!(
        r2 < r1 / 5.0,
        "third-order remainder should shrink ~8x: {r1} -> {r2}"
    );
}

#[test]
fn html_report_is_self_contained_with_valid_svg_charts() {
    let dir = run_demo();
    let html = fs::read_to_string(dir.path().join("report.html")).unwrap();
    // Only the SVG namespace URI may appear; nothing is fetched.
    assert_eq!(
        html.matches("http").count(),
        html.matches("http://www.w3.org/2000/svg").count()
    );
    assert!(!html.contains("<script"), "no scripts");
    assert!(!html.contains("src=\""), "no external resources");
    let mut svgs = Vec::new();
    let mut rest = html.as_str();
    while let Some(i) = rest.find("<svg") {
        let j = rest[i..].find("</svg>").unwrap() + i + 6;
        svgs.push(&rest[i..j]);
        rest = &rest[j..];
    }
    // P&L vs spot, 4 heat maps (3 underlyings + book), 3 Greeks-vs-spot charts.
    assert_eq!(svgs.len(), 8);
    for svg in &svgs {
        let doc = roxmltree::Document::parse(svg).expect("well-formed SVG");
        assert_eq!(doc.root_element().tag_name().name(), "svg");
        let texts = doc.descendants().filter(|n| n.has_tag_name("text")).count();
        assert!(texts > 5, "labelled axes");
    }
    let heat = roxmltree::Document::parse(svgs[1]).unwrap();
    let cells = heat
        .descendants()
        .filter(|n| n.has_tag_name("rect"))
        .count();
    assert!(
        cells >= 13 * 9,
        "a rectangle per scenario cell, found {cells}"
    );
    let line = roxmltree::Document::parse(svgs[0]).unwrap();
    assert!(line
        .descendants()
        .any(|n| n.has_tag_name("polyline") || n.has_tag_name("path")));
}

#[test]
fn greeks_both_methods_agree_on_a_clean_book() {
    let book = "id,kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol\n\
                a,call,100,100,0.5,0.03,0.2,0.5,-0.1,0.15\n\
                b,put,100,80,1,0.02,0.25,0.3,-0.3,0.2\n";
    for engine in ["series", "fourier"] {
        let out = Command::cargo_bin("saltus")
            .unwrap()
            .args(["greeks", "-", "--method", "both", "--engine", engine])
            .write_stdin(book)
            .output()
            .unwrap();
        assert_eq!(
            out.status.code(),
            Some(0),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let mut r = csv::Reader::from_reader(&out.stdout[..]);
        let h = r.headers().unwrap().clone();
        for name in [
            "delta_analytic",
            "delta_fd",
            "delta_abs_diff",
            "delta_rel_diff",
            "delta_flag",
            "volga_flag",
            "flagged",
            "status",
        ] {
            assert!(h.iter().any(|x| x == name), "{name}");
        }
        for rec in r.records() {
            let rec = rec.unwrap();
            assert_eq!(&rec[col(&h, "flagged")], "");
            assert_eq!(&rec[col(&h, "status")], "ok");
        }
    }
    // A deliberately wrong tolerance flags, and the exit code says so.
    let out = Command::cargo_bin("saltus")
        .unwrap()
        .args(["greeks", "-", "--rel-tol", "1e-30", "--spot-bump", "0.2"])
        .write_stdin(book)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1));
}
