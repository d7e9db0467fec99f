//! Calendar dates for books and quotes: ISO 8601 dates (`2027-03-19`) and
//! the year fraction between a valuation date and an expiry.
//!
//! The convention is ACT/365 fixed, the usual one for equity options: the
//! year fraction is the number of calendar days from the valuation date to
//! the expiry divided by 365, whatever the leap years in between
//! (`2028-01-01` to `2029-01-01` is 366 days, 366/365 of a year). The
//! calendar itself (month lengths, leap years, day counts) is the `jiff`
//! crate's; this module only fixes the accepted text form and the
//! convention, so the book reader and the quotes reader give the same
//! fraction for the same dates.
//!
//! ```
//! use saltus::market::dates::{parse_date, year_fraction};
//! let v = parse_date("2027-01-01").unwrap();
//! let e = parse_date("2028-01-01").unwrap();
//! assert_eq!(year_fraction(v, e), 1.0);
//! assert!(parse_date("2027-02-29").is_err()); // 2027 is not a leap year
//! ```

/// A calendar date (proleptic Gregorian, years 1 to 9999 accepted).
pub type Date = jiff::civil::Date;

/// Days in the ACT/365 fixed year.
pub const DAYS_PER_YEAR: f64 = 365.0;

/// Why a text is not a date.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[non_exhaustive]
pub enum DateError {
    /// Not of the form `YYYY-MM-DD` (four-digit year, two-digit month and day).
    #[error("is not a date of the form YYYY-MM-DD")]
    Form,
    /// Of the right form but no such day (`2027-02-30`, `2027-13-01`).
    #[error("is not a valid date")]
    NoSuchDay,
}

/// Parses an ISO 8601 calendar date, exactly `YYYY-MM-DD`, surrounding
/// white space allowed.
///
/// # Errors
/// [`DateError::Form`] for any other shape, [`DateError::NoSuchDay`] for a
/// day the calendar does not have (`2027-02-29`, `2027-04-31`, year 0).
pub fn parse_date(text: &str) -> Result<Date, DateError> {
    let b = text.trim().as_bytes();
    let digits = |r: std::ops::Range<usize>| b[r].iter().all(u8::is_ascii_digit);
    if b.len() != 10 || b[4] != b'-' || b[7] != b'-' || !digits(0..4) || !digits(5..7) {
        return Err(DateError::Form);
    }
    if !digits(8..10) {
        return Err(DateError::Form);
    }
    let num =
        |r: std::ops::Range<usize>| b[r].iter().fold(0i16, |n, &c| n * 10 + i16::from(c - b'0'));
    let (y, m, d) = (num(0..4), num(5..7), num(8..10));
    if y == 0 {
        return Err(DateError::NoSuchDay);
    }
    // Month and day are at most 99: they fit an i8.
    Date::new(y, m as i8, d as i8).map_err(|_| DateError::NoSuchDay)
}

/// Calendar days from `valuation` to `expiry` (negative when the expiry is
/// earlier).
pub fn days_between(valuation: Date, expiry: Date) -> i64 {
    // Date to date, the largest unit is days: the span is a whole number
    // of days.
    let span = valuation
        .until(expiry)
        .expect("a span between two civil dates is always representable");
    i64::from(span.get_days())
}

/// The ACT/365 fixed year fraction from `valuation` to `expiry`:
/// calendar days / 365.
///
/// # Formula
/// `T = (expiry - valuation in days) / 365`
pub fn year_fraction(valuation: Date, expiry: Date) -> f64 {
    days_between(valuation, expiry) as f64 / DAYS_PER_YEAR
}

/// True when a field that is not a number looks like an attempt at a date
/// (starts with a digit and holds a `-` or `/` after it), so its error can
/// say "not a valid date" rather than "not a number".
pub fn looks_like_date(field: &str) -> bool {
    let t = field.trim();
    t.as_bytes().first().is_some_and(u8::is_ascii_digit) && t[1..].contains(['-', '/'])
}

/// The year fraction of a date `expiry` field, with the user-facing error
/// text naming the column `column` (`expiry 2027-02-30 is not a valid
/// date`). `field` is the text as written; `valuation` the row's
/// valuation date, if any is known.
///
/// # Errors
/// A message for a date that does not parse, a date without a valuation
/// date, or an expiry before the valuation date.
pub fn dated_expiry(column: &str, field: &str, valuation: Option<Date>) -> Result<f64, String> {
    let shown = field.trim().escape_debug().to_string();
    let expiry = match parse_date(field) {
        Ok(d) => d,
        Err(DateError::Form) => {
            return Err(format!(
                "{column} {shown} is not a valid date (write YYYY-MM-DD)"
            ))
        }
        Err(_) => return Err(format!("{column} {shown} is not a valid date")),
    };
    let Some(valuation) = valuation else {
        return Err(format!(
            "{column} {shown} is a date but no valuation date is known \
             (give --valuation-date or a valuation_date column)"
        ));
    };
    if expiry < valuation {
        return Err(format!(
            "{column} {shown} is before the valuation date {valuation}"
        ));
    }
    Ok(year_fraction(valuation, expiry))
}

/// A `valuation_date` field: the date it holds, or `fallback` when it is
/// empty.
///
/// # Errors
/// `valuation_date X is not a valid date` (with the form when the shape is
/// wrong).
pub fn valuation_field(field: &str, fallback: Option<Date>) -> Result<Option<Date>, String> {
    let t = field.trim();
    if t.is_empty() {
        return Ok(fallback);
    }
    match parse_date(t) {
        Ok(d) => Ok(Some(d)),
        Err(DateError::Form) => Err(format!(
            "valuation_date {} is not a valid date (write YYYY-MM-DD)",
            t.escape_debug()
        )),
        Err(_) => Err(format!(
            "valuation_date {} is not a valid date",
            t.escape_debug()
        )),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shapes_other_than_iso_are_refused() {
        for t in [
            "2027-3-19",
            "27-03-19",
            "2027/03/19",
            "20270319",
            "2027-03-19T00:00",
            "",
        ] {
            assert_eq!(parse_date(t), Err(DateError::Form), "{t}");
        }
        assert_eq!(parse_date("0000-01-01"), Err(DateError::NoSuchDay));
        assert_eq!(
            parse_date(" 2027-03-19 ").unwrap().to_string(),
            "2027-03-19"
        );
    }

    #[test]
    fn looks_like_date_only_for_date_attempts() {
        assert!(looks_like_date("2027-02-30"));
        assert!(looks_like_date("19/03/2027"));
        assert!(!looks_like_date("abc"));
        assert!(!looks_like_date("-1"));
        assert!(!looks_like_date(""));
    }
}
