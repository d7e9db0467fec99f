//! Splitting the input into CSV records, with the line each starts on.
//!
//! Book rows are almost always plain: no quotes, `\n` or `\r\n` endings. Such
//! a line is split on commas with `memchr`, several times cheaper than a
//! general CSV state machine. Any line holding a quote or a carriage return
//! other than its ending is handed, from its first byte, to `csv_core` (the
//! state machine under the `csv` crate, with its default dialect), so quoted
//! fields, embedded line breaks and lone `\r` terminators are read exactly as
//! the `csv` crate reads them. As there, blank lines are skipped and a UTF-8
//! byte-order mark at the start of the input is dropped (only there: a mark
//! at the start of a later record is part of its first field). Unlike there,
//! a record whose fields are all empty (`,,,,`, the tail of many spreadsheet
//! exports) is skipped like a blank line and counted ([`RecordReader::skipped`]).
//!
//! Line numbers count line breaks: `\n`, `\r\n` and a lone `\r` are one
//! each, so a file gives the same numbers with any of the three endings
//! (the `csv` crate's own positions count `\n` only and are one line late
//! after `\r\n`).
//!
//! A quote left open runs, for the `csv` crate, to the end of the input as
//! one field. Here such a record is cut at the end of the line where the
//! quote opened and marked ([`Record::open_quote`]), and reading resumes on
//! the next line, so the rows after it are still read one by one.

use std::io::Read;

/// Bytes read from the input at a time.
const READ_SIZE: usize = 1 << 20;

/// One CSV record. Fields are stored one after another, each followed by
/// one separator byte, with the end offset of each; a record read by the
/// fast path keeps its raw line as this storage.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Record {
    bytes: Vec<u8>,
    ends: Vec<usize>,
    /// `bytes` is the raw line: no field holds a quote, comma or line break.
    plain: bool,
    /// The line of a quote that was never closed (the record is cut at the
    /// end of that line), or 0.
    open_quote: u64,
    /// Line breaks inside the record (in quoted fields).
    inner_breaks: u64,
}

impl Record {
    /// A record from its fields (used by tests and for headers).
    pub fn from_fields<T: AsRef<[u8]>>(fields: &[T]) -> Self {
        let mut r = Record::default();
        for f in fields {
            r.bytes.extend_from_slice(f.as_ref());
            r.ends.push(r.bytes.len());
            r.bytes.push(b',');
        }
        r
    }

    /// Number of fields.
    #[inline]
    pub fn len(&self) -> usize {
        self.ends.len()
    }

    /// True for a record with no fields.
    #[inline]
    pub fn is_empty(&self) -> bool {
        self.ends.is_empty()
    }

    /// Field `i`, if there is one.
    #[inline]
    pub fn get(&self, i: usize) -> Option<&[u8]> {
        let end = *self.ends.get(i)?;
        let start = if i == 0 { 0 } else { self.ends[i - 1] + 1 };
        Some(&self.bytes[start..end])
    }

    /// The fields in order.
    pub fn iter(&self) -> impl Iterator<Item = &[u8]> {
        (0..self.len()).filter_map(|i| self.get(i))
    }

    /// True when every field is empty (`,,,`; also a single empty field).
    #[inline]
    pub fn all_empty(&self) -> bool {
        // Fields are stored with one separator byte between them (plain
        // records) or after each (others): the last field ends at byte
        // `len - 1` exactly when no field holds a byte.
        self.ends.last().is_some_and(|&e| e + 1 == self.ends.len())
    }

    /// The line where a quote opened that the input never closes: the
    /// record then holds that line only (see the module documentation).
    #[inline]
    pub fn open_quote(&self) -> Option<u64> {
        (self.open_quote > 0).then_some(self.open_quote)
    }

    /// Number of line breaks inside the record's quoted fields (0 for a
    /// record on one line).
    #[inline]
    pub fn inner_breaks(&self) -> u64 {
        self.inner_breaks
    }

    /// The raw line (fields joined by commas) when no field needs quoting,
    /// so that echoing the record is a single copy.
    #[inline]
    pub fn plain_line(&self) -> Option<&[u8]> {
        self.plain.then_some(&self.bytes[..])
    }

    fn clear(&mut self) {
        self.bytes.clear();
        self.ends.clear();
        self.plain = false;
        self.open_quote = 0;
        self.inner_breaks = 0;
    }
}

impl std::ops::Index<usize> for Record {
    type Output = [u8];
    fn index(&self, i: usize) -> &[u8] {
        self.get(i).expect("field index out of range")
    }
}

/// Pushes the offset of every comma of `body`, then `body.len()`. Eight
/// bytes at a time: after `x = word ^ ",,,,,,,,"`, the expression below has
/// the high bit of a byte set exactly where that byte of `x` is zero (no
/// carry crosses bytes since `(x & 0x7f) + 0x7f <= 0xfe`).
#[inline]
fn comma_ends(body: &[u8], ends: &mut Vec<usize>) {
    const LO7: u64 = 0x7f7f_7f7f_7f7f_7f7f;
    const COMMAS: u64 = 0x2c2c_2c2c_2c2c_2c2c;
    let mut chunks = body.chunks_exact(8);
    let mut base = 0;
    for c in &mut chunks {
        let word = u64::from_le_bytes(c.try_into().expect("8 bytes"));
        let x = word ^ COMMAS;
        let mut hits = !(((x & LO7).wrapping_add(LO7)) | x | LO7);
        while hits != 0 {
            ends.push(base + (hits.trailing_zeros() / 8) as usize);
            hits &= hits - 1;
        }
        base += 8;
    }
    for (i, &c) in chunks.remainder().iter().enumerate() {
        if c == b',' {
            ends.push(base + i);
        }
    }
    ends.push(body.len());
}

/// Where a scan of a record's bytes stands with respect to quoting, as in
/// the default dialect of `csv_core`: a quote opens a quoted field only as
/// the first byte of a field; inside one, `""` is a quote and a quote
/// followed by anything else ends the quoting.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Quoting {
    FieldStart,
    Unquoted,
    Quoted,
    QuoteInQuoted,
}

/// Line and quote bookkeeping over the bytes `csv_core` consumes for one
/// record (the general path only: the fast path has no quotes).
struct Scan {
    /// Line of the next byte.
    line: u64,
    /// The last byte was a `\r` (a following `\n` is the same line break).
    prev_cr: bool,
    state: Quoting,
    /// Offset from the record start and line of the quote that opened the
    /// current quoted field.
    open_at: usize,
    open_line: u64,
    /// Line of the last byte that is not a line break.
    last_data_line: u64,
    /// Bytes scanned.
    seen: usize,
}

impl Scan {
    fn new(line: u64, prev_cr: bool) -> Self {
        Scan {
            line,
            prev_cr,
            state: Quoting::FieldStart,
            open_at: 0,
            open_line: line,
            last_data_line: line,
            seen: 0,
        }
    }

    fn feed(&mut self, bytes: &[u8]) {
        for &c in bytes {
            match c {
                b'\n' => {
                    self.line += u64::from(!self.prev_cr);
                    self.prev_cr = false;
                }
                b'\r' => {
                    self.line += 1;
                    self.prev_cr = true;
                }
                _ => {
                    self.prev_cr = false;
                    self.last_data_line = self.line;
                }
            }
            self.state = match (self.state, c) {
                (Quoting::FieldStart, b'"') => {
                    self.open_at = self.seen;
                    self.open_line = self.line;
                    Quoting::Quoted
                }
                (Quoting::Quoted, b'"') => Quoting::QuoteInQuoted,
                (Quoting::Quoted, _) => Quoting::Quoted,
                (Quoting::QuoteInQuoted, b'"') => Quoting::Quoted,
                (_, b',' | b'\n' | b'\r') => Quoting::FieldStart,
                _ => Quoting::Unquoted,
            };
            self.seen += 1;
        }
    }
}

/// Reads records from a byte stream.
pub struct RecordReader<R> {
    src: R,
    buf: Vec<u8>,
    /// Unread bytes are `buf[pos..end]`.
    pos: usize,
    end: usize,
    eof: bool,
    /// 1-based line number of the byte at `pos`.
    line: u64,
    /// The byte before `pos` was a `\r`: a `\n` at `pos` ends no new line.
    prev_cr: bool,
    started: bool,
    core: csv_core::Reader,
    /// Scratch for the general path.
    fields: Vec<u8>,
    ends: Vec<usize>,
    read_size: usize,
    /// Records skipped because every field was empty.
    skipped: u64,
}

impl<R: Read> RecordReader<R> {
    /// Wraps a reader.
    pub fn new(src: R) -> Self {
        Self::with_read_size(src, READ_SIZE)
    }

    /// Wraps a reader, reading `read_size` bytes at a time (tests use tiny
    /// sizes to exercise refills).
    pub fn with_read_size(src: R, read_size: usize) -> Self {
        RecordReader {
            src,
            buf: Vec::new(),
            pos: 0,
            end: 0,
            eof: false,
            line: 1,
            prev_cr: false,
            started: false,
            core: csv_core::Reader::new(),
            fields: Vec::new(),
            ends: Vec::new(),
            read_size: read_size.max(1),
            skipped: 0,
        }
    }

    /// Records skipped so far because all their fields were empty.
    pub fn skipped(&self) -> u64 {
        self.skipped
    }

    /// Reads more input, keeping the unread bytes. Returns false at end of input.
    fn fill(&mut self) -> std::io::Result<bool> {
        if self.eof {
            return Ok(false);
        }
        if self.pos > 0 {
            self.buf.copy_within(self.pos..self.end, 0);
            self.end -= self.pos;
            self.pos = 0;
        }
        // Read at least as much as is pending, so that a record longer than
        // the read size costs a geometric, not quadratic, amount of copying.
        let want = self.read_size.max(self.end);
        if self.buf.len() < self.end + want {
            self.buf.resize(self.end + want, 0);
        }
        loop {
            match self.src.read(&mut self.buf[self.end..]) {
                Ok(0) => {
                    self.eof = true;
                    return Ok(false);
                }
                Ok(n) => {
                    self.end += n;
                    return Ok(true);
                }
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                Err(e) => return Err(e),
            }
        }
    }

    /// Reads the next record into `rec` (cleared first) and returns the line
    /// it starts on, or `None` at the end of the input. Records whose fields
    /// are all empty are skipped and counted.
    ///
    /// # Errors
    /// Only I/O errors of the underlying reader.
    pub fn read_record(&mut self, rec: &mut Record) -> std::io::Result<Option<u64>> {
        loop {
            match self.read_one(rec)? {
                Some((line, false)) => return Ok(Some(line)),
                Some((_, true)) => self.skipped += 1,
                None => return Ok(None),
            }
        }
    }

    /// The next record and its line, and whether all its fields are empty.
    #[inline(always)]
    fn read_one(&mut self, rec: &mut Record) -> std::io::Result<Option<(u64, bool)>> {
        rec.clear();
        if !self.started {
            while self.end - self.pos < 3 && self.fill()? {}
            if self.buf[self.pos..self.end].starts_with(b"\xef\xbb\xbf") {
                self.pos += 3;
            }
            self.started = true;
        }
        // Skip blank lines (any run of terminators).
        loop {
            match self.buf[self.pos..self.end]
                .iter()
                .position(|&c| c != b'\n' && c != b'\r')
            {
                Some(i) => {
                    self.count_lines(i);
                    self.pos += i;
                    break;
                }
                None => {
                    let n = self.end - self.pos;
                    self.count_lines(n);
                    self.pos = self.end;
                    if !self.fill()? {
                        return Ok(None);
                    }
                }
            }
        }
        let line = self.line;
        // One scan for the first line break or quote, reading more if
        // needed. Stopping at '\r' as well keeps files with lone-CR endings
        // linear: their records then go through the general path one at a
        // time. A quote before the line break means the general path too.
        let mut searched = 0;
        let stop_at = loop {
            let hay = &self.buf[self.pos + searched..self.end];
            if let Some(i) = memchr::memchr3(b'\n', b'\r', b'"', hay) {
                let at = self.pos + searched + i;
                // A '\r' needs the next byte to tell "\r\n" from a lone CR.
                if self.buf[at] == b'\r' && at + 1 == self.end {
                    searched = at - self.pos;
                    if self.fill()? {
                        continue;
                    }
                }
                break Some(at);
            }
            searched = self.end - self.pos;
            if !self.fill()? {
                break None;
            }
        };
        // The quote-free body and where the next record starts, for a plain
        // "\n" or "\r\n" ending (or the end of the input).
        let plain_end = match stop_at {
            None => Some((self.end, self.end)),
            Some(at) => match self.buf[at] {
                b'\n' => Some((at, at + 1)),
                b'\r' if at + 1 < self.end && self.buf[at + 1] == b'\n' => Some((at, at + 2)),
                _ => None, // a lone CR, or a quote
            },
        };
        if let Some((stop, next)) = plain_end {
            let body = &self.buf[self.pos..stop];
            rec.bytes.extend_from_slice(body);
            comma_ends(body, &mut rec.ends);
            rec.plain = true;
            self.line += u64::from(next > stop);
            self.prev_cr = false;
            self.pos = next;
            // Only commas: every field is empty.
            let empty = rec.ends.len() == body.len() + 1;
            return Ok(Some((line, empty)));
        }
        self.read_general(rec)?;
        Ok(Some((line, rec.all_empty() && rec.open_quote == 0)))
    }

    /// Adds the line breaks among the next `n` unread bytes (all `\r` or
    /// `\n`) to the line count.
    fn count_lines(&mut self, n: usize) {
        for &c in &self.buf[self.pos..self.pos + n] {
            self.line += u64::from(c == b'\r' || !self.prev_cr);
            self.prev_cr = c == b'\r';
        }
    }

    /// One record through `csv_core`, from `pos` (a record start). A quote
    /// left open at the end of the input cuts the record at the end of the
    /// line where it opened.
    fn read_general(&mut self, rec: &mut Record) -> std::io::Result<()> {
        let start_line = self.line;
        let mut scan = Scan::new(self.line, self.prev_cr);
        let mut nend = self.run_core(None, &mut scan)?;
        if scan.state == Quoting::Quoted {
            let from = self.pos + scan.open_at;
            let to = self.pos + scan.seen;
            if let Some(i) = memchr::memchr2(b'\n', b'\r', &self.buf[from..to]) {
                let mut cut = Scan::new(self.line, self.prev_cr);
                nend = self.run_core(Some(scan.open_at + i), &mut cut)?;
                scan = cut;
            }
            rec.open_quote = scan.open_line;
        }
        rec.inner_breaks = scan.last_data_line - start_line;
        self.line = scan.line;
        self.prev_cr = scan.prev_cr;
        self.pos += scan.seen;
        let mut start = 0;
        for &end in &self.ends[..nend] {
            rec.bytes.extend_from_slice(&self.fields[start..end]);
            rec.ends.push(rec.bytes.len());
            rec.bytes.push(b',');
            start = end;
        }
        Ok(())
    }

    /// Runs `csv_core` over one record starting at `pos`, without moving
    /// `pos` (the record's bytes stay in the buffer), feeding `scan` with
    /// every byte it consumes; the input ends at offset `limit` from `pos`
    /// when given. Leaves the fields in `fields` and returns how many field
    /// ends are in `ends`.
    fn run_core(&mut self, limit: Option<usize>, scan: &mut Scan) -> std::io::Result<usize> {
        use csv_core::ReadRecordResult as R;
        // Fresh state: the fast path may have consumed the `\n` of a `\r\n`
        // that csv_core last saw the `\r` of.
        self.core.reset();
        self.fields.resize(self.fields.len().max(256), 0);
        self.ends.resize(self.ends.len().max(16), 0);
        let (mut nout, mut nend) = (0, 0);
        loop {
            let at = self.pos + scan.seen;
            let stop = limit.map_or(self.end, |l| self.pos + l);
            let mut input = &self.buf[at..stop];
            // After a reset csv_core drops a byte-order mark it sees whole in
            // its first call, as at the start of a file. Here that is the
            // start of a later record, where the mark is data: show it one
            // byte first.
            if scan.seen == 0 && input.first() == Some(&0xef) {
                input = &input[..1];
            }
            let (res, nin, o, e) =
                self.core
                    .read_record(input, &mut self.fields[nout..], &mut self.ends[nend..]);
            scan.feed(&self.buf[at..at + nin]);
            // csv_core reports field ends counted from the start of the
            // record, across calls.
            nout += o;
            nend += e;
            match res {
                R::InputEmpty => {
                    // At the end of what is buffered read more; at the end
                    // of the input (or of `limit`) the next call gets an
                    // empty input, which tells csv_core the input has ended.
                    if at + nin == stop && limit.is_none() {
                        self.fill()?;
                    }
                }
                R::OutputFull => {
                    let n = self.fields.len() * 2;
                    self.fields.resize(n, 0);
                }
                R::OutputEndsFull => {
                    let n = self.ends.len() * 2;
                    self.ends.resize(n, 0);
                }
                R::Record | R::End => return Ok(nend),
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Records and their fields as the `csv` crate reads them (reference).
    fn csv_crate(text: &[u8]) -> Vec<Vec<Vec<u8>>> {
        csv_crate_with_lines(text).0
    }

    /// The same without the records whose fields are all empty, which this
    /// reader skips.
    fn csv_crate_with_lines(text: &[u8]) -> (Vec<Vec<Vec<u8>>>, Vec<u64>) {
        let mut r = csv::ReaderBuilder::new()
            .has_headers(false)
            .flexible(true)
            .from_reader(text);
        r.byte_records()
            .map(|rec| {
                let rec = rec.unwrap();
                let line = rec.position().unwrap().line();
                (rec.iter().map(<[u8]>::to_vec).collect::<Vec<_>>(), line)
            })
            .filter(|(fields, _)| fields.iter().any(|f| !f.is_empty()))
            .unzip()
    }

    /// True when the `csv` crate ends `text` inside a quoted field: then
    /// appending `",` closes the quote and adds one empty field to the last
    /// record, and changes nothing else (in any other state the quote or
    /// the comma would be data, or start a record).
    fn csv_crate_leaves_quote_open(text: &[u8]) -> bool {
        let raw = |t: &[u8]| -> Vec<Vec<Vec<u8>>> {
            csv::ReaderBuilder::new()
                .has_headers(false)
                .flexible(true)
                .from_reader(t)
                .byte_records()
                .map(|r| r.unwrap().iter().map(<[u8]>::to_vec).collect())
                .collect()
        };
        let mut want = raw(text);
        let Some(last) = want.last_mut() else {
            return false;
        };
        last.push(Vec::new());
        let mut closed = text.to_vec();
        closed.extend_from_slice(b"\",");
        raw(&closed) == want
    }

    fn ours(text: &[u8], read_size: usize) -> (Vec<Vec<Vec<u8>>>, Vec<u64>) {
        let (recs, lines, _) = ours_with_open_quotes(text, read_size);
        (recs, lines)
    }

    /// Records, their lines, and the lines of quotes left open.
    fn ours_with_open_quotes(
        text: &[u8],
        read_size: usize,
    ) -> (Vec<Vec<Vec<u8>>>, Vec<u64>, Vec<u64>) {
        let mut r = RecordReader::with_read_size(text, read_size);
        let mut rec = Record::default();
        let (mut recs, mut lines, mut open) = (Vec::new(), Vec::new(), Vec::new());
        while let Some(line) = r.read_record(&mut rec).unwrap() {
            open.extend(rec.open_quote());
            if let Some(raw) = rec.plain_line() {
                let joined: Vec<u8> = rec.iter().collect::<Vec<_>>().join(&b',');
                assert_eq!(raw, &joined[..]);
            }
            recs.push(rec.iter().map(<[u8]>::to_vec).collect());
            lines.push(line);
        }
        (recs, lines, open)
    }

    #[test]
    fn same_records_as_the_csv_crate() {
        let cases: &[&[u8]] = &[
            b"a,b,c\n1,2,3\n",
            b"a,b\r\n1,2\r\n",
            b"a,b\n\n\n1,2",
            b"\xef\xbb\xbfid,kind\nx,call\n",
            b"\xef\xbb\xbf\"id\",kind\nx,call\n",
            b"id,kind\n\xef\xbb\xbf\"x\",call\n\xef\xbb\xbfy,put\n",
            b"a,\"b,c\",d\n\"multi\nline\",2,3\n4,5,6\n",
            b"a,\"say \"\"hi\"\"\"\n",
            b"lone\rcr,x\n1,2\n",
            b"ab\"c,d\n",
            b",,\n , \n",
            b"x",
            b"",
            b"\n\r\n",
        ];
        for text in cases {
            for size in [1, 2, 3, 7, 1 << 20] {
                assert_eq!(
                    ours(text, size).0,
                    csv_crate(text),
                    "{:?} / {size}",
                    String::from_utf8_lossy(text)
                );
            }
        }
    }

    #[test]
    fn comma_scan_finds_every_comma() {
        for text in [
            "",
            ",",
            "a",
            ",,,,,,,,,",
            "1234567,9",
            "12345678,",
            ",12345678",
            "a,b,c,d,e,f,g,h,i,j,k",
        ] {
            let mut ends = Vec::new();
            comma_ends(text.as_bytes(), &mut ends);
            let mut want: Vec<usize> = text.match_indices(',').map(|(i, _)| i).collect();
            want.push(text.len());
            assert_eq!(ends, want, "{text:?}");
        }
    }

    #[test]
    fn long_books_with_lone_cr_endings_read_like_the_csv_crate() {
        let text: String = (0..20_000)
            .map(|i| format!("r{i},\"q{i}\",{}\r", i % 7))
            .collect();
        let (recs, _) = ours(text.as_bytes(), 4096);
        assert_eq!(recs.len(), 20_000);
        assert_eq!(recs, csv_crate(text.as_bytes()));
        // One record far longer than the read size.
        let long = format!("a,{},c\nd\n", "x".repeat(100_000));
        assert_eq!(ours(long.as_bytes(), 7).0, csv_crate(long.as_bytes()));
    }

    #[test]
    fn line_numbers_count_newlines() {
        assert_eq!(ours(b"h\na\nb\n", 4).1, vec![1, 2, 3]);
        assert_eq!(ours(b"h\r\na\r\nb\r\n", 4).1, vec![1, 2, 3]);
        assert_eq!(ours(b"h\na\n\nb\n", 4).1, vec![1, 2, 4]);
        assert_eq!(ours(b"h\n\"two\nlines\",x\nb\n", 3).1, vec![1, 2, 4]);
    }

    #[test]
    fn issue8_a_byte_order_mark_in_a_later_quoted_record_is_kept() {
        // The csv crate drops a mark only at the start of the input.
        let text = b"id,kind\n\xef\xbb\xbf\"x\",call\n";
        for size in [1, 2, 3, 4, 1 << 20] {
            let (recs, _) = ours(text, size);
            // The mark comes first, so the quotes are not at the start of
            // the field: they are data too.
            assert_eq!(recs[1][0], b"\xef\xbb\xbf\"x\"", "read size {size}");
        }
    }

    #[test]
    fn issue8_lone_cr_endings_count_lines() {
        for size in [1, 2, 5, 1 << 20] {
            assert_eq!(ours(b"h\ra\rb\r", size).1, vec![1, 2, 3]);
            // \r\n, \r and \n mixed, a blank line, a quoted \r spanning two
            // lines: h 1, a 2, b 3, (blank 4), the quoted record 5-6, c 7.
            let text = b"h\r\na\rb\n\n\"q\rq\",x\rc";
            assert_eq!(ours(text, size).1, vec![1, 2, 3, 5, 7], "read size {size}");
        }
    }

    #[test]
    fn issue8_a_quote_left_open_is_cut_at_its_line() {
        let text = b"h,x\n1,\"2\n3,4\n5,6\n";
        for size in [1, 3, 1 << 20] {
            let (recs, lines, open) = ours_with_open_quotes(text, size);
            let want: Vec<Vec<Vec<u8>>> = [["h", "x"], ["1", "2"], ["3", "4"], ["5", "6"]]
                .iter()
                .map(|r| r.iter().map(|f| f.as_bytes().to_vec()).collect())
                .collect();
            assert_eq!(recs, want, "read size {size}");
            assert_eq!(lines, vec![1, 2, 3, 4]);
            assert_eq!(open, vec![2]);
        }
        // Opened on the last line: the record is that line.
        let (recs, _, open) = ours_with_open_quotes(b"h,x\n1,\"2,3", 2);
        assert_eq!(recs[1], vec![b"1".to_vec(), b"2,3".to_vec()]);
        assert_eq!(open, vec![2]);
        // A quoted field over two lines is not an open quote, but counted.
        let mut r = RecordReader::new(&b"h\n\"a\nb\",c\nd\n"[..]);
        let mut rec = Record::default();
        r.read_record(&mut rec).unwrap();
        assert_eq!(r.read_record(&mut rec).unwrap(), Some(2));
        assert_eq!((rec.open_quote(), rec.inner_breaks()), (None, 1));
        assert_eq!(r.read_record(&mut rec).unwrap(), Some(4));
    }

    #[test]
    fn issue8_records_with_only_empty_fields_are_skipped_and_counted() {
        let text = b"h,x\n1,2\n,\n\n\"\",\"\"\r\n,\n3,4\n,";
        let mut r = RecordReader::with_read_size(&text[..], 3);
        let mut rec = Record::default();
        let mut lines = Vec::new();
        while let Some(line) = r.read_record(&mut rec).unwrap() {
            assert!(!rec.all_empty());
            lines.push(line);
        }
        assert_eq!(lines, vec![1, 2, 7]);
        assert_eq!(r.skipped(), 4);
        assert!(Record::from_fields(&["", ""]).all_empty());
        assert!(!Record::from_fields(&["", "a"]).all_empty());
        assert!(!Record::default().all_empty());
    }

    #[test]
    fn random_texts_match_the_csv_crate() {
        let alphabet = b"ab,,\"\r\n\n 1";
        let mut rng = crate::test_rng::TestRng::new(0x1234_5678_9abc_def1);
        let mut next = |k: usize| rng.below(k as u64) as usize;
        for _ in 0..3000 {
            let len = next(40);
            let text: Vec<u8> = (0..len).map(|_| alphabet[next(alphabet.len())]).collect();
            let size = 1 + next(9);
            let (recs, lines, open) = ours_with_open_quotes(&text, size);
            let show = String::from_utf8_lossy(&text);
            assert_eq!(
                !open.is_empty(),
                csv_crate_leaves_quote_open(&text),
                "{show:?}"
            );
            if !open.is_empty() {
                // Cut at the open quote's line and read on from there (the
                // csv crate reads the rest as one field).
                continue;
            }
            let (want_recs, want_lines) = csv_crate_with_lines(&text);
            assert_eq!(recs, want_recs, "{show:?}");
            // Without carriage returns and blank lines the csv crate's line
            // numbers are right (it counts both late).
            let blank = text.starts_with(b"\n") || text.windows(2).any(|w| w == b"\n\n");
            if !text.contains(&b'\r') && !blank {
                assert_eq!(lines, want_lines, "{:?}", String::from_utf8_lossy(&text));
            }
        }
    }
}
