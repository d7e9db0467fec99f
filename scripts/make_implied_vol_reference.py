#!/usr/bin/env python3
"""Reference implied volatilities for tests/implied_vol.rs, independent of saltus.

For every case the Black-Scholes price is computed with mpmath at 100
significant digits and rounded to the nearest double (the input a program
actually sees); that double is then inverted again with mpmath's findroot at
100 digits, on the logarithm of the time value, so the reference volatility
is the exact implied volatility of the double price, not the generating
volatility. Each row also records the vol elasticity of the price,
E = sigma * vega / price, which sets how well any double-precision inversion
can do (docs/implied_vol.md).

Cases: a sweep grid (vol 0.001..5, expiry one hour..30 years, log-moneyness
ln(K/F) -6..+6, calls and puts) and named hard cases.

    pip install mpmath==1.3.0
    python3 scripts/make_implied_vol_reference.py   # writes tests/data/implied_vol_reference.csv
"""

import csv
import os
import sys

import mpmath as mp

mp.mp.dps = 100


def bs(kind, s, k, t, r, q, vol):
    s, k, t, r, q, vol = map(mp.mpf, (s, k, t, r, q, vol))
    v = vol * mp.sqrt(t)
    se = s * mp.exp(-q * t)
    kd = k * mp.exp(-r * t)
    d1 = (mp.log(se / kd) + v * v / 2) / v
    d2 = d1 - v
    if kind == "call":
        return se * mp.ncdf(d1) - kd * mp.ncdf(d2)
    return kd * mp.ncdf(-d2) - se * mp.ncdf(-d1)


def intrinsic(kind, s, k, t, r, q):
    se = mp.mpf(s) * mp.exp(-mp.mpf(q) * t)
    kd = mp.mpf(k) * mp.exp(-mp.mpf(r) * t)
    w = 1 if kind == "call" else -1
    return max(w * (se - kd), mp.mpf(0))


def invert(kind, price, s, k, t, r, q, start):
    """Exact implied vol of the (double) price, by findroot on log time value."""
    tv = mp.mpf(price) - intrinsic(kind, s, k, t, r, q)
    if tv <= 0:
        return None
    target = mp.log(tv)
    intr = intrinsic(kind, s, k, t, r, q)

    def f(v):
        d = bs(kind, s, k, t, r, q, v) - intr
        # below the working precision the time value reads as <= 0: far below the root
        return mp.log(d) - target if d > 0 else mp.mpf(-10) ** 6

    lo, hi = mp.mpf(start) * 0.9, mp.mpf(start) * 1.1
    while f(lo) > 0:
        lo /= 2
    while f(hi) < 0:
        hi *= 2
        if hi > 1000:
            return None  # the double price is at or above the supremum
    root = mp.findroot(f, (lo, hi), solver="illinois", maxsteps=500)
    assert abs(f(root)) < mp.mpf(10) ** -50, (kind, price, s, k, t, start)
    return root


def vega(s, k, t, r, q, vol):
    s, k, t, r, q, vol = map(mp.mpf, (s, k, t, r, q, vol))
    v = vol * mp.sqrt(t)
    se = s * mp.exp(-q * t)
    kd = k * mp.exp(-r * t)
    d1 = (mp.log(se / kd) + v * v / 2) / v
    return se * mp.npdf(d1) * mp.sqrt(t)


def sig(x):
    return mp.nstr(x, 20, min_fixed=-4, max_fixed=15) if x is not None else "nan"


def cases():
    vols = ["0.001", "0.01", "0.1", "0.3", "1", "2", "5"]
    expiries = [("1/8760", mp.mpf(1) / 8760), ("1/12", mp.mpf(1) / 12), ("1", 1), ("5", 5), ("30", 30)]
    moneyness = ["-6", "-2", "-0.5", "0", "0.5", "2", "6"]
    r, q, s = "0.03", "0.01", "100"
    for vol in vols:
        for tname, t in expiries:
            for lm in moneyness:
                # strike from log-moneyness ln(K/F), rounded to a double
                f = mp.mpf(s) * mp.exp((mp.mpf(r) - mp.mpf(q)) * t)
                k = float(f * mp.exp(mp.mpf(lm)))
                for kind in ("call", "put"):
                    yield (f"sweep vol={vol} T={tname} ln(K/F)={lm}", kind, 100.0, k, float(t), 0.03, 0.01, vol)
    yield ("hard: S=100 K=150 T=1 sigma=0.04 call, price about 9.01e-25", "call", 100.0, 150.0, 1.0, 0.0, 0.0, "0.04")
    yield ("hard: deep in-the-money call inverted as its out-of-the-money put", "call", 100.0, 60.0, 0.5, 0.02, 0.0, "0.2")
    yield ("hard: deep in-the-money put inverted as its out-of-the-money call", "put", 100.0, 160.0, 1.0, 0.05, 0.02, "0.25")
    yield ("hard: one-hour expiry near the money", "call", 100.0, 100.5, 1.0 / 8760, 0.03, 0.0, "0.3")
    yield ("hard: one-hour expiry out of the money put", "put", 100.0, 99.0, 1.0 / 8760, 0.03, 0.0, "0.25")
    yield ("hard: near the upper bound (sigma sqrt T = 8)", "call", 100.0, 100.0, 16.0, 0.0, 0.0, "2")
    yield ("hard: near the upper bound, put (sigma sqrt T = 10)", "put", 100.0, 80.0, 25.0, 0.01, 0.0, "2")
    yield ("hard: near the lower bound, tiny vol at the money", "call", 100.0, 100.0, 1.0 / 8760, 0.0, 0.0, "0.001")
    yield ("hard: deep out of the money short call, price near 1e-290", "call", 100.0, 400.0, 0.25, 0.0, 0.0, "0.076")
    yield ("hard: Hull-style 21/20 call, vol 0.235", "call", 21.0, 20.0, 0.25, 0.1, 0.0, "0.235")


def main():
    out = os.path.join(os.path.dirname(__file__), "..", "tests", "data", "implied_vol_reference.csv")
    rows = []
    for name, kind, s, k, t, r, q, vol in cases():
        p = bs(kind, s, k, t, r, q, vol)
        pd = float(p)
        if pd == 0.0:
            continue  # the price itself underflows: nothing to invert
        tv = mp.mpf(pd) - intrinsic(kind, s, k, t, r, q)
        # outside the issue domain (time value below 1e-14 of the price) not inverted
        iv = invert(kind, pd, s, k, t, r, q, vol) if tv > mp.mpf(10) ** -14 * pd else None
        e = mp.mpf(vol) * vega(s, k, t, r, q, vol) / mp.mpf(pd)
        rows.append([name, kind, repr(s), repr(k), repr(t), repr(r), repr(q), vol, repr(pd),
                     sig(iv), sig(tv), sig(tv / mp.mpf(pd)), repr(float(e))])
    with open(out, "w", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["case", "kind", "spot", "strike", "expiry", "rate", "div_yield", "generating_vol",
                    "price", "implied_vol", "time_value", "time_value_ratio", "elasticity"])
        w.writerows(rows)
    print(f"wrote {len(rows)} rows to {out}", file=sys.stderr)


if __name__ == "__main__":
    main()
