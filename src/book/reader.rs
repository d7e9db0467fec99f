//! Turning one CSV record into a validated position, or an error that names
//! the line, the column and the problem.

use super::schema::Schema;
use crate::model::{Contract, JumpParams, OptionKind};
use csv::ByteRecord;
use std::borrow::Cow;
use std::fmt;

/// One position of a book, borrowing its text fields from the record (no
/// allocation per row).
#[derive(Debug, Clone, PartialEq)]
pub struct BookRow<'a> {
    /// 1-based data row number (the header is row 0).
    pub row: u64,
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
    std::str::from_utf8(field)
        .map(str::trim)
        .map_err(|_| "is not valid UTF-8".to_string())
}

fn number(rec: &ByteRecord, idx: usize, name: &str) -> Result<f64, String> {
    let raw = rec.get(idx).unwrap_or(b"").trim_ascii();
    if raw.is_empty() {
        return Err(format!("{name} is missing"));
    }
    // Parsed from bytes (fast-float2: correctly rounded, like `str::parse`).
    fast_float2::parse::<f64, _>(raw)
        .map_err(|_| format!("{name} is not a number: '{}'", String::from_utf8_lossy(raw)))
}

fn optional_number(
    rec: &ByteRecord,
    idx: Option<usize>,
    name: &str,
    default: f64,
) -> Result<f64, String> {
    match idx {
        Some(i) if !rec.get(i).unwrap_or(b"").trim_ascii().is_empty() => {
            let v = number(rec, i, name)?;
            if v.is_finite() {
                Ok(v)
            } else {
                Err(format!("{name} is not a finite number ({v})"))
            }
        }
        _ => Ok(default),
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
    rec: &'a ByteRecord,
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
    let kind_raw = text(&rec[schema.kind]).map_err(|e| err(format!("kind {e}")))?;
    let kind: OptionKind = match kind_raw.parse() {
        Ok(k) => k,
        Err(()) if kind_raw.is_empty() => return Err(err("kind is missing".into())),
        Err(()) => return Err(err(format!("kind '{kind_raw}' is not call or put"))),
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

    fn schema() -> Schema {
        Schema::from_headers(&ByteRecord::from(vec![
            "kind",
            "spot",
            "strike",
            "expiry",
            "rate",
            "vol",
            "jump_rate",
            "jump_mean",
            "jump_vol",
        ]))
        .unwrap()
    }

    fn rec(f: &[&str]) -> ByteRecord {
        ByteRecord::from(f.to_vec())
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
