//! The book's columns: found by header name, in any order, case-insensitive,
//! surrounding spaces trimmed.

use csv::ByteRecord;

/// Columns a book must have.
pub const REQUIRED: [&str; 9] = [
    "kind",
    "spot",
    "strike",
    "expiry",
    "rate",
    "vol",
    "jump_rate",
    "jump_mean",
    "jump_vol",
];
/// Columns a book may have, with their defaults: `id` (row number),
/// `underlying` (empty), `div_yield` (0), `quantity` (1), `multiplier` (1).
pub const OPTIONAL: [&str; 5] = ["id", "underlying", "div_yield", "quantity", "multiplier"];
/// Every known column: [`REQUIRED`] then [`OPTIONAL`], in that order (for
/// tests and tools that build books).
pub const COLUMNS: [&str; REQUIRED.len() + OPTIONAL.len()] = {
    let mut all = [""; REQUIRED.len() + OPTIONAL.len()];
    let mut i = 0;
    while i < all.len() {
        all[i] = if i < REQUIRED.len() {
            REQUIRED[i]
        } else {
            OPTIONAL[i - REQUIRED.len()]
        };
        i += 1;
    }
    all
};

/// A problem with the header row; reported before any output is written.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum SchemaError {
    /// A required column is absent.
    #[error("missing required column{}: {}", if .0.len() > 1 { "s" } else { "" }, .0.join(", "))]
    MissingColumns(Vec<String>),
    /// A known column name appears more than once.
    #[error("column '{0}' appears more than once in the header")]
    DuplicateColumn(String),
    /// The input has no header row at all.
    #[error("the input is empty: no header row")]
    Empty,
}

/// Positions of the known columns in the input record.
#[derive(Debug, Clone, PartialEq)]
pub struct Schema {
    /// Number of fields in the header.
    pub width: usize,
    pub(crate) kind: usize,
    pub(crate) spot: usize,
    pub(crate) strike: usize,
    pub(crate) expiry: usize,
    pub(crate) rate: usize,
    pub(crate) vol: usize,
    pub(crate) jump_rate: usize,
    pub(crate) jump_mean: usize,
    pub(crate) jump_vol: usize,
    pub(crate) id: Option<usize>,
    pub(crate) underlying: Option<usize>,
    pub(crate) div_yield: Option<usize>,
    pub(crate) quantity: Option<usize>,
    pub(crate) multiplier: Option<usize>,
}

fn normalise(field: &[u8]) -> String {
    String::from_utf8_lossy(field).trim().to_ascii_lowercase()
}

impl Schema {
    /// Resolves the header row.
    ///
    /// # Errors
    /// [`SchemaError`] if a required column is missing or a known one repeats.
    pub fn from_headers(headers: &ByteRecord) -> Result<Schema, SchemaError> {
        if headers.is_empty() || (headers.len() == 1 && headers[0].is_empty()) {
            return Err(SchemaError::Empty);
        }
        let names: Vec<String> = headers.iter().map(normalise).collect();
        let find = |name: &str| -> Result<Option<usize>, SchemaError> {
            let mut hits = names.iter().enumerate().filter(|(_, n)| n.as_str() == name);
            let first = hits.next().map(|(i, _)| i);
            if hits.next().is_some() {
                return Err(SchemaError::DuplicateColumn(name.to_string()));
            }
            Ok(first)
        };
        let mut req = [0usize; 9];
        let mut missing = Vec::new();
        for (slot, name) in req.iter_mut().zip(REQUIRED) {
            match find(name)? {
                Some(i) => *slot = i,
                None => missing.push(name.to_string()),
            }
        }
        if !missing.is_empty() {
            return Err(SchemaError::MissingColumns(missing));
        }
        Ok(Schema {
            width: headers.len(),
            kind: req[0],
            spot: req[1],
            strike: req[2],
            expiry: req[3],
            rate: req[4],
            vol: req[5],
            jump_rate: req[6],
            jump_mean: req[7],
            jump_vol: req[8],
            id: find("id")?,
            underlying: find("underlying")?,
            div_yield: find("div_yield")?,
            quantity: find("quantity")?,
            multiplier: find("multiplier")?,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finds_columns_in_any_order_and_case() {
        let h = ByteRecord::from(vec![
            " Jump_Vol",
            "KIND",
            "spot ",
            "strike",
            "expiry",
            "rate",
            "vol",
            "jump_rate",
            "jump_mean",
            "Quantity",
        ]);
        let s = Schema::from_headers(&h).unwrap();
        assert_eq!(
            (s.jump_vol, s.kind, s.quantity, s.id),
            (0, 1, Some(9), None)
        );
    }

    #[test]
    fn reports_every_missing_column() {
        let h = ByteRecord::from(vec!["kind", "spot", "strike", "expiry", "rate", "vol"]);
        let e = Schema::from_headers(&h).unwrap_err();
        assert_eq!(
            e.to_string(),
            "missing required columns: jump_rate, jump_mean, jump_vol"
        );
    }
}
