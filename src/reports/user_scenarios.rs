//! The scenario file of `saltus risk --scenarios SCEN.csv`: named
//! scenarios, each a set of shocks per underlying, read into validated
//! [`UserScenario`]s.
//!
//! Design: columns are found by header name (any order, any case, spaces
//! trimmed), as in books. Required: `scenario, underlying, spot_shock_pct,
//! vol_shock_pts`; optional: `jump_rate_mult, jump_mean_shift,
//! jump_vol_shift, rate_shift_bp`. An empty field means no change. Rows with
//! the same `scenario` make one scenario, in the order of their first row;
//! `underlying` is a name or `*` for every underlying, and a named
//! underlying's row wins over `*`. Shocks are written in the flags' units
//! (percent, vol points, basis points) and turned into the fractions of
//! [`Shock`] by the same division as the command-line grid, so a scenario
//! equal to a grid point gives that grid cell to the last digit.
//!
//! A file that cannot be read or lacks a column is a fatal error. A bad row
//! never stops the others: it is kept as a [`RowProblem`] naming its line
//! and column, and the scenario it belongs to is marked as not computed
//! (a scenario with a row missing would silently be another scenario);
//! a row without a scenario name is listed on its own.

use super::risk::{spot_shock_problem, vol_shock_problem, Shock};
use std::collections::BTreeMap;
use std::path::Path;

/// Most scenarios accepted in one file.
pub const MAX_SCENARIOS: usize = 1000;
/// Largest absolute shift of `jump_mean` or `jump_vol` (the model's own
/// bound on the log-jump mean and vol is 20).
pub const MAX_JUMP_SHIFT: f64 = 20.0;
/// Largest jump-rate multiplier.
pub const MAX_JUMP_RATE_MULT: f64 = 1000.0;
/// Largest absolute rate shift in basis points (100 percentage points).
pub const MAX_RATE_SHIFT_BP: f64 = 10_000.0;

/// The columns read, required first.
pub const COLUMNS: [&str; 8] = [
    "scenario",
    "underlying",
    "spot_shock_pct",
    "vol_shock_pts",
    "jump_rate_mult",
    "jump_mean_shift",
    "jump_vol_shift",
    "rate_shift_bp",
];
const REQUIRED: usize = 4;

/// One row's shock as written (flag units) and as applied.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ShockRow {
    /// Line of the row in the file.
    pub line: u64,
    /// Spot shock in percent, as written (0 when empty).
    pub spot_shock_pct: f64,
    /// Vol shock in vol points, as written (0 when empty).
    pub vol_shock_pts: f64,
    /// The shock applied.
    pub shock: Shock,
}

/// A bad row of the scenario file.
#[derive(Debug, Clone, PartialEq)]
pub struct RowProblem {
    /// Line of the row.
    pub line: u64,
    /// The scenario it names (empty when the field is empty or unreadable).
    pub scenario: String,
    /// `line N, column C: problem`.
    pub message: String,
}

/// One named scenario.
#[derive(Debug, Clone, PartialEq)]
pub struct UserScenario {
    /// Its name.
    pub name: String,
    /// The `*` row, if any.
    pub all: Option<ShockRow>,
    /// The rows of named underlyings.
    pub by_underlying: BTreeMap<String, ShockRow>,
    /// Problems of its rows: when not empty the scenario is not computed.
    pub problems: Vec<String>,
}

impl UserScenario {
    /// The shock of `underlying`: its own row, else the `*` row, else none.
    pub fn row_for(&self, underlying: &str) -> Option<&ShockRow> {
        self.by_underlying.get(underlying).or(self.all.as_ref())
    }

    /// Whether the scenario is computed (no row of it has a problem).
    pub fn is_valid(&self) -> bool {
        self.problems.is_empty()
    }
}

/// A whole scenario file.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct ScenarioFile {
    /// The file name, for messages and the page.
    pub source: String,
    /// The scenarios in the order of their first row.
    pub scenarios: Vec<UserScenario>,
    /// Every bad row, in line order (also recorded in its scenario).
    pub problems: Vec<RowProblem>,
}

impl ScenarioFile {
    /// Reads a scenario file.
    ///
    /// # Errors
    /// A message naming the file when it cannot be read, has no header, a
    /// missing or repeated column, no scenario row, or more than
    /// [`MAX_SCENARIOS`] scenarios.
    pub fn read(path: &Path) -> Result<ScenarioFile, String> {
        let name = path.display().to_string();
        let file = std::fs::File::open(path).map_err(|e| format!("cannot open {name}: {e}"))?;
        ScenarioFile::from_reader(file, &name)
    }

    /// Reads scenario text from any reader; `source` names it in messages.
    ///
    /// # Errors
    /// As [`ScenarioFile::read`].
    pub fn from_reader<R: std::io::Read>(input: R, source: &str) -> Result<ScenarioFile, String> {
        let mut rdr = csv::ReaderBuilder::new()
            .flexible(true)
            .has_headers(true)
            .from_reader(input);
        let headers = rdr
            .byte_headers()
            .map_err(|e| format!("{source}: {e}"))?
            .clone();
        let names = crate::book::header::names(&headers);
        let mut idx: [Option<usize>; 8] = [None; 8];
        for (slot, col) in idx.iter_mut().zip(COLUMNS) {
            *slot = crate::book::header::find(&names, col, source)?;
        }
        let missing: Vec<&str> = COLUMNS[..REQUIRED]
            .iter()
            .zip(&idx)
            .filter(|(_, i)| i.is_none())
            .map(|(c, _)| *c)
            .collect();
        if !missing.is_empty() {
            return Err(format!(
                "{source}: missing required column{}: {} (the columns are {})",
                if missing.len() > 1 { "s" } else { "" },
                missing.join(", "),
                COLUMNS.join(", ")
            ));
        }
        let width = headers.len();
        let mut out = ScenarioFile {
            source: source.to_string(),
            ..ScenarioFile::default()
        };
        let mut rows = 0usize;
        for rec in rdr.byte_records() {
            let rec = rec.map_err(|e| format!("{source}: {e}"))?;
            let line = rec.position().map_or(0, |p| p.line());
            if rec.iter().all(|f| f.trim_ascii().is_empty()) {
                continue;
            }
            rows += 1;
            let scenario = rec
                .get(idx[0].unwrap_or(0))
                .and_then(|f| std::str::from_utf8(f).ok())
                .map(str::trim)
                .unwrap_or("")
                .to_string();
            let parsed = if rec.len() != width {
                Err(format!(
                    "line {line}: {} fields where the header has {width}",
                    rec.len()
                ))
            } else {
                parse_row(&rec, &idx, line)
            };
            let pos = match out.scenarios.iter().position(|s| s.name == scenario) {
                Some(p) => Some(p),
                None if scenario.is_empty() => None,
                None => {
                    if out.scenarios.len() == MAX_SCENARIOS {
                        return Err(format!(
                            "{source} line {line}: more than {MAX_SCENARIOS} scenarios"
                        ));
                    }
                    out.scenarios.push(UserScenario {
                        name: scenario.clone(),
                        all: None,
                        by_underlying: BTreeMap::new(),
                        problems: Vec::new(),
                    });
                    Some(out.scenarios.len() - 1)
                }
            };
            let result = parsed.and_then(|(underlying, row)| {
                let Some(p) = pos else {
                    return Err(format!("line {line}, column scenario: the scenario name is empty"));
                };
                let s = &mut out.scenarios[p];
                let slot = if underlying == "*" {
                    &mut s.all
                } else {
                    match s.by_underlying.entry(underlying.clone()) {
                        std::collections::btree_map::Entry::Occupied(e) => {
                            return Err(format!(
                                "line {line}, column underlying: scenario '{}' already has a row for '{}' (line {})",
                                scenario.escape_debug(),
                                underlying.escape_debug(),
                                e.get().line
                            ));
                        }
                        std::collections::btree_map::Entry::Vacant(e) => {
                            e.insert(row);
                            return Ok(());
                        }
                    }
                };
                if let Some(first) = slot {
                    return Err(format!(
                        "line {line}, column underlying: scenario '{}' already has a '*' row (line {})",
                        scenario.escape_debug(),
                        first.line
                    ));
                }
                *slot = Some(row);
                Ok(())
            });
            if let Err(message) = result {
                if let Some(p) = pos {
                    out.scenarios[p].problems.push(message.clone());
                }
                out.problems.push(RowProblem {
                    line,
                    scenario,
                    message,
                });
            }
        }
        if rows == 0 {
            return Err(format!("{source}: no scenario rows"));
        }
        Ok(out)
    }
}

/// One row's underlying and shock, or the first problem found.
fn parse_row(
    rec: &csv::ByteRecord,
    idx: &[Option<usize>; 8],
    line: u64,
) -> Result<(String, ShockRow), String> {
    let field = |k: usize| -> Result<&str, String> {
        let Some(i) = idx[k] else { return Ok("") };
        std::str::from_utf8(rec.get(i).unwrap_or(b""))
            .map(str::trim)
            .map_err(|_| format!("line {line}, column {}: not valid UTF-8", COLUMNS[k]))
    };
    let underlying = field(1)?;
    if underlying.is_empty() {
        return Err(format!(
            "line {line}, column underlying: empty (write a name, or * for every underlying)"
        ));
    }
    // A number, `default` when empty, checked by `problem`.
    let num = |k: usize, default: f64, problem: &dyn Fn(f64) -> Option<String>| {
        let t = field(k)?;
        if t.is_empty() {
            return Ok(default);
        }
        let shown: String = t.chars().take(40).collect();
        let x: f64 = t.parse().map_err(|_| {
            let hint = if t.ends_with('%') {
                " (write the number without %)"
            } else {
                ""
            };
            format!(
                "line {line}, column {}: '{}' is not a number{hint}",
                COLUMNS[k],
                shown.escape_debug()
            )
        })?;
        if !x.is_finite() {
            return Err(format!(
                "line {line}, column {}: '{}' is not a finite number",
                COLUMNS[k],
                shown.escape_debug()
            ));
        }
        match problem(x) {
            Some(p) => Err(format!("line {line}, column {}: {t} {p}", COLUMNS[k])),
            None => Ok(x),
        }
    };
    let spot_pct = num(2, 0.0, &|x| {
        spot_shock_problem(x / 100.0).map(str::to_string)
    })?;
    let vol_pts = num(3, 0.0, &|x| {
        vol_shock_problem(x / 100.0).map(str::to_string)
    })?;
    let jump_rate_mult = num(4, 1.0, &|x| {
        (!(0.0..=MAX_JUMP_RATE_MULT).contains(&x))
            .then(|| format!("is outside the accepted range 0 to {MAX_JUMP_RATE_MULT}"))
    })?;
    let shift = |x: f64| {
        (x.abs() > MAX_JUMP_SHIFT).then(|| {
            format!("is outside the accepted range -{MAX_JUMP_SHIFT} to +{MAX_JUMP_SHIFT}")
        })
    };
    let jump_mean_shift = num(5, 0.0, &shift)?;
    let jump_vol_shift = num(6, 0.0, &shift)?;
    let rate_bp = num(7, 0.0, &|x| {
        (x.abs() > MAX_RATE_SHIFT_BP).then(|| {
            format!("is outside the accepted range -{MAX_RATE_SHIFT_BP} to +{MAX_RATE_SHIFT_BP} basis points")
        })
    })?;
    Ok((
        underlying.to_string(),
        ShockRow {
            line,
            spot_shock_pct: spot_pct,
            vol_shock_pts: vol_pts,
            shock: Shock {
                spot: spot_pct / 100.0,
                vol: vol_pts / 100.0,
                jump_rate_mult,
                jump_mean_shift,
                jump_vol_shift,
                rate_shift: rate_bp / 10_000.0,
            },
        },
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn parse(text: &str) -> Result<ScenarioFile, String> {
        ScenarioFile::from_reader(text.as_bytes(), "scen.csv")
    }

    // The rules of the file, as written in the module documentation.
    #[test]
    fn rows_group_by_name_and_a_named_row_wins_over_star() {
        let f = parse(
            "Scenario,Underlying,spot_shock_pct,vol_shock_pts,rate_shift_bp\n\
             crash,*,-20,10,\n\
             crash,ALPHA,-30,,-50\n\
             rally,*,5,-2,\n",
        )
        .unwrap();
        assert!(f.problems.is_empty(), "{:?}", f.problems);
        assert_eq!(f.scenarios.len(), 2);
        let crash = &f.scenarios[0];
        assert_eq!(crash.row_for("BETA").unwrap().shock.spot, -0.2);
        let a = crash.row_for("ALPHA").unwrap();
        assert_eq!((a.shock.spot, a.shock.vol, a.line), (-0.3, 0.0, 3));
        assert_eq!(a.shock.rate_shift, -0.005);
        assert_eq!(a.shock.jump_rate_mult, 1.0, "empty: no change");
    }

    #[test]
    fn bad_rows_name_line_and_column_and_mark_their_scenario() {
        let f = parse(
            "scenario,underlying,spot_shock_pct,vol_shock_pts,jump_rate_mult\n\
             a,*,-20%,0,\n\
             b,*,0,200,\n\
             c,X,0,0,-1\n\
             ,X,0,0,\n\
             d,X,1,1,\n\
             d,X,2,2,\n\
             e,*,1,1\n\
             ok,*,1,1,2\n",
        )
        .unwrap();
        let msgs: Vec<&str> = f.problems.iter().map(|p| p.message.as_str()).collect();
        let want = [
            "line 2, column spot_shock_pct: '-20%' is not a number (write the number without %)",
            "line 3, column vol_shock_pts: 200 is outside",
            "line 4, column jump_rate_mult: -1 is outside",
            "line 5, column scenario: the scenario name is empty",
            "line 7, column underlying: scenario 'd' already has a row for 'X' (line 6)",
            "line 8: 4 fields where the header has 5",
        ];
        assert_eq!(msgs.len(), want.len(), "{msgs:?}");
        for (m, w) in msgs.iter().zip(want) {
            assert!(m.starts_with(w), "{m} / {w}");
        }
        let valid: Vec<&str> = f
            .scenarios
            .iter()
            .filter(|s| s.is_valid())
            .map(|s| s.name.as_str())
            .collect();
        assert_eq!(valid, ["ok"]);
    }

    #[test]
    fn missing_columns_and_empty_files_are_fatal() {
        let e = parse("scenario,underlying,spot_shock_pct\n").unwrap_err();
        assert!(e.contains("missing required column: vol_shock_pts"), "{e}");
        let e = parse("scenario,underlying,spot_shock_pct,vol_shock_pts\n").unwrap_err();
        assert!(e.contains("no scenario rows"), "{e}");
    }
}
