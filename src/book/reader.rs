//! Turning one CSV record into a validated position, or an error that names
//! the line, the column and the problem.

use super::records::Record;
use super::schema::Schema;
use crate::model::{Contract, JumpParams, OptionKind};
use std::borrow::Cow;
use std::fmt;

/// One position of a book, borrowing its text fields from the record (no
/// allocation per row).
#[derive(Debug, Clone, PartialEq)]
pub struct BookRow<'a> {
    /// 1-based data row number (the header is row 0).
    pub row: u64,
    /// Line of the record in the input (its first line, for a record with
    /// quoted line breaks).
    pub line: u64,
    /// The `id` column, if the book has one.
    id_field: Option<&'a str>,
    /// The `underlying` column (empty when absent), spaces trimmed.
    pub underlying: &'a str,
    /// The validated contract.
    pub contract: Contract,
    /// Signed position size (default 1).
    pub quantity: f64,
    /// Contract multiplier (default 1).
    pub multiplier: f64,
}

/// Why a row could not be read. Displays as `line N: problem`.
#[derive(Debug, Clone, PartialEq)]
pub struct RowError {
    /// 1-based line number of the record in the input file.
    pub line: u64,
    /// What is wrong, naming the column.
    pub message: String,
}

impl<'a> BookRow<'a> {
    /// The `id` column, or the row number when the book has none.
    pub fn id(&self) -> Cow<'a, str> {
        match self.id_field {
            Some(s) => Cow::Borrowed(s),
            None => Cow::Owned(self.row.to_string()),
        }
    }
}

impl fmt::Display for RowError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "line {}: {}", self.line, self.message)
    }
}

fn text(field: &[u8]) -> Result<&str, String> {
    let s = std::str::from_utf8(field).map_err(|_| "is not valid UTF-8".to_string())?;
    // Trimming (Unicode white space) is only needed when an end byte is not
    // a visible ASCII character; usually neither is.
    let visible = |b: Option<&u8>| b.is_some_and(u8::is_ascii_graphic);
    if visible(field.first()) && visible(field.last()) {
        Ok(s)
    } else {
        Ok(s.trim())
    }
}

/// `kind` in any other spelling: any case, surrounding spaces.
#[cold]
fn general_kind(field: &[u8]) -> Result<OptionKind, String> {
    let raw = text(field).map_err(|e| format!("kind {e}"))?;
    match raw.parse() {
        Ok(k) => Ok(k),
        Err(()) if raw.is_empty() => Err("kind is missing".into()),
        Err(()) => Err(format!("kind '{}' is not call or put", raw.escape_debug())),
    }
}

#[inline(always)]
fn number(rec: &Record, idx: usize, name: &str) -> Result<f64, String> {
    let raw = rec.get(idx).unwrap_or(b"");
    plain_decimal(raw).map_or_else(|| general_number(raw, name), Ok)
}

/// Everything but the plain form: surrounding spaces, exponents, long
/// mantissas, `inf`, `nan`, junk. fast-float2 is correctly rounded, like
/// `str::parse`.
#[cold]
#[inline(never)]
fn general_number(raw: &[u8], name: &str) -> Result<f64, String> {
    let raw = raw.trim_ascii();
    if raw.is_empty() {
        return Err(format!("{name} is missing"));
    }
    fast_float2::parse::<f64, _>(raw).map_err(|_| {
        // Control characters are shown escaped, never written raw.
        let shown = String::from_utf8_lossy(raw);
        format!("{name} is not a number: '{}'", shown.escape_debug())
    })
}

/// Exact powers of ten representable in a double.
const POW10: [f64; 23] = [
    1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15, 1e16,
    1e17, 1e18, 1e19, 1e20, 1e21, 1e22,
];

/// The common form of book numbers, `[-]digits[.digits]`, when its value is
/// `m / 10^f` with `m < 2^53` and `f <= 22`: both are exact doubles, so the
/// one division is correctly rounded (Clinger's fast path) and the result is
/// the same double `str::parse` gives. `None` for any other text.
#[inline(always)]
fn plain_decimal(s: &[u8]) -> Option<f64> {
    let (negative, digits) = match s.split_first() {
        Some((b'-', rest)) => (true, rest),
        _ => (false, s),
    };
    // At most 19 characters: m cannot overflow a u64.
    if digits.is_empty() || digits.len() > 19 {
        return None;
    }
    let mut m: u64 = 0;
    let mut point = usize::MAX;
    for (i, &c) in digits.iter().enumerate() {
        let d = c.wrapping_sub(b'0');
        if d < 10 {
            m = m * 10 + u64::from(d);
        } else if c == b'.' && point == usize::MAX {
            point = i;
        } else {
            return None;
        }
    }
    // A point needs digits on both sides ("1." and ".5" go to the general
    // parser).
    let frac_digits = if point == usize::MAX {
        0
    } else if point == 0 || point + 1 == digits.len() {
        return None;
    } else {
        digits.len() - point - 1
    };
    if m > 1 << 53 {
        return None;
    }
    let v = m as f64 / POW10[frac_digits];
    Some(if negative { -v } else { v })
}

#[inline(always)]
fn optional_number(
    rec: &Record,
    idx: Option<usize>,
    name: &str,
    default: f64,
) -> Result<f64, String> {
    let Some(i) = idx else {
        return Ok(default);
    };
    let raw = rec.get(i).unwrap_or(b"");
    // A plain decimal is finite; an empty field takes the default.
    if let Some(v) = plain_decimal(raw) {
        return Ok(v);
    }
    if raw.trim_ascii().is_empty() {
        return Ok(default);
    }
    let v = general_number(raw, name)?;
    if v.is_finite() {
        Ok(v)
    } else {
        Err(format!("{name} is not a finite number ({v})"))
    }
}

/// Parses and validates one data record.
///
/// # Errors
/// [`RowError`] with the record's line and the first problem found: a wrong
/// number of fields, a missing or non-numeric value, an unknown kind, or a
/// value the model refuses (negative vol, NaN, ...).
pub fn parse_row<'a>(
    schema: &Schema,
    rec: &'a Record,
    row: u64,
    line: u64,
) -> Result<BookRow<'a>, RowError> {
    let err = |message: String| RowError { line, message };
    if rec.len() != schema.width {
        return Err(err(format!(
            "malformed record: {} fields where the header has {}",
            rec.len(),
            schema.width
        )));
    }
    let kind = match &rec[schema.kind] {
        b"call" => OptionKind::Call,
        b"put" => OptionKind::Put,
        other => general_kind(other).map_err(err)?,
    };
    let spot = number(rec, schema.spot, "spot").map_err(err)?;
    let strike = number(rec, schema.strike, "strike").map_err(err)?;
    let expiry = number(rec, schema.expiry, "expiry").map_err(err)?;
    let rate = number(rec, schema.rate, "rate").map_err(err)?;
    let vol = number(rec, schema.vol, "vol").map_err(err)?;
    let jump_rate = number(rec, schema.jump_rate, "jump_rate").map_err(err)?;
    let jump_mean = number(rec, schema.jump_mean, "jump_mean").map_err(err)?;
    let jump_vol = number(rec, schema.jump_vol, "jump_vol").map_err(err)?;
    let div_yield = optional_number(rec, schema.div_yield, "div_yield", 0.0).map_err(err)?;
    let quantity = optional_number(rec, schema.quantity, "quantity", 1.0).map_err(err)?;
    let multiplier = optional_number(rec, schema.multiplier, "multiplier", 1.0).map_err(err)?;
    let contract = Contract::new(
        kind,
        spot,
        strike,
        expiry,
        rate,
        div_yield,
        vol,
        JumpParams {
            rate: jump_rate,
            mean: jump_mean,
            vol: jump_vol,
        },
    )
    .map_err(|e| err(e.to_string()))?;
    let id_field = match schema.id {
        Some(i) => Some(text(&rec[i]).map_err(|e| err(format!("id {e}")))?),
        None => None,
    };
    let underlying = match schema.underlying {
        Some(i) => text(&rec[i]).map_err(|e| err(format!("underlying {e}")))?,
        None => "",
    };
    Ok(BookRow {
        row,
        line,
        id_field,
        underlying,
        contract,
        quantity,
        multiplier,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn control_characters_in_errors_are_escaped() {
        let s = schema();
        let e = parse_row(
            &s,
            &rec(&["call", "1\0", "1", "1", "0", "0.2", "0", "0", "0"]),
            1,
            2,
        )
        .unwrap_err();
        assert_eq!(e.to_string(), "line 2: spot is not a number: '1\\0'");
        let e = parse_row(
            &s,
            &rec(&["ca\tll", "1", "1", "1", "0", "0.2", "0", "0", "0"]),
            1,
            3,
        )
        .unwrap_err();
        assert_eq!(e.to_string(), "line 3: kind 'ca\\tll' is not call or put");
    }

    #[test]
    fn plain_decimals_parse_like_std() {
        // Reference: Rust's `str::parse::<f64>` (correctly rounded).
        let mut rng = crate::test_rng::TestRng::new(0x9e37_79b9_7f4a_7c15);
        let mut next = |k: u64| rng.below(k);
        let mut fast = 0;
        for _ in 0..200_000 {
            let int_len = 1 + next(9) as usize;
            let frac_len = next(10) as usize;
            let mut t = String::new();
            if next(3) == 0 {
                t.push('-');
            }
            for _ in 0..int_len {
                t.push(char::from(b'0' + next(10) as u8));
            }
            if frac_len > 0 {
                t.push('.');
                for _ in 0..frac_len {
                    t.push(char::from(b'0' + next(10) as u8));
                }
            }
            let want: f64 = t.parse().unwrap();
            if let Some(got) = plain_decimal(t.as_bytes()) {
                assert_eq!(got.to_bits(), want.to_bits(), "{t}");
                fast += 1;
            }
        }
        assert!(fast > 150_000, "fast path taken {fast} times");
        for t in [
            "0",
            "-0",
            "0.0",
            "1.5",
            "-0.064",
            "999999999999999",
            "0.000000000000001",
        ] {
            let want: f64 = t.parse().unwrap();
            assert_eq!(
                plain_decimal(t.as_bytes()).map(f64::to_bits),
                Some(want.to_bits()),
                "{t}"
            );
        }
        for t in [
            "",
            "-",
            ".",
            "1.",
            ".5",
            "1e5",
            "1.2.3",
            "+1",
            "--1",
            "1-",
            "nan",
            "inf",
            "1 2",
            "0x1",
            "9007199254740993",
            "12345678901234567890",
        ] {
            assert_eq!(plain_decimal(t.as_bytes()), None, "{t}");
        }
    }

    fn schema() -> Schema {
        Schema::from_headers(&csv::ByteRecord::from(
            crate::book::schema::REQUIRED.to_vec(),
        ))
        .unwrap()
    }

    fn rec(f: &[&str]) -> Record {
        Record::from_fields(f)
    }

    #[test]
    fn errors_name_line_and_column() {
        let s = schema();
        let e = parse_row(
            &s,
            &rec(&["call", "100", "abc", "1", "0", "0.2", "0", "0", "0"]),
            3,
            4,
        )
        .unwrap_err();
        assert_eq!(e.to_string(), "line 4: strike is not a number: 'abc'");
        let e = parse_row(
            &s,
            &rec(&["straddle", "100", "1", "1", "0", "0.2", "0", "0", "0"]),
            1,
            2,
        )
        .unwrap_err();
        assert_eq!(e.to_string(), "line 2: kind 'straddle' is not call or put");
        let e = parse_row(
            &s,
            &rec(&["put", "100", "90", "1", "0", "", "0", "0", "0"]),
            1,
            2,
        )
        .unwrap_err();
        assert_eq!(e.to_string(), "line 2: vol is missing");
        let e = parse_row(
            &s,
            &rec(&["put", "100", "90", "1", "0", "NaN", "0", "0", "0"]),
            1,
            2,
        )
        .unwrap_err();
        assert_eq!(e.to_string(), "line 2: vol is not a finite number (NaN)");
        let e = parse_row(&s, &rec(&["put", "100"]), 1, 9).unwrap_err();
        assert!(e
            .to_string()
            .starts_with("line 9: malformed record: 2 fields"));
    }

    #[test]
    fn id_defaults_to_row_number() {
        let record = rec(&["Call", "100", "90", "1", "0", "0.2", "0", "0", "0"]);
        let r = parse_row(&schema(), &record, 7, 8).unwrap();
        assert_eq!((r.id().as_ref(), r.quantity), ("7", 1.0));
    }
}
