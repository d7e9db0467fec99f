//! One module per command; shared helpers for opening books and reporting.

pub mod crosscheck;
pub mod greeks;
pub mod price;
pub mod risk;

use anyhow::{Context, Result};
use saltus::book::BookSummary;
use std::fs::File;
use std::io::{self, BufReader, BufWriter, Read, Write};
use std::path::Path;
use std::process::ExitCode;

/// Opens a book path, `-` meaning standard input.
pub fn open_input(path: &Path) -> Result<Box<dyn Read + Send>> {
    if path.as_os_str() == "-" {
        Ok(Box::new(BufReader::with_capacity(1 << 20, io::stdin())))
    } else {
        let f = File::open(path).with_context(|| format!("cannot open {}", path.display()))?;
        if f.metadata().is_ok_and(|m| m.is_dir()) {
            anyhow::bail!("cannot read {}: it is a directory", path.display());
        }
        Ok(Box::new(BufReader::with_capacity(1 << 20, f)))
    }
}

/// Opens an output path, `-` or none meaning standard output.
pub fn open_output(path: Option<&Path>) -> Result<Box<dyn Write + Send>> {
    match path {
        // Small buffers: the pipeline writes whole chunks, which then bypass
        // the buffer instead of being copied through it.
        None => Ok(Box::new(BufWriter::with_capacity(1 << 16, io::stdout()))),
        Some(p) if p.as_os_str() == "-" => {
            Ok(Box::new(BufWriter::with_capacity(1 << 16, io::stdout())))
        }
        Some(p) => {
            let f = File::create(p).with_context(|| format!("cannot create {}", p.display()))?;
            Ok(Box::new(BufWriter::with_capacity(1 << 16, f)))
        }
    }
}

/// The error and its causes joined by `: `, skipping a cause whose text the
/// previous message already contains (the csv crate repeats its I/O cause).
pub fn error_chain(e: &anyhow::Error) -> String {
    let mut out: Vec<String> = Vec::new();
    for cause in e.chain() {
        let msg = cause.to_string();
        if out.last().is_some_and(|prev| prev.contains(&msg)) {
            continue;
        }
        out.push(msg);
    }
    out.join(": ")
}

/// True when the error chain holds a broken pipe (the reader went away).
pub fn is_broken_pipe(e: &anyhow::Error) -> bool {
    e.chain().any(|c| {
        c.downcast_ref::<io::Error>().is_some_and(|io| io.kind() == io::ErrorKind::BrokenPipe)
            || c.downcast_ref::<csv::Error>().is_some_and(|ce| {
                matches!(ce.kind(), csv::ErrorKind::Io(io) if io.kind() == io::ErrorKind::BrokenPipe)
            })
    })
}

/// Prints the per-row failures kept in the summary and the totals line.
pub fn report_rows(summary: &BookSummary, verb: &str, seconds: f64) {
    for e in &summary.first_errors {
        eprintln!("saltus: row failed: {e}");
    }
    if summary.failed as usize > summary.first_errors.len() {
        eprintln!(
            "saltus: ... and {} more failed rows (see the status column)",
            summary.failed as usize - summary.first_errors.len()
        );
    }
    let ok = summary.rows - summary.failed;
    let rate = if seconds > 0.0 {
        summary.rows as f64 / seconds
    } else {
        0.0
    };
    eprintln!(
        "saltus: {ok} rows {verb}, {} rows failed, {} rows in {seconds:.3} s ({rate:.0} rows/s)",
        summary.failed, summary.rows
    );
    if summary.skipped > 0 {
        eprintln!(
            "saltus: {} records with every field empty skipped like blank lines (not rows, not written)",
            summary.skipped
        );
    }
}

/// Exit code from a summary: 1 when any row failed.
pub fn rows_exit_code(summary: &BookSummary) -> ExitCode {
    if summary.failed > 0 {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    }
}
