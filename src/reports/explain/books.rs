//! Reading the two books of the explain and matching their positions by
//! `id`: every record is kept with its line, raw id and underlying (also
//! when it does not parse), and every position gets an [`Outcome`]:
//! explained, `new`, `expired`, or an error naming the file, line and
//! problem (a bad row, an empty or repeated id, differing contract terms).
//! The order of the positions is fixed first (the ids of BEFORE in its
//! order, then those only in AFTER); the outcomes are then computed on the
//! rayon pool and collected in that order.

use super::{explain_position, value, Explain};
use crate::book::reader::{parse_row, text};
use crate::book::records::{Record, RecordReader};
use crate::book::schema::{BookInputs, Schema};
use crate::model::{Contract, Short};
use std::collections::HashMap;
use std::io::Read;

/// One position as read from a book.
#[derive(Debug, Clone, PartialEq)]
pub struct Position {
    /// The `underlying` field (trimmed; empty when absent).
    pub underlying: String,
    /// The validated contract (market inputs and terms).
    pub contract: Contract,
    /// Signed size.
    pub quantity: f64,
    /// Contract multiplier.
    pub multiplier: f64,
}

impl Position {
    /// `quantity x multiplier`.
    pub fn weight(&self) -> f64 {
        self.quantity * self.multiplier
    }
}

/// One record of a book: its line, its raw id and underlying text (when
/// the record has those fields and they are text), and the position or why
/// it could not be read.
#[derive(Debug, Clone, PartialEq)]
pub struct Entry {
    /// Line where the record starts.
    pub line: u64,
    /// The `id` field, spaces trimmed (`None`: missing or not UTF-8).
    pub id: Option<String>,
    /// The `underlying` field, spaces trimmed, if readable.
    pub underlying: Option<String>,
    /// The position, or the problem (`column: problem`, without the line).
    pub position: Result<Position, String>,
}

/// A whole book read for the explain.
#[derive(Debug, Clone, PartialEq)]
pub struct ExplainBook {
    /// The name used in messages (the path as given).
    pub name: String,
    /// Every record, in order.
    pub entries: Vec<Entry>,
    /// Records skipped because every field was empty.
    pub skipped: u64,
}

/// Reads a book for the explain. Fatal problems (a bad header, no `id`
/// column, an I/O error) are returned as `Err`, naming the file; a record
/// that does not parse is kept as an [`Entry`] with its problem.
///
/// # Errors
/// The message of the fatal problem.
pub fn read_book<R: Read>(
    input: R,
    name: &str,
    inputs: &BookInputs,
) -> Result<ExplainBook, String> {
    let io = |e: std::io::Error| format!("cannot read {name}: {e}");
    let mut reader = RecordReader::new(input);
    let mut header = Record::default();
    reader.read_record(&mut header).map_err(io)?;
    let headers: csv::ByteRecord = header.iter().collect();
    let schema = Schema::with_inputs(&headers, inputs).map_err(|e| format!("{name}: {e}"))?;
    let Some(id_col) = schema.id else {
        return Err(format!(
            "{name} line 1: the book has no id column: the explain matches positions by id, \
             so both books need one"
        ));
    };
    let mut entries = Vec::new();
    let mut rec = Record::default();
    let mut row = 0;
    while let Some(line) = reader.read_record(&mut rec).map_err(io)? {
        row += 1;
        let field = |i: Option<usize>| {
            i.and_then(|i| rec.get(i))
                .and_then(|f| text(f).ok())
                .map(str::to_string)
        };
        let id = field(Some(id_col));
        let underlying = field(schema.underlying);
        let position = parse_row(&schema, &rec, row, line)
            .and_then(|r| {
                // The explain is built on the series' analytic Greeks: an
                // American row is refused, never explained as European.
                if r.exercise == crate::engines::pide::Exercise::American {
                    Err(crate::book::RowError {
                        line,
                        message: "exercise american: the P&L explain covers European \
                                  options only"
                            .into(),
                    })
                } else {
                    Ok(r)
                }
            })
            .map(|r| Position {
                underlying: r.underlying.to_string(),
                contract: r.contract,
                quantity: r.quantity,
                multiplier: r.multiplier,
            })
            .map_err(|e| e.message);
        entries.push(Entry {
            line,
            id,
            underlying,
            position,
        });
    }
    Ok(ExplainBook {
        name: name.to_string(),
        entries,
        skipped: reader.skipped(),
    })
}

/// What became of one position.
#[derive(Debug, Clone, PartialEq)]
pub enum Outcome {
    /// In both books and explained; the time step `T_before - T_after` in years.
    Explained(Explain, f64),
    /// In AFTER only: its value at the AFTER inputs.
    New(f64),
    /// In BEFORE only: its value at the BEFORE inputs.
    Expired(f64),
    /// Could not be explained: the message names file, line and problem.
    Error(String),
}

/// One position row of the explain.
#[derive(Debug, Clone, PartialEq)]
pub struct PositionExplain {
    /// The id (empty when the record had none).
    pub id: String,
    /// The underlying (from AFTER when readable, else BEFORE; may be empty).
    pub underlying: String,
    /// The result.
    pub outcome: Outcome,
}

impl PositionExplain {
    /// The `status` field: `ok`, `new`, `expired` or `error: ...`.
    pub fn status(&self) -> String {
        match &self.outcome {
            Outcome::Explained(..) => "ok".into(),
            Outcome::New(_) => "new".into(),
            Outcome::Expired(_) => "expired".into(),
            Outcome::Error(m) => format!("error: {m}"),
        }
    }
}

/// The contract terms that must agree between the two books, named.
fn term_differences(b: &Position, a: &Position) -> Vec<String> {
    let mut out = Vec::new();
    if b.contract.kind != a.contract.kind {
        out.push(format!("kind {} vs {}", b.contract.kind, a.contract.kind));
    }
    let mut num = |name: &str, x: f64, y: f64| {
        if x != y {
            out.push(format!("{name} {} vs {}", Short(x), Short(y)));
        }
    };
    num("strike", b.contract.strike, a.contract.strike);
    num("quantity", b.quantity, a.quantity);
    num("multiplier", b.multiplier, a.multiplier);
    if b.underlying != a.underlying {
        out.push(format!(
            "underlying '{}' vs '{}'",
            b.underlying, a.underlying
        ));
    }
    out
}

/// The lines of `id` in a book.
fn index(book: &ExplainBook) -> HashMap<&str, Vec<usize>> {
    let mut m: HashMap<&str, Vec<usize>> = HashMap::new();
    for (i, e) in book.entries.iter().enumerate() {
        if let Some(id) = e.id.as_deref().filter(|s| !s.is_empty()) {
            m.entry(id).or_default().push(i);
        }
    }
    m
}

fn lines_of(book: &ExplainBook, at: &[usize]) -> String {
    let lines: Vec<String> = at
        .iter()
        .map(|&i| book.entries[i].line.to_string())
        .collect();
    lines.join(", ")
}

/// Why an entry without a usable id cannot be matched.
fn no_id(book: &ExplainBook, e: &Entry) -> String {
    let why = match (&e.id, &e.position) {
        (None, Err(m)) => m.clone(),
        (None, Ok(_)) => "id is not valid UTF-8".to_string(),
        (Some(_), _) => "id is empty: positions are matched by id".to_string(),
    };
    format!("{} line {}: {why}", book.name, e.line)
}

/// Explains every position: the ids of BEFORE in its order, then those only
/// in AFTER in theirs. Records without a usable id, repeated ids and rows
/// that do not parse become error rows; nothing is dropped.
pub fn explain_books(before: &ExplainBook, after: &ExplainBook) -> Vec<PositionExplain> {
    use rayon::prelude::*;
    let ib = index(before);
    let ia = index(after);
    // First the list of positions in output order (cheap, sequential), then
    // their outcomes on the rayon pool; `collect` keeps the order, and each
    // outcome depends on its own position only.
    enum Job<'a> {
        NoId(&'a ExplainBook, &'a Entry),
        Id(&'a str),
    }
    let mut jobs = Vec::new();
    let mut done: std::collections::HashSet<&str> = std::collections::HashSet::new();
    for (book, first) in [(before, true), (after, false)] {
        for e in &book.entries {
            match e.id.as_deref().filter(|s| !s.is_empty()) {
                None => jobs.push(Job::NoId(book, e)),
                Some(id) => {
                    if (first || !ib.contains_key(id)) && done.insert(id) {
                        jobs.push(Job::Id(id));
                    }
                }
            }
        }
    }
    let underlying_of = |e: &Entry| -> String {
        match &e.position {
            Ok(p) => p.underlying.clone(),
            Err(_) => e.underlying.clone().unwrap_or_default(),
        }
    };
    jobs.par_iter()
        .with_min_len(64)
        .map(|job| match *job {
            Job::NoId(book, e) => PositionExplain {
                id: String::new(),
                underlying: underlying_of(e),
                outcome: Outcome::Error(no_id(book, e)),
            },
            Job::Id(id) => {
                let b_at = ib.get(id).map(Vec::as_slice).unwrap_or(&[]);
                let a_at = ia.get(id).map(Vec::as_slice).unwrap_or(&[]);
                let b_entry = b_at.first().map(|&i| &before.entries[i]);
                let a_entry = a_at.first().map(|&i| &after.entries[i]);
                PositionExplain {
                    id: id.to_string(),
                    underlying: a_entry.or(b_entry).map(underlying_of).unwrap_or_default(),
                    outcome: outcome(before, after, id, b_at, a_at, b_entry, a_entry),
                }
            }
        })
        .collect()
}

fn outcome(
    before: &ExplainBook,
    after: &ExplainBook,
    id: &str,
    b_at: &[usize],
    a_at: &[usize],
    b_entry: Option<&Entry>,
    a_entry: Option<&Entry>,
) -> Outcome {
    let mut problems = Vec::new();
    for (book, at) in [(before, b_at), (after, a_at)] {
        if at.len() > 1 {
            problems.push(format!(
                "{}: id '{id}' is repeated on lines {}: a position must appear once in each book",
                book.name,
                lines_of(book, at)
            ));
        }
    }
    if !problems.is_empty() {
        return Outcome::Error(problems.join("; "));
    }
    for (book, e) in [(before, b_entry), (after, a_entry)] {
        if let Some(Entry {
            line,
            position: Err(m),
            ..
        }) = e
        {
            problems.push(format!("{} line {line}: {m}", book.name));
        }
    }
    if !problems.is_empty() {
        return Outcome::Error(problems.join("; "));
    }
    fn pos(e: Option<&Entry>) -> Option<&Position> {
        e.and_then(|e| e.position.as_ref().ok())
    }
    match (pos(b_entry), pos(a_entry)) {
        (Some(b), Some(a)) => {
            let (lb, la) = (b_entry.unwrap().line, a_entry.unwrap().line);
            let diff = term_differences(b, a);
            if !diff.is_empty() {
                return Outcome::Error(format!(
                    "contract terms differ between {} line {lb} and {} line {la}: {}",
                    before.name,
                    after.name,
                    diff.join(", ")
                ));
            }
            match explain_position(&b.contract, &a.contract, b.weight()) {
                Ok(e) => Outcome::Explained(e, b.contract.expiry - a.contract.expiry),
                Err(m) => Outcome::Error(format!(
                    "{} line {lb} / {} line {la}: {m}",
                    before.name, after.name
                )),
            }
        }
        (Some(b), None) => one_side(
            b,
            before,
            b_entry.unwrap().line,
            "value_before",
            Outcome::Expired,
        ),
        (None, Some(a)) => one_side(a, after, a_entry.unwrap().line, "value_after", Outcome::New),
        (None, None) => unreachable!("an id comes from one of the books"),
    }
}

fn one_side(
    p: &Position,
    book: &ExplainBook,
    line: u64,
    column: &str,
    make: fn(f64) -> Outcome,
) -> Outcome {
    match value(&p.contract) {
        Ok(g) if (p.weight() * g.price).is_finite() => make(p.weight() * g.price),
        Ok(g) => Outcome::Error(format!(
            "{} line {line}: {column} is not finite ({}): outside the range double precision can represent",
            book.name,
            Short(p.weight() * g.price)
        )),
        Err(m) => Outcome::Error(format!("{} line {line}: {m}", book.name)),
    }
}
