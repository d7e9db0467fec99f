//! Output safety through the real binary (issue 8): an output never
//! replaces the input, a fatal error, a write failure or an interruption
//! never leaves a partial output under a final name, `risk` replaces its
//! directory as a whole, and the command line refuses what it cannot do
//! (unbounded `--threads`) with a message. The expected behaviour is the
//! contract written in README.md ("Output safety"), not program output.

use assert_cmd::Command;
use std::collections::BTreeMap;
use std::fs;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::Stdio;

const HEADER: &str = "kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol";

fn saltus() -> Command {
    Command::cargo_bin("saltus").unwrap()
}

fn bin() -> PathBuf {
    assert_cmd::cargo::cargo_bin("saltus")
}

/// A valid book of `n` invented rows.
fn book(n: usize) -> String {
    let mut s = String::with_capacity(n * 48 + 64);
    s.push_str(HEADER);
    s.push('\n');
    for i in 0..n {
        let kind = if i % 2 == 0 { "call" } else { "put" };
        s.push_str(&format!(
            "{kind},100,{},0.5,0.03,0.2,0.5,-0.1,0.15\n",
            80 + i % 41
        ));
    }
    s
}

/// The names in a directory, sorted.
fn names(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    v.sort();
    v
}

/// Every file of a directory with its bytes.
fn snapshot(dir: &Path) -> BTreeMap<String, Vec<u8>> {
    names(dir)
        .into_iter()
        .map(|n| {
            let bytes = fs::read(dir.join(&n)).unwrap();
            (n, bytes)
        })
        .collect()
}

fn stderr(out: &std::process::Output) -> String {
    String::from_utf8_lossy(&out.stderr).into_owned()
}

/// A report directory `rep` made by a real run, beside `book.csv`.
fn existing_report(dir: &Path) -> PathBuf {
    fs::write(dir.join("old.csv"), book(12)).unwrap();
    let out = saltus()
        .current_dir(dir)
        .args(["risk", "old.csv", "-o", "rep", "-q"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    fs::remove_file(dir.join("old.csv")).unwrap();
    dir.join("rep")
}

/// The per-row commands that take `-o FILE`, with fast options.
const FILE_COMMANDS: [&[&str]; 3] = [
    &["price"],
    &["crosscheck", "--paths", "2000"],
    &["greeks", "--method", "analytic"],
];

#[test]
fn issue8_output_naming_the_input_is_refused_and_the_input_kept() {
    let dir = tempfile::tempdir().unwrap();
    let text = book(3);
    fs::write(dir.path().join("x.csv"), &text).unwrap();
    fs::hard_link(dir.path().join("x.csv"), dir.path().join("link.csv")).unwrap();
    for cmd in FILE_COMMANDS {
        // The same name, another spelling of it, and a hard link.
        for out_name in ["x.csv", "./x.csv", "link.csv"] {
            let out = saltus()
                .current_dir(dir.path())
                .args(cmd)
                .args(["x.csv", "-o", out_name])
                .output()
                .unwrap();
            assert_eq!(out.status.code(), Some(2), "{cmd:?} -o {out_name}");
            assert!(
                stderr(&out).contains("it is the input book"),
                "{cmd:?} -o {out_name}: {}",
                stderr(&out)
            );
            assert_eq!(fs::read_to_string(dir.path().join("x.csv")).unwrap(), text);
        }
    }
    // A book read from standard input redirected from the output file.
    let out = std::process::Command::new(bin())
        .current_dir(dir.path())
        .args(["price", "-", "-o", "x.csv"])
        .stdin(fs::File::open(dir.path().join("x.csv")).unwrap())
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert_eq!(fs::read_to_string(dir.path().join("x.csv")).unwrap(), text);
    assert_eq!(names(dir.path()), ["link.csv", "x.csv"]);
}

#[test]
fn issue8_risk_output_dir_holding_the_input_or_other_files_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let rep = dir.path().join("rep");
    fs::create_dir(&rep).unwrap();
    fs::write(rep.join("book.csv"), book(3)).unwrap();
    let out = saltus()
        .current_dir(dir.path())
        .args(["risk", "rep/book.csv", "-o", "rep"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(
        stderr(&out).contains("holds the input book"),
        "{}",
        stderr(&out)
    );
    assert_eq!(names(&rep), ["book.csv"]);
    assert_eq!(fs::read_to_string(rep.join("book.csv")).unwrap(), book(3));
    // The same directory spelled differently (through a symbolic link).
    std::os::unix::fs::symlink(&rep, dir.path().join("alias")).unwrap();
    let out = saltus()
        .current_dir(dir.path())
        .args(["risk", "rep/book.csv", "-o", "alias"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert_eq!(names(&rep), ["book.csv"]);

    // A directory holding a file that is not part of a report is never
    // swapped away.
    let mine = dir.path().join("mine");
    fs::create_dir(&mine).unwrap();
    fs::write(mine.join("notes.txt"), "keep me").unwrap();
    fs::write(dir.path().join("b.csv"), book(3)).unwrap();
    let out = saltus()
        .current_dir(dir.path())
        .args(["risk", "b.csv", "-o", "mine"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(stderr(&out).contains("notes.txt"), "{}", stderr(&out));
    assert_eq!(names(&mine), ["notes.txt"]);
}

#[test]
fn issue8_fatal_error_leaves_existing_outputs_untouched() {
    let dir = tempfile::tempdir().unwrap();
    // No jump_vol column: a fatal error before any row.
    fs::write(
        dir.path().join("bad.csv"),
        "kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean\ncall,100,95,0.5,0.03,0.2,0.5,-0.1\n",
    )
    .unwrap();
    fs::write(dir.path().join("out.csv"), "precious\n").unwrap();
    for cmd in FILE_COMMANDS {
        let out = saltus()
            .current_dir(dir.path())
            .args(cmd)
            .args(["bad.csv", "-o", "out.csv"])
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(2), "{cmd:?}");
        assert!(stderr(&out).contains("jump_vol"), "{}", stderr(&out));
        assert_eq!(fs::read(dir.path().join("out.csv")).unwrap(), b"precious\n");
    }
    assert_eq!(names(dir.path()), ["bad.csv", "out.csv"]);

    let rep = existing_report(dir.path());
    let before = snapshot(&rep);
    let out = saltus()
        .current_dir(dir.path())
        .args(["risk", "bad.csv", "-o", "rep"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert_eq!(snapshot(&rep), before);
    // An unreadable input too.
    let out = saltus()
        .current_dir(dir.path())
        .args(["risk", "missing.csv", "-o", "rep"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert_eq!(snapshot(&rep), before);
    assert_eq!(names(dir.path()), ["bad.csv", "out.csv", "rep"]);
}

/// Runs saltus under a file-size limit of 64 blocks (32 or 64 KiB), with
/// SIGXFSZ ignored so that a write past it fails with EFBIG as on a full
/// disk.
fn run_with_small_disk(dir: &Path, args: &[&str]) -> std::process::Output {
    std::process::Command::new("sh")
        .current_dir(dir)
        .arg("-c")
        .arg("ulimit -f 64 && trap '' XFSZ && exec \"$0\" \"$@\"")
        .arg(bin())
        .args(args)
        .output()
        .unwrap()
}

#[test]
fn issue8_write_failure_keeps_the_old_output_and_no_temporary_file() {
    let dir = tempfile::tempdir().unwrap();
    fs::write(dir.path().join("b.csv"), book(4000)).unwrap();
    fs::write(dir.path().join("out.csv"), "precious\n").unwrap();
    let out = run_with_small_disk(dir.path(), &["price", "b.csv", "-o", "out.csv"]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(
        stderr(&out).contains("cannot write out.csv"),
        "{}",
        stderr(&out)
    );
    assert_eq!(fs::read(dir.path().join("out.csv")).unwrap(), b"precious\n");
    assert_eq!(names(dir.path()), ["b.csv", "out.csv"]);

    // The risk directory: the old report stays whole, no staging left.
    let rep = existing_report(dir.path());
    let before = snapshot(&rep);
    let out = run_with_small_disk(dir.path(), &["risk", "b.csv", "-o", "rep"]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert_eq!(snapshot(&rep), before);
    assert_eq!(names(dir.path()), ["b.csv", "out.csv", "rep"]);

    // Standard output on a full device (Linux /dev/full): exit 2, named.
    let out = std::process::Command::new(bin())
        .current_dir(dir.path())
        .args(["price", "b.csv"])
        .stdout(
            fs::OpenOptions::new()
                .write(true)
                .open("/dev/full")
                .unwrap(),
        )
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains("cannot write standard output"),
        "{}",
        stderr(&out)
    );
}

#[test]
fn successful_runs_leave_no_temporary_files() {
    let dir = tempfile::tempdir().unwrap();
    fs::write(dir.path().join("b.csv"), book(5)).unwrap();
    fs::write(dir.path().join("out.csv"), "old\n").unwrap();
    let out = saltus()
        .current_dir(dir.path())
        .args(["price", "b.csv", "-o", "out.csv"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let text = fs::read_to_string(dir.path().join("out.csv")).unwrap();
    assert_eq!(text.lines().count(), 6, "header and five rows");
    // A second report run replaces the first as a whole.
    let rep = existing_report(dir.path());
    let out = saltus()
        .current_dir(dir.path())
        .args(["risk", "b.csv", "-o", "rep", "-q"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let positions = fs::read_to_string(rep.join("positions.csv")).unwrap();
    assert_eq!(positions.lines().count(), 6, "the new book's five rows");
    assert_eq!(names(dir.path()), ["b.csv", "out.csv", "rep"]);
}

/// Feeds `rows` rows to `saltus ARGS` on a pipe, waits until it has written
/// output somewhere in `dir` (so the run is under way; it cannot finish,
/// since standard input stays open), then sends `signal` with kill(1).
fn interrupt(dir: &Path, args: &[&str], rows: usize, signal: &str) -> std::process::ExitStatus {
    let before = walk_sizes(dir);
    let mut child = std::process::Command::new(bin())
        .current_dir(dir)
        .args(args)
        .stdin(Stdio::piped())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let mut stdin = child.stdin.take().unwrap();
    let feeder = std::thread::spawn(move || {
        let text = book(rows);
        // The write fails once the process is gone: that is expected.
        let _ = stdin.write_all(text.as_bytes());
        stdin
    });
    // Poll (no timing is asserted; the bound only stops a broken run).
    let mut started = false;
    for _ in 0..6000 {
        if walk_sizes(dir) > before {
            started = true;
            break;
        }
        std::thread::sleep(std::time::Duration::from_millis(10));
    }
    assert!(started, "saltus {args:?} wrote nothing");
    let status = std::process::Command::new("kill")
        .arg(format!("-{signal}"))
        .arg(child.id().to_string())
        .status()
        .unwrap();
    assert!(status.success());
    let exit = child.wait().unwrap();
    drop(feeder.join().unwrap());
    exit
}

/// Total size of every file under `dir`, staging directories included.
fn walk_sizes(dir: &Path) -> u64 {
    let mut total = 0;
    if let Ok(entries) = fs::read_dir(dir) {
        for e in entries.flatten() {
            let p = e.path();
            match fs::symlink_metadata(&p) {
                Ok(m) if m.is_dir() => total += walk_sizes(&p),
                Ok(m) => total += m.len(),
                Err(_) => {}
            }
        }
    }
    total
}

#[test]
fn issue8_interrupted_runs_leave_the_old_output_and_no_temporary_file() {
    let dir = tempfile::tempdir().unwrap();
    fs::write(dir.path().join("out.csv"), "precious\n").unwrap();
    // A large price run, stopped by SIGTERM.
    let exit = interrupt(
        dir.path(),
        &["price", "-", "-o", "out.csv"],
        300_000,
        "TERM",
    );
    assert_eq!(exit.code(), Some(143), "{exit:?}");
    assert_eq!(fs::read(dir.path().join("out.csv")).unwrap(), b"precious\n");
    assert_eq!(names(dir.path()), ["out.csv"]);
    // crosscheck, stopped by SIGINT (Ctrl-C).
    let exit = interrupt(
        dir.path(),
        &["crosscheck", "-", "-o", "out.csv", "--paths", "2000"],
        20_000,
        "INT",
    );
    assert_eq!(exit.code(), Some(130), "{exit:?}");
    assert_eq!(fs::read(dir.path().join("out.csv")).unwrap(), b"precious\n");
    assert_eq!(names(dir.path()), ["out.csv"]);
}

#[test]
fn issue8_interrupted_risk_leaves_the_old_report() {
    let dir = tempfile::tempdir().unwrap();
    let rep = existing_report(dir.path());
    let before = snapshot(&rep);
    let exit = interrupt(dir.path(), &["risk", "-", "-o", "rep"], 20_000, "TERM");
    assert_eq!(exit.code(), Some(143), "{exit:?}");
    assert_eq!(snapshot(&rep), before);
    assert_eq!(names(dir.path()), ["rep"], "no staging directory is left");
}

#[test]
fn issue8_thread_count_is_bounded() {
    let dir = tempfile::tempdir().unwrap();
    fs::write(dir.path().join("b.csv"), book(2)).unwrap();
    for n in ["100000", "0"] {
        let out = saltus()
            .current_dir(dir.path())
            .args(["--threads", n, "price", "b.csv"])
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(2), "--threads {n}");
        assert!(
            stderr(&out).contains("must be a whole number from 1 to"),
            "{}",
            stderr(&out)
        );
        assert!(out.stdout.is_empty());
    }
    let out = saltus()
        .current_dir(dir.path())
        .args(["--threads", "2", "price", "b.csv"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
}

#[test]
fn issue8_negative_option_values_reach_validation() {
    let dir = tempfile::tempdir().unwrap();
    fs::write(dir.path().join("b.csv"), book(2)).unwrap();
    let cases: [(&[&str], &str); 4] = [
        (
            &["crosscheck", "b.csv", "--target-se", "-1"],
            "--target-se must be",
        ),
        (&["crosscheck", "b.csv", "--gamma", "-2"], "--gamma must be"),
        (&["crosscheck", "b.csv", "--z-max", "-4"], "--z-max"),
        (
            &["greeks", "b.csv", "--spot-bump", "-0.1"],
            "--spot-bump must be",
        ),
    ];
    for (args, message) in cases {
        let out = saltus()
            .current_dir(dir.path())
            .args(args)
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        let err = stderr(&out);
        assert!(!err.contains("unexpected argument"), "{args:?}: {err}");
        assert!(err.contains(message), "{args:?}: {err}");
    }
}

#[test]
fn issue8_help_has_one_layout_and_shows_each_default_once() {
    for cmd in ["price", "crosscheck", "greeks", "risk"] {
        let long = saltus().args([cmd, "--help"]).output().unwrap();
        assert!(long.status.success());
        let text = String::from_utf8(long.stdout).unwrap();
        // One way of showing defaults: clap's `[default: ...]`, once per option.
        assert!(!text.contains("(default"), "{cmd}: {text}");
        for line in text.lines() {
            assert!(
                line.matches("default:").count() <= 1,
                "{cmd}: default shown twice: {line}"
            );
        }
        // The same sections in the same order in every command.
        let mut at = 0;
        for section in [
            "Usage:",
            "Arguments:",
            "Options:",
            "Columns read",
            "Exit codes:",
        ] {
            let found = text[at..]
                .find(section)
                .unwrap_or_else(|| panic!("{cmd}: no '{section}' after byte {at}: {text}"));
            at += found;
        }
        // One layout: `-h` and `--help` print the same compact text.
        let short = saltus().args([cmd, "-h"]).output().unwrap();
        assert_eq!(String::from_utf8(short.stdout).unwrap(), text, "{cmd}");
    }
}
