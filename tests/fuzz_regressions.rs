//! The regression corpus: every input that ever broke a rule of the fuzz
//! oracle, run again with the same assertions.
//!
//! `tests/data/fuzz_regressions/` holds one small book per case, named after
//! what it guards, and `manifest.csv` listing for each: the book, the
//! command line (the words after `saltus`, the book inserted after the
//! command; `risk` writes to a fresh directory), extra checks and the
//! defect. Every case must pass the oracle of `fuzz_cli.rs`; the extra
//! checks, separated by `;`, are:
//! - `all-ok`: every row's status is `ok` (a valid row that must be priced);
//! - `some-error~TEXT`: some row failed and its status contains TEXT;
//! - `no-status~TEXT`: no status contains TEXT;
//! - `exit=0|1|2`: the exit codes allowed (default `0|1`: every corpus book
//!   has a valid header, so only a refused option may stop the run).
//!
//! Cases run on two threads; the test fails listing every broken case.

use crate::fuzz_cli::{check, run, statuses, CommandLine};
use std::path::{Path, PathBuf};
use std::sync::Mutex;

fn corpus() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/data/fuzz_regressions")
}

/// One line of the manifest.
struct Case {
    file: String,
    command: CommandLine,
    checks: Vec<String>,
    defect: String,
}

fn manifest() -> Vec<Case> {
    let mut r = csv::Reader::from_path(corpus().join("manifest.csv")).expect("manifest.csv");
    r.records()
        .map(|rec| {
            let rec = rec.expect("manifest record");
            Case {
                file: rec[0].to_string(),
                command: CommandLine::parse(&rec[1]),
                checks: rec[2]
                    .split(';')
                    .map(str::trim)
                    .filter(|c| !c.is_empty())
                    .map(String::from)
                    .collect(),
                defect: rec[3].to_string(),
            }
        })
        .collect()
}

/// The rules a case breaks (empty: it passes).
fn run_case(case: &Case, dir: &Path) -> Vec<String> {
    let path = dir.join(&case.file);
    let book = std::fs::read(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let mut allowed = vec![0, 1];
    for c in &case.checks {
        if let Some(list) = c.strip_prefix("exit=") {
            allowed = list
                .split('|')
                .map(|x| x.trim().parse().expect("exit code"))
                .collect();
        }
    }
    let work = tempfile::tempdir().expect("temp dir");
    let r = run(&case.command, &path, work.path());
    let mut broken = check(&book, &case.command, &r, allowed.contains(&2));
    if !r.code().is_some_and(|c| allowed.contains(&c)) && broken.is_empty() {
        broken.push(format!("exit {:?}, expected one of {allowed:?}", r.code()));
    }
    let st = statuses(&case.command, &r);
    let ran = matches!(r.code(), Some(0 | 1));
    for c in &case.checks {
        if c == "all-ok" {
            if let Some(s) = st.iter().find(|s| *s != "ok") {
                broken.push(format!("all-ok: a row has status '{s}'"));
            } else if !ran {
                broken.push(format!("all-ok: exit {:?}", r.code()));
            }
        } else if let Some(t) = c.strip_prefix("some-error~") {
            let t = t.to_lowercase();
            if !st
                .iter()
                .any(|s| s != "ok" && s.to_lowercase().contains(&t))
            {
                broken.push(format!(
                    "some-error~{t}: no failed row says '{t}' (statuses: {st:?})"
                ));
            }
        } else if let Some(t) = c.strip_prefix("no-status~") {
            if let Some(s) = st.iter().find(|s| s.contains(t)) {
                broken.push(format!("no-status~{t}: status '{s}'"));
            }
        } else if !c.starts_with("exit=") {
            panic!("unknown check '{c}' for {}", case.file);
        }
    }
    broken
}

#[test]
fn fuzz_regressions_still_hold() {
    let dir = corpus();
    let cases = manifest();
    // Every book is listed, and every listed book exists.
    let mut files: Vec<String> = std::fs::read_dir(&dir)
        .expect("corpus directory")
        .filter_map(|e| e.ok())
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| n != "manifest.csv")
        .collect();
    files.sort();
    let mut listed: Vec<String> = cases.iter().map(|c| c.file.clone()).collect();
    listed.sort();
    listed.dedup();
    assert_eq!(files, listed, "books in {} vs manifest.csv", dir.display());

    let next = Mutex::new(0usize);
    let failures = Mutex::new(Vec::new());
    std::thread::scope(|s| {
        for _ in 0..2 {
            s.spawn(|| loop {
                let i = {
                    let mut n = next.lock().expect("lock");
                    *n += 1;
                    *n - 1
                };
                let Some(case) = cases.get(i) else { break };
                let broken = run_case(case, &dir);
                if !broken.is_empty() {
                    let mut msg = format!(
                        "REGRESSION {}: {}\n  command: {}\n",
                        case.file,
                        case.defect,
                        case.command.shown(&dir.join(&case.file))
                    );
                    for b in broken.iter().take(6) {
                        msg.push_str(&format!("  rule broken: {b}\n"));
                    }
                    if broken.len() > 6 {
                        msg.push_str(&format!("  ... and {} more\n", broken.len() - 6));
                    }
                    failures.lock().expect("lock").push(msg);
                }
            });
        }
    });
    let failures = failures.into_inner().expect("lock");
    assert!(
        failures.is_empty(),
        "{} of {} corpus cases broke a rule:\n{}",
        failures.len(),
        cases.len(),
        failures.concat()
    );
}
