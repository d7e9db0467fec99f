//! Fitted parameter sets (`PARAMS.csv`, written by `saltus calibrate`), read
//! so that book rows can take `vol, jump_rate, jump_mean, jump_vol` from
//! their underlying's fit (`--params`).
//!
//! Columns are found by header name, in any order, case-insensitive.
//! Read: `underlying, vol, jump_rate, jump_mean, jump_vol` (required) and
//! `status` (optional; a row without one, or with `ok`, is usable); every
//! other column (standard errors, flags, ...) is ignored. A row whose status
//! is anything else is a failed fit: its numbers are not read, and a book
//! row of that underlying fails, naming it. A file with an `expiry` column
//! (one set per underlying and expiry, `calibrate --per-expiry`) is refused:
//! a term structure of parameters is not a Merton model a book can be
//! priced under.
//!
//! Problems with the file itself (missing column, repeated underlying, a
//! number that does not parse) are fatal and name the file, line and column.

use std::collections::HashMap;
use std::path::Path;

/// The four model parameters of one underlying's fit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ParamSet {
    /// Diffusion volatility.
    pub vol: f64,
    /// Jump intensity per year.
    pub jump_rate: f64,
    /// Mean log jump size.
    pub jump_mean: f64,
    /// Standard deviation of the log jump size.
    pub jump_vol: f64,
}

/// One underlying's entry in the file.
#[derive(Debug, Clone, PartialEq)]
pub enum Fit {
    /// A usable set (status `ok` or no status column).
    Ok(ParamSet),
    /// The fit failed; the status text as written.
    Failed(String),
}

/// Every underlying's fit, by underlying name (exact, spaces trimmed).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct FittedParams {
    /// The file name, for messages.
    pub source: String,
    fits: HashMap<String, Fit>,
}

/// Columns the reader needs.
pub const REQUIRED: [&str; 5] = ["underlying", "vol", "jump_rate", "jump_mean", "jump_vol"];

impl FittedParams {
    /// Reads a PARAMS file.
    ///
    /// # Errors
    /// A message naming the file (and line and column) when it cannot be
    /// read, lacks a column, repeats an underlying or has a bad number.
    pub fn read(path: &Path) -> Result<FittedParams, String> {
        let name = path.display().to_string();
        let file = std::fs::File::open(path).map_err(|e| format!("cannot open {name}: {e}"))?;
        FittedParams::from_reader(file, &name)
    }

    /// Reads PARAMS text from any reader; `source` names it in messages.
    ///
    /// # Errors
    /// As [`FittedParams::read`].
    pub fn from_reader<R: std::io::Read>(input: R, source: &str) -> Result<FittedParams, String> {
        let mut rdr = csv::ReaderBuilder::new().flexible(true).from_reader(input);
        let headers = rdr
            .byte_headers()
            .map_err(|e| format!("{source}: {e}"))?
            .clone();
        let names = crate::book::header::names(&headers);
        let find = |col: &str| crate::book::header::find(&names, col, source);
        if find("expiry")?.is_some() {
            return Err(format!(
                "{source} has an expiry column: it holds one parameter set per underlying and \
                 expiry (calibrate --per-expiry), and --params takes one set per underlying \
                 (calibrate without --per-expiry)"
            ));
        }
        let mut idx = [0usize; 5];
        let mut missing = Vec::new();
        for (slot, col) in idx.iter_mut().zip(REQUIRED) {
            match find(col)? {
                Some(i) => *slot = i,
                None => missing.push(col),
            }
        }
        if !missing.is_empty() {
            return Err(format!(
                "{source}: missing required column{}: {}",
                if missing.len() > 1 { "s" } else { "" },
                missing.join(", ")
            ));
        }
        let status_col = find("status")?;
        let mut fits = HashMap::new();
        let mut first_line: HashMap<String, u64> = HashMap::new();
        for rec in rdr.byte_records() {
            let rec = rec.map_err(|e| format!("{source}: {e}"))?;
            let line = rec.position().map_or(0, |p| p.line());
            let at = |msg: String| format!("{source} line {line}: {msg}");
            if rec.iter().all(|f| f.trim_ascii().is_empty()) {
                continue;
            }
            let field = |i: usize, col: &str| -> Result<&str, String> {
                let raw = rec.get(i).unwrap_or(b"");
                std::str::from_utf8(raw)
                    .map(str::trim)
                    .map_err(|_| at(format!("{col} is not valid UTF-8")))
            };
            let underlying = field(idx[0], "underlying")?;
            if underlying.is_empty() {
                return Err(at("underlying is missing".into()));
            }
            if let Some(first) = first_line.get(underlying) {
                return Err(at(format!(
                    "underlying '{}' appears more than once (first on line {first})",
                    underlying.escape_debug()
                )));
            }
            first_line.insert(underlying.to_string(), line);
            let status = match status_col {
                Some(i) => field(i, "status")?,
                None => "ok",
            };
            let fit = if status.eq_ignore_ascii_case("ok") {
                let num = |k: usize| -> Result<f64, String> {
                    let col = REQUIRED[k];
                    let t = field(idx[k], col)?;
                    if t.is_empty() {
                        return Err(at(format!("{col} is missing")));
                    }
                    match t.parse::<f64>() {
                        Ok(v) if v.is_finite() => Ok(v),
                        _ => Err(at(format!(
                            "{col} is not a finite number: '{}'",
                            t.escape_debug()
                        ))),
                    }
                };
                Fit::Ok(ParamSet {
                    vol: num(1)?,
                    jump_rate: num(2)?,
                    jump_mean: num(3)?,
                    jump_vol: num(4)?,
                })
            } else {
                Fit::Failed(status.to_string())
            };
            fits.insert(underlying.to_string(), fit);
        }
        Ok(FittedParams {
            source: source.to_string(),
            fits,
        })
    }

    /// The usable set of `underlying`.
    ///
    /// # Errors
    /// A row message naming the underlying when it has no entry or its fit
    /// failed.
    pub fn get(&self, underlying: &str) -> Result<ParamSet, String> {
        match self.fits.get(underlying) {
            Some(Fit::Ok(p)) => Ok(*p),
            Some(Fit::Failed(status)) => Err(format!(
                "underlying '{}': its fit in {} failed (status: {}), no parameters to use",
                underlying.escape_debug(),
                self.source,
                status.escape_debug()
            )),
            None if underlying.is_empty() => Err(format!(
                "underlying is missing: the parameters are taken from {} by underlying",
                self.source
            )),
            None => Err(format!(
                "underlying '{}' has no fitted set in {}",
                underlying.escape_debug(),
                self.source
            )),
        }
    }

    /// Number of underlyings in the file.
    pub fn len(&self) -> usize {
        self.fits.len()
    }

    /// True when the file has no rows.
    pub fn is_empty(&self) -> bool {
        self.fits.is_empty()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn read(t: &str) -> Result<FittedParams, String> {
        FittedParams::from_reader(t.as_bytes(), "p.csv")
    }

    #[test]
    fn columns_by_name_and_status() {
        let p = read(
            "status,jump_vol,UNDERLYING,vol,jump_mean,jump_rate,flags\n\
             ok,0.1,AAA,0.2,-0.1,0.5,\n\
             did not converge,,BBB,,,,\n",
        )
        .unwrap();
        assert_eq!(
            p.get("AAA").unwrap(),
            ParamSet {
                vol: 0.2,
                jump_rate: 0.5,
                jump_mean: -0.1,
                jump_vol: 0.1
            }
        );
        assert!(p
            .get("BBB")
            .unwrap_err()
            .contains("failed (status: did not converge)"));
        assert_eq!(
            p.get("CCC").unwrap_err(),
            "underlying 'CCC' has no fitted set in p.csv"
        );
    }

    #[test]
    fn file_errors_name_line_and_column() {
        let h = "underlying,vol,jump_rate,jump_mean,jump_vol\n";
        assert_eq!(
            read(&format!("{h}A,0.2,0.1,0,0.1\nA,0.2,0.1,0,0.1\n")).unwrap_err(),
            "p.csv line 3: underlying 'A' appears more than once (first on line 2)"
        );
        assert_eq!(
            read(&format!("{h}A,0.2,x,0,0.1\n")).unwrap_err(),
            "p.csv line 2: jump_rate is not a finite number: 'x'"
        );
        assert_eq!(
            read("underlying,vol\n").unwrap_err(),
            "p.csv: missing required columns: jump_rate, jump_mean, jump_vol"
        );
        assert!(read(&format!("expiry,{h}"))
            .unwrap_err()
            .contains("expiry column"));
    }
}
