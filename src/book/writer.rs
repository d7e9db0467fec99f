//! Output formatting: CSV fields written straight into a chunk's byte
//! buffer, numbers in the shortest form that parses back to the same `f64`
//! (the Żmij algorithm, `zmij` crate). Quoting follows RFC 4180: a field is quoted only when it holds a
//! comma, a quote or a line break, and inner quotes are doubled.

/// Appends the result fields of one row to an output buffer. Every push
/// writes the separating comma first, since result fields always follow the
/// echoed input fields.
pub struct RowWriter<'a> {
    buf: &'a mut Vec<u8>,
}

impl<'a> RowWriter<'a> {
    /// Wraps a buffer positioned after the echoed input fields.
    pub fn new(buf: &'a mut Vec<u8>) -> Self {
        RowWriter { buf }
    }

    /// Appends a number in shortest round-trip form. Non-finite values, which
    /// the engines do not produce, are written as `NaN` / `inf` so that they
    /// can never pass unnoticed.
    #[inline]
    pub fn push_f64(&mut self, x: f64) {
        self.buf.push(b',');
        let mut b = zmij::Buffer::new();
        self.buf.extend_from_slice(b.format(x).as_bytes());
    }

    /// Appends an integer.
    #[inline]
    pub fn push_u64(&mut self, x: u64) {
        self.buf.push(b',');
        let mut b = itoa::Buffer::new();
        self.buf.extend_from_slice(b.format(x).as_bytes());
    }

    /// Appends a text field, quoted if needed.
    #[inline]
    pub fn push_str(&mut self, s: &str) {
        self.buf.push(b',');
        write_field(self.buf, s.as_bytes());
    }

    /// Appends `n` empty fields.
    #[inline]
    pub fn push_empty(&mut self, n: usize) {
        for _ in 0..n {
            self.buf.push(b',');
        }
    }
}

/// Writes one field, quoting it when it contains `,`, `"`, `\r` or `\n`.
#[inline]
pub fn write_field(buf: &mut Vec<u8>, field: &[u8]) {
    if field
        .iter()
        .any(|&c| matches!(c, b',' | b'"' | b'\n' | b'\r'))
    {
        buf.push(b'"');
        for &c in field {
            if c == b'"' {
                buf.push(b'"');
            }
            buf.push(c);
        }
        buf.push(b'"');
    } else {
        buf.extend_from_slice(field);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trips_and_quotes() {
        let xs = [0.1, 1.0 / 3.0, 3e-19, 4.391245689202642, 1e300, -0.0];
        let mut buf = b"a".to_vec();
        let mut w = RowWriter::new(&mut buf);
        for x in xs {
            w.push_f64(x);
        }
        w.push_str("x,\"y\"");
        w.push_u64(42);
        buf.push(b'\n');
        let mut r = csv::ReaderBuilder::new()
            .has_headers(false)
            .from_reader(&buf[..]);
        let rec = r.records().next().unwrap().unwrap();
        for (i, x) in xs.iter().enumerate() {
            assert_eq!(rec[i + 1].parse::<f64>().unwrap().to_bits(), x.to_bits());
        }
        assert_eq!(&rec[7], "x,\"y\"");
        assert_eq!(&rec[8], "42");
    }
}
