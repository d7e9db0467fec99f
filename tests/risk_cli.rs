//! The `risk` and `greeks` commands: totals, scenarios, the HTML page.

use crate::common::merton;
use assert_cmd::Command;
use saltus::engines::series;
use saltus::model::OptionKind::{Call, Put};
use saltus::reports::risk::{self, Position, ScenarioSpec};
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
        line: row + 1,
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
        let spec = ScenarioSpec::new(vec![100.0 * eps], vec![0.0], vec![]).unwrap();
        let shock = spec.spot_shocks[0];
        let r = risk::build(positions.clone(), spec).unwrap();
        let (e, s) = &r.by_underlying["X"];
        let ds = 100.0 * shock;
        (s.grid[0][0].pnl - (e.delta * ds + 0.5 * e.gamma * ds * ds)).abs()
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
    // P&L vs spot, 4 heat maps (3 underlyings + book) each with its colour
    // key, 3 Greeks-vs-spot charts.
    let (keys, charts): (Vec<&str>, Vec<&str>) = svgs
        .iter()
        .partition(|s| s.starts_with("<svg class=\"colour-key\""));
    assert_eq!(charts.len(), 8);
    assert_eq!(keys.len(), 4);
    for k in &keys {
        let doc = roxmltree::Document::parse(k).expect("well-formed SVG");
        let labels: Vec<&str> = doc.descendants().filter_map(|n| n.text()).collect();
        assert!(labels.iter().any(|t| t.ends_with(" gain")), "{labels:?}");
        assert!(labels.iter().any(|t| t.ends_with(" loss")), "{labels:?}");
    }
    let svgs = charts;
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

// ---------------------------------------------------------------------------
// Issue 8: risk in constant memory, the per-row contract, validated options,
// no silent non-finite aggregates, an unambiguous book row.

const HEADER: &str = "id,underlying,kind,spot,strike,expiry,rate,div_yield,vol,jump_rate,jump_mean,jump_vol,quantity,multiplier";

/// Runs `saltus risk` on `book` (bytes) in a fresh directory with the
/// command's options `extra` (a leading `--threads N` goes before `risk`);
/// returns the directory, the report directory, the exit code and stderr.
fn risk_run(book: &[u8], extra: &[&str]) -> (tempfile::TempDir, std::path::PathBuf, i32, String) {
    let (global, extra) = match extra {
        ["--threads", n, rest @ ..] => (vec!["--threads", *n], rest),
        _ => (vec![], extra),
    };
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("book.csv");
    fs::write(&path, book).unwrap();
    let out_dir = dir.path().join("out");
    let out = Command::cargo_bin("saltus")
        .unwrap()
        .args(global)
        .arg("risk")
        .arg(&path)
        .arg("-o")
        .arg(&out_dir)
        .args(extra)
        .output()
        .unwrap();
    let code = out.status.code().unwrap_or(-1);
    (
        dir,
        out_dir,
        code,
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

/// A seeded invented book: three made-up underlyings, mixed calls and puts,
/// quantities and multipliers (xorshift, so the test needs no extra crate).
fn synthetic_book(n: usize) -> String {
    let mut state = 0x9E37_79B9_7F4A_7C15u64;
    let mut u = move || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        (state >> 11) as f64 / (1u64 << 53) as f64
    };
    let names = ["ORVAL-SYN", "PELIX-SYN", "QUORN-SYN"];
    let mut b = String::from(HEADER);
    b.push('\n');
    for i in 0..n {
        let s = 50.0 + 150.0 * u();
        let k = s * (0.7 + 0.6 * u());
        let t = 0.05 + 2.0 * u();
        let line = format!(
            "S{i},{},{},{s:.2},{k:.2},{t:.3},{:.3},{:.3},{:.3},{:.2},{:.2},{:.2},{},{}\n",
            names[i % 3],
            if i % 2 == 0 { "call" } else { "put" },
            0.05 * u(),
            0.02 * u(),
            0.1 + 0.4 * u(),
            0.1 + u(),
            -0.3 + 0.3 * u(),
            0.05 + 0.3 * u(),
            (u() * 40.0) as i64 - 20,
            if i % 5 == 0 { 100 } else { 1 },
        );
        b.push_str(&line);
    }
    b
}

fn contract_of(h: &csv::StringRecord, r: &csv::StringRecord) -> saltus::model::Contract {
    let num = |k: &str| r[col(h, k)].parse::<f64>().unwrap();
    saltus::model::Contract::new(
        r[col(h, "kind")].parse().unwrap(),
        num("spot"),
        num("strike"),
        num("expiry"),
        num("rate"),
        num("div_yield"),
        num("vol"),
        saltus::model::JumpParams {
            rate: num("jump_rate"),
            mean: num("jump_mean"),
            vol: num("jump_vol"),
        },
    )
    .unwrap()
}

const SMALL_GRID: [&str; 4] = ["--spot-shocks", "-20,-5,0,5,20", "--vol-shocks", "-5,0,5"];

#[test]
fn issue8_risk_streams_with_the_same_digits_on_any_thread_count() {
    // 7,000 rows: four chunks of the pipeline (2,048 rows each), so chunk
    // accumulators are merged; the digits must not depend on the threads.
    let book = synthetic_book(7000);
    let mut dirs = Vec::new();
    for threads in ["1", "2"] {
        let mut extra = vec!["--threads", threads];
        extra.extend(SMALL_GRID);
        let (tmp, out, code, err) = risk_run(book.as_bytes(), &extra);
        assert_eq!(code, 0, "{err}");
        dirs.push((tmp, out));
    }
    for f in [
        "totals.csv",
        "scenarios.csv",
        "jump_scenarios.csv",
        "greeks_vs_spot.csv",
        "positions.csv",
        "scenario_failures.csv",
    ] {
        let a = fs::read(dirs[0].1.join(f)).unwrap();
        let b = fs::read(dirs[1].1.join(f)).unwrap();
        assert!(a == b, "{f} differs between --threads 1 and --threads 2");
    }
    let out = &dirs[0].1;

    // Independent sums in row order: quantity x multiplier x Greek, and the
    // full-revaluation P&L of the (+5% spot, 0 vol) cell. Tolerance: 1e-12 of
    // the sum of absolute terms (the two sums differ only in order).
    let mut r = csv::Reader::from_reader(book.as_bytes());
    let h = r.headers().unwrap().clone();
    // [value, delta, vega_1pt, d_jump_rate, pnl(+5%, 0)] and their |terms|.
    let mut want: HashMap<String, ([f64; 5], [f64; 5])> = HashMap::new();
    for rec in r.records() {
        let rec = rec.unwrap();
        let c = contract_of(&h, &rec);
        let w: f64 = rec[col(&h, "quantity")].parse::<f64>().unwrap()
            * rec[col(&h, "multiplier")].parse::<f64>().unwrap();
        let g = series::price(&c).unwrap().greeks;
        let up = saltus::model::Contract::new(
            c.kind,
            c.spot * (1.0 + 0.05),
            c.strike,
            c.expiry,
            c.rate,
            c.div_yield,
            c.vol,
            c.jumps,
        )
        .unwrap();
        let pnl = w * (series::price(&up).unwrap().greeks.price - g.price);
        let terms = [
            w * g.price,
            w * g.delta,
            w * g.vega * 0.01,
            w * g.d_jump_rate,
            pnl,
        ];
        for key in [rec[col(&h, "underlying")].to_string(), "(book)".to_string()] {
            let e = want.entry(key).or_default();
            for (i, x) in terms.iter().enumerate() {
                e.0[i] += x;
                e.1[i] += x.abs();
            }
        }
    }
    let close = |got: f64, want: f64, scale: f64, what: &str| {
        assert!(
            (got - want).abs() <= 1e-12 * scale,
            "{what}: {got} vs {want}"
        );
    };
    let (th, totals) = records(&out.join("totals.csv"));
    assert_eq!(totals.len(), 4, "three underlyings and the book");
    for t in &totals {
        let book_level = &t[col(&th, "level")] == "book";
        let (w, scale) = &want[&t[0]];
        assert_eq!(&t[col(&th, "status")], "ok");
        for (i, name) in ["value", "delta", "vega_1pt", "d_jump_rate"]
            .iter()
            .enumerate()
        {
            if book_level && *name == "delta" {
                assert!(t[col(&th, name)].is_empty());
                continue;
            }
            close(t[col(&th, name)].parse().unwrap(), w[i], scale[i], name);
        }
    }
    let (sh, cells) = records(&out.join("scenarios.csv"));
    assert_eq!(cells.len(), 4 * 15);
    for c in &cells {
        assert_eq!(&c[col(&sh, "status")], "ok");
        assert_eq!(&c[col(&sh, "rows_failed")], "0");
        let pnl: f64 = c[col(&sh, "pnl")].parse().unwrap();
        match (
            &c[col(&sh, "spot_shock_pct")],
            &c[col(&sh, "vol_shock_pts")],
        ) {
            ("0.0", "0.0") => assert_eq!(pnl, 0.0, "zero shock, zero P&L exactly"),
            ("5.0", "0.0") => {
                let (w, scale) = &want[&c[0]];
                close(pnl, w[4], scale[4], "pnl +5%");
            }
            _ => {}
        }
    }
}

#[test]
fn issue8_risk_accepts_invalid_utf8_like_price() {
    // An invalid UTF-8 byte in a column risk does not read (note), and one in
    // the id: price accepts the book (the second row fails on its id); risk
    // used to stop with exit 2 on re-reading its own positions.csv.
    let mut book =
        b"id,underlying,kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol,note\n"
            .to_vec();
    book.extend_from_slice(b"A1,ORVAL-SYN,call,100,100,1,0.02,0.2,0.5,-0.1,0.15,caf\xe9\n");
    book.extend_from_slice(b"B\xff2,ORVAL-SYN,put,100,90,1,0.02,0.2,0.5,-0.1,0.15,x\n");
    book.extend_from_slice(b"C3,PELIX-SYN,put,50,55,0.5,0.01,0.3,0.2,-0.2,0.1,y\n");
    let (_tmp, out, code, err) = risk_run(&book, &[]);
    assert_eq!(code, 1, "one row fails, the run completes: {err}");
    let (th, totals) = records(&out.join("totals.csv"));
    let orval = totals.iter().find(|t| &t[0] == "ORVAL-SYN").unwrap();
    assert_eq!(&orval[col(&th, "positions")], "1");
    let html = fs::read_to_string(out.join("report.html")).unwrap();
    assert!(html.contains("1 row could not be priced"), "{html}");
    assert!(html.contains("B\u{FFFD}2"), "the id is shown lossy-decoded");
    assert!(html.contains("id is not valid UTF-8"));
    let positions = fs::read(out.join("positions.csv")).unwrap();
    assert!(
        positions.windows(4).any(|w| w == b"caf\xe9"),
        "echo is byte for byte"
    );
}

#[test]
fn issue8_risk_row_whose_shocked_vol_leaves_the_domain_completes() {
    // Row 2 has vol 9.95; the model's domain ends at 10, so the +7.5 and +10
    // point vol shocks cannot be revalued for it. Those cells exclude it and
    // say so; everything else is complete.
    let book = format!(
        "{HEADER}\n\
         A,ORVAL-SYN,call,100,100,1,0.02,0.01,0.2,0.5,-0.1,0.15,3,1\n\
         B,ORVAL-SYN,put,100,90,1,0.02,0.01,9.95,0.5,-0.1,0.15,-2,1\n\
         C,PELIX-SYN,call,40,42,0.5,0.01,0,0.3,0.2,-0.2,0.1,5,10\n"
    );
    let (_tmp, out, code, err) = risk_run(book.as_bytes(), &[]);
    assert_eq!(code, 1, "scenario failures give exit 1: {err}");
    let (ph, pos) = records(&out.join("positions.csv"));
    assert!(
        pos.iter().all(|r| &r[col(&ph, "status")] == "ok"),
        "row B prices"
    );

    let (fh, fails) = records(&out.join("scenario_failures.csv"));
    assert_eq!(fails.len(), 2 * 13, "two vol shocks x thirteen spot shocks");
    for f in &fails {
        assert_eq!(&f[col(&fh, "line")], "3");
        assert_eq!(&f[col(&fh, "id")], "B");
        assert_eq!(&f[col(&fh, "underlying")], "ORVAL-SYN");
        assert_eq!(&f[col(&fh, "scenario")], "grid");
        assert!(["7.5", "10.0"].contains(&&f[col(&fh, "vol_shock_pts")]));
        assert!(f[col(&fh, "reason")].contains("vol"), "{:?}", f);
    }

    // Row A alone, revalued independently with the library.
    let a = merton(Call, 100.0, 100.0, 1.0, 0.02, 0.01, 0.2, 0.5, -0.1, 0.15);
    let a0 = series::price(&a).unwrap().greeks.price;
    let (sh, cells) = records(&out.join("scenarios.csv"));
    let mut checked = 0;
    for c in &cells {
        let (spot, vol): (f64, f64) = (
            c[col(&sh, "spot_shock_pct")].parse::<f64>().unwrap() / 100.0,
            c[col(&sh, "vol_shock_pts")].parse::<f64>().unwrap() / 100.0,
        );
        let failed: u64 = c[col(&sh, "rows_failed")].parse().unwrap();
        let status = &c[col(&sh, "status")];
        let level = &c[col(&sh, "level")];
        if &c[0] == "PELIX-SYN" {
            assert_eq!((failed, status), (0, "ok"));
            continue;
        }
        if vol > 0.06 {
            assert_eq!(failed, 1, "{c:?}");
            assert!(
                status.starts_with("partial: 1 row could not be revalued"),
                "{status}"
            );
            if level == "underlying" {
                let shocked = merton(
                    Call,
                    100.0 * (1.0 + spot),
                    100.0,
                    1.0,
                    0.02,
                    0.01,
                    0.2 + vol,
                    0.5,
                    -0.1,
                    0.15,
                );
                let want = 3.0 * (series::price(&shocked).unwrap().greeks.price - a0);
                let got: f64 = c[col(&sh, "pnl")].parse().unwrap();
                assert!((got - want).abs() <= 1e-12 * want.abs(), "{got} vs {want}");
                checked += 1;
            }
        } else if vol < 0.04 {
            assert_eq!((failed, status), (0, "ok"), "{c:?}");
        }
    }
    assert_eq!(checked, 26);
    let html = fs::read_to_string(out.join("report.html")).unwrap();
    assert!(
        html.contains("26 scenario revaluations failed"),
        "the report says so"
    );
    assert_eq!(
        html.matches("<td class=\"text\">grid: spot ").count(),
        26,
        "and lists them"
    );
    assert!(html.contains("<td class=\"text\">grid: spot +30%, vol 10 points</td>"));
}

#[test]
fn issue8_risk_option_values_are_validated_before_any_work() {
    let book = format!("{HEADER}\nA,ORVAL-SYN,call,100,100,1,0.02,0.01,0.2,0.5,-0.1,0.15,3,1\n");
    let cases: [(&[&str], &str); 11] = [
        (&["--vol-shocks", "995"], "-100 to +100 vol points"),
        (
            &["--spot-shocks", "1e308"],
            "above -100% and at most +1000%",
        ),
        (&["--spot-shocks", "-100"], "above -100%"),
        (&["--spot-shocks", ""], "--spot-shocks is empty"),
        (&["--vol-shocks", "0,,5"], "empty value"),
        (&["--spot-shocks", "NaN"], "not a finite number"),
        (&["--vol-shocks", "0,2.5,2.50"], "given twice"),
        (&["--spot-shocks", "-0,0"], "given twice"),
        (
            &["--jump-shock", "1e308"],
            "--jump-shock: 1e308% is outside",
        ),
        (
            &["--jump-shock", "-10", "--jump-shock", "-10"],
            "given twice",
        ),
        (&["--spot-shocks", "5%"], "'5%' is not a number"),
    ];
    for (args, want) in cases {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("book.csv");
        fs::write(&path, &book).unwrap();
        let out_dir = dir.path().join("out");
        let out = Command::cargo_bin("saltus")
            .unwrap()
            .arg("risk")
            .arg(&path)
            .arg("-o")
            .arg(&out_dir)
            .args(args)
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{args:?}: {err}");
        assert!(err.contains(want), "{args:?}: {err}");
        assert!(
            !out_dir.exists(),
            "{args:?}: nothing written before the options are valid"
        );
    }
}

/// True when a CSV field anywhere in `dir` spells a non-finite number.
fn has_non_finite_field(dir: &std::path::Path) -> Option<String> {
    for entry in fs::read_dir(dir).unwrap() {
        let path = entry.unwrap().path();
        if path.extension().is_some_and(|e| e == "csv") {
            let (_, rows) = records(&path);
            for r in rows {
                for f in r.iter() {
                    let l = f.trim().to_ascii_lowercase();
                    if matches!(l.trim_start_matches(['-', '+']), "inf" | "infinity" | "nan") {
                        return Some(format!("{}: {f}", path.display()));
                    }
                }
            }
        }
    }
    None
}

#[test]
fn issue8_risk_position_that_overflows_is_a_row_error() {
    // quantity 1e308 x price ~10 and quantity 1e10 x price ~1e300 overflow:
    // row errors (not an `ok` row with inf), the others still count.
    let book = format!(
        "{HEADER}\n\
         A,ORVAL-SYN,call,100,100,1,0.02,0.01,0.2,0.5,-0.1,0.15,1e308,1\n\
         B,ORVAL-SYN,call,1e300,1e300,1,0.02,0.01,0.2,0.5,-0.1,0.15,1e10,1\n\
         C,ORVAL-SYN,put,100,90,1,0.02,0.01,0.2,0.5,-0.1,0.15,2,1\n"
    );
    let (_tmp, out, code, err) = risk_run(book.as_bytes(), &SMALL_GRID);
    assert_eq!(code, 1, "{err}");
    assert_eq!(has_non_finite_field(&out), None);
    let (ph, pos) = records(&out.join("positions.csv"));
    for (i, r) in pos.iter().enumerate() {
        let st = &r[col(&ph, "status")];
        if i < 2 {
            assert!(
                st.starts_with("error: ") && st.contains("not finite"),
                "{st}"
            );
        } else {
            assert_eq!(st, "ok");
        }
    }
    let (th, totals) = records(&out.join("totals.csv"));
    assert!(totals.iter().all(|t| &t[col(&th, "status")] == "ok"));
    assert!(totals.iter().all(|t| &t[col(&th, "positions")] == "1"));
}

#[test]
fn issue8_risk_aggregate_that_overflows_is_an_error_not_inf() {
    // Two positions each worth about 1.49e308 (deep in-the-money call, spot
    // 1.5, strike 0.01, quantity 1e308): each is finite, their sum is not.
    let row =
        |id: &str| format!("{id},ORVAL-SYN,call,1.5,0.01,1,0.02,0,0.2,0.5,-0.1,0.15,1e308,1\n");
    let book = format!("{HEADER}\n{}{}", row("A"), row("B"));
    let (_tmp, out, code, err) = risk_run(
        book.as_bytes(),
        &["--spot-shocks", "-5,0,100", "--vol-shocks", "0"],
    );
    assert_eq!(code, 1, "{err}");
    assert_eq!(has_non_finite_field(&out), None);
    let (th, totals) = records(&out.join("totals.csv"));
    for t in &totals {
        let st = &t[col(&th, "status")];
        assert!(st.starts_with("error: ") && st.contains("value"), "{st}");
        assert!(t[col(&th, "value")].is_empty());
        assert_eq!(&t[col(&th, "positions")], "2");
    }
    // +100% spot: each P&L is about 1.5e308, finite; the sum is not.
    let (sh, cells) = records(&out.join("scenarios.csv"));
    for c in &cells {
        let st = &c[col(&sh, "status")];
        if &c[col(&sh, "spot_shock_pct")] == "100.0" {
            assert!(st.starts_with("error: pnl not finite"), "{st}");
            assert!(c[col(&sh, "pnl")].is_empty());
        } else {
            assert_eq!(st, "ok");
        }
    }
    let html = fs::read_to_string(out.join("report.html")).unwrap();
    assert!(html.contains("Aggregates that are not finite"));
    assert!(err.contains("aggregate not finite"), "{err}");
}

#[test]
fn issue8_risk_underlying_named_book_is_told_apart_by_level() {
    let book = format!(
        "{HEADER}\n\
         A,(book),call,100,100,1,0.02,0.01,0.2,0.5,-0.1,0.15,3,1\n\
         B,ORVAL-SYN,put,100,90,1,0.02,0.01,0.2,0.5,-0.1,0.15,-2,1\n"
    );
    let (_tmp, out, code, err) = risk_run(book.as_bytes(), &SMALL_GRID);
    assert_eq!(code, 0, "{err}");
    for file in [
        "totals.csv",
        "scenarios.csv",
        "jump_scenarios.csv",
        "greeks_vs_spot.csv",
    ] {
        let (h, rows) = records(&out.join(file));
        let level = col(&h, "level");
        let named_book: Vec<_> = rows.iter().filter(|r| &r[0] == "(book)").collect();
        let underlying = named_book
            .iter()
            .filter(|r| &r[level] == "underlying")
            .count();
        let book_rows = named_book.iter().filter(|r| &r[level] == "book").count();
        assert!(underlying > 0 && underlying == book_rows, "{file}");
        assert!(rows
            .iter()
            .all(|r| ["underlying", "book"].contains(&&r[level])));
    }
    let (th, totals) = records(&out.join("totals.csv"));
    let book_row = totals
        .iter()
        .find(|t| &t[col(&th, "level")] == "book")
        .unwrap();
    assert_eq!(&book_row[col(&th, "positions")], "2");
}

#[test]
fn risk_report_lists_at_most_1000_failed_rows_and_counts_the_rest() {
    let mut book =
        format!("{HEADER}\nA,ORVAL-SYN,call,100,100,1,0.02,0.01,0.2,0.5,-0.1,0.15,3,1\n");
    for i in 0..1005 {
        book.push_str(&format!(
            "X{i},ORVAL-SYN,call,100,100,1,0.02,0.01,-0.2,0.5,-0.1,0.15,3,1\n"
        ));
    }
    let (_tmp, out, code, err) = risk_run(book.as_bytes(), &SMALL_GRID);
    assert_eq!(code, 1, "{err}");
    let html = fs::read_to_string(out.join("report.html")).unwrap();
    assert!(html.contains("1,005 rows could not be priced"));
    assert!(html.contains("and 5 more failed rows"), "bounded list");
    assert!(html.contains(">X999<") && !html.contains(">X1000<"));
}

#[test]
fn pipeline_state_is_per_chunk_and_merged_in_chunk_order() {
    // 5,000 rows, row 3000 bad: chunks of 2,048 rows each get a fresh state,
    // merged in chunk order on any pool size; failed rows reach the state.
    use saltus::book::{run_book_with_state, ChunkState, FailedRecord, PipelineOptions};
    #[derive(Default)]
    struct Seen {
        rows: Vec<u64>,
        failed: Vec<(u64, u64, Vec<u8>)>,
    }
    impl ChunkState for Seen {
        fn row_failed(&mut self, f: &FailedRecord<'_>) {
            self.failed
                .push((f.row, f.line, f.id.unwrap_or(b"").to_vec()));
        }
    }
    let mut book =
        String::from("id,kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol\n");
    for i in 1..=5000 {
        let vol = if i == 3000 { "-1" } else { "0.2" };
        book.push_str(&format!("r{i},call,100,100,1,0,{vol},0,0,0\n"));
    }
    let opts = PipelineOptions {
        result_columns: vec!["x".into(), "status".into()],
        ..Default::default()
    };
    for threads in [1, 2, 3] {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        let mut merged: Vec<Seen> = Vec::new();
        let mut out = Vec::new();
        let summary = pool
            .install(|| {
                run_book_with_state(
                    book.as_bytes(),
                    &mut out,
                    &opts,
                    |row, w, s: &mut Seen| {
                        s.rows.push(row.row);
                        w.push_u64(row.row);
                        Ok(())
                    },
                    |s| {
                        merged.push(s);
                        Ok(())
                    },
                )
            })
            .unwrap();
        assert_eq!(summary.rows, 5000);
        assert_eq!(merged.len(), 3, "chunks of 2,048 rows");
        let firsts: Vec<u64> = merged.iter().map(|s| s.rows[0]).collect();
        assert_eq!(firsts, [1, 2049, 4097], "merged in chunk order");
        let all: Vec<u64> = merged.iter().flat_map(|s| s.rows.iter().copied()).collect();
        let want: Vec<u64> = (1..=5000).filter(|r| *r != 3000).collect();
        assert_eq!(all, want, "each row once, in order");
        assert_eq!(merged[1].failed, [(3000, 3001, b"r3000".to_vec())]);
    }
}

#[test]
fn risk_report_page_stays_bounded_with_many_underlyings() {
    // 25 underlyings: every one in the tables, heat maps for the 20 with the
    // largest grid P&L (row U24 has the largest quantity) and the book, each
    // with its colour key, line charts with 6 underlyings.
    let mut book = format!("{HEADER}\n");
    for i in 0..25 {
        book.push_str(&format!(
            "R{i},U{i:02},call,100,100,1,0.02,0.01,0.2,0.5,-0.1,0.15,{},1\n",
            i + 1
        ));
    }
    let (_tmp, out, code, err) = risk_run(book.as_bytes(), &SMALL_GRID);
    assert_eq!(code, 0, "{err}");
    let html = fs::read_to_string(out.join("report.html")).unwrap();
    assert_eq!(
        html.matches("<svg").count(),
        4 + 2 * 21,
        "4 line charts, 21 heat maps and their colour keys"
    );
    assert!(
        html.contains("P&amp;L by full revaluation: U24")
            || html.contains("P&L by full revaluation: U24")
    );
    assert!(!html.contains("full revaluation: U00<") && !html.contains("full revaluation: U04<"));
    for i in 0..25 {
        assert!(
            html.contains(&format!("<td>U{i:02}</td>")),
            "U{i:02} in the tables"
        );
    }
    assert!(html.contains("The book has 25 underlyings"));
}
