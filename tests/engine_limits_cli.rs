//! Issue 8 through the real binary: every numeric option of `crosscheck`
//! and `greeks` is validated before any work (exit 2 with a message, never a
//! panic), engines bound their work per row, and finite differences stay
//! inside the domain or fail the row with a reason.

use std::io::Write;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

const HEADER: &str = "id,kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol";
const ROW: &str = "a,call,100,100,0.5,0.03,0.2,0.5,-0.1,0.15";

/// Runs the binary on `book` (standard input) and kills it after a
/// generous 20 s so that a runaway fails the test instead of hanging it.
/// Returns (exit code, stdout, stderr); `None` exit code means killed.
fn run(args: &[&str], book: &str) -> (Option<i32>, String, String) {
    let mut child = Command::new(env!("CARGO_BIN_EXE_saltus"))
        .args(args)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let mut stdin = child.stdin.take().unwrap();
    let book = book.to_string();
    let writer = std::thread::spawn(move || {
        let _ = stdin.write_all(book.as_bytes());
    });
    let start = Instant::now();
    let limit = Duration::from_secs(20);
    let code = loop {
        if let Some(status) = child.try_wait().unwrap() {
            break status.code();
        }
        if start.elapsed() > limit {
            let _ = child.kill();
            let _ = child.wait();
            break None;
        }
        std::thread::sleep(Duration::from_millis(20));
    };
    writer.join().unwrap();
    let out = child.wait_with_output().unwrap();
    (
        code,
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

const EXTREMES: [&str; 10] = [
    "1e20", "1e308", "inf", "NaN", "0", "-1", "-1e308", "1e-320", "1e-300", "-0",
];

#[test]
fn issue8_crosscheck_and_greeks_options_are_validated_before_any_work() {
    let book = format!("{HEADER}\n{ROW}\n");
    let numeric: [(&str, &[&str]); 2] = [
        (
            "crosscheck",
            &[
                "--paths",
                "--target-se",
                "--max-paths",
                "--seed",
                "--gamma",
                "--jump-mean-shift",
                "--z-max",
                "--fourier-tol",
                "--allow-disagree",
            ],
        ),
        (
            "greeks",
            &[
                "--rel-tol",
                "--spot-bump",
                "--vol-bump",
                "--paths",
                "--seed",
            ],
        ),
    ];
    let mut refused = 0;
    for (cmd, options) in numeric {
        for opt in options {
            for v in EXTREMES {
                let arg = format!("{opt}={v}");
                let mut args = vec![cmd, "-", arg.as_str(), "-q"];
                if cmd == "crosscheck" && *opt != "--paths" && *opt != "--target-se" {
                    args.extend(["--paths", "2000"]);
                }
                if cmd == "greeks" && *opt == "--paths" {
                    args.extend(["--engine", "mc"]);
                }
                let (code, _, err) = run(&args, &book);
                assert!(!err.contains("panicked"), "{cmd} {arg}: panic: {err}");
                match code {
                    Some(2) => {
                        refused += 1;
                        assert!(
                            err.contains(opt) || err.contains("invalid value"),
                            "{cmd} {arg}: message does not name the option: {err}"
                        );
                    }
                    Some(0) | Some(1) => {}
                    other => panic!("{cmd} {arg}: exit {other:?}: {err}"),
                }
            }
        }
    }
    assert!(refused > 100, "only {refused} refusals");
    // The panic of the issue, and values that must be refused.
    for args in [
        ["crosscheck", "-", "--gamma", "1e20"],
        ["crosscheck", "-", "--paths", "1e20"],
        ["crosscheck", "-", "--jump-mean-shift=NaN", "-q"],
        ["greeks", "-", "--spot-bump", "1e-320"],
        ["greeks", "-", "--vol-bump", "0.9"],
        ["greeks", "-", "--rel-tol=inf", "-q"],
    ] {
        let (code, out, err) = run(&args, &book);
        assert_eq!(code, Some(2), "{args:?}: {err}");
        assert!(out.is_empty(), "{args:?} wrote rows before refusing");
        assert!(
            err.contains("must be") || err.contains("invalid value"),
            "{err}"
        );
    }
}

/// Parses the CSV output and returns each row's (status, fields).
fn rows(out: &str) -> Vec<Vec<String>> {
    let mut r = csv::Reader::from_reader(out.as_bytes());
    r.records()
        .map(|x| x.unwrap().iter().map(|s| s.to_string()).collect())
        .collect()
}

fn numbers_are_finite_on_ok_rows(out: &str, echoed: usize) {
    for row in rows(out) {
        let status = row.last().unwrap();
        if status == "ok" {
            for f in &row[echoed..row.len() - 1] {
                if let Ok(x) = f.parse::<f64>() {
                    assert!(x.is_finite(), "non-finite {f} in ok row {row:?}");
                }
            }
        } else {
            assert!(status.starts_with("error: "), "{row:?}");
        }
    }
}

#[test]
fn issue8_far_from_the_money_rows_finish_with_a_value_or_a_row_error() {
    // The rows of the issue: crosscheck --paths 2000 took 40-48 s on one of
    // them, greeks --engine fourier was still running after 300 s.
    let book = format!(
        "{HEADER}\n\
         s,call,1e-300,100,0.5,0.03,0.2,0.5,-0.1,0.15\n\
         k,call,100,1e300,0.5,0.03,0.2,0.5,-0.1,0.15\n"
    );
    let (code, out, err) = run(&["crosscheck", "-", "--paths", "2000", "-q"], &book);
    assert!(matches!(code, Some(0) | Some(1)), "exit {code:?}: {err}");
    assert_eq!(rows(&out).len(), 2);
    numbers_are_finite_on_ok_rows(&out, 10);
    let (code, out, err) = run(&["greeks", "-", "--engine", "fourier", "-q"], &book);
    assert!(matches!(code, Some(0) | Some(1)), "exit {code:?}: {err}");
    assert_eq!(rows(&out).len(), 2);
    numbers_are_finite_on_ok_rows(&out, 10);
}

#[test]
fn issue8_greeks_at_domain_edges_bump_inward_and_never_write_non_finite_values() {
    // Documented edges (docs/model.md): expiry 1000, vol 10, jump_mean -20
    // and 20, jump_vol 20, rate -1 and 1, jump_rate x expiry = 1e5.
    let edges = [
        "t,call,100,100,1000,0.03,0.2,0.5,-0.1,0.15",
        "v,put,100,100,1,0.03,10,0.5,-0.1,0.15",
        "m,put,100,100,1,0.03,0.2,0.5,-20,0.15",
        "p,call,100,100,1,0.03,0.2,0.5,20,0.15",
        "j,put,100,100,1,0.03,0.2,0.5,-0.1,20",
        "r,call,100,100,1,-1,0.2,0.5,-0.1,0.15",
        "q,put,100,100,1,1,0.2,0.5,-0.1,0.15",
        "l,call,100,100,2,0.03,0.2,50000,-0.001,0.001",
    ];
    let book = format!("{HEADER}\n{}\n", edges.join("\n"));
    let (code, out, err) = run(&["greeks", "-", "--method", "fd", "-q"], &book);
    assert!(matches!(code, Some(0) | Some(1)), "exit {code:?}: {err}");
    let got = rows(&out);
    assert_eq!(got.len(), edges.len());
    for row in &got {
        assert_eq!(row.last().unwrap(), "ok", "edge row refused: {row:?}");
    }
    numbers_are_finite_on_ok_rows(&out, 10);
    // Against the analytic Greeks (an independent formula): one-sided
    // differences keep the same accuracy (--method both flags nothing). The
    // lambda T = 1e5 row is left out here: its absolute jump-mean and
    // jump-vol bumps (1e-3) move lambda T mu_J by 100 and measure no
    // derivative whatever the stencil.
    let book = format!("{HEADER}\n{}\n", edges[..edges.len() - 1].join("\n"));
    let (code, _, err) = run(&["greeks", "-", "--method", "both", "-q"], &book);
    assert_eq!(code, Some(0), "flagged or failed at an edge: {err}");

    // Rows whose finite differences were NaN/inf with status ok: now either
    // finite values or a row error naming the cause.
    let book = format!(
        "{HEADER}\n\
         a,put,1e-308,100,1,0.03,0.2,0.5,-0.1,0.15\n\
         b,put,100,100,5e-324,0.03,0.2,0.5,-0.1,0.15\n\
         c,put,100,100,1,0.03,3e-321,0.5,-0.1,0.15\n\
         d,put,100,100,1,0.03,3e-321,0,-0.1,0.15\n"
    );
    for method in ["fd", "both"] {
        let (code, out, err) = run(&["greeks", "-", "--method", method, "-q"], &book);
        assert!(matches!(code, Some(0) | Some(1)), "exit {code:?}: {err}");
        assert_eq!(rows(&out).len(), 4);
        numbers_are_finite_on_ok_rows(&out, 10);
    }
}
