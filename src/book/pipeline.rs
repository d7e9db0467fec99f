//! The streaming book pipeline: read, process in parallel chunks, write in order.
//!
//! A reader thread cuts the input into fixed chunks of [`CHUNK_ROWS`]
//! records; the calling thread processes a batch of chunks at a time with
//! rayon (one output buffer per chunk); a writer thread writes the buffers
//! in chunk order. Channels are bounded, so memory is a few batches whatever
//! the size of the book. Chunking never changes a result: rows are
//! processed independently.

use super::reader::{parse_row, BookRow, RowError};
use super::schema::{Schema, SchemaError};
use super::writer::push_empty;
use csv::ByteRecord;
use rayon::prelude::*;
use std::io::{Read, Write};
use std::sync::mpsc::sync_channel;

/// Rows per chunk handed to one rayon task.
pub const CHUNK_ROWS: usize = 2048;
/// How many row errors are kept in the summary (all are in the output).
pub const MAX_REPORTED_ERRORS: usize = 20;

/// What a run of the pipeline did.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct BookSummary {
    /// Data rows read (= rows written).
    pub rows: u64,
    /// Rows whose status is not `ok`.
    pub failed: u64,
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
#[derive(Debug, Clone)]
pub struct PipelineOptions {
    /// Names of the result columns the processor appends, ending with `status`.
    pub result_columns: Vec<String>,
}

/// One chunk of raw records with the line of each.
struct Chunk {
    first_row: u64,
    records: Vec<(ByteRecord, u64)>,
}

/// Runs a book through `process`.
///
/// `process` receives each row that parsed and validated, and appends every
/// result column except the last (`status`) to the output record; it returns
/// `Ok(())` or an error message. On error (or when the row did not parse) the
/// pipeline discards any partial fields, writes empty result fields and a
/// status `error: line N: problem`.
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
    F: Fn(&BookRow, &mut ByteRecord) -> Result<(), String> + Sync,
{
    let mut reader = csv::ReaderBuilder::new().has_headers(true).flexible(true).from_reader(input);
    let headers = reader.byte_headers()?.clone();
    let schema = Schema::from_headers(&headers)?;
    let n_results = opts.result_columns.len();

    let mut out = csv::WriterBuilder::new().flexible(true).from_writer(output);
    let mut header_out = headers.clone();
    for c in &opts.result_columns {
        header_out.push_field(c.as_bytes());
    }
    out.write_byte_record(&header_out)?;
    let mut out = out.into_inner().map_err(|e| e.into_error())?;

    let threads = rayon::current_num_threads().max(1);
    let batch = 4 * threads;
    let (chunk_tx, chunk_rx) = sync_channel::<Result<Chunk, csv::Error>>(2 * batch);
    let (buf_tx, buf_rx) = sync_channel::<Vec<u8>>(2 * batch);

    std::thread::scope(|scope| -> Result<BookSummary, BookError> {
        // Reader: raw records, in fixed chunks.
        scope.spawn(move || {
            let mut row = 0u64;
            loop {
                let mut records = Vec::with_capacity(CHUNK_ROWS);
                let first_row = row + 1;
                while records.len() < CHUNK_ROWS {
                    let mut rec = ByteRecord::new();
                    match reader.read_byte_record(&mut rec) {
                        Ok(true) => {
                            row += 1;
                            let line = rec.position().map(|p| p.line()).unwrap_or(0);
                            records.push((rec, line));
                        }
                        Ok(false) => break,
                        Err(e) => {
                            let _ = chunk_tx.send(Err(e));
                            return;
                        }
                    }
                }
                let done = records.len() < CHUNK_ROWS;
                if !records.is_empty() && chunk_tx.send(Ok(Chunk { first_row, records })).is_err() {
                    return;
                }
                if done {
                    return;
                }
            }
        });
        // Writer: buffers in order.
        let writer = scope.spawn(move || -> std::io::Result<()> {
            for buf in buf_rx {
                out.write_all(&buf)?;
            }
            out.flush()
        });

        let mut summary = BookSummary::default();
        let mut pending: Vec<Chunk> = Vec::with_capacity(batch);
        let mut input_error = None;
        let mut output_error = None;
        let mut chunks = chunk_rx.into_iter();
        loop {
            pending.clear();
            for item in chunks.by_ref() {
                match item {
                    Ok(c) => pending.push(c),
                    Err(e) => {
                        input_error = Some(e);
                        break;
                    }
                }
                if pending.len() == batch {
                    break;
                }
            }
            if pending.is_empty() {
                break;
            }
            let results: Vec<(Vec<u8>, u64, Vec<String>)> = pending
                .par_iter()
                .map(|chunk| process_chunk(chunk, &schema, n_results, &process))
                .collect();
            for (buf, failed, errors) in results {
                summary.failed += failed;
                for e in errors {
                    if summary.first_errors.len() < MAX_REPORTED_ERRORS {
                        summary.first_errors.push(e);
                    }
                }
                if buf_tx.send(buf).is_err() {
                    output_error = Some(());
                    break;
                }
            }
            summary.rows += pending.iter().map(|c| c.records.len() as u64).sum::<u64>();
            if input_error.is_some() || output_error.is_some() {
                break;
            }
        }
        drop(buf_tx);
        drop(chunks);
        writer.join().expect("writer thread panicked")?;
        if let Some(e) = input_error {
            return Err(e.into());
        }
        Ok(summary)
    })
}

fn process_chunk<F>(
    chunk: &Chunk,
    schema: &Schema,
    n_results: usize,
    process: &F,
) -> (Vec<u8>, u64, Vec<String>)
where
    F: Fn(&BookRow, &mut ByteRecord) -> Result<(), String> + Sync,
{
    let mut w = csv::WriterBuilder::new()
        .flexible(true)
        .from_writer(Vec::with_capacity(chunk.records.len() * 256));
    let mut out = ByteRecord::new();
    let mut failed = 0;
    let mut errors = Vec::new();
    for (i, (rec, line)) in chunk.records.iter().enumerate() {
        let row = chunk.first_row + i as u64;
        out.clear();
        for j in 0..schema.width {
            out.push_field(rec.get(j).unwrap_or(b""));
        }
        let echo = out.len();
        let outcome = parse_row(schema, rec, row, *line).and_then(|r| {
            process(&r, &mut out).map_err(|message| RowError { line: *line, message })
        });
        match outcome {
            Ok(()) => out.push_field(b"ok"),
            Err(e) => {
                failed += 1;
                out.truncate(echo);
                push_empty(&mut out, n_results - 1);
                let msg = e.to_string();
                out.push_field(format!("error: {msg}").as_bytes());
                if errors.len() < MAX_REPORTED_ERRORS {
                    errors.push(msg);
                }
            }
        }
        // Writing into a Vec cannot fail.
        w.write_byte_record(&out).expect("in-memory write");
    }
    (w.into_inner().expect("in-memory flush"), failed, errors)
}
