//! The `price` command's CSV contract, run through the real binary.

use crate::common::{col, read_csv, saltus, HEADER};
use std::fs;

#[test]
fn column_order_and_case_do_not_matter() {
    let dir = tempfile::tempdir().unwrap();
    let a = dir.path().join("a.csv");
    let b = dir.path().join("b.csv");
    fs::write(
        &a,
        format!("{HEADER}\ncall,100,95,0.5,0.03,0.2,0.5,-0.1,0.15\n"),
    )
    .unwrap();
    fs::write(
        &b,
        " Jump_Vol ,JUMP_MEAN,jump_rate,Vol,rate,expiry,strike,spot,KIND\n0.15,-0.1,0.5,0.2,0.03,0.5,95,100,Call\n",
    )
    .unwrap();
    let out_a = saltus().arg("price").arg(&a).output().unwrap();
    let out_b = saltus().arg("price").arg(&b).output().unwrap();
    assert!(out_a.status.success() && out_b.status.success());
    let (ha, ra) = read_csv(String::from_utf8(out_a.stdout).unwrap());
    let (hb, rb) = read_csv(String::from_utf8(out_b.stdout).unwrap());
    for name in ["price", "delta", "vega", "d_jump_vol", "terms", "status"] {
        assert_eq!(ra[0][col(&ha, name)], rb[0][col(&hb, name)], "{name}");
    }
    // The input columns are echoed unchanged, first, in their order.
    assert_eq!(
        &hb[..9],
        " Jump_Vol ,JUMP_MEAN,jump_rate,Vol,rate,expiry,strike,spot,KIND"
            .split(',')
            .collect::<Vec<_>>()
            .as_slice()
    );
    assert_eq!(rb[0][8], "Call");
}

#[test]
fn bad_rows_are_kept_in_order_with_a_status() {
    let book = format!(
        "{HEADER},id\n\
         call,100,95,0.5,0.03,0.2,0.5,-0.1,0.15,a\n\
         call,100,95,0.5,0.03,-0.2,0.5,-0.1,0.15,b\n\
         put,100,abc,0.5,0.03,0.2,0.5,-0.1,0.15,c\n\
         straddle,100,95,0.5,0.03,0.2,0.5,-0.1,0.15,d\n\
         put,100,95,0.5,0.03,,0.5,-0.1,0.15,e\n\
         put,100,95,0.5,0.03,nan,0.5,-0.1,0.15,f\n\
         put,100,95\n\
         put,100,95,0.5,0.03,0.2,0.5,-0.1,0.15,h\n"
    );
    let out = saltus()
        .arg("price")
        .arg("-")
        .write_stdin(book)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1), "exit code 1 when rows failed");
    let (h, rows) = read_csv(String::from_utf8(out.stdout).unwrap());
    assert_eq!(rows.len(), 8, "row count in == row count out");
    let st = col(&h, "status");
    let price = col(&h, "price");
    let status: Vec<&str> = rows.iter().map(|r| r[st].as_str()).collect();
    assert_eq!(status[0], "ok");
    assert_eq!(
        status[1],
        "error: line 3: vol must not be negative, got -0.2"
    );
    assert_eq!(status[2], "error: line 4: strike is not a number: 'abc'");
    assert_eq!(
        status[3],
        "error: line 5: kind 'straddle' is not call or put"
    );
    assert_eq!(status[4], "error: line 6: vol is missing");
    assert_eq!(status[5], "error: line 7: vol is not a finite number (NaN)");
    assert!(
        status[6].starts_with("error: line 8: malformed record: 3 fields"),
        "{}",
        status[6]
    );
    assert_eq!(status[7], "ok");
    assert!(rows[1][price].is_empty() && !rows[7][price].is_empty());
    assert!(rows.iter().all(|r| r.len() == h.len()));
    let err = String::from_utf8(out.stderr).unwrap();
    assert!(err.contains("2 rows priced, 6 rows failed"), "{err}");
}

#[test]
fn missing_column_is_a_clear_error_before_output() {
    let out = saltus()
        .args(["price", "-"])
        .write_stdin("kind,spot,strike,expiry,rate,vol,jump_rate\ncall,1,1,1,0,0.2,0\n")
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(out.stdout.is_empty());
    let err = String::from_utf8(out.stderr).unwrap();
    assert!(
        err.contains("missing required columns: jump_mean, jump_vol"),
        "{err}"
    );
}

#[test]
fn unreadable_file_is_a_clear_error() {
    let out = saltus()
        .args(["price", "/nonexistent/book.csv"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8(out.stderr)
        .unwrap()
        .contains("cannot open /nonexistent/book.csv"));
}

#[test]
fn writes_to_a_file_and_desk_units_rename_columns() {
    let dir = tempfile::tempdir().unwrap();
    let book = dir.path().join("book.csv");
    let out = dir.path().join("out.csv");
    fs::write(
        &book,
        format!("{HEADER}\nput,100,95,0.5,0.03,0.2,0.5,-0.1,0.15\n"),
    )
    .unwrap();
    saltus()
        .arg("price")
        .arg(&book)
        .arg("-o")
        .arg(&out)
        .assert()
        .success();
    let (h, raw) = read_csv(fs::read_to_string(&out).unwrap());
    saltus()
        .arg("price")
        .arg(&book)
        .arg("-o")
        .arg(&out)
        .arg("--desk-units")
        .assert()
        .success();
    let (hd, desk) = read_csv(fs::read_to_string(&out).unwrap());
    assert!(!hd.contains(&"vega".to_string()) && !hd.contains(&"theta".to_string()));
    let v: f64 = raw[0][col(&h, "vega")].parse().unwrap();
    let v1: f64 = desk[0][col(&hd, "vega_1pt")].parse().unwrap();
    let t: f64 = raw[0][col(&h, "theta")].parse().unwrap();
    let t1: f64 = desk[0][col(&hd, "theta_1d")].parse().unwrap();
    assert_eq!(v1, v * 0.01);
    assert_eq!(t1, t / 365.0);
}

#[test]
fn output_columns_are_the_documented_ones() {
    let out = saltus()
        .args(["price", "-"])
        .write_stdin(format!("{HEADER}\ncall,100,100,1,0.02,0.2,0,0,0\n"))
        .output()
        .unwrap();
    let (h, rows) = read_csv(String::from_utf8(out.stdout).unwrap());
    let tail: Vec<&str> = h[9..].iter().map(String::as_str).collect();
    assert_eq!(
        tail,
        [
            "price",
            "delta",
            "gamma",
            "vega",
            "theta",
            "rho",
            "div_rho",
            "d_jump_rate",
            "d_jump_mean",
            "d_jump_vol",
            "terms",
            "status"
        ]
    );
    // Black-Scholes S=K=100, r=2%, sigma=20%, T=1: 8.916037278572539 (mpmath at 30 digits, computed for this test).
    let p: f64 = rows[0][9].parse().unwrap();
    assert!((p - 8.916037278572539).abs() < 1e-12);
}

#[test]
fn demo_book_prices_with_its_deliberate_bad_rows() {
    let book = concat!(env!("CARGO_MANIFEST_DIR"), "/data/demo_book.csv");
    let out = saltus().args(["price", book]).output().unwrap();
    assert_eq!(out.status.code(), Some(1));
    let (h, rows) = read_csv(String::from_utf8(out.stdout).unwrap());
    let n_in = fs::read_to_string(book).unwrap().lines().count() - 1;
    assert_eq!(rows.len(), n_in);
    let st = col(&h, "status");
    assert_eq!(rows.iter().filter(|r| r[st] != "ok").count(), 3);
}

#[test]
fn thread_count_does_not_change_digits() {
    let book = concat!(env!("CARGO_MANIFEST_DIR"), "/data/demo_book.csv");
    let one = saltus()
        .args(["--threads", "1", "price", book])
        .output()
        .unwrap()
        .stdout;
    let two = saltus()
        .args(["--threads", "2", "price", book])
        .output()
        .unwrap()
        .stdout;
    assert_eq!(one, two);
}

#[test]
fn windows_line_endings_keep_line_numbers_right() {
    let book = format!(
        "{}\r\ncall,100,95,0.5,0.03,0.2,0.5,-0.1,0.15\r\nput,100,95,0.5,0.03,-1,0.5,-0.1,0.15\r\n",
        HEADER
    );
    let out = saltus()
        .args(["price", "-"])
        .write_stdin(book)
        .output()
        .unwrap();
    let (h, rows) = read_csv(String::from_utf8(out.stdout).unwrap());
    assert_eq!(
        rows[1][col(&h, "status")],
        "error: line 3: vol must not be negative, got -1"
    );
}

#[test]
fn a_directory_is_reported_once_and_clearly() {
    let dir = tempfile::tempdir().unwrap();
    let out = saltus().arg("price").arg(dir.path()).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8(out.stderr).unwrap();
    assert!(err.contains("it is a directory"), "{err}");
    assert_eq!(err.matches("directory").count(), 1, "{err}");
}

#[test]
fn quoted_fields_blank_lines_and_a_bom_are_read_like_any_csv_reader() {
    // RFC 4180 quoting (comma, doubled quote and a line break inside fields),
    // a blank line, a byte-order mark, spaces and capitals around values.
    let book =
        "\u{feff}id,underlying,kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol\n\
        \"A,1\",\"ZEP \"\"X\"\"\",call,\"100\",100,1,0.01,0.2,0.5,-0.1,0.15\n\
        \n\
        \"multi\nline\",Q,put,100,90,0.5,0.01,0.2,0.5,-0.1,0.15\n\
        C3,Q, Call , 100 ,90,0.5,0.01,0.2,0.5,-0.1,0.15\n\
        C4,Q,put,100,abc,0.5,0.01,0.2,0.5,-0.1,0.15\n\
        C5,Q,call,100,100,1,0.01,0.2,0.5,-0.1,0.15\n\
        C6,Q,call,100,90,0.5,0.01,0.2,0.5,-0.1,0.15";
    let out = saltus()
        .args(["price", "-", "-q"])
        .write_stdin(book)
        .output()
        .unwrap();
    let text = String::from_utf8(out.stdout).unwrap();
    let (h, rows) = read_csv(&text);
    assert_eq!(
        h[0], "id",
        "the byte-order mark is not part of the first name"
    );
    assert_eq!(rows.len(), 6);
    let (id, und, status, price) = (
        col(&h, "id"),
        col(&h, "underlying"),
        col(&h, "status"),
        col(&h, "price"),
    );
    assert_eq!(rows[0][id], "A,1");
    assert_eq!(rows[0][und], "ZEP \"X\"");
    assert_eq!(rows[1][id], "multi\nline");
    // Quoting changes nothing about the numbers: rows 1 and 5 are the same
    // contract, and so are rows 3 (spaces, capitals) and 6.
    assert_eq!(rows[0][price], rows[4][price]);
    assert_eq!(rows[2][price], rows[5][price]);
    for r in [0, 1, 2, 4, 5] {
        assert_eq!(rows[r][status], "ok", "row {r}");
    }
    // Header line 1, blank line 3, the quoted line break spans lines 4-5.
    assert_eq!(
        rows[3][status],
        "error: line 7: strike is not a number: 'abc'"
    );
    // Echoed fields are re-quoted only where needed.
    assert!(
        text.contains("\"A,1\",\"ZEP \"\"X\"\"\",call,100,100,1,"),
        "{text}"
    );
}
