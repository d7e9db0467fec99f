//! Output formatting: CSV fields written straight into a chunk's byte
//! buffer, numbers in the shortest form that parses back to the same `f64`
//! (the Żmij algorithm, `zmij` crate). Quoting follows RFC 4180: a field is quoted only when it holds a
//! comma, a quote or a line break, and inner quotes are doubled.

/// Appends the result fields of one row to an output buffer. Every push
/// writes the separating comma first, since result fields always follow the
/// echoed input fields.
///
/// The writer counts the fields it appends and remembers the first
/// non-finite number pushed and its field, so that the pipeline can refuse
/// the row ([`RowWriter::non_finite`]): no `ok` row ever holds NaN or inf.
pub struct RowWriter<'a> {
    buf: &'a mut Vec<u8>,
    /// Fields appended so far.
    fields: usize,
    /// The first non-finite number: its field index and value.
    non_finite: Option<(usize, f64)>,
    /// Why a result field was left empty in a row that is otherwise fine.
    warning: Option<String>,
}

impl<'a> RowWriter<'a> {
    /// Wraps a buffer positioned after the echoed input fields.
    pub fn new(buf: &'a mut Vec<u8>) -> Self {
        RowWriter {
            buf,
            fields: 0,
            non_finite: None,
            warning: None,
        }
    }

    /// Appends a number in shortest round-trip form. A non-finite value is
    /// written as `NaN` / `inf` and remembered (see [`RowWriter::non_finite`]).
    #[inline]
    pub fn push_f64(&mut self, x: f64) {
        if !x.is_finite() && self.non_finite.is_none() {
            self.non_finite = Some((self.fields, x));
        }
        self.fields += 1;
        self.buf.push(b',');
        let mut b = zmij::Buffer::new();
        self.buf.extend_from_slice(b.format(x).as_bytes());
    }

    /// Appends an integer.
    #[inline]
    pub fn push_u64(&mut self, x: u64) {
        self.fields += 1;
        self.buf.push(b',');
        let mut b = itoa::Buffer::new();
        self.buf.extend_from_slice(b.format(x).as_bytes());
    }

    /// Appends a text field, quoted if needed.
    #[inline]
    pub fn push_str(&mut self, s: &str) {
        self.fields += 1;
        self.buf.push(b',');
        write_field(self.buf, s.as_bytes());
    }

    /// Appends `n` empty fields.
    #[inline]
    pub fn push_empty(&mut self, n: usize) {
        self.fields += n;
        for _ in 0..n {
            self.buf.push(b',');
        }
    }

    /// Marks the row as complete but with a field deliberately left empty
    /// (for example an implied volatility that does not exist): the pipeline
    /// keeps the fields and writes the status `warning: line N: message`
    /// instead of `ok` (the row counts as not ok). The first warning wins.
    pub fn set_warning(&mut self, message: String) {
        self.warning.get_or_insert(message);
    }

    /// The warning set with [`RowWriter::set_warning`], if any.
    pub fn take_warning(&mut self) -> Option<String> {
        self.warning.take()
    }

    /// The first non-finite number pushed with [`RowWriter::push_f64`], as
    /// (index among the fields this writer appended, value). A processor
    /// with side effects beyond its fields (totals, summaries) can check it
    /// before recording the row, since the pipeline will fail such a row.
    #[inline]
    pub fn non_finite(&self) -> Option<(usize, f64)> {
        self.non_finite
    }
}

/// The message for a row whose result field `column` came out as `value`
/// (NaN or infinite), e.g. `delta is not finite (inf): outside the range
/// double precision can represent`.
pub fn non_finite_message(column: &str, value: f64) -> String {
    if value.is_nan() {
        format!("{column} is not finite (NaN): the computation has no defined value in double precision")
    } else {
        format!(
            "{column} is not finite ({value}): outside the range double precision can represent"
        )
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

    #[test]
    fn issue8_the_first_non_finite_number_and_its_field_are_remembered() {
        let mut buf = Vec::new();
        let mut w = RowWriter::new(&mut buf);
        w.push_f64(1.0);
        w.push_empty(2);
        w.push_str("a");
        w.push_u64(3);
        assert_eq!(w.non_finite(), None);
        w.push_f64(f64::NEG_INFINITY);
        w.push_f64(f64::NAN);
        assert_eq!(w.non_finite(), Some((5, f64::NEG_INFINITY)));
        assert_eq!(
            non_finite_message("delta", f64::INFINITY),
            "delta is not finite (inf): outside the range double precision can represent"
        );
    }
}
