//! Option books as CSV: the column schema, row parsing, number formatting
//! and the streaming, parallel, order-preserving pipeline every command uses.
//!
//! The contract with the user is the same for every command: each input
//! row gives exactly one output row, in input order, with the input fields
//! echoed unchanged and the command's result fields appended, the last of
//! which is `status`. A row that cannot be processed keeps its place, gets
//! empty result fields and a status naming the line, column and problem.

pub mod columns;
pub mod columns_check;
pub mod header;
pub mod pipeline;
pub mod reader;
pub mod records;
pub mod schema;
pub mod streams;
pub mod writer;

pub use pipeline::{
    run_book, run_book_with_state, BookSummary, ChunkState, FailedRecord, PipelineOptions,
    EXPIRY_YEARS,
};
pub use reader::{parse_row, BookRow, RowError};
pub use schema::{BookInputs, Schema, SchemaError};
pub use streams::StreamKeys;
