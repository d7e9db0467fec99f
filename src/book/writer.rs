//! Output formatting: numbers in shortest round-trip form.

use csv::ByteRecord;

/// Appends `x` as a field in the shortest form that parses back to the same
/// `f64` (Ryu). Non-finite values, which the engines do not produce, are
/// written as `NaN` / `inf` so that they can never pass unnoticed.
#[inline]
pub fn push_f64(rec: &mut ByteRecord, x: f64) {
    let mut buf = ryu::Buffer::new();
    rec.push_field(buf.format(x).as_bytes());
}

/// Appends an integer field.
#[inline]
pub fn push_u64(rec: &mut ByteRecord, x: u64) {
    rec.push_field(x.to_string().as_bytes());
}

/// Appends `n` empty fields (the result fields of a row that failed).
#[inline]
pub fn push_empty(rec: &mut ByteRecord, n: usize) {
    for _ in 0..n {
        rec.push_field(b"");
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trips() {
        let mut r = ByteRecord::new();
        for x in [0.1, 1.0 / 3.0, 3e-19, 4.391245689202642, 1e300] {
            push_f64(&mut r, x);
        }
        for (f, x) in r.iter().zip([0.1, 1.0 / 3.0, 3e-19, 4.391245689202642, 1e300]) {
            assert_eq!(std::str::from_utf8(f).unwrap().parse::<f64>().unwrap(), x);
        }
    }
}
