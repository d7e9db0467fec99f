//! Turning one CSV record into a validated position, or an error that names
//! the line, the column and the problem.
//!
//! Numbers in messages are shown as written in the field, or in short form
//! ([`Short`]); a value that is nearly right (`32%`, `1,000`, `0,32`) is
//! still refused, with the fix in the message. Field text in a message has
//! its control characters escaped and is cut after [`MAX_SHOWN_CHARS`]
//! characters (the echoed field keeps every byte).

use super::records::Record;
use super::schema::Schema;
use crate::engines::monte_carlo;
use crate::engines::pide::Exercise;
use crate::market::dates;
use crate::model::{Contract, JumpParams, OptionKind, Short};
use std::borrow::Cow;
use std::fmt;

/// One position of a book, borrowing its text fields from the record (no
/// allocation per row).
#[derive(Debug, Clone, PartialEq)]
pub struct BookRow<'a> {
    /// 1-based data row number (the header is row 0).
    pub row: u64,
    /// 1-based line of the input where the record starts.
    pub line: u64,
    /// The record the row was read from.
    record: &'a Record,
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
    /// Exercise style (`exercise` column; European when absent or empty).
    pub exercise: Exercise,
    /// True when the book has an `exercise` column (the command then writes
    /// its exercise result columns for every row).
    pub exercise_column: bool,
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
    /// The `id` column, or the row number when the book has none: the name
    /// shown in summaries and reports (not what keys the random stream,
    /// see [`BookRow::stream_key`]).
    pub fn id(&self) -> Cow<'a, str> {
        match self.id_field {
            Some(s) => Cow::Borrowed(s),
            None => Cow::Owned(self.row.to_string()),
        }
    }

    /// The `id` field when the book has one and it is not empty.
    pub fn explicit_id(&self) -> Option<&'a str> {
        self.id_field.filter(|s| !s.is_empty())
    }

    /// The key of this row's Monte Carlo stream under `seed`: derived from
    /// the `id` field, or, when there is none or it is empty, from the
    /// row's contents ([`BookRow::content_hash`]). It never depends on the
    /// row's position, so splitting or reordering a book changes no result.
    pub fn stream_key(&self, seed: u64) -> u64 {
        match self.explicit_id() {
            Some(id) => monte_carlo::stream_key(seed, id),
            // The NUL keeps the name apart from any id a CSV would hold.
            None => monte_carlo::stream_key(seed, &format!("\0row {:016x}", self.content_hash())),
        }
    }

    /// A stable 64-bit hash (FNV-1a) of the record's fields as read, after
    /// CSV unquoting, in column order, each preceded by its length: the same
    /// for the same fields on any machine, whatever the row's position.
    pub fn content_hash(&self) -> u64 {
        let mut h: u64 = 0xcbf2_9ce4_8422_2325;
        let mut eat = |bytes: &[u8]| {
            for &b in bytes {
                h ^= u64::from(b);
                h = h.wrapping_mul(0x0000_0100_0000_01b3);
            }
        };
        for field in self.record.iter() {
            eat(&(field.len() as u64).to_le_bytes());
            eat(field);
        }
        h
    }
}

impl fmt::Display for RowError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "line {}: {}", self.line, self.message)
    }
}

pub(crate) fn text(field: &[u8]) -> Result<&str, String> {
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

/// Longest field text quoted in a message, in characters; a longer value
/// is shown by its start and its length in bytes.
pub const MAX_SHOWN_CHARS: usize = 40;
/// Longest field, in bytes, for which a message suggests how to write it.
const MAX_HINT_BYTES: usize = 100;

/// A field's text for a message: control characters escaped, a long value
/// cut to its first [`MAX_SHOWN_CHARS`] characters and its length.
fn shown(raw: &[u8]) -> String {
    let s = String::from_utf8_lossy(raw);
    if s.chars().nth(MAX_SHOWN_CHARS).is_none() {
        return s.escape_debug().to_string();
    }
    let head: String = s.chars().take(MAX_SHOWN_CHARS).collect();
    format!("{}... ({} bytes)", head.escape_debug(), raw.len())
}

/// `kind` in any other spelling: any case, surrounding spaces.
#[cold]
fn general_kind(field: &[u8]) -> Result<OptionKind, String> {
    let raw = text(field).map_err(|e| format!("kind {e}"))?;
    match raw.parse() {
        Ok(k) => Ok(k),
        Err(()) if raw.is_empty() => Err("kind is missing".into()),
        Err(()) => Err(format!(
            "kind '{}' is not call or put",
            shown(raw.as_bytes())
        )),
    }
}

/// The `exercise` field: `european` (also empty) or `american`, any case.
#[inline(always)]
fn exercise(schema: &Schema, rec: &Record) -> Result<Exercise, String> {
    let Some(i) = schema.exercise else {
        return Ok(Exercise::European);
    };
    let raw = rec.get(i).unwrap_or(b"");
    let t = text(raw).map_err(|e| format!("exercise {e}"))?;
    if t.is_empty() || t.eq_ignore_ascii_case("european") {
        Ok(Exercise::European)
    } else if t.eq_ignore_ascii_case("american") {
        Ok(Exercise::American)
    } else {
        Err(format!(
            "exercise '{}' is not european or american",
            shown(t.as_bytes())
        ))
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
pub(crate) fn general_number(raw: &[u8], name: &str) -> Result<f64, String> {
    let raw = raw.trim_ascii();
    if raw.is_empty() {
        return Err(format!("{name} is missing"));
    }
    match fast_float2::parse::<f64, _>(raw) {
        Ok(v) if v.is_infinite() && !raw.iter().any(|c| c.eq_ignore_ascii_case(&b'i')) => Err(
            format!("{name} = {} is too large for double precision", shown(raw)),
        ),
        Ok(v) => Ok(v),
        Err(_) => Err(
            match number_hint(raw).filter(|_| raw.len() <= MAX_HINT_BYTES) {
                Some(hint) => format!("{name} is not a number: '{}' ({hint})", shown(raw)),
                None => format!("{name} is not a number: '{}'", shown(raw)),
            },
        ),
    }
}

/// The fix for a value that is nearly a number: a percentage (`32%`:
/// write 0.32), thousands separators (`1,000`, `1 000`, `1_000`,
/// `1'000`: write 1000) or a decimal comma (`0,32`: write 0.32).
fn number_hint(raw: &[u8]) -> Option<String> {
    let t = std::str::from_utf8(raw).ok()?;
    let parses = |s: &str| {
        fast_float2::parse::<f64, _>(s)
            .ok()
            .filter(|v| v.is_finite())
    };
    if let Some(n) = t.strip_suffix('%') {
        let n = n.trim_end();
        let v = parses(n)?;
        // Shifting the exponent keeps the division exact in decimal.
        let v = parses(&format!("{n}e-2")).unwrap_or(v / 100.0);
        return Some(format!("write {}", Short(v)));
    }
    let (sign, body) = match t.as_bytes().first() {
        Some(b'-' | b'+') => t.split_at(1),
        _ => ("", t),
    };
    let (int, frac) = match body.split_once('.') {
        Some((i, f)) if !f.is_empty() && f.bytes().all(|c| c.is_ascii_digit()) => (i, Some(f)),
        Some(_) => return None,
        None => (body, None),
    };
    for sep in [',', ' ', '_', '\''] {
        let groups: Vec<&str> = int.split(sep).collect();
        if groups.len() < 2 {
            continue;
        }
        let digits = |g: &str| !g.is_empty() && g.bytes().all(|c| c.is_ascii_digit());
        let grouped = groups[0].len() <= 3
            && groups.iter().all(|g| digits(g))
            && groups[1..].iter().all(|g| g.len() == 3);
        if grouped {
            let joined: String = groups.concat();
            let frac = frac.map(|f| format!(".{f}")).unwrap_or_default();
            return Some(format!("write {sign}{joined}{frac} without separators"));
        }
        // One comma between digits and no point: a decimal comma.
        if sep == ',' && groups.len() == 2 && frac.is_none() && groups.iter().all(|g| digits(g)) {
            return Some(format!(
                "write {sign}{}.{} with a decimal point",
                groups[0], groups[1]
            ));
        }
    }
    None
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
pub(crate) fn plain_decimal(s: &[u8]) -> Option<f64> {
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
        Err(format!("{name} is not a finite number ({})", Short(v)))
    }
}

/// The `expiry` field: a year fraction, or (with a valuation date from the
/// row's `valuation_date` field or the run) an ISO 8601 date turned into
/// an ACT/365 fixed year fraction.
#[inline(always)]
fn expiry(schema: &Schema, rec: &Record) -> Result<f64, String> {
    let raw = rec.get(schema.expiry).unwrap_or(b"");
    plain_decimal(raw).map_or_else(|| general_expiry(schema, rec, raw), Ok)
}

#[cold]
#[inline(never)]
fn general_expiry(schema: &Schema, rec: &Record, raw: &[u8]) -> Result<f64, String> {
    let as_number = general_number(raw, "expiry");
    let field = match text(raw) {
        Ok(t) if as_number.is_err() && dates::looks_like_date(t) => t,
        _ => return as_number,
    };
    let valuation = match schema.valuation_date {
        Some(i) => {
            let v = text(rec.get(i).unwrap_or(b"")).map_err(|e| format!("valuation_date {e}"))?;
            dates::valuation_field(v, schema.inputs.valuation_date)?
        }
        None => schema.inputs.valuation_date,
    };
    dates::dated_expiry("expiry", field, valuation)
}

/// `vol, jump_rate, jump_mean, jump_vol`: from the book's columns, or from
/// the row's underlying's fitted set (`--params`).
#[inline(always)]
fn model_params(schema: &Schema, rec: &Record) -> Result<(f64, f64, f64, f64), String> {
    if let Some(params) = &schema.inputs.params {
        let underlying = match schema.underlying {
            Some(i) => text(rec.get(i).unwrap_or(b"")).map_err(|e| format!("underlying {e}"))?,
            None => "",
        };
        let p = params.get(underlying)?;
        return Ok((p.vol, p.jump_rate, p.jump_mean, p.jump_vol));
    }
    let col = |i: Option<usize>| i.expect("model columns are required without --params");
    Ok((
        number(rec, col(schema.vol), "vol")?,
        number(rec, col(schema.jump_rate), "jump_rate")?,
        number(rec, col(schema.jump_mean), "jump_mean")?,
        number(rec, col(schema.jump_vol), "jump_vol")?,
    ))
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
    if let Some(open) = rec.open_quote() {
        return Err(err(format!(
            "malformed record: the quote opened on line {open} is never closed \
             (the row is read up to the end of that line)"
        )));
    }
    if rec.len() != schema.width {
        let spans = match rec.inner_breaks() {
            0 => String::new(),
            n => format!(
                " (a quoted field runs over lines {line} to {}: check for an unbalanced quote)",
                line + n
            ),
        };
        return Err(err(format!(
            "malformed record: {} fields where the header has {}{spans}",
            rec.len(),
            schema.width
        )));
    }
    let kind = match &rec[schema.kind] {
        b"call" => OptionKind::Call,
        b"put" => OptionKind::Put,
        other => general_kind(other).map_err(err)?,
    };
    let exercise = exercise(schema, rec).map_err(err)?;
    let spot = number(rec, schema.spot, "spot").map_err(err)?;
    let strike = number(rec, schema.strike, "strike").map_err(err)?;
    let expiry = expiry(schema, rec).map_err(err)?;
    let rate = number(rec, schema.rate, "rate").map_err(err)?;
    let (vol, jump_rate, jump_mean, jump_vol) = model_params(schema, rec).map_err(err)?;
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
        record: rec,
        id_field,
        underlying,
        contract,
        quantity,
        multiplier,
        exercise,
        exercise_column: schema.exercise.is_some(),
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
    fn issue8_nearly_numbers_are_refused_with_the_fix() {
        let s = schema();
        let line = |vol: &str| {
            let r = rec(&["call", "100", "1", "1", "0", vol, "0", "0", "0"]);
            parse_row(&s, &r, 1, 2).unwrap_err().message
        };
        assert_eq!(line("32%"), "vol is not a number: '32%' (write 0.32)");
        assert_eq!(
            line("12.5 %"),
            "vol is not a number: '12.5 %' (write 0.125)"
        );
        assert_eq!(line("0.1%"), "vol is not a number: '0.1%' (write 0.001)");
        assert_eq!(
            line("1,000"),
            "vol is not a number: '1,000' (write 1000 without separators)"
        );
        assert_eq!(
            line("-1 234 567.5"),
            "vol is not a number: '-1 234 567.5' (write -1234567.5 without separators)"
        );
        assert_eq!(
            line("0,32"),
            "vol is not a number: '0,32' (write 0.32 with a decimal point)"
        );
        assert_eq!(line("1,00,0"), "vol is not a number: '1,00,0'");
        assert_eq!(line("abc%"), "vol is not a number: 'abc%'");
        assert_eq!(
            line("1e400"),
            "vol = 1e400 is too large for double precision"
        );
        assert_eq!(
            line("1e308"),
            "vol = 1e308 is outside the supported range (0 to 10)"
        );
    }

    #[test]
    fn issue8_an_open_quote_names_its_line() {
        let s = schema();
        let text = format!(
            "{}\ncall,1,1,1,0,\"0.2,0,0,0\nput,1,1,1,0,0.2,0,0,0\n",
            crate::book::schema::REQUIRED.join(",")
        );
        let mut r = super::super::records::RecordReader::new(text.as_bytes());
        let mut record = Record::default();
        r.read_record(&mut record).unwrap();
        let line = r.read_record(&mut record).unwrap().unwrap();
        let e = parse_row(&s, &record, 1, line).unwrap_err();
        assert_eq!(
            e.to_string(),
            "line 2: malformed record: the quote opened on line 2 is never closed \
             (the row is read up to the end of that line)"
        );
        let line = r.read_record(&mut record).unwrap().unwrap();
        assert_eq!(line, 3);
        assert!(parse_row(&s, &record, 2, line).is_ok());
        // A quote closed lines later: the count is wrong and the span named.
        let text = format!(
            "{}\ncall,1,\"1,1\n0,0.2\",0,0,0\n",
            crate::book::schema::REQUIRED.join(",")
        );
        let mut r = super::super::records::RecordReader::new(text.as_bytes());
        r.read_record(&mut record).unwrap();
        let line = r.read_record(&mut record).unwrap().unwrap();
        assert_eq!(
            parse_row(&s, &record, 1, line).unwrap_err().to_string(),
            "line 2: malformed record: 6 fields where the header has 9 \
             (a quoted field runs over lines 2 to 3: check for an unbalanced quote)"
        );
    }

    #[test]
    fn issue8_the_stream_key_follows_the_contents_not_the_position() {
        let s = schema();
        let a = rec(&["call", "100", "90", "1", "0", "0.2", "0", "0", "0"]);
        let b = rec(&["call", "100", "90", "1", "0", "0.2", "0", "0", "0.1"]);
        let key = |r: &Record, row| parse_row(&s, r, row, row + 1).unwrap().stream_key(7);
        assert_eq!(key(&a, 1), key(&a, 5000));
        assert_ne!(key(&a, 1), key(&b, 1));
        assert_ne!(
            parse_row(&s, &a, 1, 2).unwrap().stream_key(8),
            key(&a, 1),
            "the seed matters"
        );
        // With an id column the id keys the stream; an empty id falls back
        // to the contents.
        let mut cols: Vec<&str> = crate::book::schema::REQUIRED.to_vec();
        cols.push("id");
        let s = Schema::from_headers(&csv::ByteRecord::from(cols)).unwrap();
        let with_id = |id| rec(&["call", "100", "90", "1", "0", "0.2", "0", "0", "0", id]);
        let (x, y) = (with_id("X"), with_id("X"));
        let kx = parse_row(&s, &x, 1, 2).unwrap().stream_key(7);
        assert_eq!(kx, crate::engines::monte_carlo::stream_key(7, "X"));
        assert_eq!(kx, parse_row(&s, &y, 9, 10).unwrap().stream_key(7));
        let (e1, e2) = (with_id(""), with_id(" "));
        let k1 = parse_row(&s, &e1, 1, 2).unwrap().stream_key(7);
        let k2 = parse_row(&s, &e1, 3, 4).unwrap().stream_key(7);
        assert_eq!(k1, k2);
        assert_ne!(k1, crate::engines::monte_carlo::stream_key(7, ""));
        assert_ne!(k1, parse_row(&s, &e2, 1, 2).unwrap().stream_key(7));
    }

    #[test]
    fn issue12_exercise_is_european_or_american_in_any_case() {
        let mut cols: Vec<&str> = crate::book::schema::REQUIRED.to_vec();
        cols.push("exercise");
        let s = Schema::from_headers(&csv::ByteRecord::from(cols)).unwrap();
        let ex = |e: &str| {
            let r = rec(&["put", "100", "90", "1", "0", "0.2", "0", "0", "0", e]);
            parse_row(&s, &r, 6, 7).map(|r| (r.exercise, r.exercise_column))
        };
        assert_eq!(ex("American"), Ok((Exercise::American, true)));
        assert_eq!(ex(" AMERICAN "), Ok((Exercise::American, true)));
        assert_eq!(ex("european"), Ok((Exercise::European, true)));
        assert_eq!(ex(""), Ok((Exercise::European, true)));
        assert_eq!(
            ex("bermudan").unwrap_err().to_string(),
            "line 7: exercise 'bermudan' is not european or american"
        );
        let r = rec(&["put", "100", "90", "1", "0", "0.2", "0", "0", "0"]);
        let row = parse_row(&schema(), &r, 1, 2).unwrap();
        assert_eq!(
            (row.exercise, row.exercise_column),
            (Exercise::European, false)
        );
    }

    #[test]
    fn id_defaults_to_row_number() {
        let record = rec(&["Call", "100", "90", "1", "0", "0.2", "0", "0", "0"]);
        let r = parse_row(&schema(), &record, 7, 8).unwrap();
        assert_eq!((r.id().as_ref(), r.quantity), ("7", 1.0));
    }
}
