//! Book-level summary of a cross-check in bounded memory: the counts, the
//! z-score statistics and histogram, the Fourier gaps binned by moneyness
//! and expiry, the coverage of the Monte Carlo 95% intervals by regime, the
//! largest deviations and the first flagged rows, for the stderr summary
//! and the validation page ([`super::crosscheck_report`]).
//!
//! # Design
//! [`CheckAccumulator`] is the pipeline's per-chunk state
//! ([`crate::book::ChunkState`]): the rows of a chunk are added in row
//! order and the chunks merged in chunk order, so every sum has the same
//! digits on any thread count, and whatever the book's size the
//! accumulator holds fixed-size tables plus at most [`KEEP_FLAGGED`]
//! flagged rows and [`TOP`] extreme rows (about 300 kB at most). Quantiles
//! of the z-scores (the normal quantile plot) come from a histogram of bin
//! width [`Z_BIN`], not from the scores themselves.

use super::crosscheck::{AmericanCheck, CheckConfig, Outcome, RowCheck, ABS_FLOOR};
use crate::book::ChunkState;
use crate::model::{Contract, OptionKind};

/// Flagged (inconclusive or disagreeing) rows kept with their details; the
/// rest are counted.
pub const KEEP_FLAGGED: usize = 1000;
/// Rows kept in each "largest" list.
pub const TOP: usize = 5;
/// Width of the fine z-score histogram.
pub const Z_BIN: f64 = 0.05;
/// The fine histogram spans `[-Z_RANGE, Z_RANGE]`; scores beyond are counted apart.
pub const Z_RANGE: f64 = 8.0;
const Z_BINS: usize = 320; // 2 Z_RANGE / Z_BIN
/// Log-moneyness `ln(K/F)` bins of the Fourier gap chart: `[lo, lo + width)`...
pub const MONEYNESS_BINS: (f64, f64, usize) = (-3.0, 0.25, 24);
/// `log10(T)` bins of the Fourier gap chart (T in years, from about 9 hours to 30 years).
pub const EXPIRY_BINS: (f64, f64, usize) = (-3.0, 0.25, 18);
/// Regimes of the coverage table: upper edges of `ln(K/F)` bands...
pub const COVERAGE_MONEYNESS: [(f64, &str); 5] = [
    (-1.0, "ln(K/F) < -1"),
    (-0.25, "-1 to -0.25"),
    (0.25, "-0.25 to 0.25"),
    (1.0, "0.25 to 1"),
    (f64::INFINITY, "ln(K/F) > 1"),
];
/// ... and of expiry bands (years).
pub const COVERAGE_EXPIRY: [(f64, &str); 5] = [
    (7.0 / 365.0, "up to 1 week"),
    (0.25, "1 week to 3 months"),
    (1.0, "3 months to 1 year"),
    (5.0, "1 to 5 years"),
    (f64::INFINITY, "over 5 years"),
];

/// One flagged row, as the summary and the page show it.
#[derive(Debug, Clone, PartialEq)]
pub struct FlaggedRow {
    /// Input line of the row.
    pub line: u64,
    /// The row's id (empty when the book has none or the field is empty:
    /// rows are named by their input line).
    pub id: String,
    /// Call or put.
    pub kind: OptionKind,
    /// `ln(K/F)`.
    pub log_moneyness: f64,
    /// Expiry, years.
    pub expiry: f64,
    /// Series price.
    pub price_series: f64,
    /// Monte Carlo z-score, when defined.
    pub z: Option<f64>,
    /// Fourier gap relative to the series price, when defined.
    pub fourier_gap_rel: Option<f64>,
    /// Monte Carlo estimator.
    pub mc_method: &'static str,
    /// Inconclusive or disagree.
    pub outcome: Outcome,
    /// The verdict text.
    pub verdict: String,
}

/// A row in a "largest" list: line, id (possibly empty) and the value.
pub type Extreme = (u64, String, f64);

/// Fourier gaps in one bin of moneyness or expiry.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct GapBin {
    /// Rows with a Fourier price.
    pub rows: u64,
    /// Rows without a conclusive Fourier check (failed, or its estimate above tolerance).
    pub unresolved: u64,
    /// Largest `|fourier_gap| / tolerance` (the row's Fourier tolerance,
    /// `max(fourier_rel_tol x price_series, ABS_FLOOR x spot)`: above 1 the
    /// row disagrees).
    pub max_gap_tol: f64,
    /// Largest Fourier error estimate in the same units.
    pub max_estimate_tol: f64,
}

impl GapBin {
    fn merge(&mut self, o: &GapBin) {
        self.rows += o.rows;
        self.unresolved += o.unresolved;
        self.max_gap_tol = self.max_gap_tol.max(o.max_gap_tol);
        self.max_estimate_tol = self.max_estimate_tol.max(o.max_estimate_tol);
    }
}

/// Coverage counts of the Monte Carlo 95% interval in one regime.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct Coverage {
    /// Rows whose interval is defined (a positive standard error).
    pub rows: u64,
    /// Rows whose interval holds the series price.
    pub covered: u64,
}

/// The bounded book-level summary (module docs).
#[derive(Debug, Clone)]
pub struct CheckAccumulator {
    /// Rows checked (rows that failed are counted by the pipeline).
    pub rows: u64,
    /// Rows whose verdict is `agree`.
    pub agree: u64,
    /// Rows whose verdict is `inconclusive`.
    pub inconclusive: u64,
    /// Rows whose verdict is `disagree`.
    pub disagree: u64,
    /// Monte Carlo paths simulated in all.
    pub mc_paths: u64,
    /// Rows by Monte Carlo estimator name, in order of first use.
    pub methods: Vec<(&'static str, u64)>,
    /// Defined z-scores: count, sum and sum of squares.
    pub z_count: u64,
    z_sum: f64,
    z_sum2: f64,
    /// z-scores with `|z| <= 1.96`.
    pub z_within_196: u64,
    /// Fine z histogram on `[-Z_RANGE, Z_RANGE]` ([`Z_BIN`] wide).
    pub z_hist: Vec<u64>,
    /// z-scores below `-Z_RANGE` and above `Z_RANGE`.
    pub z_outside: (u64, u64),
    /// Largest `|z|`.
    pub worst_z: Vec<Extreme>,
    /// Largest Fourier gaps in units of the row's tolerance (signed).
    pub worst_fourier: Vec<Extreme>,
    /// Fourier gaps by `ln(K/F)` bin ([`MONEYNESS_BINS`]; the end bins take everything beyond).
    pub gap_by_moneyness: Vec<GapBin>,
    /// Fourier gaps by `log10 T` bin ([`EXPIRY_BINS`]).
    pub gap_by_expiry: Vec<GapBin>,
    /// Coverage by moneyness band (rows) and expiry band (columns).
    pub coverage: [[Coverage; 5]; 5],
    /// The first [`KEEP_FLAGGED`] flagged rows, in input order.
    pub flagged: Vec<FlaggedRow>,
    /// Flagged rows beyond those kept.
    pub flagged_more: u64,
}

impl Default for CheckAccumulator {
    fn default() -> Self {
        CheckAccumulator {
            rows: 0,
            agree: 0,
            inconclusive: 0,
            disagree: 0,
            mc_paths: 0,
            methods: Vec::new(),
            z_count: 0,
            z_sum: 0.0,
            z_sum2: 0.0,
            z_within_196: 0,
            z_hist: vec![0; Z_BINS],
            z_outside: (0, 0),
            worst_z: Vec::new(),
            worst_fourier: Vec::new(),
            gap_by_moneyness: vec![GapBin::default(); MONEYNESS_BINS.2],
            gap_by_expiry: vec![GapBin::default(); EXPIRY_BINS.2],
            coverage: [[Coverage::default(); 5]; 5],
            flagged: Vec::new(),
            flagged_more: 0,
        }
    }
}

impl ChunkState for CheckAccumulator {}

/// Index of `x` in bins `(lo, width, n)`, the end bins taking everything beyond.
pub fn bin_of(x: f64, (lo, width, n): (f64, f64, usize)) -> usize {
    let i = ((x - lo) / width).floor();
    if i.is_nan() || i < 0.0 {
        0
    } else {
        (i as usize).min(n - 1)
    }
}

fn band<const N: usize>(x: f64, edges: &[(f64, &str); N]) -> usize {
    edges.iter().position(|(hi, _)| x < *hi).unwrap_or(N - 1)
}

/// Keeps the `TOP` entries with the largest `|value|`, ties by line.
fn keep_top(list: &mut Vec<Extreme>) {
    list.sort_by(|a, b| b.2.abs().total_cmp(&a.2.abs()).then(a.0.cmp(&b.0)));
    list.truncate(TOP);
}

/// `ln(K/F)` of a contract, also when `K/F` over- or underflows.
pub fn log_moneyness(c: &Contract) -> f64 {
    let fwd = c.forward();
    let ratio = c.strike / fwd;
    if ratio.is_normal() {
        ratio.ln()
    } else {
        c.strike.ln() - fwd.ln()
    }
}

impl CheckAccumulator {
    /// Adds one checked row (rows of a chunk in row order).
    pub fn add(&mut self, line: u64, id: &str, c: &Contract, r: &RowCheck, cfg: &CheckConfig) {
        self.rows += 1;
        match r.outcome {
            Outcome::Agree => self.agree += 1,
            Outcome::Inconclusive => self.inconclusive += 1,
            Outcome::Disagree => self.disagree += 1,
        }
        self.mc_paths += r.mc.paths;
        let method = r.mc.method.as_str();
        match self.methods.iter_mut().find(|(m, _)| *m == method) {
            Some((_, n)) => *n += 1,
            None => self.methods.push((method, 1)),
        }
        let m = log_moneyness(c);
        if let Some(z) = r.mc_z {
            self.z_count += 1;
            self.z_sum += z;
            self.z_sum2 += z * z;
            if z.abs() <= 1.96 {
                self.z_within_196 += 1;
            }
            if z < -Z_RANGE {
                self.z_outside.0 += 1;
            } else if z > Z_RANGE {
                self.z_outside.1 += 1;
            } else {
                self.z_hist[bin_of(z, (-Z_RANGE, Z_BIN, Z_BINS))] += 1;
            }
            self.worst_z.push((line, id.to_string(), z));
            keep_top(&mut self.worst_z);
            let cell =
                &mut self.coverage[band(m, &COVERAGE_MONEYNESS)][band(c.expiry, &COVERAGE_EXPIRY)];
            cell.rows += 1;
            let (lo, hi) = r.mc.ci95;
            if lo <= r.price_series && r.price_series <= hi {
                cell.covered += 1;
            }
        }
        let s = r.price_series;
        let gap_rel = r.fourier_gap.filter(|_| s > 0.0).map(|g| g / s);
        // The same tolerance as the verdict rule (reports::crosscheck).
        let tol = (cfg.fourier_rel_tol * s).max(ABS_FLOOR * c.spot);
        if c.expiry > 0.0 {
            let mut bin = GapBin::default();
            match (r.fourier, r.fourier_gap) {
                (Some(f), Some(g)) => {
                    bin.rows = 1;
                    if f.error_estimate > tol {
                        bin.unresolved = 1;
                    }
                    bin.max_gap_tol = g.abs() / tol;
                    bin.max_estimate_tol = f.error_estimate / tol;
                }
                _ => bin.unresolved = 1,
            }
            self.gap_by_moneyness[bin_of(m, MONEYNESS_BINS)].merge(&bin);
            self.gap_by_expiry[bin_of(c.expiry.log10(), EXPIRY_BINS)].merge(&bin);
        }
        if let Some(g) = r.fourier_gap.map(|g| g / tol).filter(|x| x.is_finite()) {
            self.worst_fourier.push((line, id.to_string(), g));
            keep_top(&mut self.worst_fourier);
        }
        if r.outcome != Outcome::Agree {
            if self.flagged.len() < KEEP_FLAGGED {
                self.flagged.push(FlaggedRow {
                    line,
                    id: id.to_string(),
                    kind: c.kind,
                    log_moneyness: m,
                    expiry: c.expiry,
                    price_series: s,
                    z: r.mc_z,
                    fourier_gap_rel: gap_rel,
                    mc_method: method,
                    outcome: r.outcome,
                    verdict: r.verdict.clone(),
                });
            } else {
                self.flagged_more += 1;
            }
        }
    }

    /// Adds one American row, checked by PIDE convergence and the bounds of
    /// early exercise (no Fourier or Monte Carlo figures to bin).
    pub fn add_american(&mut self, line: u64, id: &str, c: &Contract, a: &AmericanCheck) {
        self.rows += 1;
        match a.outcome {
            Outcome::Agree => self.agree += 1,
            Outcome::Inconclusive => self.inconclusive += 1,
            Outcome::Disagree => self.disagree += 1,
        }
        if a.outcome != Outcome::Agree {
            if self.flagged.len() < KEEP_FLAGGED {
                self.flagged.push(FlaggedRow {
                    line,
                    id: id.to_string(),
                    kind: c.kind,
                    log_moneyness: log_moneyness(c),
                    expiry: c.expiry,
                    price_series: a.price_series,
                    z: None,
                    fourier_gap_rel: None,
                    mc_method: "american (pide)",
                    outcome: a.outcome,
                    verdict: a.verdict.clone(),
                });
            } else {
                self.flagged_more += 1;
            }
        }
    }

    /// Adds a later chunk's accumulator (chunks in chunk order).
    pub fn merge(&mut self, o: CheckAccumulator) {
        self.rows += o.rows;
        self.agree += o.agree;
        self.inconclusive += o.inconclusive;
        self.disagree += o.disagree;
        self.mc_paths += o.mc_paths;
        for (name, n) in o.methods {
            match self.methods.iter_mut().find(|(m, _)| *m == name) {
                Some((_, k)) => *k += n,
                None => self.methods.push((name, n)),
            }
        }
        self.z_count += o.z_count;
        self.z_sum += o.z_sum;
        self.z_sum2 += o.z_sum2;
        self.z_within_196 += o.z_within_196;
        for (a, b) in self.z_hist.iter_mut().zip(&o.z_hist) {
            *a += b;
        }
        self.z_outside.0 += o.z_outside.0;
        self.z_outside.1 += o.z_outside.1;
        self.worst_z.extend(o.worst_z);
        keep_top(&mut self.worst_z);
        self.worst_fourier.extend(o.worst_fourier);
        keep_top(&mut self.worst_fourier);
        for (a, b) in self.gap_by_moneyness.iter_mut().zip(&o.gap_by_moneyness) {
            a.merge(b);
        }
        for (a, b) in self.gap_by_expiry.iter_mut().zip(&o.gap_by_expiry) {
            a.merge(b);
        }
        for (ra, rb) in self.coverage.iter_mut().zip(&o.coverage) {
            for (a, b) in ra.iter_mut().zip(rb) {
                a.rows += b.rows;
                a.covered += b.covered;
            }
        }
        let room = KEEP_FLAGGED - self.flagged.len();
        let n = o.flagged.len();
        self.flagged.extend(o.flagged.into_iter().take(room));
        self.flagged_more += o.flagged_more + n.saturating_sub(room) as u64;
    }

    /// Mean of the defined z-scores (0 without any).
    pub fn z_mean(&self) -> f64 {
        if self.z_count == 0 {
            0.0
        } else {
            self.z_sum / self.z_count as f64
        }
    }

    /// Sample standard deviation of the defined z-scores (0 below two).
    pub fn z_sd(&self) -> f64 {
        if self.z_count < 2 {
            return 0.0;
        }
        let n = self.z_count as f64;
        let mean = self.z_sum / n;
        ((self.z_sum2 - n * mean * mean).max(0.0) / (n - 1.0)).sqrt()
    }

    /// Share of defined z-scores with `|z| <= 1.96`.
    pub fn z_share_within_196(&self) -> f64 {
        if self.z_count == 0 {
            0.0
        } else {
            self.z_within_196 as f64 / self.z_count as f64
        }
    }

    /// Flagged rows with the given outcome among those kept.
    pub fn flagged_with(&self, outcome: Outcome) -> impl Iterator<Item = &FlaggedRow> {
        self.flagged.iter().filter(move |f| f.outcome == outcome)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bins_take_everything_beyond_their_ends() {
        let b = (-3.0, 0.25, 24);
        assert_eq!(bin_of(-10.0, b), 0);
        assert_eq!(bin_of(-3.0, b), 0);
        assert_eq!(bin_of(-2.75, b), 1);
        assert_eq!(bin_of(2.99, b), 23);
        assert_eq!(bin_of(40.0, b), 23);
        assert_eq!(bin_of(f64::NAN, b), 0);
        assert_eq!(Z_BINS as f64 * Z_BIN, 2.0 * Z_RANGE);
    }

    #[test]
    fn merging_keeps_the_first_flagged_rows_and_counts_the_rest() {
        let row = |line: u64| FlaggedRow {
            line,
            id: line.to_string(),
            kind: OptionKind::Call,
            log_moneyness: 0.0,
            expiry: 1.0,
            price_series: 1.0,
            z: None,
            fourier_gap_rel: None,
            mc_method: "plain",
            outcome: Outcome::Inconclusive,
            verdict: "inconclusive: x".into(),
        };
        let mut a = CheckAccumulator {
            flagged: (0..KEEP_FLAGGED as u64 - 2).map(row).collect(),
            ..Default::default()
        };
        let b = CheckAccumulator {
            flagged: (5000..5005).map(row).collect(),
            flagged_more: 7,
            ..Default::default()
        };
        a.merge(b);
        assert_eq!(a.flagged.len(), KEEP_FLAGGED);
        assert_eq!(a.flagged.last().unwrap().line, 5001);
        assert_eq!(a.flagged_more, 3 + 7);
    }
}
