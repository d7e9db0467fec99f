//! Columns found by header name in the small side files read whole
//! (PARAMS.csv, the risk command's scenario file): names trimmed and
//! compared without case, as in books, and a name given twice refused.

/// The header's names, trimmed and lowercased (invalid UTF-8 replaced).
pub fn names(headers: &csv::ByteRecord) -> Vec<String> {
    headers
        .iter()
        .map(|h| String::from_utf8_lossy(h).trim().to_ascii_lowercase())
        .collect()
}

/// The position of column `col` (lowercase) in `names`, `None` when absent.
///
/// # Errors
/// A message naming `source` when the column appears more than once.
pub fn find(names: &[String], col: &str, source: &str) -> Result<Option<usize>, String> {
    let mut hits = names.iter().enumerate().filter(|(_, n)| *n == col);
    let first = hits.next().map(|(i, _)| i);
    if hits.next().is_some() {
        return Err(format!(
            "{source}: column '{col}' appears more than once in the header"
        ));
    }
    Ok(first)
}
