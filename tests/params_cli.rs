//! `--params PARAMS.csv` (issue 9, section 5) through the real binary:
//! rows take vol, jump_rate, jump_mean, jump_vol from their underlying's
//! fitted set; conflicts, missing and failed fits, bad params files.
//! The reference for every priced row is the same book with the
//! parameters written inline: the results must be the same bits.

use assert_cmd::Command;
use std::fs;
use std::path::{Path, PathBuf};

const PARAMS: &str = "underlying,vol,jump_rate,jump_mean,jump_vol,quotes_used,flags,status\n\
ALPHA,0.2,0.5,-0.1,0.15,40,,ok\n\
BETA,0.35,1.2,0.05,0.3,40,weakly identified: jump_mean,ok\n\
GAMMA,,,,,3,,failed: too few quotes\n";

fn saltus() -> Command {
    Command::cargo_bin("saltus").unwrap()
}

fn file(dir: &Path, name: &str, text: &str) -> PathBuf {
    let p = dir.join(name);
    fs::write(&p, text).unwrap();
    p
}

fn run(args: &[&str], book: &Path) -> (i32, Vec<Vec<String>>, String) {
    let out = saltus().args(args).arg(book).arg("-q").output().unwrap();
    let rows = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .from_reader(&out.stdout[..])
        .records()
        .map(|x| x.unwrap().iter().map(String::from).collect())
        .collect();
    (
        out.status.code().unwrap(),
        rows,
        String::from_utf8(out.stderr).unwrap(),
    )
}

/// A book without model columns, and the same book with ALPHA's and
/// BETA's sets inline.
fn books(dir: &Path) -> (PathBuf, PathBuf) {
    let lean = "id,underlying,kind,spot,strike,expiry,rate\n\
        a,ALPHA,call,100,95,0.5,0.03\n\
        b,BETA,put,50,55,1.25,0.01\n\
        c,ALPHA,put,100,120,2,0.03\n";
    let full = "id,underlying,kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol\n\
        a,ALPHA,call,100,95,0.5,0.03,0.2,0.5,-0.1,0.15\n\
        b,BETA,put,50,55,1.25,0.01,0.35,1.2,0.05,0.3\n\
        c,ALPHA,put,100,120,2,0.03,0.2,0.5,-0.1,0.15\n";
    (file(dir, "lean.csv", lean), file(dir, "full.csv", full))
}

#[test]
fn rows_take_their_underlyings_fit() {
    let dir = tempfile::tempdir().unwrap();
    let p = file(dir.path(), "params.csv", PARAMS);
    let p = p.to_str().unwrap();
    let (lean, full) = books(dir.path());
    for cmd in [
        &["price"][..],
        &["greeks", "--method", "both"][..],
        &["crosscheck", "--paths", "2000"][..],
    ] {
        let with: Vec<&str> = cmd.iter().copied().chain(["--params", p]).collect();
        let (ca, ra, ea) = run(&with, &lean);
        let (cb, rb, _) = run(cmd, &full);
        assert_eq!((ca, cb), (0, 0), "{cmd:?}: {ea}");
        for (x, y) in ra.iter().zip(&rb).skip(1) {
            assert_eq!(x[7..], y[11..], "{cmd:?}");
        }
    }
}

#[test]
fn model_columns_and_params_conflict_unless_override() {
    let dir = tempfile::tempdir().unwrap();
    let p = file(dir.path(), "params.csv", PARAMS);
    let p = p.to_str().unwrap();
    let (_, full) = books(dir.path());
    let (code, out, err) = run(&["price", "--params", p], &full);
    assert_eq!(code, 2);
    assert!(out.is_empty());
    assert!(
        err.contains(
            "the book has columns vol, jump_rate, jump_mean, jump_vol and --params supplies \
             them: drop them from the book, or pass --params-override to use the fitted \
             parameters instead"
        ),
        "{err}"
    );
    // With the override the fitted sets win over the book's (wrong) columns,
    // which are echoed unchanged.
    let wrong = file(
        dir.path(),
        "wrong.csv",
        &fs::read_to_string(&full)
            .unwrap()
            .replace("0.2,0.5,-0.1,0.15", "0.9,0,0,0.01"),
    );
    let (code, ov, _) = run(&["price", "--params", p, "--params-override"], &wrong);
    let (_, reference, _) = run(&["price"], &full);
    assert_eq!(code, 0);
    for (x, y) in ov.iter().zip(&reference).skip(1) {
        assert_eq!(x[11..], y[11..]);
    }
    assert_eq!(ov[1][7], "0.9", "echoed as given");
    // One model column is enough to conflict.
    let one = file(
        dir.path(),
        "one.csv",
        "underlying,kind,spot,strike,expiry,rate,jump_vol\nALPHA,call,1,1,1,0,0.1\n",
    );
    let (code, _, err) = run(&["price", "--params", p], &one);
    assert_eq!(code, 2);
    assert!(
        err.contains("the book has column jump_vol and --params supplies it"),
        "{err}"
    );
}

#[test]
fn missing_and_failed_fits_are_row_errors_naming_the_underlying() {
    let dir = tempfile::tempdir().unwrap();
    let params = file(dir.path(), "params.csv", PARAMS);
    let p = params.to_str().unwrap();
    let book = file(
        dir.path(),
        "b.csv",
        "underlying,kind,spot,strike,expiry,rate\n\
         DELTA,call,100,100,1,0\n\
         GAMMA,call,100,100,1,0\n\
         ,call,100,100,1,0\n\
         ALPHA,call,100,100,1,0\n",
    );
    let (code, out, _) = run(&["price", "--params", p], &book);
    assert_eq!(code, 1);
    let status: Vec<&str> = out[1..]
        .iter()
        .map(|r| r.last().unwrap().as_str())
        .collect();
    assert_eq!(
        status,
        [
            format!("error: line 2: underlying 'DELTA' has no fitted set in {p}").as_str(),
            format!(
                "error: line 3: underlying 'GAMMA': its fit in {p} failed \
                 (status: failed: too few quotes), no parameters to use"
            )
            .as_str(),
            format!(
                "error: line 4: underlying is missing: the parameters are taken from {p} by underlying"
            )
            .as_str(),
            "ok",
        ]
    );
    // No underlying column at all: fatal.
    let bare = file(
        dir.path(),
        "bare.csv",
        "kind,spot,strike,expiry,rate\ncall,1,1,1,0\n",
    );
    let (code, _, err) = run(&["price", "--params", p], &bare);
    assert_eq!(code, 2);
    assert!(err.contains("the book has no underlying column"), "{err}");
}

#[test]
fn a_bad_params_file_is_fatal_and_named() {
    let dir = tempfile::tempdir().unwrap();
    let (lean, _) = books(dir.path());
    let h = "underlying,vol,jump_rate,jump_mean,jump_vol,status";
    let cases = [
        (
            format!("{h}\nALPHA,0.2,0.5,-0.1,0.15,ok\nALPHA,0.2,0.5,-0.1,0.15,ok\n"),
            " line 3: underlying 'ALPHA' appears more than once (first on line 2)",
        ),
        (
            format!("{h}\nALPHA,0.2,abc,-0.1,0.15,ok\n"),
            " line 2: jump_rate is not a finite number: 'abc'",
        ),
        (
            format!("{h}\nALPHA,0.2,0.5,,0.15,ok\n"),
            " line 2: jump_mean is missing",
        ),
        (
            "underlying,vol,jump_rate,status\nALPHA,0.2,0.5,ok\n".to_string(),
            ": missing required columns: jump_mean, jump_vol",
        ),
        (
            format!("expiry,{h}\n0.5,ALPHA,0.2,0.5,-0.1,0.15,ok\n"),
            " has an expiry column: it holds one parameter set per underlying and expiry",
        ),
    ];
    for (i, (text, want)) in cases.iter().enumerate() {
        let p = file(dir.path(), &format!("p{i}.csv"), text);
        let p = p.to_str().unwrap();
        for cmd in ["price", "risk"] {
            let out = saltus()
                .args([cmd, "--params", p])
                .arg(&lean)
                .arg("-o")
                .arg(dir.path().join(format!("out{i}")))
                .output()
                .unwrap();
            let err = String::from_utf8(out.stderr).unwrap();
            assert_eq!(out.status.code(), Some(2), "{cmd} {want}");
            assert!(
                err.contains(&format!("--params: {p}{want}")),
                "{cmd}: {err}"
            );
        }
    }
    let out = saltus()
        .args(["price", "--params-override"])
        .arg(&lean)
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(2),
        "--params-override needs --params"
    );
}

#[test]
fn risk_with_dates_and_params() {
    let dir = tempfile::tempdir().unwrap();
    let p = file(dir.path(), "params.csv", PARAMS);
    // 2027-01-01 -> 2027-07-02 is 182 days (31+28+31+30+31+30+1).
    let lean = file(
        dir.path(),
        "lean.csv",
        "id,underlying,kind,spot,strike,expiry,rate,quantity\n\
         a,ALPHA,call,100,95,2027-07-02,0.03,10\n\
         b,BETA,put,50,55,2027-07-02,0.01,-4\n",
    );
    let full = file(
        dir.path(),
        "full.csv",
        &format!(
            "id,underlying,kind,spot,strike,expiry,rate,quantity,vol,jump_rate,jump_mean,jump_vol\n\
             a,ALPHA,call,100,95,{t:?},0.03,10,0.2,0.5,-0.1,0.15\n\
             b,BETA,put,50,55,{t:?},0.01,-4,0.35,1.2,0.05,0.3\n",
            t = 182.0 / 365.0
        ),
    );
    let (ra, rb) = (dir.path().join("ra"), dir.path().join("rb"));
    let o = saltus()
        .args(["risk", "-q", "--valuation-date", "2027-01-01", "--params"])
        .arg(&p)
        .arg(&lean)
        .arg("-o")
        .arg(&ra)
        .output()
        .unwrap();
    assert_eq!(
        o.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    let o = saltus()
        .args(["risk", "-q"])
        .arg(&full)
        .arg("-o")
        .arg(&rb)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(0));
    let rows = |d: &Path| crate::common::csv_file_rows(&d.join("positions.csv"));
    let (pa, pb) = (rows(&ra), rows(&rb));
    assert_eq!(pa[0][8], "expiry_years");
    for (x, y) in pa[1..].iter().zip(&pb[1..]) {
        assert_eq!(x[8], y[5]);
        assert_eq!(x[9..], y[12..]);
    }
    // The aggregated files agree too (same positions, same parameters).
    for f in fs::read_dir(&rb).unwrap() {
        let name = f.unwrap().file_name();
        let n = name.to_str().unwrap();
        if n.ends_with(".csv") && n != "positions.csv" {
            assert_eq!(
                fs::read(ra.join(n)).unwrap(),
                fs::read(rb.join(n)).unwrap(),
                "{n}"
            );
        }
    }
}
