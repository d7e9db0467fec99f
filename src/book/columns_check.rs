//! The cross-check of a book held as columns ([`ColumnBook`]): every row
//! through [`reports::crosscheck`](crate::reports::crosscheck) exactly as
//! `saltus crosscheck` runs it, for the Python package.
//!
//! # Design
//! Each row's Monte Carlo stream is keyed on `(seed, id)` when the row has
//! a non-empty id, the command line's key, so such a row gets the command
//! line's digits; a row without one is keyed on a hash of its validated
//! inputs (never on its position), so results do not depend on the order or
//! the split of the book, but differ from the command line's (which hashes
//! the row's CSV text). Rows run in parallel in fixed chunks and are joined
//! in chunk order; the Monte Carlo engine's own blocks are merged in block
//! order, so the digits do not depend on the thread count.

use super::columns::{Column, ColumnBook, ColumnError, CHUNK_ROWS};
use crate::engines::monte_carlo::stream_key;
use crate::engines::pide::Exercise;
use crate::model::Contract;
use crate::reports::crosscheck::{check, check_american, CheckConfig};
use rayon::prelude::*;

/// The numeric result columns of [`crosscheck_columns`], in the order
/// `saltus crosscheck` writes them (`mc_method` sits between
/// `fourier_error_est` and `mc_paths` there; here it is a text column).
pub const CHECK_NUMBER_COLUMNS: [&str; 14] = [
    "price_series",
    "price_fourier",
    "price_mc",
    "mc_stderr",
    "mc_z",
    "fourier_gap",
    "fourier_gap_rel",
    "fourier_error_est",
    "mc_paths",
    "mc_ess",
    "mc_hits",
    "price_pide",
    "pide_gap",
    "pide_error_est",
];

/// Result columns of [`crosscheck_columns`]; NaN where the command line
/// leaves a field empty.
#[derive(Debug, Clone, PartialEq)]
pub struct CheckedColumns {
    /// [`CHECK_NUMBER_COLUMNS`], in order.
    pub values: Vec<Vec<f64>>,
    /// `mc_method` (empty on failed and American rows).
    pub mc_method: Vec<String>,
    /// `verdict` (empty on failed rows).
    pub verdict: Vec<String>,
    /// `ok` or `error: row N: ...`.
    pub status: Vec<String>,
}

struct RowOut {
    values: [f64; 14],
    mc_method: String,
    verdict: String,
    status: String,
}

fn failed(i: usize, m: &str) -> RowOut {
    RowOut {
        values: [f64::NAN; 14],
        mc_method: String::new(),
        verdict: String::new(),
        status: format!("error: row {i}: {m}"),
    }
}

/// The stream key of a row without an id: FNV-1a over the bits of its
/// validated inputs, named apart from any id text by a NUL.
fn content_key(seed: u64, c: &Contract) -> u64 {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    let fields = [
        c.kind.sign(),
        c.spot,
        c.strike,
        c.expiry,
        c.rate,
        c.div_yield,
        c.vol,
        c.jumps.rate,
        c.jumps.mean,
        c.jumps.vol,
    ];
    for x in fields {
        for b in x.to_bits().to_le_bytes() {
            h ^= u64::from(b);
            h = h.wrapping_mul(0x0000_0100_0000_01b3);
        }
    }
    stream_key(seed, &format!("\0values {h:016x}"))
}

fn opt(x: Option<f64>) -> f64 {
    x.unwrap_or(f64::NAN)
}

fn check_row(
    book: &ColumnBook<'_>,
    ids: Option<&Column<'_>>,
    i: usize,
    cfg: &CheckConfig,
) -> RowOut {
    let (c, exercise) = match book.row(i) {
        Ok(r) => r,
        Err(m) => return failed(i, &m),
    };
    let nan = f64::NAN;
    let out = if exercise == Exercise::American {
        let a = match check_american(&c, cfg) {
            Ok(a) => a,
            Err(e) => return failed(i, &e.to_string()),
        };
        let (pp, pe) = a.pide.map_or((nan, nan), |p| (p.price, p.error_estimate));
        RowOut {
            values: [
                a.price_series,
                nan,
                nan,
                nan,
                nan,
                nan,
                nan,
                nan,
                nan,
                nan,
                nan,
                pp,
                nan,
                pe,
            ],
            mc_method: String::new(),
            verdict: a.verdict,
            status: "ok".into(),
        }
    } else {
        let key = match ids.and_then(|col| col.text(i)) {
            Some(id) => stream_key(cfg.mc.seed, &String::from_utf8_lossy(id)),
            None => content_key(cfg.mc.seed, &c),
        };
        let r = match check(&c, key, cfg) {
            Ok(r) => r,
            Err(e) => return failed(i, &e.to_string()),
        };
        let rel = r
            .fourier_gap
            .filter(|_| r.price_series > 0.0)
            .map(|g| g / r.price_series);
        let (pp, pg, pe) = r.pide.map_or((nan, nan, nan), |p| {
            (p.price, p.price - r.price_series, p.error_estimate)
        });
        RowOut {
            values: [
                r.price_series,
                r.fourier.map_or(nan, |f| f.price),
                r.mc.price,
                r.mc.std_error,
                opt(r.mc_z),
                opt(r.fourier_gap),
                opt(rel),
                r.fourier.map_or(nan, |f| f.error_estimate),
                r.mc.paths as f64,
                r.mc.ess,
                r.mc.hits as f64,
                pp,
                pg,
                pe,
            ],
            mc_method: r.mc.method.as_str().to_string(),
            verdict: r.verdict,
            status: "ok".into(),
        }
    };
    // As the command line: a result that is not finite (other than an
    // empty field) fails the row, naming the column.
    for (j, v) in out.values.iter().enumerate() {
        if v.is_infinite() {
            return failed(
                i,
                &super::writer::non_finite_message(CHECK_NUMBER_COLUMNS[j], *v),
            );
        }
    }
    out
}

/// Cross-checks every row of `book` (series against Fourier, Monte Carlo and
/// the PIDE; American rows by PIDE convergence and bounds) with `cfg`, on the
/// rayon pool. `ids` keys each row's Monte Carlo stream (module doc).
///
/// # Errors
/// [`ColumnError`] when the columns differ in length; a bad row is a row
/// with NaN values and an `error: row N: ...` status.
pub fn crosscheck_columns(
    book: &ColumnBook<'_>,
    ids: Option<&Column<'_>>,
    cfg: &CheckConfig,
) -> Result<CheckedColumns, ColumnError> {
    book.check()?;
    let n = book.len();
    if let Some(col) = ids {
        if col.len() != n {
            return Err(ColumnError::Length {
                name: "id",
                len: col.len(),
                expected: n,
            });
        }
    }
    let chunks: Vec<Vec<RowOut>> = (0..n.div_ceil(CHUNK_ROWS))
        .into_par_iter()
        .map(|k| {
            (k * CHUNK_ROWS..((k + 1) * CHUNK_ROWS).min(n))
                .map(|i| check_row(book, ids, i, cfg))
                .collect()
        })
        .collect();
    let mut values: Vec<Vec<f64>> = (0..14).map(|_| Vec::with_capacity(n)).collect();
    let mut mc_method = Vec::with_capacity(n);
    let mut verdict = Vec::with_capacity(n);
    let mut status = Vec::with_capacity(n);
    for row in chunks.into_iter().flatten() {
        for (col, v) in values.iter_mut().zip(row.values) {
            col.push(v);
        }
        mc_method.push(row.mc_method);
        verdict.push(row.verdict);
        status.push(row.status);
    }
    Ok(CheckedColumns {
        values,
        mc_method,
        verdict,
        status,
    })
}
