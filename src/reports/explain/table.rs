//! The aggregates of the explain (per underlying, by name, and for the
//! book: sums over the explained positions in row order, with counts of
//! what is left out, new and expired) and the EXPLAIN.csv writer.

use super::books::{explain_books, ExplainBook};
use super::{
    explain_fields, num, term_fields, Explain, Outcome, PositionExplain, COLUMNS, EXTRA_COLUMNS,
};
use std::collections::BTreeMap;

/// The sum over a group of positions (an underlying or the book).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Aggregate {
    /// Sum over the explained positions.
    pub explain: Explain,
    /// Positions explained (in the sum).
    pub positions: u64,
    /// Positions left out because of an error.
    pub left_out: u64,
    /// New positions (not in `change`).
    pub new: u64,
    /// Expired positions (not in `change`).
    pub expired: u64,
    /// Sum of the new positions' values (AFTER inputs).
    pub value_new: f64,
    /// Sum of the expired positions' values (BEFORE inputs).
    pub value_expired: f64,
}

impl Aggregate {
    fn add(&mut self, p: &PositionExplain) {
        match &p.outcome {
            Outcome::Explained(e, _) => {
                self.explain.add(e);
                self.positions += 1;
            }
            Outcome::New(v) => {
                self.new += 1;
                self.value_new += v;
            }
            Outcome::Expired(v) => {
                self.expired += 1;
                self.value_expired += v;
            }
            Outcome::Error(_) => self.left_out += 1,
        }
    }

    /// The first aggregate that is not finite (the sum overflowed).
    pub fn non_finite(&self) -> Option<(&'static str, f64)> {
        self.explain.non_finite().or_else(|| {
            [
                ("value_new", self.value_new),
                ("value_expired", self.value_expired),
            ]
            .into_iter()
            .find(|(_, v)| !v.is_finite())
        })
    }

    /// `ok`, `partial: N positions left out ...`, or `error: ... not finite`.
    pub fn status(&self) -> String {
        if let Some((col, _)) = self.non_finite() {
            return format!("error: {col} is not finite (the sum overflows)");
        }
        if self.left_out > 0 {
            return format!(
                "partial: {} position{} left out (error rows, see their status); the sums are over the other {}",
                self.left_out,
                if self.left_out == 1 { "" } else { "s" },
                self.positions
            );
        }
        "ok".into()
    }
}

/// The explain of a whole book: positions, then aggregates per underlying
/// (by name) and for the book.
#[derive(Debug, Clone, PartialEq)]
pub struct BookExplain {
    /// One row per position.
    pub positions: Vec<PositionExplain>,
    /// Per underlying, sorted by name.
    pub underlyings: Vec<(String, Aggregate)>,
    /// The whole book.
    pub book: Aggregate,
}

impl BookExplain {
    /// Explains and aggregates two books.
    pub fn new(before: &ExplainBook, after: &ExplainBook) -> BookExplain {
        let positions = explain_books(before, after);
        let mut by: BTreeMap<&str, Aggregate> = BTreeMap::new();
        let mut book = Aggregate::default();
        for p in &positions {
            by.entry(p.underlying.as_str()).or_default().add(p);
            book.add(p);
        }
        let underlyings = by.into_iter().map(|(k, v)| (k.to_string(), v)).collect();
        BookExplain {
            positions,
            underlyings,
            book,
        }
    }

    /// True when every position was explained or is new/expired and every
    /// aggregate is finite.
    pub fn all_ok(&self) -> bool {
        self.book.left_out == 0
            && self.book.non_finite().is_none()
            && self
                .underlyings
                .iter()
                .all(|(_, a)| a.non_finite().is_none())
    }
}

/// The book row's `underlying` field (as in the risk report's CSVs).
pub const BOOK_NAME: &str = "(book)";

/// Writes EXPLAIN.csv: [`COLUMNS`] then [`EXTRA_COLUMNS`].
///
/// # Errors
/// I/O errors of `out`.
pub fn write_csv<W: std::io::Write>(out: W, r: &BookExplain) -> std::io::Result<()> {
    let mut w = csv::Writer::from_writer(out);
    let to_io = |e: csv::Error| std::io::Error::other(e.to_string());
    let header: Vec<&str> = COLUMNS
        .iter()
        .chain(EXTRA_COLUMNS.iter())
        .copied()
        .collect();
    w.write_record(&header).map_err(to_io)?;
    let empty = String::new;
    for p in &r.positions {
        let mut f: Vec<String> = vec!["position".into(), p.id.clone(), p.underlying.clone()];
        match &p.outcome {
            Outcome::Explained(e, dt) => {
                f.extend(explain_fields(e));
                f.push(p.status());
                f.extend(term_fields(&e.terms));
                f.push(num(*dt));
                f.extend((0..6).map(|_| empty()));
            }
            Outcome::New(v) | Outcome::Expired(v) => {
                let new = matches!(p.outcome, Outcome::New(_));
                f.push(if new { empty() } else { num(*v) });
                f.push(if new { num(*v) } else { empty() });
                f.extend((0..13).map(|_| empty()));
                f.push(p.status());
                f.extend((0..EXTRA_COLUMNS.len()).map(|_| empty()));
            }
            Outcome::Error(_) => {
                f.extend((0..15).map(|_| empty()));
                f.push(p.status());
                f.extend((0..EXTRA_COLUMNS.len()).map(|_| empty()));
            }
        }
        w.write_record(&f).map_err(to_io)?;
    }
    let groups = r
        .underlyings
        .iter()
        .map(|(n, a)| ("underlying", n.as_str(), a))
        .chain(std::iter::once(("book", BOOK_NAME, &r.book)));
    for (level, name, a) in groups {
        let mut f: Vec<String> = vec![level.into(), empty(), name.into()];
        let ok = a.non_finite().is_none();
        if ok {
            f.extend(explain_fields(&a.explain));
        } else {
            f.extend((0..15).map(|_| empty()));
        }
        f.push(a.status());
        if ok {
            f.extend(term_fields(&a.explain.terms));
        } else {
            f.extend((0..9).map(|_| empty()));
        }
        f.push(empty());
        f.extend([a.positions, a.left_out, a.new, a.expired].map(|n| n.to_string()));
        f.push(if ok { num(a.value_new) } else { empty() });
        f.push(if ok { num(a.value_expired) } else { empty() });
        w.write_record(&f).map_err(to_io)?;
    }
    w.flush()
}
