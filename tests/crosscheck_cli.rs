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
            "price_pide",
            "pide_gap",
            "pide_error_est",
            "verdict",
            "status"
        ]
    );
    for r in &rows {
        assert_eq!(&r[25], "agree", "{r:?}");
        assert_eq!(&r[26], "ok");
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
        // The European PIDE (issue 12): pide_gap = price_pide - price_series,
        // within the PIDE's own estimate, which is within the crosscheck
        // tolerance 1e-5 x spot.
        assert_eq!(num(23), num(22) - num(10), "{r:?}");
        assert!(num(23).abs() <= num(24) && num(24) <= 1e-3, "{r:?}");
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
    assert_eq!(&rows[1][26], "error: line 3: strike is not a number: 'abc'");
    assert!(rows[1][10].is_empty() && rows[1][25].is_empty());
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
        // Monte Carlo decides such a row (README "Validation"); the Fourier
        // engine's failure is still said in words.
        assert!(
            (verdict.starts_with("inconclusive: fourier engine failed: fourier error estimate")
                || verdict.starts_with(
                    "agree by mc (no verdict from the others: fourier engine failed: fourier error estimate"
                ))
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
    // The undefined martingale test is said in words; the Fourier engine
    // decides the row (README "Validation").
    let verdict = &got[2][col("verdict")];
    assert!(
        verdict.starts_with("inconclusive: ") || verdict.starts_with("agree by fourier ("),
        "{verdict}"
    );
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

/// A lattice row (zero diffusion vol, zero jump vol, jumps of size e^-0.1):
/// outside the Fourier engine's claim (docs/engines.md), so its verdict is
/// inconclusive whatever Monte Carlo finds, unless Monte Carlo disagrees.
fn lattice_row(id: &str, strike: u32) -> String {
    // Jumps of e^20: Monte Carlo cannot decide either (no path on the
    // non-paying side), so the row is genuinely inconclusive.
    format!("{id},put,100,{strike},0.5,0.02,0,2,20,0")
}

fn run_with(book: &str, args: &[&str]) -> (Option<i32>, String, String) {
    let out = Command::cargo_bin("saltus")
        .unwrap()
        .args(["crosscheck", "-", "--paths", "16384"])
        .args(args)
        .write_stdin(book.to_string())
        .output()
        .unwrap();
    (
        out.status.code(),
        String::from_utf8(out.stdout).unwrap(),
        String::from_utf8(out.stderr).unwrap(),
    )
}

#[test]
fn issue10_fail_on_inconclusive_counts_inconclusive_rows_toward_the_exit_code() {
    // README "crosscheck": exit 0 when every row is checked and at most
    // --allow-disagree rows disagree; --fail-on-inconclusive adds "and no
    // row is inconclusive", exit 1 otherwise.
    let mixed = book(&[ROWS[0], &lattice_row("L", 95)]);
    let (code, out, err) = run_with(&mixed, &[]);
    assert_eq!(code, Some(0), "{err}");
    assert!(
        out.contains("inconclusive: fourier not applicable"),
        "{out}"
    );
    let (code, _, err) = run_with(&mixed, &["--fail-on-inconclusive"]);
    assert_eq!(code, Some(1), "{err}");
    assert!(
        err.contains("1 rows reached no verdict (--fail-on-inconclusive)"),
        "{err}"
    );
    // Quiet changes nothing but the messages.
    let (code, _, err) = run_with(&mixed, &["--fail-on-inconclusive", "-q"]);
    assert_eq!((code, err.as_str()), (Some(1), ""));
    // A book where every row agrees passes with the option too.
    let (code, _, err) = run_with(&book(&ROWS[..1]), &["--fail-on-inconclusive"]);
    assert_eq!(code, Some(0), "{err}");
}

#[test]
fn issue10_summary_names_flagged_rows_by_input_line_with_reasons_and_units() {
    // Input lines, not data rows, are the one row-reference scheme (README
    // "Bad input"). A blank line shifts the line numbers of the rows below
    // it: the row with id L2 is on line 5 of the input (header 1, a 2, L1 3,
    // blank 4).
    let book = format!(
        "{HEADER}\n{}\n{}\n\n{}\n",
        ROWS[0],
        lattice_row("L1", 95),
        lattice_row("L2", 90)
    );
    let (code, _, err) = run_with(&book, &[]);
    assert_eq!(code, Some(0), "{err}");
    assert!(err.contains("  inconclusive rows:\n"), "{err}");
    assert!(
        err.contains("    line 3 (id L1): inconclusive: fourier not applicable:"),
        "{err}"
    );
    assert!(err.contains("    line 5 (id L2): inconclusive:"), "{err}");
    assert!(!err.contains("(row "), "rows are named by line only: {err}");
    assert!(err.contains("(line 2)"), "largest |z| by line: {err}");
    // Tolerances with their units.
    assert!(
        err.contains("Monte Carlo |z| <= 4 (standard errors)")
            && err.contains("1e-8 x price_series (relative)")
            && err.contains("1e-12 x spot (absolute, price units)"),
        "{err}"
    );
}

#[test]
fn issue10_summary_bounds_the_listed_rows_with_and_n_more() {
    // Twelve inconclusive rows: the first ten are listed, then "and 2 more".
    let rows: Vec<String> = (0..12)
        .map(|i| lattice_row(&format!("L{i}"), 80 + i))
        .collect();
    let refs: Vec<&str> = rows.iter().map(|s| s.as_str()).collect();
    let (_, _, err) = run_with(&book(&refs), &[]);
    let listed = err.lines().filter(|l| l.starts_with("    line ")).count();
    assert_eq!(listed, 10, "{err}");
    assert!(err.contains("    line 11 (id L9): "), "{err}");
    assert!(!err.contains("(id L10)"), "{err}");
    assert!(
        err.contains("    ... and 2 more (see the verdict column)"),
        "{err}"
    );
}

/// The inline SVG documents of an HTML page, in order.
fn svgs(html: &str) -> Vec<&str> {
    let mut out = Vec::new();
    let mut rest = html;
    while let Some(i) = rest.find("<svg") {
        let j = rest[i..].find("</svg>").expect("closed svg") + i + "</svg>".len();
        out.push(&rest[i..j]);
        rest = &rest[j..];
    }
    out
}

#[test]
fn issue10_report_page_is_self_contained_and_has_every_section() {
    // The validation page of issue 10: z-score histogram against the normal
    // density, normal quantile plot, coverage of the 95% intervals, the
    // Fourier gap against moneyness and expiry, the flagged rows and the
    // run's settings; inline SVG that parses as XML (roxmltree, as
    // tests/risk_cli.rs checks the risk page), no network references.
    let dir = tempfile::tempdir().unwrap();
    let report = dir.path().join("validation");
    let mut rows: Vec<String> = ROWS.iter().map(|s| s.to_string()).collect();
    rows.push(lattice_row("LAT-<1>", 95));
    rows.push("bad,call,100,abc,0.5,0.03,0.2,0.5,-0.1,0.15".to_string());
    let refs: Vec<&str> = rows.iter().map(|s| s.as_str()).collect();
    let (code, _, err) = run_with(
        &book(&refs),
        &["--report", report.to_str().unwrap(), "--seed", "77"],
    );
    assert_eq!(code, Some(1), "one row failed: {err}");
    let entries: Vec<String> = fs::read_dir(&report)
        .unwrap()
        .map(|e| e.unwrap().file_name().into_string().unwrap())
        .collect();
    assert_eq!(entries, ["report.html"]);
    let html = fs::read_to_string(report.join("report.html")).unwrap();
    for section in [
        "<h2>Verdicts</h2>",
        "<h2>Monte Carlo z-scores</h2>",
        "<h2>Coverage of the 95% intervals</h2>",
        "<h2>Fourier gap against moneyness and expiry</h2>",
        "<h2>Flagged rows (1)</h2>",
        "<h2>Run settings</h2>",
    ] {
        assert!(html.contains(section), "missing {section}");
    }
    // The flagged row by line, its id escaped, its reason; the failed row by line.
    assert!(html.contains("<td>6</td><td>LAT-&lt;1&gt;</td>"), "{html}");
    assert!(html.contains("fourier not applicable"));
    assert!(html.contains("line 7: strike is not a number"));
    // Settings: seed, paths, version, input.
    assert!(html.contains("<td>seed</td><td class=\"left\">77</td>"));
    assert!(html.contains("16384 paths"));
    assert!(html.contains(env!("CARGO_PKG_VERSION")));
    assert!(html.contains("<td>input file</td><td class=\"left\">-</td>"));
    // No URL but the SVG namespace: nothing is fetched from the network.
    assert!(html
        .replace("http://www.w3.org/2000/svg", "")
        .find("http")
        .is_none());
    assert!(!html.contains("<script") && !html.contains("src="));
    let svgs = svgs(&html);
    assert_eq!(svgs.len(), 4, "histogram, quantile plot, two gap charts");
    for svg in &svgs {
        let doc = roxmltree::Document::parse(svg).expect("well-formed SVG");
        assert_eq!(doc.root_element().tag_name().name(), "svg");
        let texts: Vec<&str> = doc
            .descendants()
            .filter(|n| n.has_tag_name("text"))
            .filter_map(|n| n.text())
            .collect();
        assert!(texts.len() > 5, "labelled axes");
    }
    let hist = roxmltree::Document::parse(svgs[0]).unwrap();
    assert!(hist
        .descendants()
        .any(|n| n.text().map(str::trim) == Some("standard normal density")));
    let bars = hist
        .descendants()
        .filter(|n| n.has_tag_name("rect"))
        .count();
    assert!(bars >= 40, "a bar per bin, found {bars}");
    let qq = roxmltree::Document::parse(svgs[1]).unwrap();
    let dots = qq
        .descendants()
        .filter(|n| n.has_tag_name("circle"))
        .count();
    assert!(dots >= 5, "a point per occupied quantile, found {dots}");
}

#[test]
fn issue10_zero_diffusion_rows_get_a_conclusive_fourier_check() {
    // Zero diffusion vol, positive jump vol: the Fourier engine separates
    // the zero-jump atom (docs/engines.md) and its gap to the series is
    // within tolerance with an estimate below it, so the Fourier part of
    // the verdict is decided (the issue: "the Fourier error estimate is far
    // above tolerance" on such rows). The engine's accuracy on such rows is
    // checked against the mpmath fixture in tests/fourier.rs.
    let rows = [
        "z1,call,100,100,0.25,0.03,0,1,-0.2,0.3",
        "z2,put,100,100,0.0027397260273972603,0.03,0,0.5,-0.1,0.15",
    ];
    let (_, out, err) = run_with(&book(&rows), &[]);
    let mut r = csv::Reader::from_reader(out.as_bytes());
    let h = r.headers().unwrap().clone();
    let at = |n: &str| h.iter().position(|x| x == n).unwrap();
    for row in r.records().map(|x| x.unwrap()) {
        let v = &row[at("verdict")];
        // Decided by Fourier (the PIDE does not run without diffusion).
        assert!(v.starts_with("agree by fourier and mc"), "{v} / {err}");
        assert!(
            !v.contains("fourier engine") && !v.contains("fourier error"),
            "{v} / {err}"
        );
        let est: f64 = row[at("fourier_error_est")].parse().unwrap();
        let s: f64 = row[at("price_series")].parse().unwrap();
        assert!(est <= 1e-8 * s, "{est} vs {s}");
    }
}

#[test]
fn issue10_without_an_id_column_rows_are_named_by_line_only() {
    // One row-reference scheme: without ids the summary must not show the
    // data-row number (2 for the row on line 3) as if it were an id.
    let book = "kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol\n\
                call,100,100,0.5,0.03,0.2,0.5,-0.1,0.15\n\
                put,100,95,0.5,0.02,0,2,20,0\n";
    let (_, _, err) = run_with(book, &[]);
    assert!(
        err.contains("    line 3: inconclusive: fourier not applicable"),
        "{err}"
    );
    assert!(!err.contains("(id "), "{err}");
    assert!(err.contains("largest Fourier gaps  line 2 "), "{err}");
}
