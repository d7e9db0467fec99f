//! The `greeks` command through the real binary: where a finite difference
//! is not defined (issue 10) and what it says about `--paths`.

use crate::common::{col, read_csv, saltus};

const HEADER: &str = "id,kind,spot,strike,expiry,rate,div_yield,vol,jump_rate,jump_mean,jump_vol";

fn run(book: &str, args: &[&str]) -> (Option<i32>, Vec<String>, Vec<Vec<String>>, String) {
    let out = saltus()
        .args(["greeks", "-"])
        .args(args)
        .write_stdin(book.to_string())
        .output()
        .unwrap();
    let (h, rows) = read_csv(&out.stdout);
    (
        out.status.code(),
        h,
        rows,
        String::from_utf8(out.stderr).unwrap(),
    )
}

const GREEKS: [&str; 11] = [
    "delta",
    "gamma",
    "vega",
    "theta",
    "rho",
    "div_rho",
    "d_jump_rate",
    "d_jump_mean",
    "d_jump_vol",
    "vanna",
    "volga",
];

#[test]
fn issue10_undefined_finite_differences_are_n_a_with_a_reason_not_a_flag() {
    // At zero variance the price is e^{-rT} (F - K)^+ with F = S e^{(r-q)T}
    // (a point mass at the forward; docs/model.md), which has a kink at
    // F = K: there no derivative exists and a difference across the kink
    // measures the kink (before issue 10 it flagged gamma, rho, ... as DIFF).
    // Rows: expired at the strike; zero vol and no jumps with F = K
    // (r = q = 0); zero vol and zero jump vol with a lattice point
    // S e^{-lambda k T} exactly at the strike (k = e^-0.1 - 1, lambda T = 1).
    // The lattice point with no jump: S e^{-lambda k T} = 100 e^{-k}.
    let lattice_strike = 100.0 * (-(-0.1f64).exp_m1()).exp();
    let book = format!(
        "{HEADER}\n\
         exp,call,100,100,0,0.03,0,0.2,0.5,-0.1,0.15\n\
         flat,put,100,100,0.5,0,0,0,0,-0.1,0.15\n\
         lat,call,100,{lattice_strike},0.5,0,0,0,2,-0.1,0\n"
    );
    for engine in ["series", "fourier", "mc"] {
        let (code, h, rows, err) = run(&book, &["--engine", engine, "--paths", "16384"]);
        if engine == "fourier" {
            // The lattice row is outside the Fourier engine's claim, but the
            // n/a decision comes first: no repricing is attempted.
            assert!(!err.contains("panicked"), "{err}");
        }
        assert_eq!(code, Some(0), "{engine}: {err}");
        assert_eq!(rows.len(), 3);
        for r in &rows {
            assert_eq!(r[col(&h, "status")], "ok", "{engine} {r:?}");
            assert_eq!(r[col(&h, "flagged")], "", "{engine} {r:?}");
            assert!(
                r[col(&h, "fd_note")].starts_with("not defined: "),
                "{engine} {r:?}"
            );
            for g in GREEKS {
                assert_eq!(r[col(&h, &format!("{g}_flag"))], "n/a", "{engine} {g}");
                assert_eq!(r[col(&h, &format!("{g}_fd"))], "", "{engine} {g}");
                assert!(!r[col(&h, &format!("{g}_analytic"))].is_empty());
            }
        }
        assert!(rows[0][col(&h, "fd_note")].contains("expired row at the strike"));
        assert!(
            rows[1][col(&h, "fd_note")].contains("zero variance with the forward at the strike")
        );
        assert!(rows[2][col(&h, "fd_note")].contains("point of the terminal law at the strike"));
        assert!(err.contains("0 rows with Greeks flagged"), "{err}");
    }
}

#[test]
fn issue10_zero_variance_rows_away_from_the_strike_are_still_compared() {
    // Away from the kink e^{-rT} (F - K)^+ is smooth: delta = e^{-qT} for
    // F > K and 0 for F < K (differentiating the identity above), and the
    // finite differences agree with the analytic Greeks.
    let book = format!(
        "{HEADER}\n\
         itm,call,100,80,0.5,0.03,0.01,0,0,-0.1,0.15\n\
         otm,call,100,120,0.5,0.03,0.01,0,0,-0.1,0.15\n\
         exp,put,100,90,0,0.03,0,0.2,0.5,-0.1,0.15\n"
    );
    let (code, h, rows, err) = run(&book, &[]);
    assert_eq!(code, Some(0), "{err}");
    for r in &rows {
        assert_eq!(r[col(&h, "fd_note")], "", "{r:?}");
        for g in GREEKS {
            assert_eq!(r[col(&h, &format!("{g}_flag"))], "ok", "{g} {r:?}");
        }
    }
    let delta = |i: usize| -> f64 { rows[i][col(&h, "delta_fd")].parse().unwrap() };
    assert!((delta(0) - (-0.01f64 * 0.5).exp()).abs() < 1e-9);
    assert!(delta(1).abs() < 1e-12);
}

#[test]
fn issue10_paths_below_the_monte_carlo_minimum_are_warned_not_changed_silently() {
    // The engine simulates whole blocks of 8192 antithetic pairs
    // (src/engines/monte_carlo.rs, BLOCK_PAIRS): --paths 4000 simulates
    // 16384 paths per repricing, and says so.
    let book = format!("{HEADER}\na,call,100,100,0.5,0.03,0,0.2,0.5,-0.1,0.15\n");
    let (_, _, _, err) = run(
        &book,
        &["--engine", "mc", "--method", "fd", "--paths", "4000"],
    );
    assert!(
        err.contains(
            "saltus: warning: --paths 4000 is below the Monte Carlo engine's minimum of one block \
             of 16384 paths: each row simulates 16384 paths"
        ),
        "{err}"
    );
    let (_, _, _, err) = run(
        &book,
        &["--engine", "mc", "--method", "fd", "--paths", "32768"],
    );
    assert!(!err.contains("warning"), "a whole number of blocks: {err}");
    // The series engine has no paths: no warning.
    let (_, _, _, err) = run(&book, &["--paths", "4000"]);
    assert!(!err.contains("warning"), "{err}");
}
