//! Helpers shared by the integration tests.

use saltus::model::{Contract, JumpParams, OptionKind};
use std::path::PathBuf;

/// The required columns in schema order: the header of the command tests' books.
pub const HEADER: &str = "kind,spot,strike,expiry,rate,vol,jump_rate,jump_mean,jump_vol";

/// The real binary.
pub fn saltus() -> assert_cmd::Command {
    assert_cmd::Command::cargo_bin("saltus").unwrap()
}

/// Reads CSV output (flexible widths) as its header and rows of strings.
pub fn read_csv(text: impl AsRef<[u8]>) -> (Vec<String>, Vec<Vec<String>>) {
    let mut r = csv::ReaderBuilder::new()
        .flexible(true)
        .from_reader(text.as_ref());
    let h = r.headers().unwrap().iter().map(String::from).collect();
    let rows = r
        .records()
        .map(|x| x.unwrap().iter().map(String::from).collect())
        .collect();
    (h, rows)
}

/// Every record of a CSV file, the header row included, as strings.
pub fn csv_file_rows(path: &std::path::Path) -> Vec<Vec<String>> {
    csv::ReaderBuilder::new()
        .has_headers(false)
        .from_path(path)
        .unwrap()
        .records()
        .map(|r| r.unwrap().iter().map(String::from).collect())
        .collect()
}

/// Position of column `name` in a header (panics when absent).
pub fn col(h: &[String], name: &str) -> usize {
    h.iter()
        .position(|x| x == name)
        .unwrap_or_else(|| panic!("no column {name}"))
}

/// Path of a file under `tests/data`.
pub fn data(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("tests")
        .join("data")
        .join(name)
}

/// Reads a CSV fixture as header-keyed rows of strings.
pub fn read_fixture(name: &str) -> Vec<std::collections::HashMap<String, String>> {
    let mut rdr = csv::Reader::from_path(data(name)).expect("fixture");
    let headers = rdr.headers().unwrap().clone();
    rdr.records()
        .map(|r| {
            let r = r.unwrap();
            headers
                .iter()
                .zip(r.iter())
                .map(|(h, v)| (h.to_string(), v.to_string()))
                .collect()
        })
        .collect()
}

/// Parses a fixture number (mpmath writes `nan` for "not computed").
pub fn num(row: &std::collections::HashMap<String, String>, key: &str) -> f64 {
    row[key]
        .parse()
        .unwrap_or_else(|_| panic!("{key} = {}", row[key]))
}

/// Builds a contract from a fixture row.
pub fn contract(row: &std::collections::HashMap<String, String>) -> Contract {
    Contract::new(
        row["kind"].parse::<OptionKind>().unwrap(),
        num(row, "spot"),
        num(row, "strike"),
        num(row, "expiry"),
        num(row, "rate"),
        num(row, "div_yield"),
        num(row, "vol"),
        JumpParams {
            rate: num(row, "jump_rate"),
            mean: num(row, "jump_mean"),
            vol: num(row, "jump_vol"),
        },
    )
    .unwrap()
}

/// A contract from plain numbers.
#[allow(clippy::too_many_arguments, dead_code)]
pub fn merton(
    kind: OptionKind,
    s: f64,
    k: f64,
    t: f64,
    r: f64,
    q: f64,
    sigma: f64,
    lam: f64,
    mu: f64,
    delta: f64,
) -> Contract {
    Contract::new(
        kind,
        s,
        k,
        t,
        r,
        q,
        sigma,
        JumpParams {
            rate: lam,
            mean: mu,
            vol: delta,
        },
    )
    .unwrap()
}
