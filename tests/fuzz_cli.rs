//! A seeded mutational fuzzer over the real binary, and the oracle that
//! judges one run of it (shared with the regression corpus in
//! `fuzz_regressions.rs`).
//!
//! Design: a few seed books (the demo book, a typical book and a book of
//! rows at the documented domain edges, both built here) are mutated by a
//! seeded generator (field garbage, extreme values, empty or extra fields,
//! quotes, line endings, byte-order marks, invalid UTF-8, all-empty records,
//! reordered or duplicated columns, huge lines, byte flips...). Each book
//! is run through one command of the binary with a kill switch
//! ([`KILL_AFTER`]: a generous limit so that a slow machine does not flake;
//! it catches runaways, it is not a speed assertion) and the run is judged
//! against the contract of README.md ("CSV books", "Bad input", "Exit
//! codes"):
//! - no panic (exit 101 or "panicked" on stderr), no hang, exit code 0, 1
//!   or 2, and no exit 2 when the header is valid (one bad row never stops
//!   a run);
//! - on exit 0 or 1: one output row per input data record, in order, where
//!   the input records are those the `csv` crate reads
//!   (`has_headers(false)`, `flexible(true)`), without blank lines and
//!   without records whose fields are all empty (treated as blank, quoted
//!   or not), except that a quote left open at the end of the input cuts
//!   its record at the first line break after the quote and the rest is
//!   read again from there (README "Bad input"; [`input_records`]);
//! - the echoed input fields of each row equal the record's fields byte for
//!   byte (compared as parsed CSV values, since the writer may re-quote; a
//!   record with too few fields is padded with empty ones and one with too
//!   many is cut, and such a row must not be `ok`);
//! - status `ok` or `error: line N: ...` with N the line the record starts
//!   on (1 + the line breaks before it; `\n`, `\r\n` and a lone `\r` each
//!   count one, inside quoted fields too); an error row has empty result
//!   fields; a record cut at an open quote is an error whose status names
//!   the quote's line; exit 0 only when every row is `ok`;
//! - no non-finite number (`inf`, `NaN`, or a value that parses to one) in
//!   a result field of an `ok` row; for `risk`, in no other CSV file of the
//!   report either, outside rows whose own status is not `ok`;
//! - a status never prints a number as a long decimal expansion (a run of
//!   more than 25 digits that the input record does not contain, as
//!   written, escaped or without digit separators: messages quote field
//!   text, see [`long_numbers`]).
//!
//! The default budget is fixed (books per command below) and the generator
//! seed too, so every CI run sees the same books; `SALTUS_FUZZ_BOOKS=N`
//! runs N books per command and `SALTUS_FUZZ_SEED=S` other books. A book
//! that breaks a rule is written under `target/tmp/fuzz-failures/` and its
//! path, command line and broken rules are printed, ready to be added to
//! `tests/data/fuzz_regressions/` (see DEVELOPERS.md).

use saltus::book::{schema, Schema};
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};
use wait_timeout::ChildExt;

/// Kill switch per book: a run still going after this is a hang.
pub(crate) const KILL_AFTER: Duration = Duration::from_secs(30);
/// Default generator seed.
const DEFAULT_SEED: u64 = 0x0008_f022_5eed_0001;
/// A campaign stops after this many failing books (or two hangs), so that a
/// broken build does not spend the CI budget on timeouts
/// (`SALTUS_FUZZ_MAX_FAILURES` overrides).
const MAX_FAILURES: usize = 5;
const BOM: &[u8] = b"\xef\xbb\xbf";

// ----------------------------------------------------------------- oracle --

/// A command line of the binary: the words after `saltus`; the book path is
/// inserted after the first word, and `risk` gets `-o DIR` at the end.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct CommandLine(pub Vec<String>);

impl CommandLine {
    pub(crate) fn parse(s: &str) -> CommandLine {
        CommandLine(s.split_whitespace().map(String::from).collect())
    }

    fn is_risk(&self) -> bool {
        self.0.first().is_some_and(|w| w == "risk")
    }

    fn args(&self, book: &Path, report: &Path) -> Vec<String> {
        let mut a = vec![self.0[0].clone(), book.display().to_string()];
        a.extend(self.0[1..].iter().cloned());
        if self.is_risk() {
            a.push("-o".into());
            a.push(report.display().to_string());
        }
        a
    }

    /// The command as a shell line.
    pub(crate) fn shown(&self, book: &Path) -> String {
        let report = book.with_extension("report");
        format!("saltus {}", self.args(book, &report).join(" "))
    }
}

/// What one run of the binary did.
pub(crate) struct Run {
    /// Exit code (`None`: killed by a signal).
    code: Option<i32>,
    timed_out: bool,
    stdout: Vec<u8>,
    stderr: Vec<u8>,
    /// The report directory of `risk`.
    report: PathBuf,
}

/// Runs `cmd` on the book at `book`, working in `work` (a fresh directory).
pub(crate) fn run(cmd: &CommandLine, book: &Path, work: &Path) -> Run {
    let report = work.join("report");
    let out_path = work.join("stdout");
    let err_path = work.join("stderr");
    let stdout = std::fs::File::create(&out_path).expect("stdout file");
    let stderr = std::fs::File::create(&err_path).expect("stderr file");
    let mut child = Command::new(env!("CARGO_BIN_EXE_saltus"))
        .args(cmd.args(book, &report))
        .current_dir(work)
        .stdin(Stdio::null())
        .stdout(stdout)
        .stderr(stderr)
        .spawn()
        .expect("the saltus binary starts");
    let (code, timed_out) = match child.wait_timeout(KILL_AFTER).expect("wait") {
        Some(status) => (status.code(), false),
        None => {
            let _ = child.kill();
            let _ = child.wait();
            (None, true)
        }
    };
    Run {
        code,
        timed_out,
        stdout: std::fs::read(&out_path).unwrap_or_default(),
        stderr: std::fs::read(&err_path).unwrap_or_default(),
        report,
    }
}

/// A record of the input book as the contract reads it.
pub(crate) struct InputRecord {
    pub(crate) fields: Vec<Vec<u8>>,
    /// 1-based line of its first byte.
    pub(crate) line: u64,
    /// Its text holds a quote.
    quoted: bool,
    /// The line of a quote the input never closes (the record is then cut
    /// at the end of that line), or `None`.
    pub(crate) open_quote: Option<u64>,
}

impl InputRecord {
    fn all_empty(&self) -> bool {
        self.fields.iter().all(|f| f.is_empty())
    }

    /// A record that has no output row: all fields empty, and no quote
    /// left open (README "Bad input").
    pub(crate) fn skipped(&self) -> bool {
        self.all_empty() && self.open_quote.is_none()
    }
}

/// Line breaks in `t`: `\n`, `\r\n` and a lone `\r` count one each.
fn line_breaks(t: &[u8]) -> u64 {
    let mut n = 0;
    for (i, &c) in t.iter().enumerate() {
        if c == b'\n' || (c == b'\r' && t.get(i + 1) != Some(&b'\n')) {
            n += 1;
        }
    }
    n
}

/// Where the quote that is still open at the end of `text` (one record,
/// as the `csv` crate read it) opened, by the `csv` crate's quoting rules:
/// a quote opens a quoted field only as the first byte of a field; inside
/// one, `""` is a quote and a quote followed by anything else closes it.
/// `None` when every quote is closed.
fn open_quote_at(text: &[u8]) -> Option<usize> {
    #[derive(Clone, Copy, PartialEq)]
    enum Q {
        FieldStart,
        Unquoted,
        Quoted,
        QuoteInQuoted,
    }
    let (mut state, mut open_at) = (Q::FieldStart, 0);
    for (i, &c) in text.iter().enumerate() {
        state = match (state, c) {
            (Q::FieldStart, b'"') => {
                open_at = i;
                Q::Quoted
            }
            (Q::Quoted, b'"') => Q::QuoteInQuoted,
            (Q::Quoted, _) => Q::Quoted,
            (Q::QuoteInQuoted, b'"') => Q::Quoted,
            (_, b',' | b'\n' | b'\r') => Q::FieldStart,
            _ => Q::Unquoted,
        };
    }
    (state == Q::Quoted).then_some(open_at)
}

/// Every record of a book with its line, as README "CSV books" and "Bad
/// input" define them: the `csv` crate's records (`has_headers(false)`,
/// `flexible(true)`), except that a quote left open at the end of the
/// input (which the `csv` crate reads as one field running to the end)
/// cuts its record at the first line break (`\n` or `\r`) after the
/// quote, and reading starts again there, with the rest of the input
/// read the same way. The `csv` crate gives as position the byte where its
/// read began (before blank lines, and before the byte-order mark it drops
/// at the start of the input); the record starts after those.
pub(crate) fn input_records(book: &[u8]) -> Vec<InputRecord> {
    let mut out = Vec::new();
    let mut from = 0;
    loop {
        let (recs, cut) = records_from(book, from);
        out.extend(recs);
        match cut {
            Some(at) => from = at,
            None => return out,
        }
    }
}

/// The records of `book[from..]` (`from` is 0 or just after a cut
/// record), and where reading starts again after a record cut at an open
/// quote.
fn records_from(book: &[u8], from: usize) -> (Vec<InputRecord>, Option<usize>) {
    let rest = &book[from..];
    let mut r = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .from_reader(rest);
    let mut out = Vec::new();
    let mut starts = Vec::new();
    for rec in r.byte_records() {
        let Ok(rec) = rec else { break };
        let read_from = from + rec.position().map_or(0, |p| p.byte() as usize);
        let mut start = read_from;
        if start == 0 && book.starts_with(BOM) {
            start = BOM.len();
        }
        while start < book.len() && matches!(book[start], b'\r' | b'\n') {
            start += 1;
        }
        starts.push((read_from, start));
        out.push(InputRecord {
            fields: rec.iter().map(<[u8]>::to_vec).collect(),
            line: 1 + line_breaks(&book[..start.min(book.len())]),
            quoted: false,
            open_quote: None,
        });
    }
    // A record's text runs to where the next read began.
    for i in 0..out.len() {
        let start = starts[i].1.min(book.len());
        let end = starts.get(i + 1).map_or(book.len(), |s| s.0).max(start);
        out[i].quoted = book[start..end].contains(&b'"');
    }
    // Only the last record can hold a quote left open at the end.
    let Some(&(_, start)) = starts.last() else {
        return (out, None);
    };
    let start = start.min(book.len());
    let Some(q) = open_quote_at(&book[start..]).map(|q| start + q) else {
        return (out, None);
    };
    let quote_line = 1 + line_breaks(&book[..q]);
    let cut = book[q..]
        .iter()
        .position(|&c| matches!(c, b'\n' | b'\r'))
        .map(|i| q + i);
    let end = cut.unwrap_or(book.len());
    // The cut record: what the `csv` crate reads from its text alone (after
    // a line break, so that a byte-order mark there stays data).
    let mut text = b"\n".to_vec();
    text.extend_from_slice(&book[start..end]);
    let fields = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .from_reader(&text[..])
        .byte_records()
        .next()
        .and_then(Result::ok)
        .map(|r| r.iter().map(<[u8]>::to_vec).collect())
        .unwrap_or_default();
    let last = out.last_mut().expect("a last record");
    last.fields = fields;
    last.open_quote = Some(quote_line);
    last.quoted = true;
    (out, cut)
}

/// Reads CSV output without dropping a byte-order mark at its start (a
/// leading blank line keeps the `csv` crate from treating it as one).
fn output_records(bytes: &[u8]) -> Vec<Vec<Vec<u8>>> {
    let mut text = b"\n".to_vec();
    text.extend_from_slice(bytes);
    let mut r = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .from_reader(&text[..]);
    r.byte_records()
        .map_while(Result::ok)
        .map(|rec| rec.iter().map(<[u8]>::to_vec).collect())
        .collect()
}

fn esc(b: &[u8]) -> String {
    let s = b.escape_ascii().to_string();
    if s.len() > 120 {
        let cut: String = s.chars().take(100).collect();
        format!("{cut}...({} bytes)", b.len())
    } else {
        s
    }
}

/// True for a field holding a non-finite number: one that parses to
/// inf/NaN, or a word of it that does (`inf`, `NaN`, `infinity`, `1e999`).
fn non_finite(field: &[u8]) -> bool {
    let s = String::from_utf8_lossy(field);
    let bad = |t: &str| t.parse::<f64>().is_ok_and(|x| !x.is_finite());
    bad(s.trim())
        || s.split(|c: char| !(c.is_ascii_alphanumeric() || matches!(c, '.' | '+' | '-')))
            .any(bad)
}

/// Runs of more than 25 digits in `status` that the input record does not
/// hold (a number printed as a long decimal expansion). Messages quote a
/// field's text (README "Bad input") with control characters escaped, cut
/// after its first characters, or rewritten without digit separators as
/// the suggested fix (`1,000` -> `write 1000`): a run found in any of those
/// renderings of a field is the user's own text, not a printed number.
fn long_numbers(status: &[u8], rec: &InputRecord) -> Vec<String> {
    let renderings: Vec<Vec<u8>> = rec
        .fields
        .iter()
        .flat_map(|f| {
            let text = String::from_utf8_lossy(f);
            let escaped = text.escape_debug().to_string().into_bytes();
            let joined: Vec<u8> = f
                .iter()
                .copied()
                .filter(|c| !matches!(c, b',' | b' ' | b'_' | b'\''))
                .collect();
            [f.clone(), escaped, joined]
        })
        .collect();
    let mut out = Vec::new();
    for run in status.split(|c| !c.is_ascii_digit()) {
        if run.len() > 25
            && !renderings
                .iter()
                .any(|f| memchr::memmem::find(f, run).is_some())
        {
            out.push(format!("{}...({} digits)", esc(&run[..20]), run.len()));
        }
    }
    out
}

/// The rules of the module doc, applied to one run of `cmd` on `book`.
/// Returns the rules broken (empty: the run is correct).
/// `allow_fatal`: the command line itself may be refused (exit 2 on a valid
/// header is then no fault).
pub(crate) fn check(book: &[u8], cmd: &CommandLine, run: &Run, allow_fatal: bool) -> Vec<String> {
    let mut v = Vec::new();
    if run.timed_out {
        v.push(format!(
            "hang: still running after {} s, killed",
            KILL_AFTER.as_secs()
        ));
        return v;
    }
    let stderr = String::from_utf8_lossy(&run.stderr);
    if run.code == Some(101) || stderr.contains("panicked") {
        let line = stderr
            .lines()
            .find(|l| l.contains("panicked"))
            .unwrap_or("")
            .to_string();
        v.push(format!("panic (exit {:?}): {line}", run.code));
    }
    if !matches!(run.code, Some(0..=2)) {
        v.push(format!("exit code {:?} is not 0, 1 or 2", run.code));
        return v;
    }
    let records = input_records(book);
    if run.code == Some(2) {
        // The binary takes the first record as the header.
        if let Some(first) = records.first().filter(|_| !allow_fatal) {
            let h: csv::ByteRecord = first.fields.iter().map(Vec::as_slice).collect();
            if Schema::from_headers(&h).is_ok() {
                v.push(format!(
                    "exit 2 (fatal) although the header is valid: one bad row must not stop a run; stderr: {}",
                    stderr.trim().lines().last().unwrap_or("")
                ));
            }
        }
        return v;
    }
    // Exit 0 or 1. A record whose fields are all empty (quoted or not) is
    // a blank line, unless a quote in it was left open.
    let mut records = records.into_iter().filter(|r| !r.skipped());
    let Some(header) = records.next() else {
        v.push("exit 0/1 on a book without a header".into());
        return v;
    };
    let data: Vec<InputRecord> = records.collect();
    if cmd.is_risk() {
        match std::fs::read(run.report.join("positions.csv")) {
            Ok(bytes) => check_rows(&header, &data, &bytes, run.code, "positions.csv", &mut v),
            Err(e) => v.push(format!("risk exited {:?} but positions.csv: {e}", run.code)),
        }
        check_report_files(&run.report, &mut v);
    } else {
        check_rows(&header, &data, &run.stdout, run.code, "output", &mut v);
    }
    v
}

/// The status of every output row (for `risk`, of positions.csv).
pub(crate) fn statuses(cmd: &CommandLine, run: &Run) -> Vec<String> {
    let bytes = if cmd.is_risk() {
        std::fs::read(run.report.join("positions.csv")).unwrap_or_default()
    } else {
        run.stdout.clone()
    };
    output_records(&bytes)
        .iter()
        .skip(1)
        .map(|r| String::from_utf8_lossy(r.last().map_or(&b""[..], |s| s)).into_owned())
        .collect()
}

impl Run {
    /// The exit code, `None` when killed.
    pub(crate) fn code(&self) -> Option<i32> {
        self.code
    }
}

fn check_rows(
    header: &InputRecord,
    data: &[InputRecord],
    output: &[u8],
    code: Option<i32>,
    what: &str,
    v: &mut Vec<String>,
) {
    let out = output_records(output);
    let Some(out_header) = out.first() else {
        v.push(format!("{what}: empty, no header row"));
        return;
    };
    let width = header.fields.len();
    if out_header.len() <= width
        || out_header[..width] != header.fields[..]
        || out_header.last().map(Vec::as_slice) != Some(b"status")
    {
        v.push(format!(
            "{what}: header is not the input header ({}) followed by result columns ending in status: {}",
            esc(&header.fields.join(&b',')),
            esc(&out_header.join(&b','))
        ));
        return;
    }
    let rows = &out[1..];
    // Pair records with rows, in order.
    let pairs: Vec<(&InputRecord, &Vec<Vec<u8>>)> = data.iter().zip(rows).collect();
    let wanted = data.len();
    let k = wanted;
    if k != rows.len() {
        // Where the two first part ways.
        let first = pairs.iter().find(|(rec, row)| {
            (0..width).any(|j| {
                row.get(j).map(Vec::as_slice) != Some(rec.fields.get(j).map_or(&b""[..], |f| f))
            })
        });
        let at = first.map_or("the end".into(), |(r, _)| format!("line {}", r.line));
        v.push(format!(
            "{what}: {} rows for {wanted} input data records (blank and all-empty records excluded); first difference at {at}",
            rows.len(),
        ));
        return;
    }
    let n_cols = out_header.len();
    let mut row_faults = 0usize;
    let mut fault = |v: &mut Vec<String>, s: String| {
        row_faults += 1;
        if row_faults <= 8 {
            v.push(s);
        }
    };
    let mut any_failed = None;
    for (rec, row) in pairs {
        let line = rec.line;
        if row.len() != n_cols {
            fault(
                v,
                format!(
                    "{what}: line {line}: {} fields where the output header has {n_cols}",
                    row.len()
                ),
            );
            continue;
        }
        for (j, got) in row[..width].iter().enumerate() {
            let want = rec.fields.get(j).map_or(&b""[..], |f| f);
            if got != want {
                fault(
                    v,
                    format!(
                        "{what}: line {line}: echoed field {} ({}) is '{}', the input has '{}'",
                        j + 1,
                        esc(&header.fields[j]),
                        esc(got),
                        esc(want)
                    ),
                );
            }
        }
        let status = &row[n_cols - 1];
        let results = &row[width..n_cols - 1];
        if status == b"ok" {
            if let Some(q) = rec.open_quote {
                fault(
                    v,
                    format!("{what}: line {line}: a record whose quote (line {q}) is never closed has status ok"),
                );
            }
            if rec.fields.len() != width {
                fault(
                    v,
                    format!(
                        "{what}: line {line}: a record of {} fields (header {width}) has status ok",
                        rec.fields.len()
                    ),
                );
            }
            for (k, f) in results.iter().enumerate() {
                if non_finite(f) {
                    fault(
                        v,
                        format!(
                            "{what}: line {line}: non-finite {} = '{}' in an ok row",
                            esc(&out_header[width + k]),
                            esc(f)
                        ),
                    );
                }
            }
        } else {
            any_failed.get_or_insert(line);
            let prefix = format!("error: line {line}: ");
            if !status.starts_with(prefix.as_bytes()) {
                fault(
                    v,
                    format!(
                        "{what}: line {line}: status '{}' is neither ok nor '{prefix}...'",
                        esc(status)
                    ),
                );
            }
            if let Some(q) = rec.open_quote {
                let names = format!("quote opened on line {q} ");
                if !status.windows(names.len()).any(|w| w == names.as_bytes()) {
                    fault(
                        v,
                        format!(
                            "{what}: line {line}: status does not say that a quote opened on line {q} is never closed: '{}'",
                            esc(status)
                        ),
                    );
                }
            }
            if let Some(k) = results.iter().position(|f| !f.is_empty()) {
                fault(
                    v,
                    format!(
                        "{what}: line {line}: failed row has a value in {}: '{}'",
                        esc(&out_header[width + k]),
                        esc(&results[k])
                    ),
                );
            }
            for n in long_numbers(status, rec) {
                fault(v, format!(
                    "{what}: line {line}: status prints a long decimal expansion {n} that is not in the input: '{}'",
                    esc(status)
                ));
            }
        }
    }
    if row_faults > 8 {
        v.push(format!(
            "{what}: ... and {} more row faults",
            row_faults - 8
        ));
    }
    if let (Some(0), Some(line)) = (code, any_failed) {
        v.push(format!("exit 0 although the row at line {line} failed"));
    }
}

/// No non-finite number in any other CSV file of a risk report, outside
/// rows whose own status (if the file has a status column) is not `ok`.
/// Columns that echo input text (`underlying`, `id`) are not numbers.
fn check_report_files(dir: &Path, v: &mut Vec<String>) {
    let Ok(entries) = std::fs::read_dir(dir) else {
        v.push(format!("risk: no report directory {}", dir.display()));
        return;
    };
    let mut files: Vec<PathBuf> = entries
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == "csv"))
        .filter(|p| p.file_name().is_some_and(|n| n != "positions.csv"))
        .collect();
    files.sort();
    for path in files {
        let name = path
            .file_name()
            .unwrap_or_default()
            .to_string_lossy()
            .into_owned();
        let bytes = std::fs::read(&path).unwrap_or_default();
        let recs = output_records(&bytes);
        let Some(h) = recs.first() else { continue };
        let norm = |f: &[u8]| String::from_utf8_lossy(f).trim().to_ascii_lowercase();
        let status = h.iter().position(|f| norm(f) == "status");
        let text_col = |j: usize| {
            h.get(j)
                .is_some_and(|f| matches!(norm(f).as_str(), "underlying" | "id"))
        };
        let mut faults = 0;
        for (i, r) in recs[1..].iter().enumerate() {
            if status.is_some_and(|s| r.get(s).map(Vec::as_slice) != Some(b"ok")) {
                continue;
            }
            for (j, f) in r.iter().enumerate() {
                if !text_col(j) && Some(j) != status && non_finite(f) {
                    faults += 1;
                    if faults <= 4 {
                        v.push(format!(
                            "risk {name}: row {} column {}: non-finite '{}'",
                            i + 1,
                            esc(h.get(j).map_or(&b"?"[..], |x| x)),
                            esc(f)
                        ));
                    }
                }
            }
        }
        if faults > 4 {
            v.push(format!(
                "risk {name}: ... and {} more non-finite values",
                faults - 4
            ));
        }
    }
}

// -------------------------------------------------------------- generator --

/// SplitMix64: small, seeded, portable.
pub(crate) struct Rng(u64);

impl Rng {
    pub(crate) fn new(seed: u64) -> Rng {
        Rng(seed)
    }
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        z ^ (z >> 31)
    }
    fn below(&mut self, n: usize) -> usize {
        (self.next() % n.max(1) as u64) as usize
    }
    fn chance(&mut self, p: f64) -> bool {
        (self.next() >> 11) as f64 / (1u64 << 53) as f64 <= p
    }
    fn pick<T: Copy>(&mut self, xs: &[T]) -> T {
        xs[self.below(xs.len())]
    }
    fn uniform(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * ((self.next() >> 11) as f64 / (1u64 << 53) as f64)
    }
}

/// A book as records of CSV-encoded fields (each field as it appears in
/// the file); `None` is a blank line.
#[derive(Clone)]
struct Book {
    records: Vec<Option<Vec<Vec<u8>>>>,
}

/// Encodes a field as a CSV writer would (quoted when needed).
fn encode(value: &[u8]) -> Vec<u8> {
    if value
        .iter()
        .any(|c| matches!(c, b',' | b'"' | b'\r' | b'\n'))
    {
        let mut q = vec![b'"'];
        for &c in value {
            if c == b'"' {
                q.push(b'"');
            }
            q.push(c);
        }
        q.push(b'"');
        q
    } else {
        value.to_vec()
    }
}

impl Book {
    fn from_rows(header: &[&str], rows: &[Vec<String>]) -> Book {
        let mut records = vec![Some(header.iter().map(|h| h.as_bytes().to_vec()).collect())];
        for r in rows {
            records.push(Some(r.iter().map(|f| encode(f.as_bytes())).collect()));
        }
        Book { records }
    }

    fn from_csv(text: &str) -> Book {
        Book {
            records: text
                .lines()
                .map(|l| Some(l.split(',').map(|f| f.as_bytes().to_vec()).collect()))
                .collect(),
        }
    }

    /// Keeps the header and at most `n` data records, chosen at random.
    fn sample(&self, n: usize, rng: &mut Rng) -> Book {
        let mut idx: Vec<usize> = (1..self.records.len()).collect();
        while idx.len() > n {
            idx.remove(rng.below(idx.len()));
        }
        let mut records = vec![self.records[0].clone()];
        records.extend(idx.into_iter().map(|i| self.records[i].clone()));
        Book { records }
    }

    fn header(&self) -> Vec<Vec<u8>> {
        self.records[0].clone().unwrap_or_default()
    }

    /// A data record index (1..), if any.
    fn data_index(&self, rng: &mut Rng) -> Option<usize> {
        let live: Vec<usize> = (1..self.records.len())
            .filter(|&i| self.records[i].as_ref().is_some_and(|r| !r.is_empty()))
            .collect();
        (!live.is_empty()).then(|| rng.pick(&live))
    }

    fn serialize(&self, ending: Ending, final_newline: bool, rng: &mut Rng) -> Vec<u8> {
        let mut out = Vec::new();
        let n = self.records.len();
        for (i, r) in self.records.iter().enumerate() {
            if let Some(fields) = r {
                out.extend(fields.join(&b','));
            }
            if i + 1 < n || final_newline {
                let e: &[u8] = match ending {
                    Ending::Lf => b"\n",
                    Ending::CrLf => b"\r\n",
                    Ending::Cr => b"\r",
                    Ending::Mixed => rng.pick(&[&b"\n"[..], b"\r\n", b"\r"]),
                };
                out.extend_from_slice(e);
            }
        }
        out
    }
}

#[derive(Clone, Copy, Debug)]
enum Ending {
    Lf,
    CrLf,
    Cr,
    Mixed,
}

/// Values that broke or strain parsers and engines.
const EXTREMES: &[&str] = &[
    "1e308",
    "-1e308",
    "1.7976931348623157e308",
    "1e-320",
    "5e-324",
    "-5e-324",
    "1e-300",
    "1e300",
    "-0",
    "0",
    "NaN",
    "nan",
    "inf",
    "-inf",
    "Infinity",
    "1e999",
    "1e-400",
    "",
    " ",
    "abc",
    "32%",
    "1,000",
    "\"",
    "9007199254740993",
    "0.1234567890123456789012345",
    "1e5",
    "1e10",
    "1e20",
    "-1",
    "10",
    "20",
    "-20",
    "1000",
    "9.95",
    "0x1p3",
    "+1",
    "1.",
    ".5",
    "1e",
    "١",
    "\u{feff}1",
    "(book)",
    "call",
    "put",
];

/// Values at or near a column's documented edges.
fn column_edge(name: &str, rng: &mut Rng) -> &'static str {
    let list: &[&str] = match name {
        "spot" | "strike" => &[
            "1e-300", "1e300", "1e-320", "5e-324", "1e308", "0", "-1", "1e-10", "1e10",
        ],
        "expiry" => &[
            "0",
            "1000",
            "1000.0001",
            "1e-300",
            "5e-324",
            "1e-12",
            "-0",
            "500",
        ],
        "rate" | "div_yield" => &["1", "-1", "1.0000001", "-0", "0.999999", "-0.99"],
        "vol" => &["0", "10", "9.95", "10.0001", "1e-300", "3e-321", "5", "-0"],
        "jump_rate" => &["0", "1e5", "100000", "1e-300", "1000", "1e6", "50000"],
        "jump_mean" => &["-20", "20", "-19.99", "20.0001", "-5", "5", "1e-300"],
        "jump_vol" => &["0", "20", "10", "19.99", "20.0001", "5", "1e-300"],
        "quantity" | "multiplier" => &[
            "1e308", "-1e308", "1e10", "1e300", "0", "-0", "5e-324", "1e-300",
        ],
        "kind" => &["call", "put", "CALL", " put ", "straddle", ""],
        "id" => &["", "dup", "dup", "x,y", "\"q\""],
        "underlying" => &["(book)", "", "A", "a", "NaN", "inf"],
        _ => EXTREMES,
    };
    rng.pick(list)
}

fn garbage(rng: &mut Rng) -> Vec<u8> {
    let alphabet: &[u8] = b"09.e-+,\"\r\n \tax%\xff\xc3\xef\xbb\xbf\0";
    (0..1 + rng.below(8)).map(|_| rng.pick(alphabet)).collect()
}

/// Applies one random mutation; returns its description.
fn mutate_structure(book: &mut Book, rng: &mut Rng, max_rows: usize) -> String {
    let width = book.header().len().max(1);
    match rng.below(17) {
        0 | 1 => {
            let Some(r) = book.data_index(rng) else {
                return "none".into();
            };
            let rec = book.records[r].as_mut().expect("data");
            let j = rng.below(rec.len());
            let v = rng.pick(EXTREMES);
            rec[j] = encode(v.as_bytes());
            format!("record {r} field {j} = {v:?}")
        }
        2 | 3 => {
            let Some(r) = book.data_index(rng) else {
                return "none".into();
            };
            let header = book.header();
            let j = rng.below(
                width
                    .min(book.records[r].as_ref().expect("data").len())
                    .max(1),
            );
            let name = String::from_utf8_lossy(header.get(j).map_or(&b""[..], |h| h))
                .trim()
                .to_ascii_lowercase();
            let v = column_edge(&name, rng);
            let rec = book.records[r].as_mut().expect("data");
            if j < rec.len() {
                rec[j] = encode(v.as_bytes());
            }
            format!("record {r} {name} = {v:?}")
        }
        4 => {
            let Some(r) = book.data_index(rng) else {
                return "none".into();
            };
            let rec = book.records[r].as_mut().expect("data");
            let j = rng.below(rec.len());
            let g = garbage(rng);
            rec[j] = if rng.chance(0.5) {
                encode(&g)
            } else {
                g.clone()
            };
            format!("record {r} field {j} = garbage {}", esc(&g))
        }
        5 => {
            let Some(r) = book.data_index(rng) else {
                return "none".into();
            };
            let rec = book.records[r].as_mut().expect("data");
            if rng.chance(0.5) {
                rec.push(b"extra".to_vec());
                format!("record {r}: extra field")
            } else {
                rec.pop();
                format!("record {r}: missing field")
            }
        }
        6 => {
            // Duplicate, drop or reorder columns, in every record.
            let j = rng.below(width);
            let how = rng.below(3);
            let mut perm: Vec<usize> = (0..width).collect();
            for i in (1..width).rev() {
                perm.swap(i, rng.below(i + 1));
            }
            for rec in book.records.iter_mut().flatten() {
                match how {
                    0 if j < rec.len() => {
                        let f = rec[j].clone();
                        rec.push(f);
                    }
                    1 if j < rec.len() => {
                        rec.remove(j);
                    }
                    2 if rec.len() == width => {
                        *rec = perm.iter().map(|&p| rec[p].clone()).collect();
                    }
                    _ => {}
                }
            }
            ["duplicated", "dropped", "reordered"][how].to_string() + &format!(" column {j}")
        }
        7 => {
            let n = if rng.chance(0.7) {
                width
            } else {
                1 + rng.below(width + 2)
            };
            let at = 1 + rng.below(book.records.len());
            book.records.insert(at, Some(vec![Vec::new(); n]));
            format!("all-empty record of {n} fields at {at}")
        }
        8 => {
            let at = 1 + rng.below(book.records.len());
            book.records.insert(at, None);
            format!("blank line at {at}")
        }
        9 => {
            let Some(r) = book.data_index(rng) else {
                return "none".into();
            };
            match rng.below(3) {
                0 => {
                    let rec = book.records[r].clone();
                    book.records.insert(r, rec);
                    format!("record {r} duplicated")
                }
                1 => {
                    book.records.remove(r);
                    format!("record {r} deleted")
                }
                _ => {
                    let s = 1 + rng.below(book.records.len() - 1);
                    book.records.swap(r, s);
                    format!("records {r} and {s} swapped")
                }
            }
        }
        10 | 11 => {
            // Quoting: a quoted field, one with an embedded separator, line
            // break or quote, or a quote where none belongs.
            let Some(r) = book.data_index(rng) else {
                return "none".into();
            };
            let rec = book.records[r].as_mut().expect("data");
            let j = rng.below(rec.len());
            let old = rec[j].clone();
            let (new, what) = match rng.below(5) {
                0 => (encode_forced(&old), "quoted"),
                1 => (encode(&[&old[..], b",5"].concat()), "embedded comma"),
                2 => (encode(&[&old[..], b"\nx"].concat()), "embedded line break"),
                3 => (
                    encode(&[b"say \"", &old[..], b"\""].concat()),
                    "embedded quotes",
                ),
                _ => ([&old[..], b"\"x"].concat(), "stray quote"),
            };
            rec[j] = new;
            format!("record {r} field {j}: {what}")
        }
        12 => {
            let Some(r) = book.data_index(rng) else {
                return "none".into();
            };
            let rec = book.records[r].as_mut().expect("data");
            let j = rng.below(rec.len());
            let n = rng.pick(&[1_000usize, 70_000, 300_000]);
            rec[j] = if rng.chance(0.5) {
                vec![b'7'; n]
            } else {
                [b"0.".to_vec(), vec![b'1'; n]].concat()
            };
            format!("record {r} field {j}: {n}-byte number")
        }
        13 => {
            // Header names: case, spaces, garbage.
            let j = rng.below(width);
            if let Some(h) = book.records[0].as_mut() {
                if j < h.len() {
                    h[j] = match rng.below(3) {
                        0 => h[j].to_ascii_uppercase(),
                        1 => [b"  ", &h[j][..], b" "].concat(),
                        _ => garbage(rng),
                    };
                }
            }
            format!("header field {j} renamed")
        }
        14 => {
            // A BOM before a (quoted) data record.
            let Some(r) = book.data_index(rng) else {
                return "none".into();
            };
            let rec = book.records[r].as_mut().expect("data");
            if rng.chance(0.5) {
                rec[0] = encode_forced(&rec[0]);
            }
            rec[0] = [BOM, &rec[0][..]].concat();
            format!("BOM before record {r}")
        }
        15 => {
            // Values from another record's column (plausible, wrong place).
            let (Some(a), Some(b)) = (book.data_index(rng), book.data_index(rng)) else {
                return "none".into();
            };
            let ra = book.records[a].clone().expect("data");
            let rb = book.records[b].as_mut().expect("data");
            let j = rng.below(ra.len().min(rb.len()).max(1));
            let k = rng.below(ra.len().max(1));
            if j < rb.len() && k < ra.len() {
                rb[j] = ra[k].clone();
            }
            format!("record {b} field {j} = record {a} field {k}")
        }
        _ => {
            // More rows: the same record repeated. Few for the slow
            // commands (small `max_rows`), where a valid row may take
            // seconds: the kill switch is per book and must not turn a slow
            // but bounded row into a hang.
            let Some(r) = book.data_index(rng) else {
                return "none".into();
            };
            let rec = book.records[r].clone();
            let n = if max_rows <= 8 {
                1 + rng.below(2)
            } else {
                max_rows.min(12) * (2 + rng.below(4))
            };
            for _ in 0..n {
                book.records.push(rec.clone());
            }
            format!("record {r} repeated {n} times")
        }
    }
}

fn encode_forced(v: &[u8]) -> Vec<u8> {
    if v.first() == Some(&b'"') {
        return v.to_vec();
    }
    let mut q = vec![b'"'];
    q.extend_from_slice(v);
    q.push(b'"');
    q
}

/// Byte-level mutations of the serialized book.
fn mutate_bytes(text: &mut Vec<u8>, rng: &mut Rng) -> String {
    let at = rng.below(text.len() + 1);
    match rng.below(8) {
        0 if !text.is_empty() => {
            let i = at.min(text.len() - 1);
            let old = text[i];
            text[i] ^= 1 << rng.below(8);
            format!("byte {i} flipped ({old:#04x} -> {:#04x})", text[i])
        }
        1 => {
            text.insert(at, b'"');
            format!("unbalanced quote at byte {at}")
        }
        2 => {
            text.splice(0..0, BOM.iter().copied());
            "BOM at the start".into()
        }
        3 => {
            let bad: &[u8] = rng.pick(&[
                &b"\xff"[..],
                b"\xc3",
                b"\xed\xa0\x80",
                b"\xc0\xaf",
                b"\xfe\xff",
            ]);
            text.splice(at..at, bad.iter().copied());
            format!("invalid UTF-8 {} at byte {at}", esc(bad))
        }
        4 => {
            text.truncate(at);
            format!("truncated at byte {at}")
        }
        5 => {
            let b: &[u8] = rng.pick(&[&b"\r"[..], b"\n", b"\r\n", b",", b"\0"]);
            text.splice(at..at, b.iter().copied());
            format!("{} inserted at byte {at}", esc(b))
        }
        6 => {
            // A BOM at the start of a line.
            let starts: Vec<usize> = std::iter::once(0)
                .chain(
                    text.iter()
                        .enumerate()
                        .filter(|(_, &c)| c == b'\n')
                        .map(|(i, _)| i + 1),
                )
                .collect();
            let s = rng.pick(&starts);
            text.splice(s..s, BOM.iter().copied());
            format!("BOM at byte {s}")
        }
        _ => {
            let b = (rng.next() & 0xff) as u8;
            if at < text.len() {
                text[at] = b;
            }
            format!("byte {at} set to {b:#04x}")
        }
    }
}

/// A typical book: moderate values, optional columns and order at random.
fn typical_book(rng: &mut Rng) -> Book {
    let mut cols: Vec<&str> = schema::REQUIRED.to_vec();
    // `valuation_date` adds the `expiry_years` result column, which this
    // oracle does not model yet; dated books are covered by `dates_cli`.
    for opt in schema::OPTIONAL
        .into_iter()
        .filter(|c| *c != "valuation_date")
        .chain(["note"])
    {
        if rng.chance(0.6) {
            cols.push(opt);
        }
    }
    for i in (1..cols.len()).rev() {
        cols.swap(i, rng.below(i + 1));
    }
    let unders = ["ORVAL", "PELLIX-IDX", "QUAMBO"];
    let rows: Vec<Vec<String>> = (0..20)
        .map(|i| {
            let spot = rng.uniform(5.0, 500.0);
            cols.iter()
                .map(|c| match *c {
                    "kind" => rng.pick(&["call", "put"]).to_string(),
                    "spot" => format!("{spot:.2}"),
                    "strike" => format!("{:.2}", spot * rng.uniform(0.6, 1.5)),
                    "expiry" => format!("{:.4}", rng.uniform(0.01, 3.0)),
                    "rate" => format!("{:.3}", rng.uniform(-0.01, 0.08)),
                    "vol" => format!("{:.3}", rng.uniform(0.05, 0.8)),
                    "jump_rate" => format!("{:.2}", rng.uniform(0.0, 3.0)),
                    "jump_mean" => format!("{:.3}", rng.uniform(-0.4, 0.2)),
                    "jump_vol" => format!("{:.3}", rng.uniform(0.0, 0.5)),
                    "id" => format!("T-{i:03}"),
                    "underlying" => rng.pick(&unders).to_string(),
                    "div_yield" => format!("{:.3}", rng.uniform(0.0, 0.05)),
                    "quantity" => format!("{}", rng.below(200) as i64 - 100),
                    "multiplier" => rng.pick(&["1", "10", "100"]).to_string(),
                    // European only: American rows run the PIDE, whose
                    // cost belongs to the American tests, not this budget;
                    // the column still brings its two result columns.
                    "exercise" => rng.pick(&["european", "", "European"]).to_string(),
                    _ => "free text".to_string(),
                })
                .collect()
        })
        .collect();
    Book::from_rows(&cols, &rows)
}

/// Rows at the documented domain edges (README "CSV books", model.rs).
fn edge_book() -> Book {
    const H: [&str; 14] = [
        "id",
        "kind",
        "spot",
        "strike",
        "expiry",
        "rate",
        "div_yield",
        "vol",
        "jump_rate",
        "jump_mean",
        "jump_vol",
        "quantity",
        "multiplier",
        "underlying",
    ];
    let rows = [
        "e01,call,100,100,0,0.05,0,0.2,1,-0.1,0.1,1,1,A",
        "e02,put,100,100,1000,0.05,0.02,0.2,1,-0.1,0.1,1,1,A",
        "e03,call,100,90,1,1,-1,0.2,0.5,-0.1,0.1,-3,100,B",
        "e04,put,100,110,1,-1,1,0,0.5,-0.1,0.1,2,1,B",
        "e05,call,100,100,1,0.02,0,10,0.5,-0.1,0.1,1,1,C",
        "e06,put,100,100,1,0.02,0,0.2,100000,-0.001,0.001,1,1,C",
        "e07,call,100,100,0.5,0.02,0,0.2,0.5,-20,0.1,1,1,D",
        "e08,put,100,100,0.5,0.02,0,0.2,0.5,20,0.1,1,1,D",
        "e09,call,100,100,0.5,0.02,0,0.2,0.5,0,20,1,1,D",
        "e10,put,100,100,0.5,0.02,0,0.2,0,0,0,1,1,D",
        "e11,call,1e-300,1e-300,1,0.02,0,0.2,0.5,-0.1,0.1,1,1,E",
        "e12,put,1e300,1e300,1,0.02,0,0.2,0.5,-0.1,0.1,1,1,E",
        "e13,call,100,1e-300,1,0.02,0,0.2,0.5,-0.1,0.1,1,1,E",
        "e14,put,100,1e300,1,0.02,0,0.2,0.5,-0.1,0.1,1,1,E",
        "e15,call,50,55,0.25,0.03,0.01,0.3,2,-0.2,0.25,-1e6,1e3,F",
        "e16,put,50,45,0.25,0.03,0.01,0.3,2,-0.2,0.25,1,1,F",
    ];
    let rows: Vec<Vec<String>> = rows
        .iter()
        .map(|r| r.split(',').map(String::from).collect())
        .collect();
    Book::from_rows(&H, &rows)
}

fn demo_book() -> Book {
    let text = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/data/demo_book.csv"))
        .expect("data/demo_book.csv");
    Book::from_csv(&text)
}

/// One mutated book and how it was made.
fn make_book(rng: &mut Rng, max_rows: usize) -> (Vec<u8>, String) {
    let (mut book, seed_name) = match rng.below(3) {
        0 => (demo_book(), "demo"),
        1 => (typical_book(rng), "typical"),
        _ => (edge_book(), "edge"),
    };
    book = book.sample(max_rows, rng);
    let mut how = vec![format!("seed {seed_name}")];
    let n_struct = rng.below(4);
    for _ in 0..n_struct {
        how.push(mutate_structure(&mut book, rng, max_rows));
    }
    let ending = rng.pick(&[
        Ending::Lf,
        Ending::Lf,
        Ending::Lf,
        Ending::CrLf,
        Ending::Cr,
        Ending::Mixed,
    ]);
    let final_newline = rng.chance(0.8);
    how.push(format!(
        "{ending:?} endings{}",
        if final_newline {
            ""
        } else {
            ", no final newline"
        }
    ));
    let mut text = book.serialize(ending, final_newline, rng);
    if n_struct == 0 || rng.chance(0.4) {
        for _ in 0..1 + rng.below(2) {
            how.push(mutate_bytes(&mut text, rng));
        }
    }
    (text, how.join("; "))
}

// -------------------------------------------------------------- campaigns --

fn env_u64(name: &str) -> Option<u64> {
    let v = std::env::var(name).ok()?;
    let v = v.trim();
    match v.strip_prefix("0x") {
        Some(h) => u64::from_str_radix(h, 16).ok(),
        None => v.parse().ok(),
    }
}

/// Where failing books are kept.
pub(crate) fn failure_dir() -> PathBuf {
    PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("fuzz-failures")
}

/// Runs `books` mutated books (default; `SALTUS_FUZZ_BOOKS` overrides)
/// through `cmd`, each with at most `max_rows` seed rows.
fn campaign(name: &str, cmd: &str, books: usize, max_rows: usize) -> Vec<String> {
    let cmd = CommandLine::parse(cmd);
    let books = env_u64("SALTUS_FUZZ_BOOKS").map_or(books, |n| n as usize);
    let seed = env_u64("SALTUS_FUZZ_SEED").unwrap_or(DEFAULT_SEED);
    let max_failures = env_u64("SALTUS_FUZZ_MAX_FAILURES").map_or(MAX_FAILURES, |n| n as usize);
    let tag = name
        .bytes()
        .fold(0u64, |h, b| h.wrapping_mul(31).wrapping_add(u64::from(b)));
    let start = Instant::now();
    let mut failures = Vec::new();
    let mut hangs = 0;
    let mut ran = 0;
    for i in 0..books {
        let mut rng =
            Rng::new(seed ^ tag.rotate_left(17) ^ (i as u64).wrapping_mul(0x2545_f491_4f6c_dd1d));
        let (text, how) = make_book(&mut rng, max_rows);
        let work = tempfile::tempdir().expect("temp dir");
        let book = work.path().join("book.csv");
        std::fs::write(&book, &text).expect("write book");
        let r = run(&cmd, &book, work.path());
        ran += 1;
        let broken = check(&text, &cmd, &r, false);
        if broken.is_empty() {
            continue;
        }
        hangs += usize::from(r.timed_out);
        let dir = failure_dir();
        std::fs::create_dir_all(&dir).expect("failure dir");
        let kept = dir.join(format!("{name}-seed{seed:x}-book{i}.csv"));
        std::fs::write(&kept, &text).expect("keep book");
        let mut msg = String::new();
        let _ = writeln!(msg, "FUZZ FAILURE {name} book {i}: {}", kept.display());
        let _ = writeln!(msg, "  command: {}", cmd.shown(&kept));
        let _ = writeln!(msg, "  made by: {how}");
        for b in &broken {
            let _ = writeln!(msg, "  rule broken: {b}");
        }
        eprint!("{msg}");
        failures.push(msg);
        if failures.len() >= max_failures || hangs >= 2.max(max_failures / 2) {
            eprintln!("{name}: stopping after {} failing books", failures.len());
            break;
        }
    }
    eprintln!(
        "fuzz {name}: {ran} books in {:.1} s, {} failing (seed {seed:#x})",
        start.elapsed().as_secs_f64(),
        failures.len()
    );
    failures
}

/// Fails listing the failing books of one or more campaigns.
fn assert_clean(failures: Vec<String>) {
    assert!(
        failures.is_empty(),
        "{} fuzzed books broke a rule (details above, books kept in {}):\n{}",
        failures.len(),
        failure_dir().display(),
        failures
            .iter()
            .map(|f| f.lines().next().unwrap_or(""))
            .collect::<Vec<_>>()
            .join("\n")
    );
}

#[test]
fn fuzz_price() {
    let mut failures = campaign("price", "price", 400, 40);
    failures.extend(campaign(
        "price-bound",
        "price --with-bound --desk-units",
        150,
        40,
    ));
    assert_clean(failures);
}

#[test]
fn fuzz_crosscheck() {
    assert_clean(campaign("crosscheck", "crosscheck --paths 2000", 100, 5));
}

#[test]
fn fuzz_greeks_series() {
    assert_clean(campaign(
        "greeks-series",
        "greeks --method both --engine series",
        300,
        30,
    ));
}

#[test]
fn fuzz_greeks_fourier() {
    assert_clean(campaign(
        "greeks-fourier",
        "greeks --method both --engine fourier",
        100,
        4,
    ));
}

#[test]
fn fuzz_greeks_mc() {
    assert_clean(campaign(
        "greeks-mc",
        "greeks --method both --engine mc --paths 1000",
        80,
        5,
    ));
}

#[test]
fn fuzz_risk() {
    assert_clean(campaign("risk", "risk", 300, 30));
}

/// The oracle itself: rules that must hold on known-good and known-bad
/// runs, so a harness mistake cannot pass for a saltus defect.
#[test]
fn fuzz_oracle_reads_lines_and_blank_records_like_the_contract() {
    let book = b"\xef\xbb\xbf\r\nkind,spot\r\n\r\n,\r\n\"a\nb\",1\rc,2\n";
    let recs = input_records(book);
    let got: Vec<(Vec<&[u8]>, u64)> = recs
        .iter()
        .map(|r| (r.fields.iter().map(Vec::as_slice).collect(), r.line))
        .collect();
    let want: Vec<(Vec<&[u8]>, u64)> = vec![
        (vec![b"kind", b"spot"], 2),
        (vec![b"", b""], 4),
        (vec![b"a\nb", b"1"], 5),
        (vec![b"c", b"2"], 7),
    ];
    assert_eq!(got, want);
    assert!(recs[1].all_empty());
    // A quote left open cuts its record at the end of its line (any of the
    // three line breaks), and the records after it are read as usual
    // (README "Bad input").
    type Cut<'a> = Vec<(Vec<&'a [u8]>, u64, Option<u64>)>;
    for nl in ["\n", "\r\n", "\r"] {
        let book = format!("k,s{nl}a,1{nl}b,\"x\"\"y,2{nl}c,3{nl}d,4{nl}e,5");
        let recs = input_records(book.as_bytes());
        let got: Cut = recs
            .iter()
            .map(|r| {
                (
                    r.fields.iter().map(Vec::as_slice).collect(),
                    r.line,
                    r.open_quote,
                )
            })
            .collect();
        let want: Cut = vec![
            (vec![b"k", b"s"], 1, None),
            (vec![b"a", b"1"], 2, None),
            (vec![b"b", b"x\"y,2"], 3, Some(3)),
            (vec![b"c", b"3"], 4, None),
            (vec![b"d", b"4"], 5, None),
            (vec![b"e", b"5"], 6, None),
        ];
        assert_eq!(got, want, "{nl:?}");
    }
    assert!(non_finite(b"inf") && non_finite(b"NaN") && non_finite(b"1e999"));
    assert!(non_finite(b"disagree: z = NaN") && !non_finite(b"infinite") && !non_finite(b"1e308"));
    // A leading BOM in the output is kept as part of the first field.
    assert_eq!(output_records(b"\xef\xbb\xbfa,b\n")[0][0], b"\xef\xbb\xbfa");
}

/// The oracle on hand-made runs: a correct output passes, and each kind of
/// fault is caught.
#[test]
fn fuzz_oracle_judges_hand_made_runs() {
    const H: &str = "kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol";
    const R: &str = "call,100,100,1,0,0.2,0,0,0";
    let judge = |book: &str, out: &str, code: i32| {
        let run = Run {
            code: Some(code),
            timed_out: false,
            stdout: out.as_bytes().to_vec(),
            stderr: Vec::new(),
            report: PathBuf::new(),
        };
        check(book.as_bytes(), &CommandLine::parse("price"), &run, false)
    };
    let book = format!("{H}\n{R}\n\n{R}\n");
    let good = format!("{H},price,status\n{R},10.4,ok\n{R},10.4,ok\n");
    assert_eq!(judge(&book, &good, 0), Vec::<String>::new());
    // A wrong line number, a non-finite value, a missing row, exit 0 on a
    // failed row, a changed echo.
    for (out, code) in [
        (
            format!("{H},price,status\n{R},10.4,ok\n{R},,error: line 3: x\n"),
            1,
        ),
        (format!("{H},price,status\n{R},10.4,ok\n{R},NaN,ok\n"), 0),
        (format!("{H},price,status\n{R},10.4,ok\n"), 0),
        (
            format!("{H},price,status\n{R},10.4,ok\n{R},,error: line 4: x\n"),
            0,
        ),
        (
            format!("{H},price,status\n{R},10.4,ok\nput{},10.4,ok\n", &R[4..]),
            0,
        ),
    ] {
        assert_eq!(judge(&book, &out, code).len(), 1, "{out}");
    }
    // An all-empty record is a blank line: a row for it is one too many.
    let book = format!("{H}\n{R}\n,,,\n");
    let out = format!("{H},price,status\n{R},10.4,ok\n,,,,,,,,,,error: line 3: kind is missing\n");
    assert_eq!(judge(&book, &out, 1).len(), 1);
    assert!(judge(&book, &good[..good.len() - R.len() - 9], 0).is_empty());
    // A quoted empty record is a blank line too; a quote left open at the
    // end is a row whose status names the quote's line.
    let with = format!(
        "{H},price,status\n{R},10.4,ok\n,,,,,,,,,,error: line 3: malformed record: the quote opened on line 3 is never closed\n"
    );
    let without = format!("{H},price,status\n{R},10.4,ok\n");
    let book = format!("{H}\n{R}\n\"\"\n");
    assert_eq!(judge(&book, &without, 0), Vec::<String>::new());
    assert_eq!(judge(&book, &with, 1).len(), 1);
    let book = format!("{H}\n{R}\n\"");
    assert_eq!(judge(&book, &with, 1), Vec::<String>::new());
    assert_eq!(judge(&book, &without, 0).len(), 1);
    let vague = with.replace("the quote opened on line 3 is never closed", "1 fields");
    assert_eq!(judge(&book, &vague, 1).len(), 1);
    // A long decimal expansion in a message, absent from the input.
    let book = format!("{H}\ncall,100,100,1,1e308,0.2,0,0,0\n");
    let out = format!(
        "{H},price,status\ncall,100,100,1,1e308,0.2,0,0,0,,error: line 2: rate = 1{} is out\n",
        "0".repeat(308)
    );
    assert_eq!(judge(&book, &out, 1).len(), 1);
    // Exit 2 on a valid header is a fault; on a bad header it is not.
    assert_eq!(judge(&format!("{H}\n{R}\n"), "", 2).len(), 1);
    assert!(judge("kind,spot\ncall,1\n", "", 2).is_empty());
}
