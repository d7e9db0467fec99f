//! The `crosscheck` command through the real binary: columns, verdicts,
//! status contract, and reproducibility across threads, order and splits.

use assert_cmd::Command;
use std::fs;

const HEADER: &str = "id,kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol";
const ROWS: [&str; 4] = [
    "a,call,100,100,0.5,0.03,0.2,0.5,-0.1,0.15",
    "b,put,100,80,1.0,0.02,0.25,0.3,-0.3,0.2",
    "c,put,100,40,0.5,0.03,0.15,0.1,-0.7,0.1",
    "d,call,100,120,2.0,0.01,0.3,1.0,0.05,0.1",
];

fn run(
    book: &str,
    extra: &[&str],
) -> (
    Option<i32>,
    Vec<csv::StringRecord>,
    csv::StringRecord,
    String,
) {
    let out = Command::cargo_bin("saltus")
        .unwrap()
        .args(extra)
        .args(["crosscheck", "-", "--paths", "200000"])
        .write_stdin(book.to_string())
        .output()
        .unwrap();
    let mut r = csv::Reader::from_reader(&out.stdout[..]);
    let h = r.headers().unwrap().clone();
    let rows = r.records().map(|x| x.unwrap()).collect();
    (
        out.status.code(),
        rows,
        h,
        String::from_utf8(out.stderr).unwrap(),
    )
}

fn book(rows: &[&str]) -> String {
    format!("{HEADER}\n{}\n", rows.join("\n"))
}

#[test]
fn writes_the_documented_columns_and_agrees() {
    let (code, rows, h, err) = run(&book(&ROWS), &[]);
    assert_eq!(code, Some(0), "{err}");
    let tail: Vec<&str> = h.iter().skip(10).collect();
    assert_eq!(
        tail,
        [
            "price_series",
            "price_fourier",
            "price_mc",
            "mc_stderr",
            "mc_z",
            "fourier_gap",
            "fourier_gap_rel",
            "fourier_error_est",
            "mc_method",
            "mc_paths",
            "mc_ess",
            "mc_hits",
            "verdict",
            "status"
        ]
    );
    for r in &rows {
        assert_eq!(&r[22], "agree", "{r:?}");
        assert_eq!(&r[23], "ok");
        let z: f64 = r[14].parse().unwrap();
        assert!(z.abs() < 4.0);
        // fourier_gap_rel is fourier_gap / price_series (README "CSV books").
        let num = |i: usize| r[i].parse::<f64>().unwrap();
        assert_eq!(num(16), num(15) / num(10), "{r:?}");
        assert!(num(17) >= 0.0 && num(17) <= 1e-8 * num(10), "{r:?}");
        // mc_method: an estimator name, `+parity` when converted (docs/engines.md).
        let method = r[18].strip_suffix("+parity").unwrap_or(&r[18]);
        assert!(
            [
                "plain",
                "jump-count",
                "esscher",
                "esscher+jump-count",
                "share-measure"
            ]
            .contains(&method),
            "{r:?}"
        );
        let (paths, hits): (u64, u64) = (r[19].parse().unwrap(), r[21].parse().unwrap());
        assert!(hits > 0 && hits <= paths, "{r:?}");
        assert!(
            num(20) > 0.0 && num(20) <= paths as f64 * (1.0 + 1e-12),
            "{r:?}"
        );
    }
    assert!(err.contains("rows checked          4"), "{err}");
    assert!(err.contains("z-scores"), "{err}");
}

#[test]
fn bad_rows_keep_the_status_contract() {
    let (code, rows, _, _) = run(
        &book(&[ROWS[0], "x,call,100,abc,0.5,0.03,0.2,0.5,-0.1,0.15"]),
        &[],
    );
    assert_eq!(code, Some(1));
    assert_eq!(rows.len(), 2);
    assert_eq!(&rows[1][23], "error: line 3: strike is not a number: 'abc'");
    assert!(rows[1][10].is_empty() && rows[1][22].is_empty());
}

#[test]
fn results_depend_on_row_id_not_on_threads_order_or_split() {
    let (_, all, _, _) = run(&book(&ROWS), &["--threads", "2"]);
    let (_, one_thread, _, _) = run(&book(&ROWS), &["--threads", "1"]);
    assert_eq!(all, one_thread);
    let reversed: Vec<&str> = ROWS.iter().rev().copied().collect();
    let (_, rev, _, _) = run(&book(&reversed), &[]);
    let (_, first, _, _) = run(&book(&ROWS[..2]), &[]);
    let (_, second, _, _) = run(&book(&ROWS[2..]), &[]);
    for (i, r) in all.iter().enumerate() {
        assert_eq!(r, &rev[ROWS.len() - 1 - i], "reordering changed row {i}");
        let split = if i < 2 { &first[i] } else { &second[i - 2] };
        assert_eq!(r, split, "splitting changed row {i}");
    }
}

#[test]
fn demo_book_report_is_correct() {
    let book = concat!(env!("CARGO_MANIFEST_DIR"), "/data/demo_book.csv");
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("report.csv");
    let res = Command::cargo_bin("saltus")
        .unwrap()
        .args(["crosscheck", book, "-o"])
        .arg(&out)
        .args(["--paths", "200000"])
        .output()
        .unwrap();
    assert_eq!(
        res.status.code(),
        Some(1),
        "the demo book has three bad rows"
    );
    let text = fs::read_to_string(&out).unwrap();
    let mut r = csv::Reader::from_reader(text.as_bytes());
    let h = r.headers().unwrap().clone();
    let v = h.iter().position(|x| x == "verdict").unwrap();
    let st = h.iter().position(|x| x == "status").unwrap();
    let rows: Vec<_> = r.records().map(|x| x.unwrap()).collect();
    let ok: Vec<_> = rows.iter().filter(|r| &r[st] == "ok").collect();
    assert_eq!(rows.len() - ok.len(), 3);
    assert!(ok.iter().all(|r| !r[v].starts_with("disagree")));
}

#[test]
fn target_se_and_bad_options() {
    let (code, rows, _, _) = run(&book(&ROWS[..1]), &[]);
    assert_eq!(code, Some(0));
    let out = Command::cargo_bin("saltus")
        .unwrap()
        .args(["crosscheck", "-", "--target-se", "0.05%"])
        .write_stdin(book(&ROWS[..1]))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
    let mut r = csv::Reader::from_reader(&out.stdout[..]);
    let rec = r.records().next().unwrap().unwrap();
    let (p, se): (f64, f64) = (rec[12].parse().unwrap(), rec[13].parse().unwrap());
    assert!(se <= 0.0005 * p, "{se} vs {p}");
    assert!(!rows.is_empty());
    let bad = Command::cargo_bin("saltus")
        .unwrap()
        .args(["crosscheck", "-", "--target-se", "-1"])
        .write_stdin(book(&ROWS[..1]))
        .output()
        .unwrap();
    assert_eq!(bad.status.code(), Some(2));
}

#[test]
fn issue8_fourier_failure_and_undefined_martingale_z_give_inconclusive_verdicts_in_words() {
    // Strike 1e300 and spot 1e-300 calls: the Fourier error estimate
    // (about 7e135 and 7e-165) exceeds the whole price range (0 to 100, 0 to
    // 1e-300; docs/engines.md), so the Fourier engine fails; the row keeps
    // its series and Monte Carlo results with an inconclusive verdict. The
    // jump_mean 20 put: every simulated terminal price alike (the martingale
    // z-score was written as -inf in a row with status ok).
    let rows = [
        "k,call,100,1e300,0.5,0.03,0.2,0.5,-0.1,0.15",
        "s,call,1e-300,100,0.5,0.03,0.2,0.5,-0.1,0.15",
        "z,put,100,100,0.5,0.02,0.2,0.5,20,0.1",
    ];
    let (code, got, h, err) = run(&book(&rows), &[]);
    assert!(matches!(code, Some(0) | Some(1)), "{err}");
    let col = |name: &str| h.iter().position(|x| x == name).unwrap();
    for row in &got[..2] {
        assert_eq!(&row[col("status")], "ok", "{row:?}");
        let verdict = &row[col("verdict")];
        assert!(
            verdict.starts_with("inconclusive: fourier engine failed: fourier error estimate")
                && verdict.contains("exceeds the whole range"),
            "{verdict}"
        );
        assert_eq!(&row[col("price_fourier")], "");
        assert_eq!(&row[col("fourier_gap")], "");
        for name in ["price_series", "price_mc", "mc_stderr"] {
            assert!(
                row[col(name)].parse::<f64>().is_ok_and(f64::is_finite),
                "{name}: {row:?}"
            );
        }
    }
    let verdict = &got[2][col("verdict")];
    assert!(verdict.starts_with("inconclusive: "), "{verdict}");
    for row in &got {
        let v = row[col("verdict")].to_ascii_lowercase();
        for word in v.split(|c: char| !(c.is_ascii_alphanumeric() || c == '.' || c == '-')) {
            assert!(
                word.parse::<f64>().is_ok_and(f64::is_finite) || word.parse::<f64>().is_err(),
                "non-finite number '{word}' in verdict '{v}'"
            );
        }
    }
}
