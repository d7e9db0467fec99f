"""saltus from Python: Merton (1976) jump-diffusion option books priced by
the saltus library, over columns.

A book is a pandas DataFrame, a dict of arrays (numpy arrays, lists) or a
pyarrow Table with the columns of a saltus CSV book, found by name (any
case, surrounding spaces ignored): ``kind, spot, strike, expiry, rate, vol,
jump_rate, jump_mean, jump_vol`` and optionally ``div_yield``, ``quantity``
and ``multiplier``. Every number comes from the native library, on its own
thread pool with the GIL released, so the results carry the digits of
``saltus price`` on the same book.

The row contract is the command line's: one output row per input row, in
order; the input columns are kept and the result columns appended
(``price, delta, gamma, vega, theta, rho, div_rho, d_jump_rate,
d_jump_mean, d_jump_vol``, optionally ``implied_vol``, then ``terms`` and
``status``). A row that cannot be priced keeps its place, has NaN result
values and a status naming the row (its 0-based position) and the problem,
e.g. ``error: row 3: vol must not be negative, got -0.2``. NaN never appears
in a row whose status is ``ok``.

Numeric columns are read as float64, NaN standing for an empty cell (as
pandas reads one): an empty required field is an error (``vol is
missing``), an empty optional field takes its default. Text columns (object
or string dtype, e.g. ``pd.read_csv(..., dtype=str)``) are parsed as the
CSV reader parses a field, with the same messages.

Model prices are estimates: validate them and use them under your firm's
model-risk policy and applicable regulation.
"""

from __future__ import annotations

from typing import Any, Dict, List, Optional

import numpy as np

from . import _saltus

__all__ = ["price", "crosscheck", "calibrate", "implied_vol", "RESULT_COLUMNS", "CHECK_COLUMNS",
           "__version__"]

__version__ = _saltus.version()

#: The result columns of :func:`price`, in order (``implied_vol`` is added
#: before ``terms`` when asked for).
RESULT_COLUMNS = [
    "price",
    "delta",
    "gamma",
    "vega",
    "theta",
    "rho",
    "div_rho",
    "d_jump_rate",
    "d_jump_mean",
    "d_jump_vol",
    "terms",
    "status",
]

#: The result columns of :func:`crosscheck`, in the order of ``saltus crosscheck``.
CHECK_COLUMNS = [
    "price_series", "price_fourier", "price_mc", "mc_stderr", "mc_z", "fourier_gap",
    "fourier_gap_rel", "fourier_error_est", "mc_method", "mc_paths", "mc_ess", "mc_hits",
    "price_pide", "pide_gap", "pide_error_est", "verdict", "status",
]

_REQUIRED = [
    "kind",
    "spot",
    "strike",
    "expiry",
    "rate",
    "vol",
    "jump_rate",
    "jump_mean",
    "jump_vol",
]
_OPTIONAL = ["div_yield", "quantity", "multiplier", "valuation_date", "exercise"]


class BookError(ValueError):
    """The book as a whole cannot be read (a missing or repeated column,
    columns of different lengths); bad rows are not exceptions but rows
    with a status saying why."""


def _frame_kind(frame: Any) -> str:
    mod = type(frame).__module__
    if mod.startswith("pandas") and hasattr(frame, "columns"):
        return "pandas"
    if mod.startswith("pyarrow") and hasattr(frame, "column_names"):
        return "arrow"
    if isinstance(frame, dict):
        return "dict"
    raise TypeError(
        "a book must be a pandas DataFrame, a dict of arrays or a pyarrow Table, "
        f"got {type(frame).__name__}"
    )


def _columns(frame: Any, kind: str) -> Dict[str, Any]:
    """Name -> column values, for every column of the book, in order."""
    if kind == "pandas":
        return {str(c): frame[c] for c in frame.columns}
    if kind == "arrow":
        return {name: frame.column(name) for name in frame.column_names}
    return {str(k): v for k, v in frame.items()}


def _find(names: List[str], wanted: List[str], required: bool) -> Dict[str, str]:
    """Book column name for each wanted column (case-insensitive, trimmed)."""
    found: Dict[str, str] = {}
    norm = {}
    for n in names:
        key = n.strip().lower()
        if key in norm and key in wanted + _REQUIRED + _OPTIONAL:
            raise BookError(f"column '{key}' appears more than once")
        norm[key] = n
    missing = []
    for w in wanted:
        if w in norm:
            found[w] = norm[w]
        elif required:
            missing.append(w)
    if missing:
        raise BookError("missing required columns: " + ", ".join(missing))
    return found


def _as_numpy(values: Any) -> np.ndarray:
    if hasattr(values, "to_numpy") and not isinstance(values, np.ndarray):
        try:
            return values.to_numpy(zero_copy_only=False)  # pyarrow
        except TypeError:
            return values.to_numpy()  # pandas
    return np.asarray(values)


def _arrow_text(values: Any) -> Any:
    """Arrow string data as (offsets int64, data uint8, null bool) arrays,
    handed to the library without a Python object per cell; None when
    `values` is not an Arrow string column."""
    mod = type(values).__module__
    if not mod.startswith("pyarrow"):
        return None
    import pyarrow as pa

    arr = values.combine_chunks() if isinstance(values, pa.ChunkedArray) else values
    if pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type):
        arr = arr.cast(pa.large_string())
        _, off, data = arr.buffers()
        n = len(arr)
        offsets = np.frombuffer(off, dtype=np.int64)[arr.offset: arr.offset + n + 1]
        raw = np.frombuffer(data, dtype=np.uint8) if data is not None else np.zeros(0, np.uint8)
        null = np.ascontiguousarray(arr.is_null().to_numpy(zero_copy_only=False), dtype=bool)
        return (np.ascontiguousarray(offsets), raw, null)
    return None


def _dates_as_text(arr: np.ndarray, name: str) -> List[Optional[str]]:
    """Calendar dates (datetime64) as `YYYY-MM-DD` text; NaT is an empty
    cell. A time of day other than midnight is refused: saltus counts days."""
    days = arr.astype("datetime64[D]")
    has_time = (arr != days) & ~np.isnat(arr)
    if has_time.any():
        i = int(np.flatnonzero(has_time)[0])
        raise BookError(f"column {name} holds a time of day at row {i} ({arr[i]}); "
                        "give calendar dates")
    text = np.datetime_as_string(days, unit="D")
    return [None if t == "NaT" else str(t) for t in text.tolist()]


def _column_arg(values: Any, name: str = "") -> Any:
    """A float64 contiguous array for numbers, Arrow text as buffers, dates
    as ISO text, else a list of str | None."""
    text = _arrow_text(values)
    if text is not None:
        return text
    arr = _as_numpy(values)
    if arr.dtype.kind == "M":
        return _dates_as_text(arr, name)
    if arr.dtype.kind in "fiub":
        return np.ascontiguousarray(arr, dtype=np.float64)
    out: List[Optional[str]] = []
    for v in arr.tolist():
        if v is None or (isinstance(v, float) and v != v):
            out.append(None)
        elif hasattr(v, "isoformat") and not isinstance(v, str):
            out.append(_date_text(v, name))
        else:
            out.append(str(v))
    return out


def _date_text(v: Any, name: str) -> str:
    """A date or timestamp object as `YYYY-MM-DD` (midnight only)."""
    import datetime as dt

    if isinstance(v, dt.datetime) or hasattr(v, "to_pydatetime"):
        t = v.to_pydatetime() if hasattr(v, "to_pydatetime") else v
        if (t.hour, t.minute, t.second, t.microsecond) != (0, 0, 0, 0):
            raise BookError(f"column {name} holds a time of day ({v}); give calendar dates")
        return t.date().isoformat()
    return v.isoformat()


def _text_arg(values: Any) -> List[Any]:
    """The column as a list; the native call accepts it as it is when every
    element is a str or None (the common case, no copy in Python)."""
    return _as_numpy(values).tolist()


def _clean_text(values: List[Any]) -> List[Optional[str]]:
    """str for anything that is not None or a NaN (pandas' empty cell)."""
    return [None if (v is None or (isinstance(v, float) and v != v)) else str(v)
            for v in values]


def _assemble(frame: Any, kind: str, results: Dict[str, Any], order: List[str]) -> Any:
    if kind == "pandas":
        import pandas as pd

        res = pd.DataFrame({k: results[k] for k in order}, index=frame.index)
        clash = [c for c in order if c in frame.columns]
        left = frame.drop(columns=clash) if clash else frame
        return pd.concat([left, res], axis=1)
    if kind == "arrow":
        import pyarrow as pa

        table = frame
        for k in order:
            if k in table.column_names:
                table = table.drop_columns([k])
        for k in order:
            table = table.append_column(k, pa.array(results[k]))
        return table
    out = {k: v for k, v in frame.items() if k not in order}
    out.update({k: results[k] for k in order})
    return out


def price(frame: Any, *, implied_vol: bool = False, valuation_date: Any = None,
          pide_tol: Optional[float] = None) -> Any:
    """Prices every row of a book with the Merton series and all analytic
    Greeks (raw units: vega per 1.00 of vol, theta per year).

    Parameters
    ----------
    frame:
        pandas DataFrame, dict of arrays or pyarrow Table with the book's
        columns (see the module documentation).
    implied_vol:
        Also return ``implied_vol``, the Black-Scholes volatility of each
        Merton price (the model smile), before ``terms``. Where it does not
        exist in double precision it is NaN and the status reads
        ``warning: row N: implied_vol: <reason>`` (price and Greeks kept).
    valuation_date:
        The valuation date (``"YYYY-MM-DD"``, a ``datetime.date`` or a
        pandas Timestamp at midnight) of rows whose ``expiry`` is a date and
        that have no ``valuation_date`` of their own. Expiries may then be
        dates (text ``YYYY-MM-DD``, ``datetime64`` or date objects); the year
        fraction is ACT/365 fixed, as on the command line, and is returned in
        an ``expiry_years`` column placed before the results whenever a
        valuation date can apply (this argument or a ``valuation_date``
        column), exactly as ``saltus price --valuation-date`` writes it.
    pide_tol:
        Tolerance of the PIDE engine for American rows (an ``exercise``
        column holding ``american``), an absolute price error as a fraction
        of spot (default 1e-6, as ``saltus price --pide-tol``). With an
        ``exercise`` column the results carry ``early_exercise_premium`` and
        ``error_estimate`` before ``terms``, as on the command line. An
        American row costs about thirteen PIDE solutions (docs/pide.md).

    Returns
    -------
    The same kind of object as ``frame``: its columns followed by the result
    columns (a result column already in the input is replaced).

    Raises
    ------
    BookError
        A required column is missing or repeated, or columns differ in length.
    TypeError
        ``frame`` is not a supported type.
    """
    kind = _frame_kind(frame)
    cols = _columns(frame, kind)
    names = list(cols)
    req = _find(names, _REQUIRED, True)
    opt = _find(names, _OPTIONAL, False)
    args = {w: _column_arg(cols[req[w]], w) for w in _REQUIRED[1:]}
    for w in _OPTIONAL:
        args[w] = _column_arg(cols[opt[w]], w) if w in opt else None
    if pide_tol is not None:
        args["pide_tol"] = float(pide_tol)
    if valuation_date is not None:
        args["default_valuation"] = (valuation_date if isinstance(valuation_date, str)
                                     else _date_text(valuation_date, "valuation_date"))
    kinds = _arrow_text(cols[req["kind"]])
    if kinds is None:
        kinds = _text_arg(cols[req["kind"]])
    try:
        try:
            res = _saltus.price_columns(kinds, implied_vol=implied_vol, **args)
        except TypeError:
            # Some kind is neither str nor None (a NaN, a number): convert.
            res = _saltus.price_columns(_clean_text(kinds), implied_vol=implied_vol, **args)
    except ValueError as e:
        raise BookError(str(e)) from None
    order = (["expiry_years"] if "expiry_years" in res else []) + RESULT_COLUMNS[:10] \
        + (["implied_vol"] if implied_vol else []) \
        + (["early_exercise_premium", "error_estimate"] if "error_estimate" in res else []) \
        + ["terms", "status"]
    return _assemble(frame, kind, res, order)


def implied_vol(
    kind: Any,
    price: Any,
    spot: Any,
    strike: Any,
    expiry: Any,
    rate: Any,
    div_yield: Any = 0.0,
):
    """Black-Scholes implied volatility of each price, to machine precision
    (the inversion of ``saltus price --implied-vol``, docs/implied_vol.md).

    Arguments are arrays of one length, or scalars broadcast to it.
    Returns ``(vols, status)``: a float64 array and a list of ``ok`` or
    ``error: row N: <reason>`` (the vol is NaN exactly where the status is
    not ``ok``: a price outside its no-arbitrage bounds, a time value too
    small for double precision to resolve, a bad input).
    """
    arrays = [np.atleast_1d(np.asarray(x, dtype=np.float64))
              for x in (price, spot, strike, expiry, rate, div_yield)]
    kinds = np.atleast_1d(np.asarray(kind, dtype=object))
    n = max([len(kinds)] + [len(a) for a in arrays])
    arrays = [np.ascontiguousarray(np.broadcast_to(a, (n,))) for a in arrays]
    kinds = np.broadcast_to(kinds, (n,))
    kind_list = _clean_text(kinds.tolist())
    try:
        return _saltus.implied_vol(kind_list, *arrays)
    except ValueError as e:
        raise BookError(str(e)) from None


def crosscheck(frame: Any, *, paths: int = 1_000_000, seed: int = 20_261_201,
               pide_tol: Optional[float] = None) -> Any:
    """Re-prices every row with independent engines (Fourier, Monte Carlo,
    the PIDE) and compares each with the Merton series, as
    ``saltus crosscheck --paths N --seed S`` does: the same columns
    (:data:`CHECK_COLUMNS`) and verdict rules (docs/engines.md).

    A row's Monte Carlo stream is keyed on ``(seed, id)`` when the book has
    an ``id`` column and the row a non-empty id: such rows get the command
    line's digits. Without an id the key is a hash of the row's values,
    never its position (results do not depend on order or split, but differ
    from the command line's, which hashes the CSV text). Fields the command
    line leaves empty are NaN; ``mc_method`` and ``verdict`` are text.
    Expiries may be dates with a ``valuation_date`` column (no
    ``expiry_years`` column is added here).
    """
    kind = _frame_kind(frame)
    cols = _columns(frame, kind)
    names = list(cols)
    req = _find(names, _REQUIRED, True)
    opt = _find(names, _OPTIONAL + ["id"], False)
    args = {w: _column_arg(cols[req[w]], w) for w in _REQUIRED[1:]}
    for w in _OPTIONAL + ["id"]:
        args[w] = _column_arg(cols[opt[w]], w) if w in opt else None
    if args["id"] is not None and isinstance(args["id"], np.ndarray):
        # Numeric ids: as text, the way a CSV holds them when integral.
        args["id"] = [None if v != v else (str(int(v)) if float(v).is_integer() else repr(v))
                      for v in args["id"].tolist()]
    if pide_tol is not None:
        args["pide_tol"] = float(pide_tol)
    kinds = _arrow_text(cols[req["kind"]])
    if kinds is None:
        kinds = _clean_text(_text_arg(cols[req["kind"]]))
    try:
        res = _saltus.crosscheck_columns(kinds, paths=int(paths), seed=int(seed), **args)
    except ValueError as e:
        raise BookError(str(e)) from None
    return _assemble(frame, kind, res, CHECK_COLUMNS)


def calibrate(quotes: Any, *, valuation_date: Any = None, per_expiry: bool = False,
              keep_arbitrage: bool = False):
    """Fits ``vol, jump_rate, jump_mean, jump_vol`` per underlying to a quote
    sheet, exactly as ``saltus calibrate`` does (docs/calibration.md), and
    returns ``(params, residuals)`` as pandas DataFrames with the columns of
    PARAMS.csv and of the residuals file.

    ``quotes`` is a path to a quotes CSV, or a pandas DataFrame (or pyarrow
    Table) with the quote sheet's columns; a frame is handed to the library
    as CSV text with every number in round-trip form, so the fit is the one
    the command line makes of the same sheet. Statuses of a frame's rows name
    the row's 0-based position (``row N``); for a file, its line.
    ``valuation_date`` serves expiries written as dates, as
    ``--valuation-date``.
    """
    import io
    import os
    import re

    import pandas as pd

    from_frame = not isinstance(quotes, (str, bytes, os.PathLike))
    if from_frame:
        frame = quotes.to_pandas() if hasattr(quotes, "to_pandas") and not hasattr(
            quotes, "to_csv") else quotes
        data = frame.to_csv(index=False, float_format=None).encode()
    else:
        with open(quotes, "rb") as f:
            data = f.read()
    if valuation_date is not None and not isinstance(valuation_date, str):
        valuation_date = _date_text(valuation_date, "valuation_date")
    try:
        params, residuals = _saltus.calibrate_csv(
            data, valuation_date=valuation_date, per_expiry=per_expiry,
            keep_arbitrage=keep_arbitrage)
    except ValueError as e:
        raise BookError(str(e)) from None
    read = lambda t: pd.read_csv(io.StringIO(t), float_precision="round_trip",  # noqa: E731
                                 keep_default_na=False, na_values=[""])
    p, r = read(params), read(residuals)
    if from_frame and "status" in r.columns:
        r["status"] = [re.sub(r"line (\d+):", lambda m: f"row {int(m.group(1)) - 2}:", str(s))
                       for s in r["status"]]
    return p, r
