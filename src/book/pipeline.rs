//! The streaming book pipeline: read, process in parallel chunks, write in order.
//!
//! The calling thread cuts the input into fixed chunks of [`CHUNK_ROWS`]
//! records and spawns one rayon task per chunk (one output buffer each); a
//! writer thread puts the finished buffers back in chunk order and writes
//! them. At most a few chunks per worker are in flight, so memory is flat
//! whatever the size of the book. Chunking never changes a result: rows are
//! processed independently.
//!
//! Commands that aggregate (`risk`) use [`run_book_with_state`]: each chunk
//! gets a fresh state ([`ChunkState`]) that its rows add to in row order,
//! and the writer thread hands the finished states to a merge function in
//! chunk order. Chunks are a fixed number of records whatever the thread
//! count, so floating-point sums come out with the same digits on any
//! number of threads.

use super::reader::{parse_row, BookRow, RowError};
use super::records::{Record, RecordReader};
use super::schema::{BookInputs, Schema, SchemaError};
use super::writer::{non_finite_message, write_field, RowWriter};
use csv::ByteRecord;
use std::io::{Read, Write};
use std::sync::mpsc::sync_channel;

/// Rows per chunk handed to one rayon task.
pub const CHUNK_ROWS: usize = 2048;
/// The column holding the year fraction used, written when an expiry may be
/// a date.
pub const EXPIRY_YEARS: &str = "expiry_years";
/// How many row errors are kept in the summary (all are in the output).
pub const MAX_REPORTED_ERRORS: usize = 20;

/// What a run of the pipeline did.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct BookSummary {
    /// Data rows read (= rows written).
    pub rows: u64,
    /// Rows whose status is not `ok`.
    pub failed: u64,
    /// Records skipped because every field was empty (`,,,`), like blank
    /// lines: not rows, not written.
    pub skipped: u64,
    /// The first [`MAX_REPORTED_ERRORS`] failures, as `line N: problem`.
    pub first_errors: Vec<String>,
}

/// Fatal problems: nothing (or, for I/O failures mid-stream, not everything)
/// could be written.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum BookError {
    /// The header is unusable.
    #[error(transparent)]
    Schema(#[from] SchemaError),
    /// Reading or writing failed.
    #[error("{0}")]
    Io(#[from] std::io::Error),
    /// The CSV layer failed (e.g. an I/O error underneath it).
    #[error("{0}")]
    Csv(#[from] csv::Error),
}

/// Options of a pipeline run.
#[derive(Debug, Clone, Default)]
pub struct PipelineOptions {
    /// Names of the result columns the processor appends, ending with `status`.
    pub result_columns: Vec<String>,
    /// Valuation date and fitted parameters from outside the book. When an
    /// expiry may be a date ([`Schema::dated`]), the pipeline writes an
    /// `expiry_years` column (the year fraction used) before the
    /// processor's columns; otherwise the output has only the processor's.
    pub inputs: BookInputs,
    /// The result columns (ending with `status`) used instead of
    /// `result_columns` when the book has an `exercise` column
    /// ([`Schema::has_exercise`]); `None`: the same columns either way. The
    /// header decides, since the book streams; the processor reads the
    /// choice from [`BookRow::exercise_column`].
    pub exercise_columns: Option<Vec<String>>,
}

/// One chunk of raw records with the line of each. `len` records are live;
/// the vector is recycled between chunks so records keep their allocations.
struct Chunk {
    first_row: u64,
    len: usize,
    records: Vec<(Record, u64)>,
}

/// Per-chunk state of [`run_book_with_state`]: each chunk starts from
/// `Default` and is told about its failed rows.
pub trait ChunkState: Default + Send {
    /// Called for every row of the chunk written with an error status (a row
    /// that did not parse, or whose processor returned an error), in row order.
    fn row_failed(&mut self, _failed: &FailedRecord<'_>) {}
}

impl ChunkState for () {}

/// A row written with an error status, as [`ChunkState::row_failed`] sees it.
#[derive(Debug, Clone, Copy)]
pub struct FailedRecord<'a> {
    /// 1-based data row.
    pub row: u64,
    /// Line of the record in the input.
    pub line: u64,
    /// The raw `id` field, when the book has an `id` column and the record
    /// has that field (any bytes: it may not be UTF-8).
    pub id: Option<&'a [u8]>,
    /// The status text written (`error: line N: problem`).
    pub status: &'a str,
}

/// Runs a book through `process`.
///
/// `process` receives each row that parsed and validated, and appends every
/// result column except the last (`status`) through the [`RowWriter`]; it
/// returns `Ok(())` or an error message. A row that is complete except for a
/// field left empty on purpose calls [`RowWriter::set_warning`]: its fields
/// are kept and its status is `warning: line N: message` (counted as failed). On error (or when the row did not
/// parse, or a number it pushed is NaN or infinite) the pipeline discards
/// any partial fields, writes empty result fields and a status
/// `error: line N: problem`.
///
/// # Errors
/// [`BookError`] for a bad header (before anything is written) or an I/O failure.
pub fn run_book<R, W, F>(
    input: R,
    output: W,
    opts: &PipelineOptions,
    process: F,
) -> Result<BookSummary, BookError>
where
    R: Read + Send,
    W: Write + Send,
    F: Fn(&BookRow, &mut RowWriter) -> Result<(), String> + Sync,
{
    run_book_with_state(
        input,
        output,
        opts,
        |row, w, _: &mut ()| process(row, w),
        |()| Ok(()),
    )
}

/// [`run_book`] with a per-chunk state: `process` also receives the state of
/// its chunk (a fresh `S::default()` for every chunk of [`CHUNK_ROWS`]
/// records), and the writer thread calls `merge` with each chunk's state in
/// chunk order, after writing the chunk's rows. The chunking does not depend
/// on the thread count, so a merge that adds up floating-point numbers gives
/// the same digits on any number of threads.
///
/// # Errors
/// As [`run_book`]; an error returned by `merge` stops the run like an
/// output error.
pub fn run_book_with_state<R, W, S, F, M>(
    input: R,
    output: W,
    opts: &PipelineOptions,
    process: F,
    mut merge: M,
) -> Result<BookSummary, BookError>
where
    R: Read + Send,
    W: Write + Send,
    S: ChunkState,
    F: Fn(&BookRow, &mut RowWriter, &mut S) -> Result<(), String> + Sync,
    M: FnMut(S) -> std::io::Result<()> + Send,
{
    let mut reader = RecordReader::new(input);
    let mut header_record = Record::default();
    reader.read_record(&mut header_record)?;
    let headers: ByteRecord = header_record.iter().collect();
    let schema = Schema::with_inputs(&headers, &opts.inputs)?;
    let result_columns = match &opts.exercise_columns {
        Some(c) if schema.has_exercise() => c,
        _ => &opts.result_columns,
    };
    let columns: Vec<String> = schema
        .dated()
        .then(|| EXPIRY_YEARS.to_string())
        .into_iter()
        .chain(result_columns.iter().cloned())
        .collect();
    let columns = &columns[..];

    let mut out = csv::WriterBuilder::new().flexible(true).from_writer(output);
    let mut header_out = headers.clone();
    for c in columns {
        header_out.push_field(c.as_bytes());
    }
    out.write_byte_record(&header_out)?;
    let mut out = out.into_inner().map_err(|e| e.into_error())?;

    // Chunks in flight (read but not yet written) are bounded, so memory is
    // flat whatever the book size.
    let max_in_flight = 4 * rayon::current_num_threads().max(1) + 2;
    let (token_tx, token_rx) = sync_channel::<()>(max_in_flight);
    let (done_tx, done_rx) = std::sync::mpsc::channel::<(u64, ChunkResult<S>)>();
    let (recycle_tx, recycle_rx) = sync_channel::<Vec<(Record, u64)>>(max_in_flight);
    // Output buffers are recycled too: fresh half-megabyte buffers would be
    // mapped and page-faulted anew for every chunk.
    let buffers = std::sync::Mutex::new(Vec::<Vec<u8>>::new());
    let buffers = &buffers;

    std::thread::scope(|scope| -> Result<BookSummary, BookError> {
        // Writer: puts finished chunks back in input order and writes them.
        let writer = scope.spawn(move || -> std::io::Result<BookSummary> {
            let mut summary = BookSummary::default();
            let mut waiting = std::collections::BTreeMap::new();
            let mut next = 0u64;
            let mut io_error = None;
            for (idx, result) in done_rx {
                waiting.insert(idx, result);
                while let Some(r) = waiting.remove(&next) {
                    next += 1;
                    let _ = token_rx.recv();
                    summary.rows += r.rows;
                    summary.failed += r.failed;
                    for e in r.errors {
                        if summary.first_errors.len() < MAX_REPORTED_ERRORS {
                            summary.first_errors.push(e);
                        }
                    }
                    if io_error.is_none() {
                        let written = out.write_all(&r.buf).and_then(|()| merge(r.state));
                        let mut spent = r.buf;
                        spent.clear();
                        if let Ok(mut pool) = buffers.lock() {
                            pool.push(spent);
                        }
                        if let Err(e) = written {
                            io_error = Some(e);
                        }
                    }
                }
                if io_error.is_some() {
                    break;
                }
            }
            if let Some(e) = io_error {
                return Err(e);
            }
            out.flush()?;
            Ok(summary)
        });

        // Reader (this thread): cut the input into chunks and hand each to the pool.
        let mut input_error = None;
        let schema = &schema;
        let process = &process;
        rayon::in_place_scope(|pool| {
            let mut row = 0u64;
            let mut idx = 0u64;
            loop {
                let mut records = recycle_rx.try_recv().unwrap_or_default();
                let first_row = row + 1;
                let mut len = 0;
                while len < CHUNK_ROWS {
                    if records.len() == len {
                        records.push((Record::default(), 0));
                    }
                    let (rec, line) = &mut records[len];
                    match reader.read_record(rec) {
                        Ok(Some(l)) => {
                            row += 1;
                            *line = l;
                            len += 1;
                        }
                        Ok(None) => break,
                        Err(e) => {
                            input_error = Some(e);
                            break;
                        }
                    }
                }
                let last = len < CHUNK_ROWS || input_error.is_some();
                if len > 0 {
                    if token_tx.send(()).is_err() {
                        break; // the writer stopped (output error)
                    }
                    let chunk = Chunk {
                        first_row,
                        len,
                        records,
                    };
                    let done_tx = done_tx.clone();
                    let recycle_tx = recycle_tx.clone();
                    pool.spawn(move |_| {
                        let buf = buffers
                            .lock()
                            .ok()
                            .and_then(|mut p| p.pop())
                            .unwrap_or_default();
                        let result = process_chunk(&chunk, schema, columns, process, buf);
                        let _ = done_tx.send((idx, result));
                        let _ = recycle_tx.try_send(chunk.records);
                    });
                    idx += 1;
                }
                if last {
                    break;
                }
            }
        });
        drop(done_tx);
        let mut summary = writer.join().expect("writer thread panicked")?;
        summary.skipped = reader.skipped();
        if let Some(e) = input_error {
            return Err(e.into());
        }
        Ok(summary)
    })
}

/// What processing one chunk produced.
struct ChunkResult<S> {
    buf: Vec<u8>,
    state: S,
    rows: u64,
    failed: u64,
    errors: Vec<String>,
}

fn process_chunk<S, F>(
    chunk: &Chunk,
    schema: &Schema,
    columns: &[String],
    process: &F,
    mut buf: Vec<u8>,
) -> ChunkResult<S>
where
    S: ChunkState,
    F: Fn(&BookRow, &mut RowWriter, &mut S) -> Result<(), String> + Sync,
{
    let mut state = S::default();
    buf.reserve(chunk.len * 320);
    let mut failed = 0;
    let mut errors = Vec::new();
    for (i, (rec, line)) in chunk.records[..chunk.len].iter().enumerate() {
        let row = chunk.first_row + i as u64;
        // Echo the input fields (padded or cut to the header's width): a
        // plain record of the right width is its raw line.
        match rec.plain_line() {
            Some(raw) if rec.len() == schema.width => buf.extend_from_slice(raw),
            _ => {
                for j in 0..schema.width {
                    if j > 0 {
                        buf.push(b',');
                    }
                    write_field(&mut buf, rec.get(j).unwrap_or(b""));
                }
            }
        }
        let echo = buf.len();
        let outcome = parse_row(schema, rec, row, *line).and_then(|r| {
            let mut w = RowWriter::new(&mut buf);
            if schema.dated() {
                w.push_f64(r.contract.expiry);
            }
            let done = process(&r, &mut w, &mut state);
            // The safety net under every command: no NaN or inf in an ok row.
            let non_finite = w.non_finite();
            let warning = w.take_warning();
            done.and_then(|()| match non_finite {
                None => Ok(warning),
                Some((i, v)) => Err(non_finite_message(
                    columns.get(i).map_or("a result", String::as_str),
                    v,
                )),
            })
            .map_err(|message| RowError {
                line: *line,
                message,
            })
        });
        match outcome {
            Ok(None) => buf.extend_from_slice(b",ok"),
            Ok(Some(warning)) => {
                // Fields kept; the status says which one is empty and why.
                failed += 1;
                let msg = format!("line {line}: {warning}");
                RowWriter::new(&mut buf).push_str(&format!("warning: {msg}"));
                if errors.len() < MAX_REPORTED_ERRORS {
                    errors.push(msg);
                }
            }
            Err(e) => {
                failed += 1;
                buf.truncate(echo);
                let mut w = RowWriter::new(&mut buf);
                w.push_empty(columns.len() - 1);
                let msg = e.to_string();
                let status = format!("error: {msg}");
                w.push_str(&status);
                state.row_failed(&FailedRecord {
                    row,
                    line: *line,
                    id: schema.id.and_then(|i| rec.get(i)),
                    status: &status,
                });
                if errors.len() < MAX_REPORTED_ERRORS {
                    errors.push(msg);
                }
            }
        }
        buf.push(b'\n');
    }
    ChunkResult {
        buf,
        state,
        rows: chunk.len as u64,
        failed,
        errors,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn issue8_a_non_finite_result_fails_the_row_and_names_the_column() {
        let book = format!(
            "{},id\n{}\n{}\n",
            super::super::schema::REQUIRED.join(","),
            "call,100,100,1,0,0.2,0,0,0,a",
            "call,100,100,1,0,0.2,0,0,0,b"
        );
        let opts = PipelineOptions {
            result_columns: ["x", "y", "status"].map(String::from).to_vec(),
            ..Default::default()
        };
        let mut out = Vec::new();
        let summary = run_book(book.as_bytes(), &mut out, &opts, |row, w| {
            w.push_f64(1.0);
            // A processor that overflows on row b.
            w.push_f64(if row.explicit_id() == Some("b") {
                f64::MAX * 2.0
            } else {
                2.0
            });
            Ok(())
        })
        .unwrap();
        let text = String::from_utf8(out).unwrap();
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[1], "call,100,100,1,0,0.2,0,0,0,a,1.0,2.0,ok");
        assert_eq!(
            lines[2],
            "call,100,100,1,0,0.2,0,0,0,b,,,error: line 3: y is not finite (inf): \
             outside the range double precision can represent"
        );
        assert_eq!((summary.rows, summary.failed), (2, 1));
    }
}
