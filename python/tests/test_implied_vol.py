"""saltus.implied_vol against the 100-digit mpmath inversion fixture
(tests/data/implied_vol_reference.csv, made by
scripts/make_implied_vol_reference.py) and the command line's bounds."""

from __future__ import annotations

import numpy as np
import pandas as pd

import saltus
from conftest import ROOT


def test_fixture_within_the_conditioning_bound():
    """Vol error within max(1e-12, 16 eps / E), E the vol elasticity of the
    price (docs/implied_vol.md; the bound the Rust test asserts), on every
    fixture case with a finite reference vol and E > 0."""
    ref = pd.read_csv(ROOT / "tests" / "data" / "implied_vol_reference.csv")
    ok = np.isfinite(ref["implied_vol"]) & (ref["elasticity"] > 0)
    ref = ref[ok].reset_index(drop=True)
    vols, status = saltus.implied_vol(ref["kind"], ref["price"], ref["spot"], ref["strike"],
                                      ref["expiry"], ref["rate"], ref["div_yield"])
    eps = np.finfo(float).eps
    bound = np.maximum(1e-12, 16 * eps / ref["elasticity"].to_numpy())
    solved = np.array([s == "ok" for s in status])
    assert solved.mean() > 0.9, [s for s in status if s != "ok"][:5]
    rel = np.abs(vols[solved] / ref["implied_vol"].to_numpy()[solved] - 1)
    assert (rel <= bound[solved]).all(), ref["case"][solved][rel > bound[solved]].tolist()
    assert np.isnan(vols[~solved]).all()


def test_hull_example_from_memory():
    """Hull, Options, Futures and Other Derivatives, implied volatility
    example (from memory): S = 21, K = 20, r = 0.1, T = 0.25, call price
    1.875 has an implied vol of about 0.235; mpmath findroot at 30 digits
    gives 0.234512913997643786548..."""
    v, s = saltus.implied_vol("call", 1.875, 21.0, 20.0, 0.25, 0.1, 0.0)
    assert s == ["ok"] and abs(v[0] / 0.2345129139976437865 - 1) < 1e-12


def test_bad_prices_say_why():
    v, s = saltus.implied_vol(["call", "put", "fly"], [200.0, -1.0, 5.0], 100.0, 100.0, 1.0,
                              0.0, 0.0)
    assert np.isnan(v).all()
    assert s[0].startswith("error: row 0:") and s[1].startswith("error: row 1:")
    assert s[2] == "error: row 2: kind 'fly' is not call or put"
