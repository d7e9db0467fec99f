//! Monte Carlo stream keys for book rows, with a check for repeated ids.
//!
//! A row's random stream is keyed on `(seed, id)`, or on the row's contents
//! when the book has no `id` (see [`BookRow::stream_key`]), never on its
//! position, so results do not change when a book is split or reordered.
//! Two rows with the same id share a stream and their estimates are then
//! not independent; [`StreamKeys`] hands out the keys and notes such
//! repeats for one warning at the end of the run.
//!
//! Design: rows arrive from several threads in any order, and the warning
//! must not depend on that. The check keeps, per distinct id, a 64-bit
//! hash and the smallest line seen (about 32 bytes per row with the hash
//! table's overhead), and a handful of examples. Each repeat records the
//! larger of its line and the smallest line so far, so the recorded lines
//! are always every occurrence but the first, whatever the arrival order,
//! and the examples (the repeats on the lowest lines) are deterministic.

use super::reader::BookRow;
use crate::engines::monte_carlo;
use std::collections::{BTreeMap, HashMap};
use std::sync::Mutex;

/// How many repeated ids the warning names.
pub const DUPLICATE_EXAMPLES: usize = 5;

/// Stream keys under one seed, and the repeated ids seen so far.
#[derive(Debug)]
pub struct StreamKeys {
    seed: u64,
    seen: Mutex<Repeats>,
}

#[derive(Debug, Default)]
struct Repeats {
    /// Hash of each id seen, with the smallest line it was seen on.
    first_line: HashMap<u64, u64>,
    /// Rows whose id an earlier row already has.
    count: u64,
    /// The repeats on the lowest lines: line, id hash and id.
    examples: BTreeMap<u64, (u64, String)>,
}

impl StreamKeys {
    /// Keys under `seed`.
    pub fn new(seed: u64) -> Self {
        StreamKeys {
            seed,
            seen: Mutex::new(Repeats::default()),
        }
    }

    /// The row's stream key ([`BookRow::stream_key`]); a row with an `id`
    /// is also checked against the ids seen before.
    pub fn key(&self, row: &BookRow) -> u64 {
        if let Some(id) = row.explicit_id() {
            self.note(id, row.line);
        }
        row.stream_key(self.seed)
    }

    fn note(&self, id: &str, line: u64) {
        let h = monte_carlo::stream_key(0, id);
        let Ok(mut r) = self.seen.lock() else {
            return;
        };
        let repeat_line = match r.first_line.get_mut(&h) {
            None => {
                r.first_line.insert(h, line);
                return;
            }
            Some(first) => {
                let later = line.max(*first);
                *first = line.min(*first);
                later
            }
        };
        r.count += 1;
        let keep = r.examples.len() < DUPLICATE_EXAMPLES
            || r.examples
                .last_key_value()
                .is_some_and(|(&l, _)| repeat_line < l);
        if keep {
            r.examples.insert(repeat_line, (h, id.to_string()));
            if r.examples.len() > DUPLICATE_EXAMPLES {
                r.examples.pop_last();
            }
        }
    }

    /// Rows so far whose id an earlier row already has.
    pub fn repeated(&self) -> u64 {
        self.seen.lock().map_or(0, |r| r.count)
    }

    /// The warning to print when some rows repeat an id, naming the first
    /// few with their lines, e.g. `2 rows repeat the id of an earlier row
    /// and share its random stream: 'A' on line 5 (first on line 2), ...`.
    pub fn duplicate_warning(&self) -> Option<String> {
        let r = self.seen.lock().ok()?;
        if r.count == 0 {
            return None;
        }
        let shown: Vec<String> = r
            .examples
            .iter()
            .map(|(line, (h, id))| {
                let first = r.first_line.get(h).copied().unwrap_or(*line);
                format!(
                    "'{}' on line {line} (first on line {first})",
                    id.escape_debug()
                )
            })
            .collect();
        let more = if r.count as usize > shown.len() {
            ", ..."
        } else {
            ""
        };
        let head = if r.count == 1 {
            "1 row repeats the id of an earlier row and shares".to_string()
        } else {
            format!("{} rows repeat the id of an earlier row and share", r.count)
        };
        Some(format!(
            "{head} its random stream (the estimates are not independent): {}{more}",
            shown.join(", ")
        ))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::book::records::Record;
    use crate::book::{parse_row, Schema};

    fn schema() -> Schema {
        let mut cols: Vec<&str> = crate::book::schema::REQUIRED.to_vec();
        cols.push("id");
        Schema::from_headers(&csv::ByteRecord::from(cols)).unwrap()
    }

    fn record(id: &str) -> Record {
        Record::from_fields(&["call", "100", "90", "1", "0", "0.2", "0", "0", "0", id])
    }

    /// Notes rows (id, line) in the given order and returns the warning.
    fn warn(rows: &[(&str, u64)]) -> Option<String> {
        let s = schema();
        let keys = StreamKeys::new(1);
        for &(id, line) in rows {
            let rec = record(id);
            let row = parse_row(&s, &rec, line - 1, line).unwrap();
            assert_eq!(keys.key(&row), row.stream_key(1));
        }
        keys.duplicate_warning()
    }

    #[test]
    fn issue8_repeated_ids_are_reported_whatever_the_order() {
        assert_eq!(warn(&[("A", 2), ("B", 3), ("", 4), ("", 5)]), None);
        let rows = [("A", 2), ("B", 3), ("A", 4), ("C", 5), ("A", 6), ("B", 9)];
        let want = "3 rows repeat the id of an earlier row and share its random stream \
                    (the estimates are not independent): 'A' on line 4 (first on line 2), \
                    'A' on line 6 (first on line 2), 'B' on line 9 (first on line 3)";
        assert_eq!(warn(&rows).as_deref(), Some(want));
        let mut reversed = rows;
        reversed.reverse();
        assert_eq!(warn(&reversed).as_deref(), Some(want));
        let one = warn(&[("A", 7), ("A", 3)]).unwrap();
        assert!(
            one.starts_with("1 row repeats the id of an earlier row and shares its")
                && one.ends_with("'A' on line 7 (first on line 3)"),
            "{one}"
        );
    }

    #[test]
    fn issue8_only_the_first_few_repeats_are_named() {
        let rows: Vec<(String, u64)> = (0..40).map(|i| (format!("X{}", i % 10), 40 - i)).collect();
        let rows: Vec<(&str, u64)> = rows.iter().map(|(s, l)| (s.as_str(), *l)).collect();
        let w = warn(&rows).unwrap();
        assert!(w.starts_with("30 rows repeat"), "{w}");
        assert!(w.ends_with(", ..."), "{w}");
        assert_eq!(w.matches("(first on line").count(), DUPLICATE_EXAMPLES);
        // The lowest repeats are lines 11 to 15, whatever the order.
        assert!(w.contains("on line 11 (first on line 1)"), "{w}");
        assert!(w.contains("on line 15 (first on line 5)"), "{w}");
    }
}
