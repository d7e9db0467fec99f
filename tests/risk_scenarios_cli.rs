//! `saltus risk --scenarios SCEN.csv` (issue 11): named scenarios through
//! the real binary, checked against the command's own grid (the same full
//! revaluation by definition: a scenario whose only shocks are a grid
//! point's spot and vol shocks *is* that grid point), against the rule that
//! a `*` row is the per-underlying rows applied one by one (the P&L of a
//! book is the sum of its positions' P&L), against an independent
//! revaluation with the library for the jump and rate columns, and for bad
//! rows reported with line and column.

use crate::common::{csv_file_rows, merton, saltus};
use saltus::engines::series;
use saltus::model::OptionKind::Put;
use std::collections::HashMap;
use std::fs;
use std::path::{Path, PathBuf};

fn demo_book() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("data/demo_book.csv")
}

/// Runs `saltus risk BOOK --scenarios SCEN -o DIR` with the scenario text;
/// returns the temporary directory, the report directory, the exit code
/// and stderr.
fn run(book: &Path, scenarios: &str, extra: &[&str]) -> (tempfile::TempDir, PathBuf, i32, String) {
    let dir = tempfile::tempdir().unwrap();
    let scen = dir.path().join("scen.csv");
    fs::write(&scen, scenarios).unwrap();
    let out = dir.path().join("out");
    let o = saltus()
        .arg("risk")
        .arg(book)
        .arg("--scenarios")
        .arg(&scen)
        .arg("-o")
        .arg(&out)
        .args(extra)
        .output()
        .unwrap();
    let code = o.status.code().unwrap_or(-1);
    (
        dir,
        out,
        code,
        String::from_utf8_lossy(&o.stderr).into_owned(),
    )
}

/// `(scenario, underlying) -> (pnl field, status)` of scenarios_user.csv.
fn user_cells(dir: &Path) -> HashMap<(String, String), (String, String)> {
    let rows = csv_file_rows(&dir.join("scenarios_user.csv"));
    assert_eq!(
        rows[0],
        [
            "scenario",
            "underlying",
            "pnl",
            "level",
            "rows_failed",
            "status"
        ]
    );
    rows[1..]
        .iter()
        .map(|r| ((r[0].clone(), r[1].clone()), (r[2].clone(), r[5].clone())))
        .collect()
}

/// `(underlying, spot_shock_pct, vol_shock_pts) -> pnl field` of scenarios.csv.
fn grid_cells(dir: &Path) -> HashMap<(String, String, String), String> {
    let rows = csv_file_rows(&dir.join("scenarios.csv"));
    assert_eq!(
        &rows[0][..4],
        ["underlying", "spot_shock_pct", "vol_shock_pts", "pnl"]
    );
    rows[1..]
        .iter()
        .map(|r| ((r[0].clone(), r[1].clone(), r[2].clone()), r[3].clone()))
        .collect()
}

const GROUPS: [&str; 4] = ["KORRIN-BIO", "VALDEN-ENERGY", "ZEPHYRA-IDX", "(book)"];

#[test]
fn issue11_scenario_equal_to_a_grid_point_reproduces_that_cell_exactly() {
    // By definition (README, the scenario file): a row with only
    // spot_shock_pct and vol_shock_pts revalues exactly as the grid does.
    let scen = "scenario,underlying,spot_shock_pct,vol_shock_pts\n\
                down,*,-10,2.5\n\
                up,*,+25,-7.5\n\
                mixed,*,-10,2.5\n\
                mixed,ZEPHYRA-IDX,5,0\n\
                only-one,KORRIN-BIO,-30,10\n";
    let (_t, out, code, err) = run(&demo_book(), scen, &[]);
    assert_eq!(code, 1, "the demo book has three bad rows: {err}");
    let user = user_cells(&out);
    let grid = grid_cells(&out);
    let g =
        |u: &str, s: &str, v: &str| grid[&(u.to_string(), s.to_string(), v.to_string())].clone();
    let cell = |scenario: &str, u: &str| user[&(scenario.to_string(), u.to_string())].clone();
    for u in GROUPS {
        // Digit for digit: the same revaluation summed in the same order.
        assert_eq!(cell("down", u), (g(u, "-10.0", "2.5"), "ok".into()), "{u}");
        assert_eq!(cell("up", u), (g(u, "25.0", "-7.5"), "ok".into()), "{u}");
    }
    // A named underlying's row wins over `*`.
    assert_eq!(
        cell("mixed", "ZEPHYRA-IDX").0,
        g("ZEPHYRA-IDX", "5.0", "0.0")
    );
    assert_eq!(
        cell("mixed", "KORRIN-BIO").0,
        g("KORRIN-BIO", "-10.0", "2.5")
    );
    // An underlying no row names does not move.
    assert_eq!(
        cell("only-one", "KORRIN-BIO").0,
        g("KORRIN-BIO", "-30.0", "10.0")
    );
    assert_eq!(cell("only-one", "VALDEN-ENERGY").0, "0.0");
    assert_eq!(
        cell("only-one", "(book)").0,
        g("KORRIN-BIO", "-30.0", "10.0")
    );
    // The page shows the table.
    let html = fs::read_to_string(out.join("report.html")).unwrap();
    assert!(html.contains("<h2>Named scenarios</h2>"));
    assert!(html.contains("<td>only-one</td>"));
}

#[test]
fn issue11_star_row_equals_the_per_underlying_rows_applied_one_by_one() {
    // Every shock column, so the rule is checked for all of them.
    let shock = "-8,3,1.5,-0.02,0.03,50";
    let mut scen = String::from(
        "scenario,underlying,spot_shock_pct,vol_shock_pts,jump_rate_mult,jump_mean_shift,jump_vol_shift,rate_shift_bp\n",
    );
    scen.push_str(&format!("all,*,{shock}\n"));
    for u in &GROUPS[..3] {
        scen.push_str(&format!("each,{u},{shock}\n"));
        scen.push_str(&format!("only {u},{u},{shock}\n"));
    }
    let (_t, out, code, err) = run(&demo_book(), &scen, &[]);
    assert_eq!(code, 1, "{err}");
    let user = user_cells(&out);
    let pnl = |s: &str, u: &str| -> f64 {
        let (v, st) = &user[&(s.to_string(), u.to_string())];
        assert_eq!(st, "ok");
        v.parse().unwrap()
    };
    for u in GROUPS {
        // The same rows, the same revaluations, the same order: exact.
        assert_eq!(pnl("all", u), pnl("each", u), "{u}");
    }
    let mut sum = 0.0;
    let mut scale = 0.0;
    for u in &GROUPS[..3] {
        // One underlying at a time moves that underlying only.
        assert_eq!(pnl(&format!("only {u}"), u), pnl("all", u), "{u}");
        for other in &GROUPS[..3] {
            if other != u {
                assert_eq!(pnl(&format!("only {u}"), other), 0.0);
            }
        }
        let b = pnl(&format!("only {u}"), "(book)");
        sum += b;
        scale += b.abs();
    }
    // The book's P&L is the sum of its positions' P&L: the three one-by-one
    // books add up to the `*` book up to the rounding of a different order.
    let all = pnl("all", "(book)");
    assert!((all - sum).abs() <= 1e-12 * scale, "{all} vs {sum}");
}

#[test]
fn issue11_jump_and_rate_columns_shift_the_inputs_in_their_units() {
    // One position revalued independently with the library: jump rate x 2,
    // jump mean - 0.05, jump vol + 0.05, rate + 100 bp (= 0.01), spot +5%,
    // vol +2 points, as README defines the columns.
    let book_text = "id,underlying,kind,spot,strike,expiry,rate,div_yield,vol,jump_rate,jump_mean,jump_vol,quantity,multiplier\n\
                     A,ORVAL-SYN,put,100,95,0.75,0.03,0.01,0.22,0.4,-0.1,0.15,-3,10\n";
    let dir = tempfile::tempdir().unwrap();
    let book = dir.path().join("book.csv");
    fs::write(&book, book_text).unwrap();
    let scen = "underlying,scenario,vol_shock_pts,spot_shock_pct,jump_rate_mult,jump_mean_shift,jump_vol_shift,rate_shift_bp\n\
                ORVAL-SYN,stress,2,5,2,-0.05,0.05,100\n";
    let (_t, out, code, err) = run(&book, scen, &[]);
    assert_eq!(code, 0, "{err}");
    let base = merton(Put, 100.0, 95.0, 0.75, 0.03, 0.01, 0.22, 0.4, -0.1, 0.15);
    let shocked = merton(Put, 105.0, 95.0, 0.75, 0.04, 0.01, 0.24, 0.8, -0.15, 0.2);
    let want = -30.0
        * (series::price(&shocked).unwrap().greeks.price
            - series::price(&base).unwrap().greeks.price);
    let got: f64 = user_cells(&out)[&("stress".to_string(), "ORVAL-SYN".to_string())]
        .0
        .parse()
        .unwrap();
    // The shocked inputs differ from the literals above by the rounding of
    // 0.03 + 0.01, 0.22 + 0.02, 100 x 1.05 ...: a few ulps of the price.
    assert!((got - want).abs() <= 1e-10 * want.abs(), "{got} vs {want}");
}

#[test]
fn issue11_bad_scenario_rows_are_reported_with_line_and_column_never_dropped() {
    let scen = "scenario,underlying,spot_shock_pct,vol_shock_pts,jump_vol_shift\n\
                good,*,-5,1,\n\
                typo,*,-5%,1,\n\
                typo,KORRIN-BIO,-5,1,\n\
                range,*,-150,0,\n\
                twice,KORRIN-BIO,1,1,\n\
                twice,KORRIN-BIO,2,2,\n\
                ,*,1,1,\n\
                good-2,NOT-IN-BOOK,1,1,\n";
    let (_t, out, code, err) = run(&demo_book(), scen, &[]);
    assert_eq!(code, 1, "{err}");
    for want in [
        "line 3, column spot_shock_pct: '-5%' is not a number (write the number without %)",
        "line 5, column spot_shock_pct: -150 is outside the accepted range",
        "line 7, column underlying: scenario 'twice' already has a row for 'KORRIN-BIO' (line 6)",
        "line 8, column scenario: the scenario name is empty",
        "the scenario file names underlyings not in the book: NOT-IN-BOOK",
    ] {
        assert!(err.contains(want), "stderr lacks {want:?}:\n{err}");
    }
    let user = user_cells(&out);
    for u in GROUPS {
        let k = |s: &str| (s.to_string(), u.to_string());
        assert_eq!(user[&k("good")].1, "ok");
        for bad in ["typo", "range", "twice"] {
            let (pnl, st) = &user[&k(bad)];
            assert!(pnl.is_empty(), "not computed: no number");
            assert!(st.starts_with("error: not computed: line "), "{st}");
        }
        assert_eq!(user[&k("good-2")], ("0.0".to_string(), "ok".to_string()));
    }
    assert!(user[&("typo".into(), "(book)".into())]
        .1
        .contains("column spot_shock_pct"));
    let html = fs::read_to_string(out.join("report.html")).unwrap();
    assert!(
        html.contains("4 rows of the scenario file are bad"),
        "listed on the page"
    );
    assert!(html.contains("line 8, column scenario"));

    // A missing column is fatal before any output.
    let (_t, out, code, err) = run(
        &demo_book(),
        "scenario,underlying,spot_shock_pct\nx,*,1\n",
        &[],
    );
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("missing required column: vol_shock_pts"),
        "{err}"
    );
    assert!(!out.exists());
}

#[test]
fn issue11_demo_scenario_file_runs() {
    let scen = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("data/demo_scenarios.csv");
    let (_t, out, code, err) = run(&demo_book(), &fs::read_to_string(scen).unwrap(), &[]);
    assert_eq!(code, 1, "only the demo book's own bad rows: {err}");
    let user = user_cells(&out);
    assert!(user.values().all(|(p, st)| st == "ok" && !p.is_empty()));
    assert_eq!(
        user.len(),
        6 * 4,
        "six scenarios, three underlyings and the book"
    );
}

#[test]
fn issue11_jump_shock_list_gives_every_underlying_each_jump_in_percent() {
    // An instantaneous jump of x% with everything else unchanged is the grid
    // point (spot x%, vol 0): the same revaluation, so the same digits.
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("out");
    let o = saltus()
        .arg("risk")
        .arg(demo_book())
        .args(["--jump-shock", "-10,+5", "-o"])
        .arg(&out)
        .output()
        .unwrap();
    assert_eq!(
        o.status.code(),
        Some(1),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    let grid = grid_cells(&out);
    let rows = csv_file_rows(&out.join("jump_scenarios.csv"));
    assert_eq!(
        &rows[0][..4],
        ["underlying", "scenario", "jump_size_pct", "pnl"]
    );
    let mut given = 0;
    for r in &rows[1..] {
        match r[1].as_str() {
            "given_jump" => {
                let spot = r[2].clone();
                assert!(spot == "-10.0" || spot == "5.0", "{r:?}");
                assert_eq!(
                    r[3],
                    grid[&(r[0].clone(), spot, "0.0".to_string())],
                    "{r:?}"
                );
                given += 1;
            }
            "model_mean_jump" if r[0] == "(book)" => {
                assert!(r[2].is_empty(), "no one size for the whole book: {r:?}");
                assert_eq!(r[6], "ok");
            }
            "model_mean_jump" => {
                let k: f64 = r[2].parse().unwrap();
                assert!(k < 0.0 && k > -100.0, "the demo's jumps are down: {r:?}");
            }
            other => panic!("unexpected scenario {other}"),
        }
    }
    assert_eq!(given, 2 * 4, "two jumps, three underlyings and the book");
}
