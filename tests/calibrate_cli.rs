//! The `calibrate` command through the real binary: the quotes-file row
//! contract, the PARAMS and residuals columns, the report directory, the
//! options, and the demo quote sheet (made by scripts/make_demo_quotes.py
//! from invented parameters with an independent Python Merton series).

use assert_cmd::Command;
use std::fs;
use std::path::Path;

fn demo() -> &'static str {
    concat!(env!("CARGO_MANIFEST_DIR"), "/data/demo_quotes.csv")
}

fn saltus() -> Command {
    Command::cargo_bin("saltus").unwrap()
}

fn records(path: &Path) -> (csv::StringRecord, Vec<csv::StringRecord>) {
    let mut r = csv::Reader::from_path(path).unwrap();
    let h = r.headers().unwrap().clone();
    (h, r.records().map(|x| x.unwrap()).collect())
}

fn col(h: &csv::StringRecord, name: &str) -> usize {
    h.iter()
        .position(|x| x == name)
        .unwrap_or_else(|| panic!("no column {name}"))
}

const CONTRACT: [&str; 16] = [
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
];

#[test]
fn demo_sheet_params_residuals_and_report() {
    let dir = tempfile::tempdir().unwrap();
    let (params, res, rep) = (
        dir.path().join("params.csv"),
        dir.path().join("res.csv"),
        dir.path().join("fit"),
    );
    let out = saltus()
        .args(["calibrate", demo(), "-o"])
        .arg(&params)
        .arg("--residuals")
        .arg(&res)
        .arg("--report")
        .arg(&rep)
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(1),
        "the demo sheet has two bad rows: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let (h, rows) = records(&params);
    assert_eq!(&h.iter().take(16).collect::<Vec<_>>(), &CONTRACT);
    let names: Vec<&str> = rows.iter().map(|r| &r[0]).collect();
    assert_eq!(names, ["KORRIN-BIO", "VALDEN-ENERGY", "ZEPHYRA-IDX"]);
    // The invented parameters of scripts/make_demo_quotes.py: the fit must
    // land within 4 reported standard errors of each (noise +-0.2 vol pts).
    let truth = [
        ("KORRIN-BIO", [0.38, 0.5, -0.25, 0.3]),
        ("VALDEN-ENERGY", [0.27, 0.8, 0.04, 0.15]),
        ("ZEPHYRA-IDX", [0.13, 0.3, -0.12, 0.1]),
    ];
    for (r, (name, t)) in rows.iter().zip(truth) {
        assert_eq!(&r[0], name);
        assert_eq!(&r[col(&h, "status")], "ok");
        let rmse: f64 = r[col(&h, "rmse_vol_pts")].parse().unwrap();
        assert!(rmse < 0.3, "{name}: rmse {rmse}");
        for (j, p) in ["vol", "jump_rate", "jump_mean", "jump_vol"]
            .iter()
            .enumerate()
        {
            let v: f64 = r[col(&h, p)].parse().unwrap();
            let se: f64 = r[col(&h, &format!("se_{p}"))].parse().unwrap();
            assert!(
                (v - t[j]).abs() < 4.0 * se,
                "{name} {p}: {v} vs {} (se {se})",
                t[j]
            );
        }
    }
    // Residuals: every input row echoed in order, bad rows named.
    let (hi, input) = records(Path::new(demo()));
    let (hr, res_rows) = records(&res);
    assert_eq!(res_rows.len(), input.len());
    assert_eq!(
        hr.iter().skip(hi.len()).collect::<Vec<_>>(),
        [
            "market_vol",
            "model_vol",
            "residual_vol_pts",
            "market_price",
            "model_price",
            "status"
        ]
    );
    for (a, b) in input.iter().zip(&res_rows) {
        assert_eq!(
            a.iter().collect::<Vec<_>>(),
            b.iter().take(hi.len()).collect::<Vec<_>>()
        );
    }
    let status = |line: usize| res_rows[line - 2][col(&hr, "status")].to_string();
    assert!(
        status(200).starts_with("error: line 200: two quote kinds"),
        "{}",
        status(200)
    );
    assert!(
        status(201).starts_with("excluded: line 201: arbitrage: call price 9.5"),
        "{}",
        status(201)
    );
    assert_eq!(status(2), "ok");
    // Residual column = 100 (model - market), checked on the written digits.
    let r2 = &res_rows[0];
    let f = |c: &str| r2[col(&hr, c)].parse::<f64>().unwrap();
    assert!((f("residual_vol_pts") - 100.0 * (f("model_vol") - f("market_vol"))).abs() < 1e-12);
    // The report: self-contained HTML with SVG, no scripts or remote content.
    let html = fs::read_to_string(rep.join("report.html")).unwrap();
    assert!(html.contains("<svg") && html.contains("ZEPHYRA-IDX"));
    for bad in ["<script", "src=\"http", "href=\"http", "@import", "url("] {
        assert!(!html.contains(bad), "{bad}");
    }
    assert_eq!(
        fs::read(rep.join("params.csv")).unwrap(),
        fs::read(&params).unwrap()
    );
}

fn run_text(text: &str, extra: &[&str]) -> (i32, String, String, tempfile::TempDir) {
    let dir = tempfile::tempdir().unwrap();
    let q = dir.path().join("q.csv");
    fs::write(&q, text).unwrap();
    let res = dir.path().join("res.csv");
    let out = saltus()
        .arg("calibrate")
        .arg(&q)
        .arg("--residuals")
        .arg(&res)
        .args(extra)
        .output()
        .unwrap();
    let res_text = fs::read_to_string(&res).unwrap_or_default();
    (
        out.status.code().unwrap(),
        String::from_utf8(out.stdout).unwrap(),
        res_text + &String::from_utf8_lossy(&out.stderr),
        dir,
    )
}

/// Black-Scholes quotes at vol 0.2 (spot 100, rate 0, T 0.5 and 1) as
/// implied vols, plus the given rows.
fn sheet(extra_rows: &str) -> String {
    let mut s = String::from("underlying,kind,strike,expiry,spot,rate,price,bid,ask,implied_vol\n");
    for t in ["0.5", "1"] {
        for k in [80, 90, 100, 110, 120] {
            let kind = if k < 100 { "put" } else { "call" };
            s.push_str(&format!("A,{kind},{k},{t},100,0,,,,0.2\n"));
        }
    }
    s + extra_rows
}

#[test]
fn a_row_needs_exactly_one_quote_kind() {
    let (code, _, res, _d) = run_text(
        &sheet("A,call,100,1,100,0,8,,,0.2\nA,call,100,1,100,0,,,,\nA,put,100,1,100,0,,5,,\n"),
        &[],
    );
    assert_eq!(code, 1);
    assert!(res.contains(
        "error: line 12: two quote kinds in one row (price and implied_vol): give exactly one of \
         price, bid and ask, or implied_vol"
    ));
    assert!(res.contains(
        "error: line 13: no quote: give exactly one of price, bid and ask, or implied_vol"
    ));
    assert!(res.contains("error: line 14: bid is given without ask"));
}

#[test]
fn bad_fields_name_line_and_column() {
    let (code, _, res, _d) = run_text(
        &sheet("A,call,abc,1,100,0,,,,0.2\nA,call,100,1,100,0,,,,21.5%\nA,call,100,2027-03-19,100,0,,,,0.2\n"),
        &[],
    );
    assert_eq!(code, 1);
    assert!(
        res.contains("error: line 12: strike is not a number: 'abc'"),
        "{res}"
    );
    assert!(res.contains("error: line 13: implied_vol is not a number: '21.5%' (write 0.215)"));
    assert!(
        res.contains("error: line 14: expiry 2027-03-19 is a date but no valuation date is known")
    );
}

#[test]
fn arbitrage_is_flagged_and_excluded_unless_kept() {
    // Calls at 100, 110, 120 (T = 1, spot 100, rate 0): the 110 call priced
    // above the chord of its neighbours (convexity), and a call at 130
    // priced above the 120 call (monotonicity). Prices by hand: BS(0.2)
    // values of about 7.97 (K=100) and 1.70 (K=120), from memory.
    let rows = "B,call,100,1,100,0,7.97,,,\nB,call,110,1,100,0,6,,,\nB,call,120,1,100,0,1.7,,,\n\
                B,call,130,1,100,0,2,,,\nB,put,90,1,100,0,,,,0.22\nB,put,80,1,100,0,,,,0.24\n\
                B,put,85,1,100,0,,,,0.23\n";
    let (code, params, res, _d) = run_text(&sheet(rows), &[]);
    assert_eq!(code, 1);
    assert!(
        res.contains(
            "excluded: line 13: arbitrage: call prices are not convex in strike: 6 at strike 110"
        ),
        "{res}"
    );
    assert!(res.contains("excluded: line 15: arbitrage: call price 2 at strike 130 is above 1.7"));
    let used = |p: &str, name: &str| {
        let mut r = csv::Reader::from_reader(p.as_bytes());
        let h = r.headers().unwrap().clone();
        r.records()
            .map(|x| x.unwrap())
            .find(|x| &x[0] == name)
            .map(|x| x[col(&h, "quotes_used")].to_string())
            .unwrap()
    };
    assert_eq!(used(&params, "B"), "5");
    let (_, params, res, _d) = run_text(&sheet(rows), &["--keep-arbitrage"]);
    assert_eq!(used(&params, "B"), "7");
    assert!(res.contains("warning: line 13: kept with --keep-arbitrage: arbitrage:"));
    // A price above its upper bound (a call worth more than the spot) has
    // no implied vol: excluded even with --keep-arbitrage.
    let (_, _, res, _d) = run_text(&sheet("A,call,100,1,100,0,101,,,\n"), &["--keep-arbitrage"]);
    assert!(
        res.contains("excluded: line 12: arbitrage: price 101 is not below the no-arbitrage upper bound 100 (by 1)"),
        "{res}"
    );
}

#[test]
fn fix_and_per_expiry() {
    let (code, params, _, _d) = run_text(&sheet(""), &["--fix", "jump_mean=-0.1", "--per-expiry"]);
    assert!(code <= 1);
    let mut r = csv::Reader::from_reader(params.as_bytes());
    let h = r.headers().unwrap().clone();
    assert_eq!(&h[1], "expiry");
    let rows: Vec<_> = r.records().map(|x| x.unwrap()).collect();
    assert_eq!(rows.len(), 2);
    let expiry = |i: usize| rows[i][1].parse::<f64>().unwrap();
    assert_eq!((expiry(0), expiry(1)), (0.5, 1.0));
    for row in &rows {
        assert_eq!(&row[col(&h, "jump_mean")], "-0.1");
        assert_eq!(&row[col(&h, "fixed")], "jump_mean");
        assert_eq!(&row[col(&h, "se_jump_mean")], "");
        // A flat smile: vol 0.2 reproduced, jumps not identified.
        let v: f64 = row[col(&h, "vol")].parse().unwrap();
        assert!((v - 0.2).abs() < 1e-3, "{v}");
        assert!(
            row[col(&h, "flags")].contains("weakly identified: jump"),
            "{:?}",
            row
        );
    }
}

#[test]
fn options_are_validated_before_any_work() {
    for (args, msg) in [
        (vec!["--fix", "bogus=1"], "--fix: unknown parameter 'bogus'"),
        (
            vec!["--fix", "vol=-0.1"],
            "--fix: vol = -0.1 is outside the calibrated range",
        ),
        (
            vec!["--fix", "vol=0.2", "--fix", "vol=0.3"],
            "vol is given twice",
        ),
        (vec!["--regularize", "1"], "--regularize needs --prior"),
        (
            vec!["--prior", "vol=0.2"],
            "--prior has no effect without --regularize",
        ),
        (
            vec!["--regularize", "-1", "--prior", "vol=0.2"],
            "--regularize must be",
        ),
    ] {
        let (code, _, err, _d) = run_text(&sheet(""), &args);
        assert_eq!(code, 2, "{args:?}");
        assert!(err.contains(msg), "{args:?}: {err}");
    }
    let (code, _, err, _d) = run_text("underlying,kind,strike,expiry,price\n", &[]);
    assert_eq!(code, 2);
    assert!(
        err.contains("missing required columns: spot, rate"),
        "{err}"
    );
}

#[test]
fn the_input_is_never_overwritten() {
    let dir = tempfile::tempdir().unwrap();
    let q = dir.path().join("q.csv");
    fs::write(&q, sheet("")).unwrap();
    let out = saltus()
        .arg("calibrate")
        .arg(&q)
        .arg("-o")
        .arg(&q)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert_eq!(fs::read_to_string(&q).unwrap(), sheet(""));
}

#[test]
fn regularisation_pulls_toward_the_prior() {
    // With a heavy weight the fixed point is the prior itself.
    let (_, params, _, _d) = run_text(
        &sheet(""),
        &[
            "--prior",
            "vol=0.2,jump_rate=0.5,jump_mean=-0.2,jump_vol=0.1",
            "--regularize",
            "1e8",
        ],
    );
    let mut r = csv::Reader::from_reader(params.as_bytes());
    let h = r.headers().unwrap().clone();
    let row = r.records().next().unwrap().unwrap();
    let v = |c: &str| row[col(&h, c)].parse::<f64>().unwrap();
    assert!((v("jump_rate") - 0.5).abs() < 1e-3, "{row:?}");
    assert!((v("jump_mean") + 0.2).abs() < 1e-3, "{row:?}");
}

#[test]
fn output_does_not_depend_on_the_thread_count() {
    let run = |threads: &str| {
        saltus()
            .args(["--threads", threads, "calibrate", demo(), "-q"])
            .output()
            .unwrap()
            .stdout
    };
    assert_eq!(run("1"), run("2"));
}

/// The demo sheet with each expiry rounded to whole days, written once as a
/// year fraction (days / 365) and once as a date after 2026-12-01.
fn dated_sheets(dir: &Path) -> (std::path::PathBuf, std::path::PathBuf) {
    let mut r = csv::Reader::from_path(demo()).unwrap();
    let h = r.headers().unwrap().clone();
    let t = col(&h, "expiry");
    let (years, dated) = (dir.join("years.csv"), dir.join("dated.csv"));
    let mut wy = csv::Writer::from_path(&years).unwrap();
    let mut wd = csv::Writer::from_path(&dated).unwrap();
    wy.write_record(&h).unwrap();
    wd.write_record(&h).unwrap();
    let start = jiff::civil::date(2026, 12, 1);
    for rec in r.records() {
        let rec = rec.unwrap();
        let (mut y, mut d): (Vec<String>, Vec<String>) = (Vec::new(), Vec::new());
        for (i, f) in rec.iter().enumerate() {
            if i == t && f.parse::<f64>().is_ok() {
                let days = (f.parse::<f64>().unwrap() * 365.0).round() as i64;
                y.push(format!("{}", days as f64 / 365.0));
                d.push(
                    start
                        .checked_add(jiff::Span::new().days(days))
                        .unwrap()
                        .to_string(),
                );
            } else {
                y.push(f.to_string());
                d.push(f.to_string());
            }
        }
        wy.write_record(&y).unwrap();
        wd.write_record(&d).unwrap();
    }
    wy.flush().unwrap();
    wd.flush().unwrap();
    (years, dated)
}

#[test]
fn dated_expiries_fit_exactly_as_their_year_fractions() {
    // ACT/365 fixed: a date D days after the valuation date is D / 365 years
    // (the convention stated in the README), so both sheets give the same fit.
    let dir = tempfile::tempdir().unwrap();
    let (years, dated) = dated_sheets(dir.path());
    let run = |sheet: &Path, extra: &[&str]| {
        let out = saltus()
            .arg("calibrate")
            .arg(sheet)
            .args(extra)
            .output()
            .unwrap();
        assert!(
            out.status.code().unwrap() <= 1,
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        out.stdout
    };
    let a = run(&years, &[]);
    let b = run(&dated, &["--valuation-date", "2026-12-01"]);
    assert!(!a.is_empty());
    assert_eq!(String::from_utf8_lossy(&a), String::from_utf8_lossy(&b));
    // Without a valuation date every dated quote is a row error naming the column.
    let res = dir.path().join("res.csv");
    let out = saltus()
        .arg("calibrate")
        .arg(&dated)
        .arg("--residuals")
        .arg(&res)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1));
    let (h, rows) = records(&res);
    let s = col(&h, "status");
    let dated_rows = rows
        .iter()
        .filter(|r| r[s].contains("is a date but no valuation date is known"));
    assert!(
        dated_rows.count() >= 190,
        "statuses: {:?}",
        rows.iter()
            .map(|r| r[s].to_string())
            .take(3)
            .collect::<Vec<_>>()
    );
}
