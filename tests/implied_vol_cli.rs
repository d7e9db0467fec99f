//! `saltus price --implied-vol` through the real binary: the column's
//! place, its values against the library inversion and Black-Scholes, the
//! output without the flag unchanged, and the warning contract for a Merton
//! price with no implied volatility.

use crate::common::{read_csv, saltus};
use saltus::model::OptionKind;

const HEADER: &str = "kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol,id";

fn price(book: &str, extra: &[&str]) -> (String, i32) {
    let out = saltus()
        .args(["price", "-", "-q"])
        .args(extra)
        .write_stdin(book.to_string())
        .output()
        .unwrap();
    (
        String::from_utf8(out.stdout).unwrap(),
        out.status.code().unwrap(),
    )
}

#[test]
fn implied_vol_column_sits_before_terms_and_inverts_the_merton_price() {
    let book = format!(
        "{HEADER}\ncall,100,90,0.5,0.03,0.2,0.5,-0.1,0.15,a\nput,100,80,1,0.03,0.2,0.5,-0.1,0.15,b\n\
         call,100,100,0.25,0.03,0.25,0,0,0,c\n"
    );
    let (text, code) = price(&book, &["--implied-vol", "--with-bound"]);
    assert_eq!(code, 0, "{text}");
    let (h, r) = read_csv(&text);
    let n = h.len();
    assert_eq!(
        &h[n - 4..],
        ["truncation_bound", "implied_vol", "terms", "status"]
    );
    for row in &r {
        let kind: OptionKind = row[0].parse().unwrap();
        let f = |i: usize| row[i].parse::<f64>().unwrap();
        let p = f(10);
        let iv = f(n - 3);
        // The column is the Black-Scholes vol of the Merton price (round trip
        // through the Black-Scholes formula, an identity).
        let bs = saltus::black_scholes::price(kind, f(1), f(2), f(3), f(4), 0.0, iv);
        assert!((bs / p - 1.0).abs() < 1e-12, "{row:?}");
        assert_eq!(row[n - 1], "ok");
    }
    // Jumps with a negative mean raise the out-of-the-money put's vol above
    // the diffusion vol (the model smile); with no jumps it is the vol.
    let iv = |i: usize| r[i][n - 3].parse::<f64>().unwrap();
    assert!(iv(1) > 0.2);
    assert!((iv(2) / 0.25 - 1.0).abs() < 1e-12, "{}", iv(2));
}

#[test]
fn without_the_flag_the_output_is_unchanged() {
    let book = format!("{HEADER}\ncall,100,90,0.5,0.03,0.2,0.5,-0.1,0.15,a\n");
    let (plain, _) = price(&book, &[]);
    let (with, _) = price(&book, &["--implied-vol"]);
    let (hp, rp) = read_csv(&plain);
    let (hw, rw) = read_csv(&with);
    assert!(!hp.iter().any(|c| c == "implied_vol"));
    let i = hw.iter().position(|c| c == "implied_vol").unwrap();
    let mut hw2 = hw.clone();
    hw2.remove(i);
    let mut rw2 = rw[0].clone();
    rw2.remove(i);
    assert_eq!(hp, hw2);
    assert_eq!(rp[0], rw2);
}

#[test]
fn a_price_with_no_implied_vol_keeps_its_fields_and_says_why() {
    // A deep in-the-money call with one day left: the time value is far
    // below the rounding of the intrinsic value, so no vol is resolvable.
    let book = format!(
        "{HEADER}\ncall,100,1,0.003,0.03,0.2,0,0,0,deep\ncall,100,100,0.5,0.03,0.2,0,0,0,fine\n"
    );
    let (text, code) = price(&book, &["--implied-vol"]);
    assert_eq!(code, 1, "{text}");
    let (h, r) = read_csv(&text);
    let n = h.len();
    let status = &r[0][n - 1];
    assert!(
        status.starts_with("warning: line 2: implied_vol: time value"),
        "{status}"
    );
    assert!(
        status.contains("too small for double precision"),
        "{status}"
    );
    assert_eq!(r[0][n - 3], "", "implied_vol left empty");
    assert!(r[0][10].parse::<f64>().unwrap() > 99.0, "price kept");
    assert!(!r[0][n - 2].is_empty(), "terms kept");
    assert_eq!(r[1][n - 1], "ok");
}
