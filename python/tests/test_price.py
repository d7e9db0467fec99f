"""saltus.price against the command line (same digits), the 40-digit mpmath
fixture (accuracy) and the row contract (bad rows)."""

from __future__ import annotations

import csv
import re
import math
import random
import threading

import numpy as np
import pandas as pd
import pytest

import saltus
from conftest import ROOT, run_cli, write_csv

GREEKS = saltus.RESULT_COLUMNS[:10]


def invented_book(n: int, seed: int):
    """An invented book spanning short to long expiries, wings and jump
    regimes, with a few bad rows (made-up numbers, no market data)."""
    rng = random.Random(seed)
    header = ["id", "kind", "spot", "strike", "expiry", "rate", "div_yield",
              "vol", "jump_rate", "jump_mean", "jump_vol", "quantity"]
    rows = []
    for i in range(n):
        s = rng.choice([20.0, 100.0, 2500.0])
        rows.append([
            f"Q{i}", rng.choice(["call", "put", "Call", " PUT "]), repr(s),
            repr(round(s * rng.uniform(0.4, 2.2), 4)),
            repr(rng.choice([0.0, 1 / 365, 0.1, 0.5, 2.0, 10.0])),
            repr(round(rng.uniform(-0.01, 0.08), 5)), repr(round(rng.uniform(0, 0.04), 5)),
            repr(rng.choice([0.0, 0.05, 0.2, 0.6])), repr(rng.choice([0.0, 0.1, 1.0, 8.0])),
            repr(round(rng.uniform(-0.5, 0.2), 4)), repr(rng.choice([0.0, 0.05, 0.3])),
            repr(rng.choice([1, -3, 10])),
        ])
    rows[3][7] = "-0.2"        # negative vol
    rows[5][3] = "abc"         # strike not a number
    rows[7][1] = "straddle"    # bad kind
    rows[9][8] = ""            # missing jump_rate
    rows[11][2] = "32%"        # nearly a number
    return header, rows


def same_float(a: str, b: float) -> bool:
    if a == "":
        return math.isnan(b)
    return float(a) == b and not math.isnan(b)


@pytest.mark.parametrize("implied", [False, True])
def test_same_digits_as_the_cli(cli, tmp_path, implied):
    """Every value and status equals `saltus price` on the same CSV (source:
    the command-line tool; the CLI writes shortest round-trip decimals, so
    reading them back gives the same doubles)."""
    header, rows = invented_book(400, 7)
    book = write_csv(tmp_path / "book.csv", header, rows)
    args = ["price", str(book)] + (["--implied-vol"] if implied else [])
    h, got = run_cli(cli, args, tmp_path)
    frame = pd.read_csv(book, dtype=str, keep_default_na=False)
    out = saltus.price(frame, implied_vol=implied)
    cols = GREEKS + (["implied_vol"] if implied else []) + ["terms"]
    assert h[len(header):] == cols + ["status"]
    assert list(out.columns) == header + cols + ["status"]
    for i, r in enumerate(got):
        rec = dict(zip(h, r))
        # The CLI counts input lines (header = line 1); Python counts rows from 0.
        assert out["status"][i] == rec["status"].replace(f"line {i + 2}:", f"row {i}:"), i
        for c in cols:
            assert same_float(rec[c], out[c][i]), (i, c, rec[c], out[c][i])


def test_numeric_frame_equals_text_frame(tmp_path):
    """pd.read_csv with numeric dtypes gives the same digits as text columns
    when pandas parses floats correctly rounded (float_precision="round_trip";
    its default parser is not correctly rounded in every pandas version)."""
    header, rows = invented_book(200, 11)
    good = [r for i, r in enumerate(rows) if i not in (3, 5, 7, 9, 11)]
    book = write_csv(tmp_path / "good.csv", header, good)
    a = saltus.price(pd.read_csv(book, float_precision="round_trip"))
    b = saltus.price(pd.read_csv(book, dtype=str))
    for c in GREEKS + ["terms"]:
        np.testing.assert_array_equal(a[c].to_numpy(), b[c].to_numpy())
    assert (a["status"] == "ok").all()


def test_against_the_mpmath_fixture():
    """Prices within 1e-13 x spot and Greeks within 1e-9 relative of the
    40-digit mpmath values (tests/data/merton_reference.csv, made by
    scripts/make_reference.py) - the bounds the Rust reference test asserts."""
    ref = pd.read_csv(ROOT / "tests" / "data" / "merton_reference.csv", dtype={"case": str})
    out = saltus.price(ref.drop(columns=GREEKS + ["vanna", "volga"]))
    assert (out["status"] == "ok").all(), out["status"].tolist()
    for c in GREEKS:
        want = ref[c].to_numpy()
        got = out[c].to_numpy()
        tol = (1e-13 if c == "price" else 1e-9) * np.maximum(np.abs(want), 1e-4 * ref["spot"])
        if c == "price":
            tol = 1e-13 * ref["spot"].to_numpy()
        bad = np.abs(got - want) > tol
        assert not bad.any(), (c, ref["case"][bad].tolist())


def test_bad_rows_keep_their_place_and_say_why():
    """The row contract of README 'Bad input', with 0-based row positions."""
    frame = {
        "kind": np.array(["call", "put", "call", "put"], dtype=object),
        "spot": np.array([100.0, 100.0, np.nan, 100.0]),
        "strike": np.array([100.0, 90.0, 100.0, 100.0]),
        "expiry": np.array([0.5, 0.5, 0.5, 0.5]),
        "rate": np.array([0.02, 0.02, 0.02, 0.02]),
        "vol": np.array([0.2, -0.2, 0.2, np.inf]),
        "jump_rate": np.array([0.3, 0.3, 0.3, 0.3]),
        "jump_mean": np.array([-0.1, -0.1, -0.1, -0.1]),
        "jump_vol": np.array([0.15, 0.15, 0.15, 0.15]),
        "div_yield": np.array([np.nan, 0.01, 0.0, 0.0]),
    }
    out = saltus.price(frame)
    assert out["status"] == [
        "ok",
        "error: row 1: vol must not be negative, got -0.2",
        "error: row 2: spot is missing",
        "error: row 3: vol is not a finite number (inf)",
    ]
    assert np.isfinite(out["price"][0]) and np.isnan(out["price"][1:]).all()
    # An empty (NaN) optional cell takes its default: div_yield 0.
    again = saltus.price({**frame, "div_yield": np.zeros(4)})
    assert again["price"][0] == out["price"][0]


def test_book_errors_are_exceptions():
    base = {"kind": ["call"], "spot": [100.0], "strike": [100.0], "expiry": [1.0],
            "rate": [0.0], "vol": [0.2], "jump_rate": [0.1], "jump_mean": [0.0]}
    with pytest.raises(saltus.BookError, match="missing required columns: jump_vol"):
        saltus.price(base)
    with pytest.raises(saltus.BookError, match="column jump_vol has 2 rows where kind has 1"):
        saltus.price({**base, "jump_vol": [0.1, 0.2]})
    with pytest.raises(saltus.BookError, match="more than once"):
        saltus.price({**base, "jump_vol": [0.1], " Jump_Vol": [0.1]})
    with pytest.raises(TypeError):
        saltus.price([1, 2, 3])


def test_columns_found_by_name_in_any_case_and_order():
    f = pd.DataFrame({" JUMP_VOL": [0.1], "Kind": ["put"], "spot": [100], "strike": [95],
                      "expiry": [1], "rate": [0.01], "vol": [0.2], "jump_rate": [0.5],
                      "jump_mean": [-0.2], "note": ["kept"]})
    out = saltus.price(f)
    assert out["status"][0] == "ok" and out["note"][0] == "kept"
    assert list(out.columns)[:10] == list(f.columns)


def test_pyarrow_table():
    pa = pytest.importorskip("pyarrow")
    header, rows = invented_book(50, 3)
    f = pd.DataFrame(rows, columns=header)
    a = saltus.price(f)
    t = saltus.price(pa.Table.from_pandas(f, preserve_index=False))
    assert t.column_names == list(a.columns)
    np.testing.assert_array_equal(t.column("price").to_numpy(zero_copy_only=False),
                                  a["price"].to_numpy())
    assert t.column("status").to_pylist() == a["status"].tolist()


def test_gil_is_released_while_pricing():
    """Another Python thread runs while the native library prices (the GIL
    is released around the computation)."""
    n = 300_000
    rng = np.random.default_rng(1)
    args = dict(
        kind=["call"] * n, spot=np.full(n, 100.0), strike=rng.uniform(50, 150, n),
        expiry=rng.uniform(0.1, 3, n), rate=np.full(n, 0.02), vol=np.full(n, 0.2),
        jump_rate=np.full(n, 2.0), jump_mean=np.full(n, -0.1), jump_vol=np.full(n, 0.2),
    )
    started = threading.Event()
    done = threading.Event()

    def work():
        started.set()
        saltus._saltus.price_columns(**args)
        done.set()

    t = threading.Thread(target=work)
    t.start()
    started.wait()
    count = 0
    while not done.is_set():
        count += 1
    t.join()
    assert count > 1000, count


def test_dated_expiries_match_the_cli(cli, tmp_path):
    """Dates as expiries: ACT/365 fixed from the valuation date, the same
    expiry_years and prices as `saltus price --valuation-date` (source: the
    command line), with datetime64 columns and per-row valuation dates."""
    header = ["id", "kind", "spot", "strike", "expiry", "valuation_date", "rate", "vol",
              "jump_rate", "jump_mean", "jump_vol"]
    rows = [
        ["D1", "call", "100", "95", "2027-03-19", "", "0.03", "0.2", "0.5", "-0.1", "0.2"],
        ["D2", "put", "100", "105", "2028-02-29", "2027-01-04", "0.03", "0.2", "0.5", "-0.1", "0.2"],
        ["D3", "put", "100", "105", "0.75", "", "0.03", "0.2", "0.5", "-0.1", "0.2"],
        ["D4", "call", "100", "95", "2026-11-30", "", "0.03", "0.2", "0.5", "-0.1", "0.2"],
        ["D5", "call", "100", "95", "2027-02-30", "", "0.03", "0.2", "0.5", "-0.1", "0.2"],
    ]
    book = write_csv(tmp_path / "dated.csv", header, rows)
    h, got = run_cli(cli, ["price", str(book), "--valuation-date", "2026-12-02"], tmp_path)
    text = saltus.price(pd.read_csv(book, dtype=str, keep_default_na=False),
                        valuation_date="2026-12-02")
    assert list(text.columns) == h
    for i, r in enumerate(got):
        rec = dict(zip(h, r))
        assert text["status"][i] == rec["status"].replace(f"line {i + 2}:", f"row {i}:")
        for c in ["expiry_years"] + GREEKS:
            assert same_float(rec[c], text[c][i]), (i, c)
    # 2026-12-02 to 2027-03-19 is 107 days (counted by hand: 29 + 31 + 28 + 19).
    assert text["expiry_years"][0] == 107 / 365
    # The same book with datetime64 columns and a date object.
    import datetime as dt
    typed = pd.read_csv(book, dtype=str, keep_default_na=False).iloc[[0, 1]].copy()
    typed["expiry"] = pd.to_datetime(typed["expiry"])
    typed["valuation_date"] = pd.to_datetime(typed["valuation_date"].replace("", None))
    out = saltus.price(typed, valuation_date=dt.date(2026, 12, 2))
    np.testing.assert_array_equal(out["price"].to_numpy(), text["price"][:2].to_numpy())
    with pytest.raises(saltus.BookError, match="time of day"):
        saltus.price(typed.assign(expiry=pd.to_datetime(["2027-03-19 10:00", "2028-02-29 00:00"])))


def test_american_rows_match_the_cli(cli, tmp_path):
    """An `exercise` column: American rows by the PIDE, with the premium and
    the error estimate, the same digits as `saltus price` (source: the
    command line); the premium is never negative and a bad style is a row
    error with the CLI's words."""
    header = ["id", "kind", "exercise", "spot", "strike", "expiry", "rate", "div_yield", "vol",
              "jump_rate", "jump_mean", "jump_vol"]
    rows = [
        ["A1", "put", "american", "100", "105", "0.5", "0.05", "0", "0.25", "0.2", "-0.2", "0.1"],
        ["A2", "call", "European", "100", "95", "0.5", "0.05", "0", "0.25", "0.2", "-0.2", "0.1"],
        ["A3", "call", "", "100", "95", "0.5", "0.05", "0", "0.25", "0.2", "-0.2", "0.1"],
        ["A4", "put", "bermudan", "100", "95", "0.5", "0.05", "0", "0.25", "0.2", "-0.2", "0.1"],
    ]
    book = write_csv(tmp_path / "am.csv", header, rows)
    h, got = run_cli(cli, ["price", str(book), "--pide-tol", "1e-5"], tmp_path)
    out = saltus.price(pd.read_csv(book, dtype=str, keep_default_na=False), pide_tol=1e-5)
    assert list(out.columns) == h
    cols = GREEKS + ["early_exercise_premium", "error_estimate", "terms"]
    for i, r in enumerate(got):
        rec = dict(zip(h, r))
        assert out["status"][i] == rec["status"].replace(f"line {i + 2}:", f"row {i}:")
        for c in cols:
            assert same_float(rec[c], out[c][i]), (i, c, rec[c], out[c][i])
    assert out["early_exercise_premium"][0] > 0 and out["early_exercise_premium"][1] == 0
    assert out["status"][3] == "error: row 3: exercise 'bermudan' is not european or american"
    with pytest.raises(saltus.BookError, match="pide_tol"):
        saltus.price(pd.read_csv(book, dtype=str, keep_default_na=False), pide_tol=0.5)


def test_crosscheck_matches_the_cli(cli, tmp_path):
    """saltus.crosscheck: every column and verdict equals `saltus crosscheck`
    with the same --paths and --seed on a book with ids (source: the command
    line; streams are keyed on seed and id), and the digits do not depend on
    the order of the book."""
    header, rows = invented_book(24, 5)
    book = write_csv(tmp_path / "xc.csv", header, rows)
    h, got = run_cli(cli, ["crosscheck", str(book), "--paths", "20000", "--seed", "7"], tmp_path)
    frame = pd.read_csv(book, dtype=str, keep_default_na=False)
    out = saltus.crosscheck(frame, paths=20000, seed=7)
    assert list(out.columns) == h
    text_cols = {"mc_method", "verdict", "status"}
    for i, r in enumerate(got):
        rec = dict(zip(h, r))
        assert out["status"][i] == rec["status"].replace(f"line {i + 2}:", f"row {i}:")
        for c in saltus.CHECK_COLUMNS:
            if c in text_cols - {"status"}:
                assert out[c][i] == rec[c], (i, c)
            elif c != "status":
                assert same_float(rec[c], out[c][i]), (i, c, rec[c], out[c][i])
    rev = saltus.crosscheck(frame.iloc[::-1].reset_index(drop=True), paths=20000, seed=7)
    np.testing.assert_array_equal(rev["price_mc"].to_numpy()[::-1], out["price_mc"].to_numpy())


def test_calibrate_matches_the_cli(cli, tmp_path):
    """saltus.calibrate gives the PARAMS and residuals files of
    `saltus calibrate` on the invented demo quote sheet (source: the command
    line), from the file and from a DataFrame of it."""
    import subprocess

    sheet = ROOT / "data" / "demo_quotes.csv"
    params_csv = tmp_path / "params.csv"
    res_csv = tmp_path / "res.csv"
    proc = subprocess.run([str(cli), "calibrate", str(sheet), "-o", str(params_csv),
                           "--residuals", str(res_csv), "-q"], capture_output=True, text=True)
    assert proc.returncode in (0, 1), proc.stderr
    read = lambda p: pd.read_csv(p, float_precision="round_trip",  # noqa: E731
                                 keep_default_na=False, na_values=[""])
    want_p, want_r = read(params_csv), read(res_csv)
    got_p, got_r = saltus.calibrate(str(sheet))
    pd.testing.assert_frame_equal(got_p, want_p)
    pd.testing.assert_frame_equal(got_r, want_r)
    frame = pd.read_csv(sheet, dtype=str, keep_default_na=False)
    fp, fr = saltus.calibrate(frame)
    pd.testing.assert_frame_equal(fp, want_p)
    assert fr["status"].tolist() == [
        re.sub(r"line (\d+):", lambda m: f"row {int(m.group(1)) - 2}:", s)
        for s in want_r["status"]
    ]
