//! `saltus explain` through the real binary: the EXPLAIN.csv contract on
//! the invented demo books, identities of the attribution (the steps
//! telescope to the change, the aggregates re-add, zero moves give zeros,
//! the Taylor remainder's order), the row contract and the page.

use crate::common::{merton, read_csv, saltus};
use saltus::engines::series;
use saltus::model::OptionKind::Put;
use saltus::reports::explain::{COLUMNS, EXTRA_COLUMNS};
use std::collections::HashMap;
use std::fs;
use std::path::Path;

fn data(name: &str) -> String {
    format!("{}/data/{name}", env!("CARGO_MANIFEST_DIR"))
}

type Rows = Vec<HashMap<String, String>>;

/// Runs explain and returns the exit code and the rows keyed by column.
fn explain(before: &Path, after: &Path, extra: &[&str]) -> (i32, Vec<String>, Rows) {
    let out = saltus()
        .arg("explain")
        .arg(before)
        .arg(after)
        .args(extra)
        .output()
        .unwrap();
    let (h, rows) = read_csv(&out.stdout);
    let rows = rows
        .into_iter()
        .map(|r| h.iter().cloned().zip(r).collect())
        .collect();
    (out.status.code().unwrap(), h, rows)
}

fn f(r: &HashMap<String, String>, c: &str) -> f64 {
    r[c].parse()
        .unwrap_or_else(|_| panic!("{c} = '{}' in {r:?}", r[c]))
}

const SUMMED: [&str; 15] = [
    "value_before",
    "value_after",
    "change",
    "from_spot",
    "from_vol",
    "from_time",
    "from_rates",
    "from_jumps",
    "from_cross",
    "unexplained",
    "step_spot",
    "step_vol",
    "step_time",
    "step_rates",
    "step_jumps",
];

fn demo() -> (i32, Vec<String>, Rows) {
    explain(
        Path::new(&data("demo_explain_before.csv")),
        Path::new(&data("demo_explain_after.csv")),
        &[],
    )
}

#[test]
fn demo_books_give_the_documented_columns_and_statuses() {
    let (code, h, rows) = demo();
    assert_eq!(code, 1, "the demo has one bad row");
    let want: Vec<&str> = COLUMNS.iter().chain(&EXTRA_COLUMNS).copied().collect();
    assert_eq!(h, want);
    let status = |id: &str| {
        rows.iter()
            .find(|r| r["id"] == id && r["level"] == "position")
            .unwrap()["status"]
            .clone()
    };
    assert_eq!(status("QUO-NEW"), "new");
    assert_eq!(status("TAR-EXP"), "expired");
    assert!(
        status("VEL-006")
            .ends_with("demo_explain_after.csv line 16: vol must not be negative, got -0.25"),
        "{}",
        status("VEL-006")
    );
    let levels: Vec<&str> = rows.iter().map(|r| r["level"].as_str()).collect();
    assert_eq!(levels.iter().filter(|l| **l == "position").count(), 17);
    assert_eq!(
        &levels[17..],
        ["underlying", "underlying", "underlying", "book"]
    );
    let book = rows.last().unwrap();
    assert_eq!(
        [
            &book["positions"],
            &book["left_out"],
            &book["new"],
            &book["expired"]
        ],
        ["14", "1", "1", "1"]
    );
    assert!(book["status"].starts_with("partial: 1 position left out"));
}

#[test]
fn values_are_quantity_times_multiplier_times_the_series_price() {
    // QUO-001: put 1700 on 1850, expiry 2027-04-16 valued 2027-03-01:
    // 46 calendar days (counted by hand: 30 in March, 16 in April) / 365.
    let (_, _, rows) = demo();
    let r = rows.iter().find(|r| r["id"] == "QUO-001").unwrap();
    let c = merton(
        Put,
        1850.0,
        1700.0,
        46.0 / 365.0,
        0.031,
        0.015,
        0.16,
        0.30,
        -0.10,
        0.08,
    );
    let v = -40.0 * 10.0 * series::price(&c).unwrap().greeks.price;
    assert!(
        (f(r, "value_before") - v).abs() <= 1e-12 * v.abs(),
        "{} vs {v}",
        r["value_before"]
    );
    assert!((f(r, "dt_years") - 1.0 / 365.0).abs() < 1e-15);
}

#[test]
fn steps_add_up_to_the_change_and_the_aggregates_re_add() {
    // Source: the waterfall telescopes (each step starts where the last
    // ended), and aggregates are sums of the explained positions' rows,
    // re-added here from the CSV.
    let (_, _, rows) = demo();
    let mut by: HashMap<String, [f64; 15]> = HashMap::new();
    for r in rows
        .iter()
        .filter(|r| r["level"] == "position" && r["status"] == "ok")
    {
        let steps: f64 = [
            "step_spot",
            "step_vol",
            "step_time",
            "step_rates",
            "step_jumps",
        ]
        .iter()
        .map(|c| f(r, c))
        .sum();
        let scale = f(r, "value_before").abs().max(f(r, "value_after").abs());
        assert!((steps - f(r, "change")).abs() <= 1e-14 * scale, "{r:?}");
        let from: f64 = [
            "from_spot",
            "from_vol",
            "from_time",
            "from_rates",
            "from_jumps",
            "from_cross",
        ]
        .iter()
        .map(|c| f(r, c))
        .sum();
        assert!((f(r, "change") - from - f(r, "unexplained")).abs() <= 1e-13 * scale);
        assert!(
            (f(r, "from_delta") + f(r, "from_gamma") - f(r, "from_spot")).abs() <= 1e-13 * scale
        );
        for key in [r["underlying"].clone(), "(book)".to_string()] {
            let acc = by.entry(key).or_insert([0.0; 15]);
            for (a, c) in acc.iter_mut().zip(SUMMED) {
                *a += f(r, c);
            }
        }
    }
    for r in rows.iter().filter(|r| r["level"] != "position") {
        let want = by[&r["underlying"]];
        for (w, c) in want.iter().zip(SUMMED) {
            assert!(
                (f(r, c) - w).abs() <= 1e-9 * (1.0 + w.abs()),
                "{c}: {} vs {w}",
                r[c]
            );
        }
    }
}

#[test]
fn zero_moves_give_zero_in_every_column() {
    // Source: the definitions. The same book on both sides: no change, no
    // Greek term, no step, nothing unexplained, exit 0.
    let dir = tempfile::tempdir().unwrap();
    let text = fs::read_to_string(data("demo_explain_before.csv")).unwrap();
    let (b, a) = (dir.path().join("b.csv"), dir.path().join("a.csv"));
    fs::write(&b, &text).unwrap();
    fs::write(&a, &text).unwrap();
    let (code, _, rows) = explain(&b, &a, &[]);
    assert_eq!(code, 0);
    for r in &rows {
        assert_eq!(r["status"], "ok", "{r:?}");
        for c in SUMMED[2..].iter().chain(&EXTRA_COLUMNS[..10]) {
            if r["level"] == "position" || *c != "dt_years" {
                assert_eq!(f(r, c), 0.0, "{c} in {r:?}");
            }
        }
    }
}

#[test]
fn unexplained_is_third_order_in_a_spot_vol_move_through_the_csv() {
    // Source: Taylor's theorem, as in the library test, read back from
    // EXPLAIN.csv (numbers are written in shortest round-trip form).
    let dir = tempfile::tempdir().unwrap();
    let head = "id,kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol,quantity";
    let b = dir.path().join("b.csv");
    fs::write(
        &b,
        format!("{head}\nP1,put,100,95,0.4,0.03,0.22,0.6,-0.15,0.12,5\n"),
    )
    .unwrap();
    let mut rem = Vec::new();
    for i in 0..5 {
        let h = 0.1 / f64::from(1 << i);
        let a = dir.path().join("a.csv");
        let spot = 100.0 * (1.0 + h);
        let vol = 0.22 + 0.5 * h;
        fs::write(
            &a,
            format!("{head}\nP1,put,{spot},95,0.4,0.03,{vol},0.6,-0.15,0.12,5\n"),
        )
        .unwrap();
        let (code, _, rows) = explain(&b, &a, &[]);
        assert_eq!(code, 0);
        rem.push(f(&rows[0], "unexplained").abs());
    }
    let ratios: Vec<f64> = rem.windows(2).map(|w| w[0] / w[1]).collect();
    eprintln!("explain_cli: remainder ratios as the move halves: {ratios:.3?}");
    assert!((7.0..9.0).contains(ratios.last().unwrap()), "{ratios:?}");
}

#[test]
fn valuation_dates_from_the_option_give_the_time_step() {
    // Two dated books without a valuation_date column: --valuation-date
    // BEFORE,AFTER, three calendar days apart (ACT/365 fixed: 3/365).
    let dir = tempfile::tempdir().unwrap();
    let head = "id,kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol";
    let row = "A,call,100,100,2027-09-17,0.03,0.2,0.5,-0.1,0.1";
    let (b, a) = (dir.path().join("b.csv"), dir.path().join("a.csv"));
    fs::write(&b, format!("{head}\n{row}\n")).unwrap();
    fs::write(&a, format!("{head}\n{row}\n")).unwrap();
    let (code, _, rows) = explain(&b, &a, &["--valuation-date", "2027-03-05,2027-03-08"]);
    assert_eq!(code, 0);
    assert!((f(&rows[0], "dt_years") - 3.0 / 365.0).abs() < 1e-15);
    assert!(
        f(&rows[0], "from_time") < 0.0,
        "a long call loses time value"
    );
    assert_eq!(f(&rows[0], "step_spot"), 0.0);
    let bad = saltus()
        .arg("explain")
        .arg(&b)
        .arg(&a)
        .args(["--valuation-date", "2027-03-05,"])
        .output()
        .unwrap();
    assert_eq!(bad.status.code(), Some(2));
}

#[test]
fn fatal_errors_name_the_file_and_leave_outputs_alone() {
    let dir = tempfile::tempdir().unwrap();
    let b = dir.path().join("noid.csv");
    fs::write(
        &b,
        "kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol\ncall,1,1,1,0,0.2,0,0,0\n",
    )
    .unwrap();
    let a = Path::new(&data("demo_explain_after.csv")).to_path_buf();
    let out = dir.path().join("out.csv");
    fs::write(&out, "old").unwrap();
    let r = saltus()
        .arg("explain")
        .arg(&b)
        .arg(&a)
        .arg("-o")
        .arg(&out)
        .output()
        .unwrap();
    assert_eq!(r.status.code(), Some(2));
    let err = String::from_utf8_lossy(&r.stderr);
    assert!(
        err.contains("noid.csv line 1: the book has no id column"),
        "{err}"
    );
    assert_eq!(fs::read_to_string(&out).unwrap(), "old");
    // The output may not be either input book.
    let copy = dir.path().join("after.csv");
    fs::copy(&a, &copy).unwrap();
    let r = saltus()
        .arg("explain")
        .arg(data("demo_explain_before.csv"))
        .arg(&copy)
        .arg("-o")
        .arg(&copy)
        .output()
        .unwrap();
    assert_eq!(r.status.code(), Some(2));
    assert_eq!(fs::read(&copy).unwrap(), fs::read(&a).unwrap());
}

#[test]
fn the_page_is_self_contained_with_parseable_charts() {
    let dir = tempfile::tempdir().unwrap();
    let rep = dir.path().join("rep");
    let r = saltus()
        .arg("explain")
        .arg(data("demo_explain_before.csv"))
        .arg(data("demo_explain_after.csv"))
        .arg("-o")
        .arg(dir.path().join("x.csv"))
        .arg("--report")
        .arg(&rep)
        .output()
        .unwrap();
    assert_eq!(r.status.code(), Some(1));
    let page = fs::read_to_string(rep.join("explain.html")).unwrap();
    assert!(!page.contains("<script"));
    assert!(!page.contains("src=") && !page.contains("href="));
    let mut svgs = 0;
    let mut rest = page.as_str();
    while let Some(start) = rest.find("<svg") {
        let end = rest[start..].find("</svg>").unwrap() + start + 6;
        let doc = roxmltree::Document::parse(&rest[start..end]).expect("SVG parses as XML");
        let bars = doc.descendants().filter(|n| n.has_tag_name("rect")).count();
        assert!(bars >= 6, "a waterfall has a bar per step and a total");
        svgs += 1;
        rest = &rest[end..];
    }
    assert_eq!(
        svgs, 2,
        "the revaluation waterfall and the Greek attribution"
    );
    for text in [
        "Largest unexplained",
        "QUO-NEW",
        "TAR-EXP",
        "vol must not be negative",
        "VELLUM-BANK",
    ] {
        assert!(page.contains(text), "{text}");
    }
}

#[test]
fn output_is_the_same_on_one_and_two_threads() {
    // Determinism rule of the project: the same digits on any thread count.
    let run = |threads: &str| {
        saltus()
            .args(["--threads", threads, "explain"])
            .arg(data("demo_explain_before.csv"))
            .arg(data("demo_explain_after.csv"))
            .arg("-q")
            .output()
            .unwrap()
            .stdout
    };
    let one = run("1");
    assert!(!one.is_empty());
    assert_eq!(one, run("2"));
}

#[test]
fn params_take_one_fitted_file_per_day() {
    // --params BEFORE,AFTER: only the fitted vol moves (0.20 to 0.21), so
    // every non-vol column is zero and vega x 0.01 + volga x 0.01^2 / 2
    // explains the change to third order.
    let dir = tempfile::tempdir().unwrap();
    let head = "id,underlying,kind,spot,strike,expiry,rate";
    let row = "A,ZU,call,100,100,0.5,0.03";
    let (b, a) = (dir.path().join("b.csv"), dir.path().join("a.csv"));
    fs::write(&b, format!("{head}\n{row}\n")).unwrap();
    fs::write(&a, format!("{head}\n{row}\n")).unwrap();
    let ph = "underlying,vol,jump_rate,jump_mean,jump_vol,status";
    let (p0, p1) = (dir.path().join("p0.csv"), dir.path().join("p1.csv"));
    fs::write(&p0, format!("{ph}\nZU,0.20,0.5,-0.1,0.1,ok\n")).unwrap();
    fs::write(&p1, format!("{ph}\nZU,0.21,0.5,-0.1,0.1,ok\n")).unwrap();
    let pair = format!("{},{}", p0.display(), p1.display());
    let (code, _, rows) = explain(&b, &a, &["--params", &pair]);
    assert_eq!(code, 0, "{rows:?}");
    let r = &rows[0];
    for c in [
        "from_spot",
        "from_time",
        "from_rates",
        "from_jumps",
        "from_cross",
        "step_spot",
        "step_time",
    ] {
        assert_eq!(f(r, c), 0.0, "{c}");
    }
    assert!(f(r, "from_vol") > 0.0);
    assert!(f(r, "unexplained").abs() < 1e-3 * f(r, "change").abs());
    assert_eq!(f(r, "step_vol"), f(r, "change"));
}
