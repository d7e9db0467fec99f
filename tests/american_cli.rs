//! American rows (book column `exercise`, issue 12) through the real
//! binary: `price` against the library's PIDE engine and the published
//! d'Halluin-Forsyth-Vetzal value, the bounds and identities of early
//! exercise, bad `exercise` values, determinism across thread counts, and
//! books without the column written exactly as before.

use crate::common::{col, merton, read_csv, saltus, HEADER};
use saltus::engines::pide::{self, Exercise, PideConfig};
use saltus::engines::series;
use saltus::greeks::american;
use saltus::model::OptionKind;

/// The d'Halluin, Forsyth & Vetzal (2005) jump set: K = 100, T = 0.25,
/// r = 0.05, sigma = 0.15, lambda = 0.1, mu_J = -0.9, delta = 0.45.
const DFV: &str = "100,0.25,0.05,0.15,0.1,-0.9,0.45";

/// A small American book (invented names).
fn book() -> String {
    format!(
        "id,kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol,div_yield,exercise\n\
         dfv-put,put,100,{},0,American\n\
         dfv-call,call,100,{},0,american\n\
         div-call,call,42.5,40,0.5,0.03,0.3,0.5,-0.1,0.2,0.04,AMERICAN\n\
         euro-put,put,100,{},0,\n",
        dfv_fields(),
        dfv_fields(),
        dfv_fields()
    )
}

/// `strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol` of the DFV set.
fn dfv_fields() -> String {
    DFV.to_string()
}

fn run_price(book: &str, extra: &[&str]) -> (Vec<String>, Vec<Vec<String>>, Option<i32>) {
    let out = saltus()
        .args(extra)
        .arg("price")
        .arg("-")
        .arg("-q")
        .write_stdin(book.to_string())
        .output()
        .unwrap();
    let (h, rows) = read_csv(String::from_utf8(out.stdout).unwrap());
    (h, rows, out.status.code())
}

fn f(rows: &[Vec<String>], h: &[String], row: usize, name: &str) -> f64 {
    rows[row][col(h, name)]
        .parse()
        .unwrap_or_else(|_| panic!("row {row} {name} = '{}'", rows[row][col(h, name)]))
}

#[test]
fn issue12_american_rows_price_like_the_library_pide_on_any_thread_count() {
    let (h, rows, code) = run_price(&book(), &["--threads", "1"]);
    assert_eq!(code, Some(0), "{rows:?}");
    // Columns: the premium and the error estimate before terms.
    let tail: Vec<&str> = h[h.len() - 4..].iter().map(String::as_str).collect();
    assert_eq!(
        tail,
        [
            "early_exercise_premium",
            "error_estimate",
            "terms",
            "status"
        ]
    );
    // Determinism (DEVELOPERS.md): the same digits on two threads.
    let (h2, rows2, _) = run_price(&book(), &["--threads", "2"]);
    assert_eq!((&h, &rows), (&h2, &rows2));

    let cfg = PideConfig::default();
    let put = merton(
        OptionKind::Put,
        100.0,
        100.0,
        0.25,
        0.05,
        0.0,
        0.15,
        0.1,
        -0.9,
        0.45,
    );
    let lib = pide::price(&put, Exercise::American, &cfg).unwrap();
    let euro = series::price(&put).unwrap().greeks;
    // The CLI writes the library's PIDE price (above the European bound
    // here), its grid Greeks and its error estimate.
    assert_eq!(f(&rows, &h, 0, "price"), lib.price.max(euro.price));
    assert_eq!(f(&rows, &h, 0, "delta"), lib.delta);
    assert_eq!(f(&rows, &h, 0, "gamma"), lib.gamma);
    assert_eq!(f(&rows, &h, 0, "theta"), lib.theta);
    assert_eq!(f(&rows, &h, 0, "error_estimate"), lib.error_estimate);
    assert_eq!(rows[0][col(&h, "terms")], "");
    // d'Halluin, Forsyth & Vetzal (2005) American put at S = 100: about
    // 3.2412435 (the value quoted for this set in the PIDE literature; from
    // memory), within the default tolerance 1e-6 x spot = 1e-4.
    let p = f(&rows, &h, 0, "price");
    assert!((p - 3.2412435).abs() <= 1e-4, "DFV American put {p}");
    assert!(lib.error_estimate <= 1e-4);
    // Early-exercise premium = American - European series, >= 0; positive
    // for the put (r > 0) and the call with a dividend yield.
    for r in 0..3 {
        let prem = f(&rows, &h, r, "early_exercise_premium");
        assert!(prem >= 0.0, "row {r}: premium {prem}");
    }
    assert_eq!(
        f(&rows, &h, 0, "early_exercise_premium"),
        f(&rows, &h, 0, "price") - euro.price
    );
    assert!(f(&rows, &h, 0, "early_exercise_premium") > 0.05);
    assert!(f(&rows, &h, 2, "early_exercise_premium") > 1e-3);
    // Merton (1973): an American call without dividends at r >= 0 is worth
    // the European call: equal to the series within the PIDE's estimate.
    let call = merton(
        OptionKind::Call,
        100.0,
        100.0,
        0.25,
        0.05,
        0.0,
        0.15,
        0.1,
        -0.9,
        0.45,
    );
    let euro_call = series::price(&call).unwrap().greeks;
    let am_call = f(&rows, &h, 1, "price");
    let est = f(&rows, &h, 1, "error_estimate");
    assert!(
        (am_call - euro_call.price).abs() <= est,
        "American call {am_call} vs European series {} (estimate {est:.1e})",
        euro_call.price
    );
    // The European row: the series price, premium 0, error_estimate the
    // series truncation bound, terms written.
    let e = series::price(&put).unwrap();
    assert_eq!(f(&rows, &h, 3, "price"), e.greeks.price);
    assert_eq!(f(&rows, &h, 3, "early_exercise_premium"), 0.0);
    assert_eq!(f(&rows, &h, 3, "error_estimate"), e.truncation_bound);
    assert_eq!(rows[3][col(&h, "terms")], e.terms.to_string());
}

#[test]
fn issue12_bumped_greeks_of_a_call_without_dividends_are_the_european_ones() {
    // Merton (1973): with q = 0 and r >= 0 the American call is the
    // European call, so every Greek equals the series' analytic Greek; the
    // finite differences of PIDE prices must find them within their noise
    // (the PIDE error estimate over the bump) plus the central-difference
    // truncation (1e-3 relative, common practice for h = 1e-2 bumps).
    let c = merton(
        OptionKind::Call,
        100.0,
        95.0,
        0.5,
        0.04,
        0.0,
        0.25,
        0.5,
        -0.2,
        0.15,
    );
    let a = american::price(&c, &PideConfig::default()).unwrap();
    let g = series::price(&c).unwrap().greeks;
    let pairs = [
        ("vega", a.greeks.vega, g.vega),
        ("rho", a.greeks.rho, g.rho),
        ("div_rho", a.greeks.div_rho, g.div_rho),
        ("d_jump_rate", a.greeks.d_jump_rate, g.d_jump_rate),
        ("d_jump_mean", a.greeks.d_jump_mean, g.d_jump_mean),
        ("d_jump_vol", a.greeks.d_jump_vol, g.d_jump_vol),
    ];
    for ((name, fd, an), noise) in pairs.into_iter().zip(a.fd_noise) {
        assert!(
            (fd - an).abs() <= noise + 1e-3 * an.abs(),
            "{name}: fd {fd} vs analytic {an} (noise {noise:.1e})"
        );
    }
    assert!((a.greeks.delta - g.delta).abs() <= 1e-4, "delta");
    assert!((a.greeks.price - g.price).abs() <= a.error_estimate);
}

#[test]
fn issue12_bad_exercise_values_are_row_errors_naming_line_and_column() {
    let book = format!(
        "{HEADER},exercise\n\
         put,100,100,0,0.05,0.2,0,0,0,bermudan\n\
         put,100,100,0,0.05,0.2,0,0,0,1\n\
         put,100,100,0,0.05,0.2,0,0,0,\"american,\"\n\
         put,100,100,0,0.05,0.2,0,0,0, Europe\n\
         put,90,100,0,0.05,0.2,0,0,0,American\n\
         put,90,100,0,0.05,0.2,0,0,0,EUROPEAN\n\
         put,100,100,1,0.05,0.2,60,-0.01,0.01,american\n"
    );
    let (h, rows, code) = run_price(&book, &[]);
    assert_eq!(code, Some(1));
    let status = |r: usize| rows[r][col(&h, "status")].clone();
    assert_eq!(
        status(0),
        "error: line 2: exercise 'bermudan' is not european or american"
    );
    assert_eq!(
        status(1),
        "error: line 3: exercise '1' is not european or american"
    );
    assert_eq!(
        status(2),
        "error: line 4: exercise 'american,' is not european or american"
    );
    assert_eq!(
        status(3),
        "error: line 5: exercise 'Europe' is not european or american"
    );
    // Beyond the PIDE's reach: refused at once, saying which limit.
    assert_eq!(
        status(6),
        "error: line 8: American exercise: lambda T = 6.000e1 is beyond the PIDE's reach (at most 50)"
    );
    // Failed rows keep empty results.
    assert_eq!(rows[0][col(&h, "price")], "");
    // T = 0: the payoff, exactly, with either style (the PIDE's expiry case).
    assert_eq!((status(4).as_str(), f(&rows, &h, 4, "price")), ("ok", 10.0));
    assert_eq!((status(5).as_str(), f(&rows, &h, 5, "price")), ("ok", 10.0));
}

#[test]
fn issue12_a_book_without_exercise_is_written_as_before() {
    // Without the column: no new columns, and the same fields as the same
    // book with an all-European exercise column minus its two new columns.
    let rows = "call,100,95,0.5,0.03,0.2,0.5,-0.1,0.15\nput,80,100,1,0.01,0.3,1,0.05,0.1\n";
    let plain = format!("{HEADER}\n{rows}");
    let with = format!(
        "{HEADER},exercise\n{}",
        rows.lines()
            .map(|l| format!("{l},european\n"))
            .collect::<String>()
    );
    let (h1, r1, c1) = run_price(&plain, &[]);
    let (h2, r2, c2) = run_price(&with, &[]);
    assert_eq!((c1, c2), (Some(0), Some(0)));
    assert_eq!(
        h1[9..],
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
    let drop = |h: &[String], r: &[String]| -> Vec<String> {
        h.iter()
            .zip(r)
            .filter(|(n, _)| {
                !["exercise", "early_exercise_premium", "error_estimate"].contains(&n.as_str())
            })
            .map(|(_, v)| v.clone())
            .collect()
    };
    assert_eq!(drop(&h2, &h2), h1);
    for (a, b) in r1.iter().zip(&r2) {
        assert_eq!(a, &drop(&h2, b));
    }
}

fn run_crosscheck(book: &str) -> (Vec<String>, Vec<Vec<String>>, Option<i32>) {
    let out = saltus()
        .args(["crosscheck", "-", "--paths", "20000", "-q"])
        .write_stdin(book.to_string())
        .output()
        .unwrap();
    let (h, rows) = read_csv(String::from_utf8(out.stdout).unwrap());
    (h, rows, out.status.code())
}

#[test]
fn issue12_crosscheck_verdicts_on_european_and_american_rows() {
    let book = format!(
        "id,kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol,div_yield,exercise\n\
         am-put,put,100,{DFV},0,american\n\
         am-call,call,100,{DFV},0,American\n\
         eu-put,put,100,{DFV},0,european\n\
         many-jumps,call,100,100,1,0.01,0.2,60,-0.01,0.01,0,european\n\
         tiny-t,call,100,100,1e-300,0.01,0.2,1,-0.1,0.1,0,\n\
         far-strike,call,1e-300,1,1,0.01,0.2,1,-0.1,0.1,0,american\n"
    );
    let (h, rows, code) = run_crosscheck(&book);
    assert_eq!(code, Some(0), "{rows:?}");
    let v = |r: usize| rows[r][col(&h, "verdict")].clone();
    let put = merton(
        OptionKind::Put,
        100.0,
        100.0,
        0.25,
        0.05,
        0.0,
        0.15,
        0.1,
        -0.9,
        0.45,
    );
    let euro = series::price(&put).unwrap().greeks.price;
    // American rows: PIDE convergence and the bounds; no Fourier or MC.
    assert!(
        v(0).starts_with("agree: American, by PIDE grid convergence (estimate "),
        "{}",
        v(0)
    );
    assert!(
        v(0).contains(">= European series, >= intrinsic)"),
        "{}",
        v(0)
    );
    assert_eq!(f(&rows, &h, 0, "price_series"), euro);
    let am = f(&rows, &h, 0, "price_pide");
    // d'Halluin, Forsyth & Vetzal (2005) put, about 3.2412435 (from
    // memory), within the crosscheck tolerance 1e-5 x spot.
    assert!((am - 3.2412435).abs() <= 1e-3, "{am}");
    assert!(f(&rows, &h, 0, "pide_error_est") <= 1e-3);
    for c in [
        "price_fourier",
        "price_mc",
        "mc_z",
        "fourier_gap",
        "mc_method",
        "pide_gap",
    ] {
        assert_eq!(rows[0][col(&h, c)], "", "{c}");
    }
    // Merton (1973): the verdict names the equality it checked.
    assert!(
        v(1).contains("= European call as q = 0 and r >= 0"),
        "{}",
        v(1)
    );
    // The European row: four engines agree; the PIDE within its estimate.
    assert_eq!(v(2), "agree");
    let gap = f(&rows, &h, 2, "pide_gap");
    assert_eq!(gap, f(&rows, &h, 2, "price_pide") - euro);
    assert!(gap.abs() <= f(&rows, &h, 2, "pide_error_est"));
    // Beyond the PIDE's reach: inconclusive with the reason, row kept ok.
    assert!(
        v(3).contains("pide not run: lambda T = 6.000e1 is beyond the PIDE's reach (at most 50)"),
        "{}",
        v(3)
    );
    assert!(
        v(4).contains("pide not run: expiry 1.0e-300 is below the PIDE's reach"),
        "{}",
        v(4)
    );
    assert!(
        v(5).starts_with("inconclusive: American, pide not run: ln(S/K)"),
        "{}",
        v(5)
    );
    for row in &rows[3..6] {
        assert_eq!(row[col(&h, "status")], "ok");
        assert_eq!(row[col(&h, "price_pide")], "");
    }
}

#[test]
fn issue12_greeks_reprice_american_rows_with_the_pide() {
    // American rows: the finite differences of American PIDE prices must
    // find the PIDE grid's own delta, gamma and theta (two independent
    // routes to the same derivative); --engine pide on a European row: the
    // finite differences of European PIDE prices against the series'
    // closed-form Greeks (the analytic reference).
    let book = format!(
        "id,kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol,exercise\n\
         am,put,100,{DFV},american\n\
         eu,put,100,{DFV},european\n"
    );
    let out = saltus()
        .args([
            "greeks",
            "-",
            "--engine",
            "pide",
            "--pide-tol",
            "1e-5",
            "-q",
        ])
        .write_stdin(book)
        .output()
        .unwrap();
    let (h, rows) = read_csv(String::from_utf8(out.stdout).unwrap());
    assert_eq!(out.status.code(), Some(0), "{rows:?}");
    for g in ["delta", "gamma", "theta"] {
        assert_eq!(rows[0][col(&h, &format!("{g}_flag"))], "ok", "{g}");
        assert_eq!(rows[1][col(&h, &format!("{g}_flag"))], "ok", "{g}");
    }
    // No closed form for the others on the American row: fd only.
    for g in ["vega", "rho", "d_jump_rate", "vanna"] {
        assert_eq!(rows[0][col(&h, &format!("{g}_analytic"))], "", "{g}");
        assert_eq!(rows[0][col(&h, &format!("{g}_flag"))], "", "{g}");
        assert!(f(&rows, &h, 0, &format!("{g}_fd")).is_finite());
        assert_eq!(rows[1][col(&h, &format!("{g}_flag"))], "ok", "{g}");
    }
    // An American put is worth at least the European one, and its delta
    // is negative (Merton 1973 bounds).
    assert!(f(&rows, &h, 0, "price") >= f(&rows, &h, 1, "price"));
    assert!(f(&rows, &h, 0, "delta_fd") < 0.0);
    // --method analytic on an American row: grid values and a warning.
    let book = format!("{HEADER},exercise\nput,100,{DFV},american\n");
    let out = saltus()
        .args([
            "greeks",
            "-",
            "--method",
            "analytic",
            "--pide-tol",
            "1e-5",
            "-q",
        ])
        .write_stdin(book)
        .output()
        .unwrap();
    let (h, rows) = read_csv(String::from_utf8(out.stdout).unwrap());
    assert_eq!(out.status.code(), Some(1));
    assert!(rows[0][col(&h, "status")]
        .starts_with("warning: line 2: American exercise has no closed form"));
    assert_eq!(rows[0][col(&h, "vega")], "");
    assert!(f(&rows, &h, 0, "gamma") > 0.0);
}

#[test]
fn issue12_risk_revalues_american_rows_with_the_pide() {
    // The scenario P&L of an American row is the library PIDE's change of
    // value times the position (full revaluation), and positions.csv holds
    // the price `price` writes.
    let book = format!(
        "id,underlying,kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol,quantity,exercise\n\
         am,KORVANTIS,put,100,{DFV},3,american\n"
    );
    let dir = tempfile::tempdir().unwrap();
    let bookf = dir.path().join("book.csv");
    std::fs::write(&bookf, &book).unwrap();
    let rep = dir.path().join("rep");
    let out = saltus()
        .args([
            "risk",
            "--spot-shocks",
            "-10,0",
            "--vol-shocks",
            "0",
            "--pide-tol",
            "1e-5",
            "-q",
        ])
        .arg(&bookf)
        .arg("-o")
        .arg(&rep)
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let cfg = PideConfig { tol_spot: 1e-5 };
    let at = |s: f64| {
        let c = merton(
            OptionKind::Put,
            s,
            100.0,
            0.25,
            0.05,
            0.0,
            0.15,
            0.1,
            -0.9,
            0.45,
        );
        pide::price(&c, Exercise::American, &cfg).unwrap().price
    };
    let (h, cells) = read_csv(std::fs::read(rep.join("scenarios.csv")).unwrap());
    let pnl = |shock: &str| {
        cells
            .iter()
            .find(|r| r[col(&h, "level")] == "underlying" && r[col(&h, "spot_shock_pct")] == shock)
            .map(|r| r[col(&h, "pnl")].parse::<f64>().unwrap())
            .unwrap()
    };
    assert_eq!(pnl("0.0"), 0.0);
    let base = american::price(
        &merton(
            OptionKind::Put,
            100.0,
            100.0,
            0.25,
            0.05,
            0.0,
            0.15,
            0.1,
            -0.9,
            0.45,
        ),
        &cfg,
    )
    .unwrap()
    .greeks
    .price;
    let want = 3.0 * (at(90.0) - base);
    assert!(
        (pnl("-10.0") - want).abs() <= 1e-12 * want.abs(),
        "{} vs {want}",
        pnl("-10.0")
    );
    let (ph, pos) = read_csv(std::fs::read(rep.join("positions.csv")).unwrap());
    assert_eq!(pos[0][col(&ph, "price")].parse::<f64>().unwrap(), base);
}
