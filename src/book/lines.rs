//! Line numbers of records, counted from the raw bytes.
//!
//! The csv crate's record positions count a `\r\n` terminator late (the
//! record after it reports the previous line), so a book saved with Windows
//! line endings would get error messages one line off. [`LineCounter`] wraps
//! the input, remembers the byte offsets of the newlines it has passed on,
//! and answers "which line does byte offset X start" with memory bounded by
//! the reader's look-ahead, not by the file.

use std::cell::RefCell;
use std::collections::VecDeque;
use std::io::Read;
use std::rc::Rc;

#[derive(Default)]
struct State {
    /// Offsets of newlines read but not yet passed by a query.
    pending: VecDeque<u64>,
    /// Newlines before the last queried offset.
    counted: u64,
    /// Bytes read so far.
    offset: u64,
}

/// A reader adapter that records newline offsets.
pub struct LineCounter<R> {
    inner: R,
    state: Rc<RefCell<State>>,
}

/// The query side of a [`LineCounter`].
#[derive(Clone)]
pub struct LineIndex {
    state: Rc<RefCell<State>>,
}

impl<R: Read> LineCounter<R> {
    /// Wraps a reader; the index answers line queries for its bytes.
    pub fn new(inner: R) -> (Self, LineIndex) {
        let state = Rc::new(RefCell::new(State::default()));
        (
            LineCounter {
                inner,
                state: state.clone(),
            },
            LineIndex { state },
        )
    }
}

impl<R: Read> Read for LineCounter<R> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let n = self.inner.read(buf)?;
        let mut st = self.state.borrow_mut();
        let base = st.offset;
        for i in memchr::memchr_iter(b'\n', &buf[..n]) {
            st.pending.push_back(base + i as u64);
        }
        st.offset += n as u64;
        Ok(n)
    }
}

impl LineIndex {
    /// 1-based line of a record whose csv position is `offset`. The csv
    /// reader's record span starts right after the previous record's last
    /// consumed byte, which is the `\r` of a `\r\n` (or before one blank
    /// line), so a newline *at* the offset still belongs before the record.
    /// Offsets must be queried in non-decreasing order.
    pub fn line_of(&self, offset: u64) -> u64 {
        let mut st = self.state.borrow_mut();
        while st.pending.front().is_some_and(|&nl| nl <= offset) {
            st.pending.pop_front();
            st.counted += 1;
        }
        st.counted + 1
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn counts_lf_and_crlf_alike() {
        for text in ["h\na\nb\n", "h\r\na\r\nb\r\n", "h\na\n\nb\n"] {
            let (counter, index) = LineCounter::new(text.as_bytes());
            let mut rdr = csv::ReaderBuilder::new()
                .has_headers(true)
                .from_reader(counter);
            let mut rec = csv::ByteRecord::new();
            let mut lines = Vec::new();
            while rdr.read_byte_record(&mut rec).unwrap() {
                lines.push(index.line_of(rec.position().unwrap().byte()));
            }
            let want = if text.contains("\n\n") {
                vec![2, 4]
            } else {
                vec![2, 3]
            };
            assert_eq!(lines, want, "{text:?}");
        }
    }
}
