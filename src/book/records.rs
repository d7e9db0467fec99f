//! Splitting the input into CSV records, with the line each starts on.
//!
//! Book rows are almost always plain: no quotes, `\n` or `\r\n` endings. Such
//! a line is split on commas with `memchr`, several times cheaper than a
//! general CSV state machine. Any line holding a quote or a carriage return
//! other than its ending is handed, from its first byte, to `csv_core` (the
//! state machine under the `csv` crate, with its default dialect), so quoted
//! fields, embedded line breaks and lone `\r` terminators are read exactly as
//! the `csv` crate reads them. As there, blank lines are skipped and a UTF-8
//! byte-order mark at the start of the input is dropped.
//!
//! Line numbers count `\n` bytes, so `\n` and `\r\n` files give the same
//! numbers (the `csv` crate's own positions are one line late after `\r\n`).

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
    started: bool,
    core: csv_core::Reader,
    /// Scratch for the general path.
    fields: Vec<u8>,
    ends: Vec<usize>,
    read_size: usize,
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
            started: false,
            core: csv_core::Reader::new(),
            fields: Vec::new(),
            ends: Vec::new(),
            read_size: read_size.max(1),
        }
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
    /// it starts on, or `None` at the end of the input.
    ///
    /// # Errors
    /// Only I/O errors of the underlying reader.
    pub fn read_record(&mut self, rec: &mut Record) -> std::io::Result<Option<u64>> {
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
            self.pos = next;
            return Ok(Some(line));
        }
        self.read_general(rec)?;
        Ok(Some(line))
    }

    /// Adds the newlines among the next `n` unread bytes to the line count.
    fn count_lines(&mut self, n: usize) {
        self.line += memchr::memchr_iter(b'\n', &self.buf[self.pos..self.pos + n]).count() as u64;
    }

    /// One record through `csv_core`, from `pos` (a record start).
    fn read_general(&mut self, rec: &mut Record) -> std::io::Result<()> {
        use csv_core::ReadRecordResult as R;
        // Fresh state: the fast path may have consumed the `\n` of a `\r\n`
        // that csv_core last saw the `\r` of.
        self.core.reset();
        self.fields.resize(self.fields.len().max(256), 0);
        self.ends.resize(self.ends.len().max(16), 0);
        let (mut nout, mut nend) = (0, 0);
        loop {
            let input = &self.buf[self.pos..self.end];
            let (res, nin, o, e) =
                self.core
                    .read_record(input, &mut self.fields[nout..], &mut self.ends[nend..]);
            self.count_lines(nin);
            self.pos += nin;
            // csv_core reports field ends counted from the start of the
            // record, across calls.
            nout += o;
            nend += e;
            match res {
                R::InputEmpty => {
                    if !self.fill()? {
                        // Tell csv_core the input has ended (empty input).
                        continue;
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
                R::Record => break,
                R::End => break,
            }
        }
        let mut start = 0;
        for &end in &self.ends[..nend] {
            rec.bytes.extend_from_slice(&self.fields[start..end]);
            rec.ends.push(rec.bytes.len());
            rec.bytes.push(b',');
            start = end;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Records and their fields as the `csv` crate reads them (reference).
    fn csv_crate(text: &[u8]) -> Vec<Vec<Vec<u8>>> {
        csv_crate_with_lines(text).0
    }

    fn csv_crate_with_lines(text: &[u8]) -> (Vec<Vec<Vec<u8>>>, Vec<u64>) {
        let mut r = csv::ReaderBuilder::new()
            .has_headers(false)
            .flexible(true)
            .from_reader(text);
        r.byte_records()
            .map(|rec| {
                let rec = rec.unwrap();
                let line = rec.position().unwrap().line();
                (rec.iter().map(<[u8]>::to_vec).collect(), line)
            })
            .unzip()
    }

    fn ours(text: &[u8], read_size: usize) -> (Vec<Vec<Vec<u8>>>, Vec<u64>) {
        let mut r = RecordReader::with_read_size(text, read_size);
        let mut rec = Record::default();
        let (mut recs, mut lines) = (Vec::new(), Vec::new());
        while let Some(line) = r.read_record(&mut rec).unwrap() {
            if let Some(raw) = rec.plain_line() {
                let joined: Vec<u8> = rec.iter().collect::<Vec<_>>().join(&b',');
                assert_eq!(raw, &joined[..]);
            }
            recs.push(rec.iter().map(<[u8]>::to_vec).collect());
            lines.push(line);
        }
        (recs, lines)
    }

    #[test]
    fn same_records_as_the_csv_crate() {
        let cases: &[&[u8]] = &[
            b"a,b,c\n1,2,3\n",
            b"a,b\r\n1,2\r\n",
            b"a,b\n\n\n1,2",
            b"\xef\xbb\xbfid,kind\nx,call\n",
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
    fn random_texts_match_the_csv_crate() {
        let alphabet = b"ab,,\"\r\n\n 1";
        let mut rng = crate::test_rng::TestRng::new(0x1234_5678_9abc_def1);
        let mut next = |k: usize| rng.below(k as u64) as usize;
        for _ in 0..3000 {
            let len = next(40);
            let text: Vec<u8> = (0..len).map(|_| alphabet[next(alphabet.len())]).collect();
            let size = 1 + next(9);
            let (recs, lines) = ours(&text, size);
            let (want_recs, want_lines) = csv_crate_with_lines(&text);
            assert_eq!(recs, want_recs, "{:?}", String::from_utf8_lossy(&text));
            // Without carriage returns and blank lines the csv crate's line
            // numbers are right (it counts both late).
            let blank = text.starts_with(b"\n") || text.windows(2).any(|w| w == b"\n\n");
            if !text.contains(&b'\r') && !blank {
                assert_eq!(lines, want_lines, "{:?}", String::from_utf8_lossy(&text));
            }
        }
    }
}
