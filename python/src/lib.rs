//! The native module `saltus._saltus`: thin PyO3 glue between numpy arrays
//! and the saltus library. Nothing is computed here; every number comes
//! from the library (`saltus::book::columns`, `saltus::market::implied_vol`),
//! so the Python package gives the digits of the command-line tool.
//!
//! The Python layer (`saltus/__init__.py`) finds the columns by name in a
//! pandas DataFrame, a dict of arrays or a pyarrow Table and passes each as
//! a contiguous float64 array or, for text, a list of `str | None`. The GIL
//! is released while the library works on its thread pool.

#![forbid(unsafe_code)]

use numpy::{IntoPyArray, PyReadonlyArray1};
use pyo3::exceptions::PyValueError;
use pyo3::prelude::*;
use pyo3::types::{PyDict, PyList, PyString};
use saltus::book::columns::{price_columns, Column, ColumnBook};
use saltus::greeks::RAW_COLUMNS;
use saltus::model::OptionKind;

/// A column as the Python layer passes it: a float64 array, Arrow-layout
/// text as `(offsets int64, data uint8, null bool)` arrays, or a list.
#[derive(FromPyObject)]
enum ColArg<'py> {
    Numbers(PyReadonlyArray1<'py, f64>),
    Utf8(
        PyReadonlyArray1<'py, i64>,
        PyReadonlyArray1<'py, u8>,
        PyReadonlyArray1<'py, bool>,
    ),
    Text(Vec<Option<String>>),
}

fn slice<'a, T: numpy::Element>(a: &'a PyReadonlyArray1<'_, T>) -> PyResult<&'a [T]> {
    a.as_slice()
        .map_err(|e| PyValueError::new_err(format!("array not contiguous: {e}")))
}

impl ColArg<'_> {
    fn column(&self) -> PyResult<Column<'_>> {
        Ok(match self {
            ColArg::Numbers(a) => Column::Numbers(slice(a)?),
            ColArg::Utf8(offsets, data, null) => Column::Utf8 {
                offsets: slice(offsets)?,
                data: slice(data)?,
                null: slice(null)?,
            },
            ColArg::Text(v) => Column::Text(v),
        })
    }
}

fn opt_column<'a>(c: &'a Option<ColArg<'_>>) -> PyResult<Option<Column<'a>>> {
    c.as_ref().map(ColArg::column).transpose()
}

/// Prices a book given as columns; returns a dict of result columns
/// (`price` ... `d_jump_vol`, optionally `implied_vol`, `terms` as float64
/// arrays, `status` as a list of str).
#[pyfunction(name = "price_columns")]
#[pyo3(signature = (kind, spot, strike, expiry, rate, vol, jump_rate, jump_mean, jump_vol,
    div_yield=None, quantity=None, multiplier=None, valuation_date=None,
    default_valuation=None, exercise=None, pide_tol=None, implied_vol=false))]
#[allow(clippy::too_many_arguments)]
fn price_columns_py<'py>(
    py: Python<'py>,
    kind: ColArg<'py>,
    spot: ColArg<'py>,
    strike: ColArg<'py>,
    expiry: ColArg<'py>,
    rate: ColArg<'py>,
    vol: ColArg<'py>,
    jump_rate: ColArg<'py>,
    jump_mean: ColArg<'py>,
    jump_vol: ColArg<'py>,
    div_yield: Option<ColArg<'py>>,
    quantity: Option<ColArg<'py>>,
    multiplier: Option<ColArg<'py>>,
    valuation_date: Option<ColArg<'py>>,
    default_valuation: Option<String>,
    exercise: Option<ColArg<'py>>,
    pide_tol: Option<f64>,
    implied_vol: bool,
) -> PyResult<Bound<'py, PyDict>> {
    let pide = pide_config(pide_tol, saltus::engines::pide::PideConfig::default())?;
    let default_valuation = parse_valuation(default_valuation)?;
    let book = ColumnBook {
        kind: kind.column()?,
        spot: spot.column()?,
        strike: strike.column()?,
        expiry: expiry.column()?,
        rate: rate.column()?,
        vol: vol.column()?,
        jump_rate: jump_rate.column()?,
        jump_mean: jump_mean.column()?,
        jump_vol: jump_vol.column()?,
        div_yield: opt_column(&div_yield)?,
        quantity: opt_column(&quantity)?,
        multiplier: opt_column(&multiplier)?,
        valuation_date: opt_column(&valuation_date)?,
        default_valuation,
        exercise: opt_column(&exercise)?,
        pide,
    };
    let out = py
        .detach(|| price_columns(&book, implied_vol))
        .map_err(|e| PyValueError::new_err(e.to_string()))?;
    let d = PyDict::new(py);
    if let Some(y) = out.expiry_years {
        d.set_item("expiry_years", y.into_pyarray(py))?;
    }
    for (name, v) in RAW_COLUMNS.iter().zip(out.values) {
        d.set_item(*name, v.into_pyarray(py))?;
    }
    if let Some(iv) = out.implied_vol {
        d.set_item("implied_vol", iv.into_pyarray(py))?;
    }
    if let Some((premium, estimate)) = out.exercise {
        d.set_item("early_exercise_premium", premium.into_pyarray(py))?;
        d.set_item("error_estimate", estimate.into_pyarray(py))?;
    }
    d.set_item("terms", out.terms.into_pyarray(py))?;
    d.set_item("status", status_list(py, out.status)?)?;
    Ok(d)
}

/// Cross-checks a book given as columns (series against Fourier, Monte Carlo
/// and the PIDE), as `saltus crosscheck` does; returns a dict of result
/// columns (floats, `mc_method`, `verdict` and `status` as lists of str).
#[pyfunction(name = "crosscheck_columns")]
#[pyo3(signature = (kind, spot, strike, expiry, rate, vol, jump_rate, jump_mean, jump_vol,
    div_yield=None, quantity=None, multiplier=None, valuation_date=None,
    default_valuation=None, exercise=None, id=None, paths=1_000_000, seed=20_261_201,
    pide_tol=None))]
#[allow(clippy::too_many_arguments)]
fn crosscheck_columns_py<'py>(
    py: Python<'py>,
    kind: ColArg<'py>,
    spot: ColArg<'py>,
    strike: ColArg<'py>,
    expiry: ColArg<'py>,
    rate: ColArg<'py>,
    vol: ColArg<'py>,
    jump_rate: ColArg<'py>,
    jump_mean: ColArg<'py>,
    jump_vol: ColArg<'py>,
    div_yield: Option<ColArg<'py>>,
    quantity: Option<ColArg<'py>>,
    multiplier: Option<ColArg<'py>>,
    valuation_date: Option<ColArg<'py>>,
    default_valuation: Option<String>,
    exercise: Option<ColArg<'py>>,
    id: Option<ColArg<'py>>,
    paths: u64,
    seed: u64,
    pide_tol: Option<f64>,
) -> PyResult<Bound<'py, PyDict>> {
    use saltus::book::columns_check::{crosscheck_columns, CHECK_NUMBER_COLUMNS};
    use saltus::engines::monte_carlo::{McConfig, Work, MAX_PATHS};
    use saltus::reports::crosscheck::CheckConfig;
    if !(2..=MAX_PATHS).contains(&paths) {
        return Err(PyValueError::new_err(format!(
            "paths must be between 2 and {MAX_PATHS}, got {paths}"
        )));
    }
    let mut cfg = CheckConfig {
        mc: McConfig {
            work: Work::Paths(paths),
            seed,
            ..McConfig::default()
        },
        ..CheckConfig::default()
    };
    cfg.pide = pide_config(pide_tol, cfg.pide)?;
    let default_valuation = parse_valuation(default_valuation)?;
    let book = ColumnBook {
        kind: kind.column()?,
        spot: spot.column()?,
        strike: strike.column()?,
        expiry: expiry.column()?,
        rate: rate.column()?,
        vol: vol.column()?,
        jump_rate: jump_rate.column()?,
        jump_mean: jump_mean.column()?,
        jump_vol: jump_vol.column()?,
        div_yield: opt_column(&div_yield)?,
        quantity: opt_column(&quantity)?,
        multiplier: opt_column(&multiplier)?,
        valuation_date: opt_column(&valuation_date)?,
        default_valuation,
        exercise: opt_column(&exercise)?,
        pide: saltus::engines::pide::PideConfig::default(),
    };
    let ids = opt_column(&id)?;
    let out = py
        .detach(|| crosscheck_columns(&book, ids.as_ref(), &cfg))
        .map_err(|e| PyValueError::new_err(e.to_string()))?;
    let d = PyDict::new(py);
    let mut values = out.values.into_iter();
    for name in CHECK_NUMBER_COLUMNS {
        let v = values.next().expect("one vector per column");
        if name == "mc_paths" {
            d.set_item("mc_method", out.mc_method.clone())?;
        }
        d.set_item(name, v.into_pyarray(py))?;
    }
    d.set_item("verdict", out.verdict)?;
    d.set_item("status", status_list(py, out.status)?)?;
    Ok(d)
}

/// Calibrates the Merton parameters to a quote sheet given as CSV bytes,
/// exactly as `saltus calibrate` does; returns the PARAMS.csv and the
/// residuals CSV texts the command would write.
#[pyfunction(name = "calibrate_csv")]
#[pyo3(signature = (quotes, valuation_date=None, per_expiry=false, keep_arbitrage=false))]
fn calibrate_csv_py(
    py: Python<'_>,
    quotes: Vec<u8>,
    valuation_date: Option<String>,
    per_expiry: bool,
    keep_arbitrage: bool,
) -> PyResult<(String, String)> {
    use saltus::market::calibrate::{calibrate, CalibrationSpec};
    use saltus::market::quotes::read_quotes_dated;
    use saltus::reports::calibration_report as report;
    let date = parse_valuation(valuation_date)?;
    let spec = CalibrationSpec {
        per_expiry,
        keep_arbitrage,
        ..CalibrationSpec::default()
    };
    py.detach(|| -> Result<(String, String), String> {
        let sheet = read_quotes_dated(&quotes[..], date).map_err(|e| e.to_string())?;
        let fits = calibrate(&sheet, &spec);
        let outcomes = report::outcomes(&sheet, &fits, &spec);
        let mut params = Vec::new();
        report::write_params(&mut params, &sheet, &fits, &spec).map_err(|e| e.to_string())?;
        let mut residuals = Vec::new();
        report::write_residuals(&mut residuals, &sheet, &outcomes).map_err(|e| e.to_string())?;
        Ok((
            String::from_utf8_lossy(&params).into_owned(),
            String::from_utf8_lossy(&residuals).into_owned(),
        ))
    })
    .map_err(PyValueError::new_err)
}

/// `pide_tol` checked against the command line's accepted range
/// (`--pide-tol`), or `default` when not given.
fn pide_config(
    tol: Option<f64>,
    default: saltus::engines::pide::PideConfig,
) -> PyResult<saltus::engines::pide::PideConfig> {
    match tol {
        None => Ok(default),
        Some(t) if t.is_finite() && (1e-9..=1e-2).contains(&t) => {
            Ok(saltus::engines::pide::PideConfig { tol_spot: t })
        }
        Some(t) => Err(PyValueError::new_err(format!(
            "pide_tol must be between 1e-9 and 1e-2 (a fraction of spot), got {t}"
        ))),
    }
}

fn parse_valuation(t: Option<String>) -> PyResult<Option<saltus::market::dates::Date>> {
    match t {
        None => Ok(None),
        Some(t) => saltus::market::dates::parse_date(&t)
            .map(Some)
            .map_err(|e| PyValueError::new_err(format!("valuation_date '{t}' {e}"))),
    }
}

/// The statuses as a Python list, every `ok` the same interned string
/// (a million rows then make a handful of string objects, not a million).
fn status_list(py: Python<'_>, status: Vec<String>) -> PyResult<Bound<'_, PyList>> {
    let ok = pyo3::intern!(py, "ok");
    let items: Vec<Bound<'_, PyAny>> = status
        .into_iter()
        .map(|s| {
            if s == "ok" {
                ok.clone().into_any()
            } else {
                PyString::new(py, &s).into_any()
            }
        })
        .collect();
    PyList::new(py, items)
}

/// Black-Scholes implied volatilities of prices, element by element;
/// returns `(vols, status)` with NaN and a reason where there is none.
#[pyfunction(name = "implied_vol")]
#[pyo3(signature = (kind, price, spot, strike, expiry, rate, div_yield))]
#[allow(clippy::too_many_arguments)]
fn implied_vol_py<'py>(
    py: Python<'py>,
    kind: Vec<Option<String>>,
    price: PyReadonlyArray1<'py, f64>,
    spot: PyReadonlyArray1<'py, f64>,
    strike: PyReadonlyArray1<'py, f64>,
    expiry: PyReadonlyArray1<'py, f64>,
    rate: PyReadonlyArray1<'py, f64>,
    div_yield: PyReadonlyArray1<'py, f64>,
) -> PyResult<(Bound<'py, numpy::PyArray1<f64>>, Bound<'py, PyList>)> {
    let cols = [&price, &spot, &strike, &expiry, &rate, &div_yield];
    let n = kind.len();
    let mut slices = Vec::with_capacity(cols.len());
    for (name, c) in ["price", "spot", "strike", "expiry", "rate", "div_yield"]
        .iter()
        .zip(cols)
    {
        let s = c
            .as_slice()
            .map_err(|e| PyValueError::new_err(format!("array not contiguous: {e}")))?;
        if s.len() != n {
            return Err(PyValueError::new_err(format!(
                "column {name} has {} rows where kind has {n}",
                s.len()
            )));
        }
        slices.push(s);
    }
    let (vols, status) = py.detach(|| {
        use rayon::prelude::*;
        (0..n)
            .into_par_iter()
            .with_min_len(1024)
            .map(|i| {
                let k = match kind[i].as_deref().map(str::trim) {
                    None | Some("") => {
                        return (f64::NAN, format!("error: row {i}: kind is missing"))
                    }
                    Some(t) => match t.parse::<OptionKind>() {
                        Ok(k) => k,
                        Err(()) => {
                            return (
                                f64::NAN,
                                format!(
                                    "error: row {i}: kind '{}' is not call or put",
                                    t.escape_debug()
                                ),
                            )
                        }
                    },
                };
                let s = &slices;
                match saltus::market::implied_vol::implied_vol(
                    k, s[0][i], s[1][i], s[2][i], s[3][i], s[4][i], s[5][i],
                ) {
                    Ok(v) => (v, "ok".to_string()),
                    Err(e) => (f64::NAN, format!("error: row {i}: {e}")),
                }
            })
            .unzip::<_, _, Vec<f64>, Vec<String>>()
    });
    Ok((vols.into_pyarray(py), status_list(py, status)?))
}

/// The saltus version this module was built from.
#[pyfunction]
fn version() -> &'static str {
    env!("CARGO_PKG_VERSION")
}

/// The native part of the saltus package.
#[pymodule]
fn _saltus(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(price_columns_py, m)?)?;
    m.add_function(wrap_pyfunction!(implied_vol_py, m)?)?;
    m.add_function(wrap_pyfunction!(crosscheck_columns_py, m)?)?;
    m.add_function(wrap_pyfunction!(calibrate_csv_py, m)?)?;
    m.add_function(wrap_pyfunction!(version, m)?)?;
    Ok(())
}
