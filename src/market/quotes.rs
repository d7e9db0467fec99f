//! The quotes file: one quoted European option per row, read under the same
//! row contract as books (columns by header name in any order, any case;
//! every row keeps a status; a bad row is reported with its line and column
//! and excluded from the fit, never dropped).
//!
//! Required columns: `underlying, kind, strike, expiry, spot, rate`;
//! optional `id`, `div_yield` (0), `valuation_date`, `weight` (1); the quote
//! is exactly one of `price` (the mid), `bid` and `ask`, or `implied_vol` (a
//! decimal, 0.215). Two quote kinds in a row, or none, is a row error.
//!
//! Static no-arbitrage checks ([`check_arbitrage`]): a price outside the
//! bounds `max(0, F - K) e^{-rT} < C < S e^{-qT}` (puts likewise) has no
//! implied vol and is always excluded; within one underlying, expiry and
//! kind, call prices must not increase and puts not decrease with strike,
//! and both must be convex in strike. Those are tested on the tradeable
//! side (a violation must survive the bid/ask spread) and flagged with the
//! reason; the fit excludes them unless told to keep them.
//!
//! The whole file is held in memory (a quote sheet is small; the fit needs
//! all quotes of an underlying at once).

use crate::black_scholes;
use crate::book::reader::{general_number, plain_decimal, text};
use crate::book::records::{Record, RecordReader};
use crate::market::dates::{self, Date};
use crate::market::implied_vol::implied_vol;
use crate::model::{Contract, JumpParams, OptionKind, Short};
use std::io::Read;

/// Columns a quotes file must have.
pub const REQUIRED: [&str; 6] = ["underlying", "kind", "strike", "expiry", "spot", "rate"];
/// Optional columns: identification, yield, weighting and the quote itself.
pub const OPTIONAL: [&str; 8] = [
    "id",
    "div_yield",
    "valuation_date",
    "weight",
    "price",
    "bid",
    "ask",
    "implied_vol",
];
/// Relative slack allowed in the strike checks (rounding of quoted prices).
pub const ARBITRAGE_REL_TOL: f64 = 1e-12;

/// A problem with the file as a whole (reported before any fit).
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum QuotesError {
    /// The input has no header row.
    #[error("the quotes file is empty: no header row")]
    Empty,
    /// Required columns are absent.
    #[error("missing required column{}: {}", if .0.len() > 1 { "s" } else { "" }, .0.join(", "))]
    MissingColumns(Vec<String>),
    /// A known column appears twice.
    #[error("column '{0}' appears more than once in the header")]
    DuplicateColumn(String),
    /// No quote column at all.
    #[error("no quote column: give price, or bid and ask, or implied_vol")]
    NoQuoteColumn,
    /// Reading failed.
    #[error("cannot read the quotes: {0}")]
    Io(#[from] std::io::Error),
}

/// How a row is quoted.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum QuoteValue {
    /// A mid price.
    Price(f64),
    /// Bid and ask prices.
    BidAsk {
        /// Bid price.
        bid: f64,
        /// Ask price.
        ask: f64,
    },
    /// A Black-Scholes implied vol (decimal).
    Vol(f64),
}

/// One validated quote.
#[derive(Debug, Clone, PartialEq)]
pub struct Quote {
    /// 1-based line of the record.
    pub line: u64,
    /// The `id` column (empty when absent).
    pub id: String,
    /// The underlying (spaces trimmed).
    pub underlying: String,
    /// Call or put.
    pub kind: OptionKind,
    /// Spot.
    pub spot: f64,
    /// Strike.
    pub strike: f64,
    /// Expiry in years (> 0).
    pub expiry: f64,
    /// Rate.
    pub rate: f64,
    /// Dividend yield.
    pub div_yield: f64,
    /// The `weight` column (1 when absent).
    pub weight: f64,
    /// The quote as given.
    pub value: QuoteValue,
    /// Mid price (for an implied vol quote, its Black-Scholes price).
    pub market_price: f64,
    /// Lowest and highest tradeable prices (bid, ask; both the mid otherwise).
    pub price_range: (f64, f64),
    /// Implied vol of the mid; `None` when the mid is outside the bounds.
    pub market_vol: Option<f64>,
    /// Implied vols of bid and ask where they exist (for the report).
    pub vol_range: (Option<f64>, Option<f64>),
    /// Half the bid/ask spread in vol, for bid/ask quotes.
    pub half_spread_vol: Option<f64>,
    /// Why the quote violates static no-arbitrage, if it does.
    pub arbitrage: Option<String>,
}

impl Quote {
    /// Weight of the quote's residual in vol points: `weight / half-spread
    /// in vol points` for a bid/ask quote, `weight` otherwise.
    pub fn fit_weight(&self) -> f64 {
        match self.half_spread_vol {
            Some(h) => self.weight / (100.0 * h),
            None => self.weight,
        }
    }

    /// True when the mid is outside the no-arbitrage bounds (no implied vol):
    /// never fitted.
    pub fn outside_bounds(&self) -> bool {
        self.market_vol.is_none()
    }
}

/// One data row of the file: its fields as read and what became of them.
#[derive(Debug, Clone, PartialEq)]
pub struct QuoteRow {
    /// 1-based line of the record.
    pub line: u64,
    /// The fields as read (echoed in the residuals file).
    pub fields: Vec<Vec<u8>>,
    /// The quote, or the row error (`line N: ...`).
    pub quote: Result<Quote, String>,
}

/// A quotes file read into memory.
#[derive(Debug, Clone, PartialEq)]
pub struct QuoteSheet {
    /// The header fields as read.
    pub header: Vec<Vec<u8>>,
    /// Every data row, in input order.
    pub rows: Vec<QuoteRow>,
    /// Records skipped because every field was empty.
    pub skipped: u64,
}

#[derive(Debug, Clone, Copy)]
struct Columns {
    width: usize,
    req: [usize; 6],
    id: Option<usize>,
    div_yield: Option<usize>,
    valuation_date: Option<usize>,
    weight: Option<usize>,
    price: Option<usize>,
    bid: Option<usize>,
    ask: Option<usize>,
    implied_vol: Option<usize>,
}

fn columns(header: &Record) -> Result<Columns, QuotesError> {
    if header.is_empty() || (header.len() == 1 && header[0].is_empty()) {
        return Err(QuotesError::Empty);
    }
    let names: Vec<String> = header
        .iter()
        .map(|f| String::from_utf8_lossy(f).trim().to_ascii_lowercase())
        .collect();
    let find = |name: &str| -> Result<Option<usize>, QuotesError> {
        let mut hits = names.iter().enumerate().filter(|(_, n)| n.as_str() == name);
        let first = hits.next().map(|(i, _)| i);
        if hits.next().is_some() {
            return Err(QuotesError::DuplicateColumn(name.to_string()));
        }
        Ok(first)
    };
    let mut req = [0usize; 6];
    let mut missing = Vec::new();
    for (slot, name) in req.iter_mut().zip(REQUIRED) {
        match find(name)? {
            Some(i) => *slot = i,
            None => missing.push(name.to_string()),
        }
    }
    if !missing.is_empty() {
        return Err(QuotesError::MissingColumns(missing));
    }
    let c = Columns {
        width: header.len(),
        req,
        id: find("id")?,
        div_yield: find("div_yield")?,
        valuation_date: find("valuation_date")?,
        weight: find("weight")?,
        price: find("price")?,
        bid: find("bid")?,
        ask: find("ask")?,
        implied_vol: find("implied_vol")?,
    };
    if c.price.is_none() && c.implied_vol.is_none() && (c.bid.is_none() || c.ask.is_none()) {
        return Err(QuotesError::NoQuoteColumn);
    }
    Ok(c)
}

fn field(rec: &Record, idx: Option<usize>) -> &[u8] {
    idx.and_then(|i| rec.get(i)).unwrap_or(b"")
}

fn number(raw: &[u8], name: &str) -> Result<f64, String> {
    let v = plain_decimal(raw).map_or_else(|| general_number(raw, name), Ok)?;
    if v.is_finite() {
        Ok(v)
    } else {
        Err(format!("{name} is not a finite number ({})", Short(v)))
    }
}

/// An optional number: `None` for an empty field or an absent column.
fn optional(rec: &Record, idx: Option<usize>, name: &str) -> Result<Option<f64>, String> {
    let raw = field(rec, idx);
    if raw.trim_ascii().is_empty() {
        return Ok(None);
    }
    number(raw, name).map(Some)
}

fn parse_quote(
    c: &Columns,
    rec: &Record,
    line: u64,
    valuation: Option<Date>,
) -> Result<Quote, String> {
    if let Some(open) = rec.open_quote() {
        return Err(format!(
            "malformed record: the quote opened on line {open} is never closed \
             (the row is read up to the end of that line)"
        ));
    }
    if rec.len() != c.width {
        return Err(format!(
            "malformed record: {} fields where the header has {}",
            rec.len(),
            c.width
        ));
    }
    let [u, k, x, t, s, r] = c.req;
    let underlying = text(&rec[u])
        .map_err(|e| format!("underlying {e}"))?
        .to_string();
    if underlying.is_empty() {
        return Err("underlying is missing".into());
    }
    let kind_text = text(&rec[k]).map_err(|e| format!("kind {e}"))?;
    let kind: OptionKind = kind_text.parse().map_err(|()| {
        if kind_text.is_empty() {
            "kind is missing".to_string()
        } else {
            format!("kind '{}' is not call or put", kind_text.escape_debug())
        }
    })?;
    let strike = number(&rec[x], "strike")?;
    // A dated expiry needs the row's valuation date (its `valuation_date`
    // field, else `--valuation-date`); ACT/365 fixed, as for books.
    let valuation = match c.valuation_date {
        Some(i) => {
            let field = text(&rec[i]).map_err(|e| format!("valuation_date {e}"))?;
            dates::valuation_field(field, valuation)?
        }
        None => valuation,
    };
    let expiry_text = text(&rec[t]).map_err(|e| format!("expiry {e}"))?;
    let expiry = match number(&rec[t], "expiry") {
        Ok(v) => v,
        Err(_) if dates::looks_like_date(expiry_text) => {
            dates::dated_expiry("expiry", expiry_text, valuation)?
        }
        Err(e) => return Err(e),
    };
    let spot = number(&rec[s], "spot")?;
    let rate = number(&rec[r], "rate")?;
    let div_yield = optional(rec, c.div_yield, "div_yield")?.unwrap_or(0.0);
    let none = JumpParams {
        rate: 0.0,
        mean: 0.0,
        vol: 0.0,
    };
    Contract::new(kind, spot, strike, expiry, rate, div_yield, 0.2, none)
        .map_err(|e| e.to_string())?;
    if expiry <= 0.0 {
        return Err(format!(
            "expiry must be positive for a quote, got {}",
            Short(expiry)
        ));
    }
    let weight = optional(rec, c.weight, "weight")?.unwrap_or(1.0);
    if weight <= 0.0 {
        return Err(format!("weight must be positive, got {}", Short(weight)));
    }
    let id = match c.id {
        Some(i) => text(&rec[i]).map_err(|e| format!("id {e}"))?.to_string(),
        None => String::new(),
    };
    let price = optional(rec, c.price, "price")?;
    let bid = optional(rec, c.bid, "bid")?;
    let ask = optional(rec, c.ask, "ask")?;
    let vol = optional(rec, c.implied_vol, "implied_vol")?;
    let mut given: Vec<&str> = Vec::new();
    if price.is_some() {
        given.push("price");
    }
    if bid.is_some() || ask.is_some() {
        given.push("bid/ask");
    }
    if vol.is_some() {
        given.push("implied_vol");
    }
    let value = match (given.len(), price, bid, ask, vol) {
        (0, ..) => {
            return Err("no quote: give exactly one of price, bid and ask, or implied_vol".into())
        }
        (1, Some(p), ..) => QuoteValue::Price(p),
        (1, _, Some(b), Some(a), _) => QuoteValue::BidAsk { bid: b, ask: a },
        (1, _, Some(_), None, _) => return Err("bid is given without ask".into()),
        (1, _, None, Some(_), _) => return Err("ask is given without bid".into()),
        (1, _, _, _, Some(v)) => QuoteValue::Vol(v),
        _ => {
            return Err(format!(
                "two quote kinds in one row ({}): give exactly one of price, bid and ask, or \
                 implied_vol",
                given.join(" and ")
            ))
        }
    };
    let bs = |sigma: f64| black_scholes::price(kind, spot, strike, expiry, rate, div_yield, sigma);
    let iv = |p: f64| implied_vol(kind, p, spot, strike, expiry, rate, div_yield);
    let mut q = Quote {
        line,
        id,
        underlying,
        kind,
        spot,
        strike,
        expiry,
        rate,
        div_yield,
        weight,
        value,
        market_price: 0.0,
        price_range: (0.0, 0.0),
        market_vol: None,
        vol_range: (None, None),
        half_spread_vol: None,
        arbitrage: None,
    };
    let (lower, upper) = price_bounds(kind, spot, strike, expiry, rate, div_yield);
    // Outside the bounds: a flag (the row is excluded); inside: an implied
    // vol, or a row error when none can be resolved.
    let bounds = |p: f64, what: &str| -> Option<String> {
        if p <= lower {
            Some(format!(
                "arbitrage: {what} {} is not above the no-arbitrage lower bound {} (by {})",
                Short(p),
                Short(lower),
                Short(lower - p)
            ))
        } else if p >= upper {
            Some(format!(
                "arbitrage: {what} {} is not below the no-arbitrage upper bound {} (by {})",
                Short(p),
                Short(upper),
                Short(p - upper)
            ))
        } else {
            None
        }
    };
    let vol_of = |p: f64, what: &str| -> Result<f64, String> {
        iv(p).map_err(|e| format!("{what} {} has no implied vol: {e}", Short(p)))
    };
    match value {
        QuoteValue::Vol(v) => {
            if !(v > 0.0 && v <= 5.0) {
                return Err(format!(
                    "implied_vol must be above 0 and at most 5 (a decimal: write 0.215 for \
                     21.5%), got {}",
                    Short(v)
                ));
            }
            let p = bs(v);
            q.market_price = p;
            q.price_range = (p, p);
            q.market_vol = Some(v);
            q.vol_range = (Some(v), Some(v));
        }
        QuoteValue::Price(p) => {
            if p < 0.0 {
                return Err(format!("price must not be negative, got {}", Short(p)));
            }
            q.market_price = p;
            q.price_range = (p, p);
            match bounds(p, "price") {
                Some(why) => q.arbitrage = Some(why),
                None => {
                    let v = vol_of(p, "price")?;
                    q.market_vol = Some(v);
                    q.vol_range = (Some(v), Some(v));
                }
            }
        }
        QuoteValue::BidAsk { bid, ask } => {
            if bid < 0.0 {
                return Err(format!("bid must not be negative, got {}", Short(bid)));
            }
            if bid > ask {
                return Err(format!("bid {} is above ask {}", Short(bid), Short(ask)));
            }
            let mid = 0.5 * (bid + ask);
            q.market_price = mid;
            q.price_range = (bid, ask);
            match bounds(mid, "mid price") {
                Some(why) => q.arbitrage = Some(why),
                None => {
                    let v = vol_of(mid, "mid price")?;
                    // A bid at or below intrinsic value (or an ask at or
                    // above the upper bound) has no vol of its own.
                    let vb = bounds(bid, "bid").is_none().then(|| iv(bid).ok()).flatten();
                    let va = bounds(ask, "ask").is_none().then(|| iv(ask).ok()).flatten();
                    q.market_vol = Some(v);
                    q.vol_range = (vb, va);
                    let half = match (vb, va) {
                        (Some(b), Some(a)) => 0.5 * (a - b),
                        (None, Some(a)) => a - v,
                        (Some(b), None) => v - b,
                        (None, None) => 0.0,
                    };
                    if half.is_nan() || half <= 0.0 {
                        return Err(format!(
                            "bid {} and ask {} give no vol spread: quote a price or an \
                             implied_vol instead",
                            Short(bid),
                            Short(ask)
                        ));
                    }
                    q.half_spread_vol = Some(half);
                }
            }
        }
    }
    Ok(q)
}

/// The static no-arbitrage bounds `(lower, upper)` of a European price:
/// calls `max(0, S e^{-qT} - K e^{-rT}) < C < S e^{-qT}`, puts
/// `max(0, K e^{-rT} - S e^{-qT}) < P < K e^{-rT}`.
pub fn price_bounds(
    kind: OptionKind,
    spot: f64,
    strike: f64,
    expiry: f64,
    rate: f64,
    div_yield: f64,
) -> (f64, f64) {
    let fs = spot * (-div_yield * expiry).exp();
    let kd = strike * (-rate * expiry).exp();
    match kind {
        OptionKind::Call => ((fs - kd).max(0.0), fs),
        OptionKind::Put => ((kd - fs).max(0.0), kd),
    }
}

/// Reads a quotes file. Row problems are kept in their rows; only a missing
/// header, a missing column or an I/O error fails the whole read. The
/// strike checks are then applied by [`check_arbitrage`].
///
/// # Errors
/// [`QuotesError`] for problems with the file as a whole.
pub fn read_quotes<R: Read>(input: R) -> Result<QuoteSheet, QuotesError> {
    read_quotes_dated(input, None)
}

/// [`read_quotes`] with a valuation date for rows whose expiry is a date and
/// that have no `valuation_date` field of their own (`--valuation-date`).
///
/// # Errors
/// [`QuotesError`] for problems with the file as a whole.
pub fn read_quotes_dated<R: Read>(
    input: R,
    valuation: Option<Date>,
) -> Result<QuoteSheet, QuotesError> {
    let mut reader = RecordReader::new(input);
    let mut rec = Record::default();
    if reader.read_record(&mut rec)?.is_none() {
        return Err(QuotesError::Empty);
    }
    let cols = columns(&rec)?;
    let header: Vec<Vec<u8>> = rec.iter().map(<[u8]>::to_vec).collect();
    let mut rows = Vec::new();
    while let Some(line) = reader.read_record(&mut rec)? {
        let quote =
            parse_quote(&cols, &rec, line, valuation).map_err(|m| format!("line {line}: {m}"));
        rows.push(QuoteRow {
            line,
            fields: rec.iter().map(<[u8]>::to_vec).collect(),
            quote,
        });
    }
    let mut sheet = QuoteSheet {
        header,
        rows,
        skipped: reader.skipped(),
    };
    check_arbitrage(&mut sheet);
    Ok(sheet)
}

/// Flags the strike-monotonicity and convexity violations within each
/// underlying, expiry and kind (on adjacent strikes, on the tradeable side:
/// a violation must survive the bid/ask spread). Deterministic: the result
/// does not depend on the order of the rows.
pub fn check_arbitrage(sheet: &mut QuoteSheet) {
    use std::collections::BTreeMap;
    let mut groups: BTreeMap<(String, u64, bool), Vec<usize>> = BTreeMap::new();
    for (i, r) in sheet.rows.iter().enumerate() {
        if let Ok(q) = &r.quote {
            if !q.outside_bounds() {
                groups
                    .entry((
                        q.underlying.clone(),
                        q.expiry.to_bits(),
                        q.kind == OptionKind::Call,
                    ))
                    .or_default()
                    .push(i);
            }
        }
    }
    let mut flags: Vec<(usize, String)> = Vec::new();
    for ((_, _, is_call), mut idx) in groups {
        let rows = &sheet.rows;
        let strike = |i: usize| rows[i].quote.as_ref().map_or(0.0, |q| q.strike);
        idx.sort_by(|&a, &b| strike(a).total_cmp(&strike(b)).then(a.cmp(&b)));
        // Every index of a group holds a parsed quote (see above).
        let quotes: Vec<&Quote> = idx
            .iter()
            .filter_map(|&i| rows[i].quote.as_ref().ok())
            .collect();
        let kind = if is_call { "call" } else { "put" };
        let tol = |p: f64| ARBITRAGE_REL_TOL * p.abs().max(1e-300);
        for w in 0..quotes.len().saturating_sub(1) {
            let (a, b) = (quotes[w], quotes[w + 1]);
            if a.strike == b.strike {
                continue;
            }
            if is_call && b.price_range.0 > a.price_range.1 + tol(a.price_range.1) {
                flags.push((
                    idx[w + 1],
                    format!(
                        "arbitrage: call price {} at strike {} is above {} at the lower strike {} \
                         (call prices must not increase with strike)",
                        Short(b.price_range.0),
                        Short(b.strike),
                        Short(a.price_range.1),
                        Short(a.strike)
                    ),
                ));
            }
            if !is_call && a.price_range.0 > b.price_range.1 + tol(b.price_range.1) {
                flags.push((
                    idx[w],
                    format!(
                        "arbitrage: put price {} at strike {} is above {} at the higher strike {} \
                         (put prices must not decrease with strike)",
                        Short(a.price_range.0),
                        Short(a.strike),
                        Short(b.price_range.1),
                        Short(b.strike)
                    ),
                ));
            }
        }
        // Convexity on consecutive distinct strikes.
        let mut distinct: Vec<usize> = Vec::new();
        for (j, qj) in quotes.iter().enumerate() {
            if distinct
                .last()
                .is_none_or(|&l| quotes[l].strike != qj.strike)
            {
                distinct.push(j);
            }
        }
        for w in distinct.windows(3) {
            let (a, b, c) = (quotes[w[0]], quotes[w[1]], quotes[w[2]]);
            let (k1, k2, k3) = (a.strike, b.strike, c.strike);
            let chord = (a.price_range.1 * (k3 - k2) + c.price_range.1 * (k2 - k1)) / (k3 - k1);
            if b.price_range.0 > chord + tol(chord) {
                flags.push((
                    idx[w[1]],
                    format!(
                        "arbitrage: {kind} prices are not convex in strike: {} at strike {} is \
                         above {} on the line through strikes {} and {}",
                        Short(b.price_range.0),
                        Short(k2),
                        Short(chord),
                        Short(k1),
                        Short(k3)
                    ),
                ));
            }
        }
    }
    for (i, why) in flags {
        if let Ok(q) = &mut sheet.rows[i].quote {
            if q.arbitrage.is_none() {
                q.arbitrage = Some(why);
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sheet(text: &str) -> QuoteSheet {
        read_quotes(text.as_bytes()).unwrap()
    }

    #[test]
    fn one_quote_kind_per_row() {
        let s = sheet(
            "underlying,kind,strike,expiry,spot,rate,price,bid,ask,implied_vol\n\
             A,call,100,1,100,0,10,,,\n\
             A,call,100,1,100,0,10,9,11,\n\
             A,call,100,1,100,0,,,,\n\
             A,call,100,1,100,0,,9,,\n\
             A,call,100,1,100,0,,,,0.2\n",
        );
        assert!(s.rows[0].quote.is_ok());
        assert_eq!(
            s.rows[1].quote.as_ref().unwrap_err(),
            "line 3: two quote kinds in one row (price and bid/ask): give exactly one of price, \
             bid and ask, or implied_vol"
        );
        assert!(s.rows[2].quote.as_ref().unwrap_err().contains("no quote"));
        assert_eq!(
            s.rows[3].quote.as_ref().unwrap_err(),
            "line 5: bid is given without ask"
        );
        assert!(s.rows[4].quote.is_ok());
    }

    #[test]
    fn bounds_and_strike_checks() {
        // Bounds: a call is worth less than the spot (S e^{-qT} = 100).
        let s = sheet(
            "underlying,kind,strike,expiry,spot,rate,price\n\
             A,call,100,1,100,0,101\n\
             A,call,90,1,100,0,12\n\
             A,call,100,1,100,0,8\n\
             A,call,110,1,100,0,9\n\
             A,call,120,1,100,0,2\n",
        );
        let arb = |i: usize| s.rows[i].quote.as_ref().unwrap().arbitrage.clone();
        assert!(arb(0).unwrap().contains("upper bound"));
        assert!(arb(1).is_none());
        assert!(
            arb(3).unwrap().contains("must not increase"),
            "{:?}",
            arb(3)
        );
    }
}
