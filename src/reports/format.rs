//! Number formats of the HTML pages, one rule for tables, chart ticks and
//! heat-map cells alike.
//!
//! Design: every amount on a page goes through [`compact`] (three
//! significant digits with a `k` / `M` / `bn` / `tn` suffix), every count
//! through [`grouped`] (all digits, thousands separators), every axis
//! through [`Ticks`] (nice steps, one suffix and one number of decimals per
//! axis), and every negative number is written with the true minus sign
//! [`MINUS`], never a hyphen. Zero is always `0`, never `-0`. Values that
//! are not finite read `error` (the CSV files leave them empty with an
//! `error` status). The CSV files keep full round-trip precision; these
//! formats are for reading only.

/// The minus sign of every number on a page (U+2212).
pub const MINUS: &str = "\u{2212}";

/// Significant digits of [`compact`].
pub const SIG_DIGITS: i32 = 3;

/// Suffixes of [`compact`] and their powers of ten.
const SUFFIXES: [(f64, &str); 4] = [(1e12, "tn"), (1e9, "bn"), (1e6, "M"), (1e3, "k")];

/// `x` rounded to `d` significant digits.
fn round_sig(x: f64, d: i32) -> f64 {
    if x == 0.0 || !x.is_finite() {
        return x;
    }
    // Rounding through the decimal text is exact where arithmetic is not.
    let s = format!("{:.*e}", (d - 1).max(0) as usize, x);
    s.parse().unwrap_or(x)
}

/// Puts the page's minus sign in front of `body` when `negative`.
fn signed(negative: bool, body: String) -> String {
    if negative {
        format!("{MINUS}{body}")
    } else {
        body
    }
}

/// Decimals that show `x` (already rounded to `d` significant digits) with
/// exactly `d` significant digits.
fn decimals_for(x: f64, d: i32) -> usize {
    if x == 0.0 {
        return 0;
    }
    let e = x.abs().log10().floor() as i32;
    (d - 1 - e).max(0) as usize
}

/// An amount to three significant digits: `845`, `12.3`, `0.0123`,
/// `5.59M`, `−1.20bn`; below 0.001 in magnitude `1.23e−5`; from 1e15 on
/// `1.23e15`. Not finite: `error`.
pub fn compact(x: f64) -> String {
    compact_sig(x, SIG_DIGITS)
}

/// [`compact`] with `d` significant digits.
pub fn compact_sig(x: f64, d: i32) -> String {
    if !x.is_finite() {
        return "error".to_string();
    }
    let r = round_sig(x, d);
    if r == 0.0 {
        return "0".to_string();
    }
    let a = r.abs();
    let body = if !(1e-3..1e15).contains(&a) {
        let s = format!("{:.*e}", (d - 1).max(0) as usize, a);
        s.replace("e-", &format!("e{MINUS}"))
    } else if let Some((p, suffix)) = SUFFIXES.iter().find(|(p, _)| a >= *p) {
        let v = a / p;
        format!("{:.*}{suffix}", decimals_for(v, d), v)
    } else {
        format!("{:.*}", decimals_for(a, d), a)
    };
    signed(r < 0.0, body)
}

/// A count with every digit and thousands separators: `12,345`.
pub fn grouped(n: u64) -> String {
    let s = n.to_string();
    let mut out = String::with_capacity(s.len() + s.len() / 3);
    for (i, c) in s.chars().enumerate() {
        if i > 0 && (s.len() - i) % 3 == 0 {
            out.push(',');
        }
        out.push(c);
    }
    out
}

/// A number as written in the flags (a shock in percent or vol points),
/// with its sign: `+5`, `−2.5`, `0`. Twelve significant digits at most, so
/// `7.000000000000001` reads `7`.
pub fn signed_short(x: f64) -> String {
    if !x.is_finite() {
        return "error".to_string();
    }
    let r = round_sig(x, 12);
    if r == 0.0 {
        return "0".to_string();
    }
    let s = zmij::Buffer::new().format(r.abs()).to_string();
    let s = s.strip_suffix(".0").map(str::to_string).unwrap_or(s);
    if r < 0.0 {
        format!("{MINUS}{s}")
    } else {
        format!("+{s}")
    }
}

/// The labels of one chart axis: nice steps (1, 2, 2.5 or 5 times a power
/// of ten) covering a range, all written with one suffix and one number of
/// decimals, so `−20M, −15M, ... 5M` rather than `-20000000.0`.
#[derive(Debug, Clone, PartialEq)]
pub struct Ticks {
    /// The tick values, ascending.
    pub values: Vec<f64>,
    /// Divisor of the suffix (1, 1e3, 1e6, ...).
    unit: f64,
    /// Suffix shared by every label.
    suffix: &'static str,
    /// Decimals shared by every label.
    decimals: usize,
}

impl Ticks {
    /// About `target` ticks covering `[lo, hi]` (the first at or below
    /// `lo`, the last at or above `hi`). An empty or non-finite range gives
    /// the ticks of `[-1, 1]`.
    pub fn new(lo: f64, hi: f64, target: usize) -> Ticks {
        let (lo, hi) = if lo.is_finite() && hi.is_finite() && hi > lo {
            (lo, hi)
        } else if lo.is_finite() && lo == hi && lo != 0.0 {
            (lo - lo.abs() * 0.5, hi + hi.abs() * 0.5)
        } else {
            (-1.0, 1.0)
        };
        let raw = (hi - lo) / target.max(1) as f64;
        let mag = 10f64.powf(raw.log10().floor());
        let step = [1.0, 2.0, 2.5, 5.0, 10.0]
            .iter()
            .map(|m| m * mag)
            .find(|s| *s >= raw * (1.0 - 1e-9))
            .unwrap_or(10.0 * mag);
        let first = (lo / step).floor() as i64;
        let last = (hi / step).ceil() as i64;
        let values: Vec<f64> = (first..=last)
            .map(|k| {
                let v = round_sig(k as f64 * step, 12);
                v + 0.0
            })
            .collect();
        let top = values.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        let (unit, suffix) = SUFFIXES
            .iter()
            .find(|(p, _)| top >= *p && *p < 1e15)
            .map(|(p, s)| (*p, *s))
            .unwrap_or((1.0, ""));
        // Decimals that show the step exactly in the chosen unit.
        let s = step / unit;
        let decimals = (0..=6)
            .find(|d| {
                let scaled = s * 10f64.powi(*d);
                (scaled - scaled.round()).abs() < 1e-6 * scaled.max(1.0)
            })
            .unwrap_or(6) as usize;
        Ticks {
            values,
            unit,
            suffix,
            decimals,
        }
    }

    /// The lowest and highest tick.
    pub fn range(&self) -> (f64, f64) {
        (self.values[0], self.values[self.values.len() - 1])
    }

    /// The label of `x` (a tick value) in this axis' format.
    pub fn label(&self, x: f64) -> String {
        let v = x / self.unit;
        let body = format!("{:.*}", self.decimals, v.abs());
        if body.chars().all(|c| c == '0' || c == '.') {
            return "0".to_string();
        }
        signed(v < 0.0, format!("{body}{}", self.suffix))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Expected strings written by hand from the format rules above.
    #[test]
    fn compact_keeps_three_significant_digits_and_one_minus() {
        let m = MINUS;
        let cases = [
            (5_590_000.0, "5.59M".to_string()),
            (-20_000_000.0, format!("{m}20.0M")),
            (845.2, "845".to_string()),
            (999.6, "1.00k".to_string()),
            (12.345, "12.3".to_string()),
            (0.012345, "0.0123".to_string()),
            (-0.0, "0".to_string()),
            (0.0, "0".to_string()),
            (1.5e9, "1.50bn".to_string()),
            (-2.345e-5, format!("{m}2.35e{m}5")),
            (3e16, "3.00e16".to_string()),
            (f64::NAN, "error".to_string()),
        ];
        for (x, want) in cases {
            assert_eq!(compact(x), want, "{x}");
        }
    }

    #[test]
    fn counts_have_thousands_separators() {
        assert_eq!(grouped(0), "0");
        assert_eq!(grouped(999), "999");
        assert_eq!(grouped(1000), "1,000");
        assert_eq!(grouped(1_234_567), "1,234,567");
    }

    #[test]
    fn ticks_share_one_suffix_and_never_read_minus_zero() {
        let t = Ticks::new(-20e6, 6e6, 6);
        let labels: Vec<String> = t.values.iter().map(|v| t.label(*v)).collect();
        assert_eq!(t.values.first(), Some(&-20e6));
        assert!(
            labels.iter().all(|l| l.ends_with('M') || l == "0"),
            "{labels:?}"
        );
        assert!(labels.contains(&"0".to_string()));
        assert!(labels[0].starts_with(MINUS));
        // An empty book: a flat zero range.
        let t = Ticks::new(0.0, 0.0, 6);
        let labels: Vec<String> = t.values.iter().map(|v| t.label(*v)).collect();
        assert!(
            !labels.iter().any(|l| l.contains("-0") || l == "−0"),
            "{labels:?}"
        );
        assert_eq!(t.label(0.0), "0");
        let t = Ticks::new(-0.3, 0.3, 6);
        assert_eq!(t.label(0.1), "0.1");
        assert_eq!(signed_short(0.07 * 100.0), "+7");
        assert_eq!(signed_short(-2.5), format!("{MINUS}2.5"));
    }
}
