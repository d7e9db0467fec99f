//! The book input/output contract shared by every command (issue 8), run
//! through the real binary: fields echoed as read, line numbers with any
//! line ending, open quotes, short numbers in messages, Monte Carlo streams
//! that do not depend on a row's position, empty spreadsheet records, and
//! no NaN or inf in an `ok` row. Expected fields come from the `csv` crate
//! reading the same input, or are written out by hand.

use crate::common::{col, read_csv, saltus, HEADER};
use std::fs;

const ROW: &str = "call,100,95,0.5,0.03,0.2,0.5,-0.1,0.15";

/// Runs `saltus ARGS... -` on `book`; returns (exit code, header, rows, stderr).
fn run(args: &[&str], book: &str) -> (Option<i32>, Vec<String>, Vec<Vec<String>>, String) {
    let out = saltus()
        .args(args)
        .arg("-")
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

#[test]
fn issue8_a_byte_order_mark_at_a_quoted_data_record_is_echoed_unchanged() {
    // A second file's mark, e.g. after concatenating two exports.
    let book = format!("id,{HEADER}\n\u{feff}\"R1\",{ROW}\n");
    let (_, h, rows, _) = run(&["price"], &book);
    let (_, want) = read_csv(format!("id,{HEADER}\n\u{feff}\"R1\",{ROW}\n").as_bytes());
    assert_eq!(rows[0][col(&h, "id")], want[0][0]);
    assert_eq!(rows[0][col(&h, "id")], "\u{feff}\"R1\"");
}

#[test]
fn issue8_cr_only_line_endings_name_the_right_line() {
    let book = format!("{HEADER}\r{ROW}\rput,100,95,0.5,0.03,-1,0.5,-0.1,0.15\r{ROW}\r");
    let (code, h, rows, _) = run(&["price"], &book);
    assert_eq!(code, Some(1));
    assert_eq!(rows.len(), 3);
    assert_eq!(
        rows[1][col(&h, "status")],
        "error: line 3: vol must not be negative, got -1"
    );
}

#[test]
fn issue8_an_unbalanced_quote_names_its_line_and_the_rows_after_it_are_read() {
    let book = format!(
        "id,{HEADER}\na,{ROW}\nb,call,100,95,0.5,0.03,\"0.2,0.5,-0.1,0.15\nc,{ROW}\nd,{ROW}\n"
    );
    let (code, h, rows, _) = run(&["price"], &book);
    assert_eq!(code, Some(1));
    let st = col(&h, "status");
    let status: Vec<&str> = rows.iter().map(|r| r[st].as_str()).collect();
    assert_eq!(
        status,
        [
            "ok",
            "error: line 3: malformed record: the quote opened on line 3 is never closed \
             (the row is read up to the end of that line)",
            "ok",
            "ok"
        ]
    );
    let ids: Vec<&str> = rows.iter().map(|r| r[0].as_str()).collect();
    assert_eq!(ids, ["a", "b", "c", "d"]);
}

#[test]
fn issue8_messages_show_huge_numbers_in_short_form() {
    let book = format!("{HEADER}\ncall,100,95,0.5,0.03,1e308,0.5,-0.1,0.15\n");
    let (_, h, rows, err) = run(&["price"], &book);
    let want = "error: line 2: vol = 1e308 is outside the supported range (0 to 10)";
    assert_eq!(rows[0][col(&h, "status")], want);
    assert!(err.contains(&want[7..]), "{err}");
}

#[test]
fn issue8_empty_spreadsheet_records_are_skipped_and_counted() {
    let book = format!("{HEADER}\n{ROW}\n{ROW}\n,,,,,,,,\n,,,,,,,,\r\n\"\",,,,,,,,\n");
    let (code, h, rows, err) = run(&["price"], &book);
    assert_eq!(code, Some(0), "{err}");
    assert_eq!(rows.len(), 2);
    assert!(rows.iter().all(|r| r[col(&h, "status")] == "ok"));
    assert!(
        err.contains("3 records with every field empty skipped"),
        "{err}"
    );
    // A percentage stays an error, with the fix.
    let book = format!("{HEADER}\ncall,100,95,0.5,0.03,32%,0.5,-0.1,0.15\n");
    let (_, h, rows, _) = run(&["price"], &book);
    assert_eq!(
        rows[0][col(&h, "status")],
        "error: line 2: vol is not a number: '32%' (write 0.32)"
    );
}

/// Monte Carlo results per row, keyed by the row's contents (its strike).
fn mc_by_strike(args: &[&str], book: &str, column: &str) -> Vec<(String, String)> {
    let (code, h, rows, err) = run(args, book);
    assert!(code.is_some_and(|c| c < 2), "{err}");
    let (k, v, st) = (col(&h, "strike"), col(&h, column), col(&h, "status"));
    let mut out: Vec<(String, String)> = rows
        .iter()
        .map(|r| {
            assert_eq!(r[st], "ok");
            (r[k].clone(), r[v].clone())
        })
        .collect();
    out.sort_by(|a, b| a.0.parse::<f64>().unwrap().total_cmp(&b.0.parse().unwrap()));
    out
}

#[test]
fn issue8_books_without_ids_give_the_same_monte_carlo_digits_when_split_or_reordered() {
    let rows: Vec<String> = [80, 90, 100, 110]
        .iter()
        .map(|k| format!("call,100,{k},0.5,0.03,0.2,0.5,-0.1,0.15"))
        .collect();
    let whole = format!("{HEADER}\n{}\n", rows.join("\n"));
    let tail = format!("{HEADER}\n{}\n{}\n", rows[3], rows[2]);
    let cc = ["crosscheck", "--paths", "4000", "-q"];
    let a = mc_by_strike(&cc, &whole, "price_mc");
    let b = mc_by_strike(&cc, &tail, "price_mc");
    assert_eq!(&a[2..], &b[..], "the last two rows, alone and reversed");
    let gk = [
        "greeks", "--engine", "mc", "--method", "fd", "--paths", "4000", "-q",
    ];
    let a = mc_by_strike(&gk, &whole, "delta");
    let b = mc_by_strike(&gk, &tail, "delta");
    assert_eq!(&a[2..], &b[..]);
}

#[test]
fn issue8_repeated_ids_are_named_in_one_warning() {
    let book = format!("id,{HEADER}\nA,{ROW}\nB,{ROW}\nA,{ROW}\nC,{ROW}\nB,{ROW}\n");
    // (16384 paths: one whole Monte Carlo block, so no --paths warning.)
    let (_, _, rows, err) = run(&["crosscheck", "--paths", "16384"], &book);
    assert_eq!(rows.len(), 5);
    let warnings: Vec<&str> = err.lines().filter(|l| l.contains("warning")).collect();
    assert_eq!(
        warnings,
        [
            "saltus: warning: 2 rows repeat the id of an earlier row and share its random stream \
          (the estimates are not independent): 'A' on line 4 (first on line 2), \
          'B' on line 6 (first on line 3)"
        ]
    );
}

/// Every `ok` row's result fields are empty, text, or finite numbers.
fn assert_no_non_finite_ok_row(h: &[String], rows: &[Vec<String>], first_result: usize) {
    let st = col(h, "status");
    for r in rows {
        if r[st] != "ok" {
            assert!(r[first_result..st].iter().all(String::is_empty), "{r:?}");
            continue;
        }
        for (name, v) in h[first_result..st].iter().zip(&r[first_result..st]) {
            if let Ok(x) = v.parse::<f64>() {
                assert!(x.is_finite(), "{name} = {v} in an ok row: {r:?}");
            }
        }
    }
}

#[test]
fn issue8_greeks_never_write_nan_or_inf_in_an_ok_row() {
    // The inputs of the issue: spot 1e-308, expiry 5e-324, vol 3e-321.
    let book = format!(
        "{HEADER}\ncall,1e-308,1,5e-324,0,3e-321,0,0,0\ncall,1e-308,1,1,0,0.2,0,0,0\n\
         put,1,1e-308,5e-324,0,3e-321,0,0,0\nput,1e-308,1,5e-324,0,3e-321,0.5,-0.1,0.15\n{ROW}\n"
    );
    for method in ["analytic", "fd", "both"] {
        let (code, h, rows, err) = run(&["greeks", "--method", method], &book);
        assert!(code.is_some_and(|c| c < 2), "{err}");
        assert_eq!(rows.len(), 5, "{method}");
        assert_no_non_finite_ok_row(&h, &rows, 9);
        assert_eq!(rows[4][col(&h, "status")], "ok", "{method}");
    }
}

#[test]
fn issue8_price_never_writes_nan_or_inf_in_an_ok_row() {
    let book = format!(
        "{HEADER}\ncall,1e-308,1,5e-324,0,3e-321,0,0,0\nput,1e300,1e-300,1,0,0.2,0,0,0\n\
         call,1,1e-320,1000,1,10,100,-20,20\nput,1e-300,1e300,1e-300,-1,0,0,20,0\n{ROW}\n"
    );
    for extra in [&[][..], &["--with-bound"], &["--desk-units"]] {
        let mut args = vec!["price"];
        args.extend_from_slice(extra);
        let (_, h, rows, err) = run(&args, &book);
        assert_eq!(rows.len(), 5, "{err}");
        assert_no_non_finite_ok_row(&h, &rows, 9);
    }
}

#[test]
fn issue8_a_non_finite_position_value_is_a_row_error() {
    let dir = tempfile::tempdir().unwrap();
    let book = dir.path().join("book.csv");
    fs::write(&book, format!("{HEADER},quantity\n{ROW},1e308\n{ROW},2\n")).unwrap();
    let report = dir.path().join("report");
    let out = saltus()
        .arg("risk")
        .arg(&book)
        .arg("-o")
        .arg(&report)
        .arg("-q")
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1));
    let (h, rows) = read_csv(fs::read(report.join("positions.csv")).unwrap());
    assert_eq!(rows.len(), 2);
    assert!(
        rows[0][col(&h, "status")].starts_with("error: line 2: position_value is not finite"),
        "{}",
        rows[0][col(&h, "status")]
    );
    assert_eq!(rows[1][col(&h, "status")], "ok");
    assert_no_non_finite_ok_row(&h, &rows, 10);
    // The failed row is kept out of every other file of the report.
    for entry in fs::read_dir(&report).unwrap() {
        let path = entry.unwrap().path();
        if path.extension().is_some_and(|e| e == "csv") {
            let (h, rows) = read_csv(fs::read(&path).unwrap());
            for r in rows {
                for (name, v) in h.iter().zip(&r) {
                    if let Ok(x) = v.parse::<f64>() {
                        assert!(x.is_finite(), "{}: {name} = {v}", path.display());
                    }
                }
            }
        }
    }
}
