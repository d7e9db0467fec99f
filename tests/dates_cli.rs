//! Calendar dates as expiries (issue 9, section 1): ACT/365 fixed year
//! fractions against hand-counted days, and the book contract of dated
//! expiries through the real binary (every error message exactly).

use assert_cmd::Command;
use saltus::market::dates::{days_between, parse_date, year_fraction, DateError};
use std::fs;
use std::path::Path;

const HEADER: &str = "id,underlying,kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol";
const MODEL: &str = "0.03,0.2,0.5,-0.1,0.15";

fn saltus() -> Command {
    Command::cargo_bin("saltus").unwrap()
}

fn run(args: &[&str], book: &Path) -> (i32, Vec<Vec<String>>, String) {
    let out = saltus().args(args).arg(book).arg("-q").output().unwrap();
    let mut r = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .from_reader(&out.stdout[..]);
    let rows = r
        .records()
        .map(|x| x.unwrap().iter().map(String::from).collect())
        .collect();
    (
        out.status.code().unwrap(),
        rows,
        String::from_utf8(out.stderr).unwrap(),
    )
}

fn book(dir: &Path, name: &str, text: &str) -> std::path::PathBuf {
    let p = dir.join(name);
    fs::write(&p, text).unwrap();
    p
}

fn d(t: &str) -> saltus::market::dates::Date {
    parse_date(t).unwrap()
}

/// Days counted by hand from the Gregorian rules (a year divisible by 4 is
/// a leap year, except centuries not divisible by 400), and confirmed with
/// Python's `datetime.date` subtraction.
#[test]
fn year_fractions_from_hand_counted_days() {
    let cases = [
        // 2027 is not a leap year: 365 days.
        ("2027-01-01", "2028-01-01", 365),
        // 2028 is: 2028-02-29 exists, 366 days.
        ("2028-01-01", "2029-01-01", 366),
        ("2028-02-28", "2028-03-01", 2),
        ("2027-02-28", "2027-03-01", 1),
        // 2100 is a century not divisible by 400: no 29 February.
        ("2100-02-28", "2100-03-01", 1),
        // 2000 is divisible by 400: a leap year.
        ("2000-02-28", "2000-03-01", 2),
        // 31 + 28 + 31 + 30 + 31 + 30 = 181 to 1 July, then one more day.
        ("2027-01-01", "2027-07-02", 182),
        // 30 (to 1 Jan) + 59 (to 1 Mar) + 18.
        ("2026-12-02", "2027-03-19", 107),
        // Ten years with the leap days of 2024, 2028 and 2032.
        ("2024-01-01", "2034-01-01", 3653),
        ("2027-04-01", "2027-04-01", 0),
    ];
    for (v, e, days) in cases {
        assert_eq!(days_between(d(v), d(e)), days, "{v} -> {e}");
        // ACT/365 fixed: the one division, exactly.
        assert_eq!(
            year_fraction(d(v), d(e)).to_bits(),
            (days as f64 / 365.0).to_bits()
        );
    }
    assert_eq!(year_fraction(d("2027-01-01"), d("2028-01-01")), 1.0);
    assert_eq!(days_between(d("2028-01-01"), d("2027-01-01")), -365);
    assert!(parse_date("2028-02-29").is_ok());
    assert_eq!(parse_date("2027-02-29"), Err(DateError::NoSuchDay));
    assert_eq!(parse_date("2100-02-29"), Err(DateError::NoSuchDay));
    assert!(parse_date("2000-02-29").is_ok());
    assert_eq!(parse_date("2027-04-31"), Err(DateError::NoSuchDay));
    assert_eq!(parse_date("2027-13-01"), Err(DateError::NoSuchDay));
    assert_eq!(parse_date("2027-03-19T10:00"), Err(DateError::Form));
}

#[test]
fn every_date_error_names_the_line_and_column() {
    let dir = tempfile::tempdir().unwrap();
    let rows = [
        "2027-02-30",
        "2027-02-29",
        "2026-12-31",
        "2027/03/19",
        "2027-3-19",
        "2027-01-01",
    ];
    let mut text = format!("{HEADER}\n");
    for (i, e) in rows.iter().enumerate() {
        text.push_str(&format!("r{i},A,call,100,100,{e},{MODEL}\n"));
    }
    let p = book(dir.path(), "b.csv", &text);
    let (code, out, _) = run(&["price", "--valuation-date", "2027-01-01"], &p);
    assert_eq!(code, 1);
    let status: Vec<&str> = out[1..]
        .iter()
        .map(|r| r.last().unwrap().as_str())
        .collect();
    assert_eq!(
        status,
        [
            "error: line 2: expiry 2027-02-30 is not a valid date",
            "error: line 3: expiry 2027-02-29 is not a valid date",
            "error: line 4: expiry 2026-12-31 is before the valuation date 2027-01-01",
            "error: line 5: expiry 2027/03/19 is not a valid date (write YYYY-MM-DD)",
            "error: line 6: expiry 2027-3-19 is not a valid date (write YYYY-MM-DD)",
            "ok",
        ]
    );
    // A dated expiry equal to the valuation date is T = 0: the payoff.
    let last = &out[6];
    assert_eq!(&last[11..13], ["0.0", "0.0"], "expiry_years and price");
    // Without any valuation date a date expiry is a row error too.
    let (code, out, _) = run(&["price"], &p);
    assert_eq!(code, 1);
    assert_eq!(
        out[6].last().unwrap(),
        "error: line 7: expiry 2027-01-01 is a date but no valuation date is known \
         (give --valuation-date or a valuation_date column)"
    );
    assert!(!out[0].contains(&"expiry_years".to_string()));
}

#[test]
fn a_bad_valuation_date_option_is_fatal() {
    let dir = tempfile::tempdir().unwrap();
    let p = book(
        dir.path(),
        "b.csv",
        &format!("{HEADER}\na,A,call,100,100,0.5,{MODEL}\n"),
    );
    for cmd in ["price", "crosscheck", "greeks", "risk"] {
        let out = saltus()
            .args([cmd, "--valuation-date", "2027-02-29"])
            .arg(&p)
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(2), "{cmd}");
        let err = String::from_utf8(out.stderr).unwrap();
        assert!(
            err.contains("invalid value '2027-02-29' for '--valuation-date <YYYY-MM-DD>': '2027-02-29' is not a valid date"),
            "{cmd}: {err}"
        );
    }
}

#[test]
fn the_valuation_date_column_wins_over_the_option() {
    let dir = tempfile::tempdir().unwrap();
    let text = format!(
        "valuation_date,{HEADER}\n\
         2027-04-01,a,A,call,100,100,2028-04-01,{MODEL}\n\
         ,b,A,call,100,100,2028-04-01,{MODEL}\n\
         2027-13-01,c,A,call,100,100,2028-04-01,{MODEL}\n"
    );
    let p = book(dir.path(), "b.csv", &text);
    let (code, out, _) = run(&["price", "--valuation-date", "2028-01-01"], &p);
    assert_eq!(code, 1);
    let y = out[0].iter().position(|c| c == "expiry_years").unwrap();
    assert_eq!(y, 12, "right after the echoed input");
    // 2027-04-01 -> 2028-04-01 holds 2028-02-29: 366 days.
    assert_eq!(out[1][y], format!("{:?}", 366.0 / 365.0));
    // Empty field: the option, 2028-01-01 -> 2028-04-01 = 31 + 29 + 31 days.
    assert_eq!(out[2][y], format!("{:?}", 91.0 / 365.0));
    assert_eq!(
        out[3].last().unwrap(),
        "error: line 4: valuation_date 2027-13-01 is not a valid date"
    );
    // The column alone is enough (no option).
    let (_, out, _) = run(&["price"], &p);
    assert_eq!(out[1].last().unwrap(), "ok");
    assert_eq!(
        out[2].last().unwrap(),
        "error: line 3: expiry 2028-04-01 is a date but no valuation date is known \
         (give --valuation-date or a valuation_date column)"
    );
}

/// The year fraction a date stands for, written as a number, prices to
/// the same bits: dates change only how T is read.
#[test]
fn dates_price_like_the_equivalent_year_fraction() {
    let dir = tempfile::tempdir().unwrap();
    // Days: 182 and 77 counted by month, 3652 = ten years of 365 plus the
    // leap days of 2028, 2032 and 2036, less one (Python datetime agrees).
    let expiries = [
        ("2027-07-02", 182),
        ("2027-03-19", 77),
        ("2036-12-31", 3652),
    ];
    let (mut dated, mut plain) = (format!("{HEADER}\n"), format!("{HEADER}\n"));
    for (i, (e, days)) in expiries.iter().enumerate() {
        for kind in ["call", "put"] {
            dated.push_str(&format!("r{i},A,{kind},100,90,{e},{MODEL}\n"));
            let t = format!("{:?}", *days as f64 / 365.0);
            plain.push_str(&format!("r{i},A,{kind},100,90,{t},{MODEL}\n"));
        }
    }
    let a = book(dir.path(), "a.csv", &dated);
    let b = book(dir.path(), "b.csv", &plain);
    for cmd in [
        &["price", "--valuation-date", "2027-01-01"][..],
        &[
            "greeks",
            "--method",
            "both",
            "--valuation-date",
            "2027-01-01",
        ][..],
        &[
            "crosscheck",
            "--paths",
            "2000",
            "--valuation-date",
            "2027-01-01",
        ][..],
    ] {
        let (ca, ra, _) = run(cmd, &a);
        let (cb, rb, _) = run(&cmd[..cmd.len() - 2], &b);
        assert_eq!((ca, cb), (0, 0), "{cmd:?}");
        assert_eq!(ra[0][11], "expiry_years");
        for (x, y) in ra[1..].iter().zip(&rb[1..]) {
            assert_eq!(x[11], y[5], "expiry_years is the fraction used");
            assert_eq!(x[12..], y[11..], "{cmd:?}");
        }
    }
    // Without a valuation date the columns are those of today's output.
    let (_, rb, _) = run(&["price"], &b);
    assert_eq!(rb[0][11], "price");
}

#[test]
fn risk_reads_dated_expiries() {
    let dir = tempfile::tempdir().unwrap();
    let a = book(
        dir.path(),
        "a.csv",
        &format!(
            "{HEADER}\na,A,call,100,90,2027-07-02,{MODEL}\nb,A,put,100,110,2027-03-19,{MODEL}\n"
        ),
    );
    let b = book(
        dir.path(),
        "b.csv",
        &format!(
            "{HEADER}\na,A,call,100,90,{:?},{MODEL}\nb,A,put,100,110,{:?},{MODEL}\n",
            182.0 / 365.0,
            77.0 / 365.0
        ),
    );
    let (ra, rb) = (dir.path().join("ra"), dir.path().join("rb"));
    let ok = |args: &[&str], book: &Path, out: &Path| {
        let o = saltus()
            .args(args)
            .arg(book)
            .arg("-o")
            .arg(out)
            .arg("-q")
            .output()
            .unwrap();
        assert_eq!(
            o.status.code(),
            Some(0),
            "{}",
            String::from_utf8_lossy(&o.stderr)
        );
    };
    ok(&["risk", "--valuation-date", "2027-01-01"], &a, &ra);
    ok(&["risk"], &b, &rb);
    let rows = |p: &Path| crate::common::csv_file_rows(&p.join("positions.csv"));
    let (pa, pb) = (rows(&ra), rows(&rb));
    assert_eq!(pa[0][11], "expiry_years");
    for (x, y) in pa[1..].iter().zip(&pb[1..]) {
        assert_eq!(x[12..], y[11..]);
    }
}
