#!/usr/bin/env python3
"""Independent high-precision reference values for saltus's tests.

Uses mpmath (a general-purpose arbitrary-precision library, PyPI package
`mpmath`) at 40 significant digits. Nothing here shares code or algebra with
the Rust series engine:

* the Merton price is evaluated in its textbook form (Merton 1976):
      V = sum_n e^{-L'T} (L'T)^n / n! * BS(S, K, T, sigma_n, r_n, q),
      L' = lambda (1+k), sigma_n^2 = sigma^2 + n delta^2 / T,
      r_n = r - lambda k + n ln(1+k) / T,
  summed directly from n = 0 with far more terms than 40 digits need (and
  the truncation checked by adding 200 more terms);
* every Greek is a numerical derivative of that price by mpmath.diff, which
  raises the working precision internally; at the edge of the domain
  (sigma, lambda or delta = 0) a one-sided (right) difference is used.

Writes tests/data/merton_reference.csv and tests/data/normal_reference.csv.
Run:  pip install mpmath==1.3.0 && python3 scripts/make_reference.py
"""
import csv
import os

import mpmath as mp

mp.mp.dps = 40
HERE = os.path.dirname(os.path.abspath(__file__))
OUT = os.path.join(HERE, "..", "tests", "data")


def bs(kind, s, k, t, sig, r, q):
    """Black-Scholes with continuous yield; zero variance -> discounted forward intrinsic."""
    w = 1 if kind == "call" else -1
    fwd = s * mp.exp((r - q) * t)
    disc = mp.exp(-r * t)
    v = sig * mp.sqrt(t)
    if v == 0:
        return disc * max(w * (fwd - k), 0)
    d1 = (mp.log(fwd / k) + v * v / 2) / v
    d2 = d1 - v
    return disc * w * (fwd * mp.ncdf(w * d1) - k * mp.ncdf(w * d2))


def merton(kind, s, k, t, r, q, sig, lam, mu, dl, extra=0):
    if t == 0:
        return max((s - k) if kind == "call" else (k - s), 0)
    kk = mp.exp(mu + dl * dl / 2) - 1
    lp = lam * (1 + kk)
    big = max(lam * t, lp * t)
    nmax = int(big + 16 * mp.sqrt(big) + 80) + extra
    total = mp.mpf(0)
    for n in range(nmax + 1):
        if lp == 0 and n > 0:
            break
        wgt = mp.exp(-lp * t) * (lp * t) ** n / mp.factorial(n)
        sig_n = mp.sqrt(sig * sig + n * dl * dl / t)
        r_n = r - lam * kk + n * mp.log(1 + kk) / t
        total += wgt * bs(kind, s, k, t, sig_n, r_n, q)
    return total


FIELDS = ["spot", "strike", "expiry", "rate", "div_yield", "vol", "jump_rate", "jump_mean", "jump_vol"]


def greeks(row):
    kind = row["kind"]
    base = {f: mp.mpf(row[f]) for f in FIELDS}

    def f(**over):
        p = dict(base)
        p.update(over)
        return merton(kind, p["spot"], p["strike"], p["expiry"], p["rate"], p["div_yield"],
                      p["vol"], p["jump_rate"], p["jump_mean"], p["jump_vol"])

    price = f()
    check = merton(kind, *(base[x] for x in ["spot", "strike", "expiry", "rate", "div_yield", "vol",
                                              "jump_rate", "jump_mean", "jump_vol"]), extra=200)
    assert abs(price - check) <= mp.mpf(10) ** -45 * max(abs(price), mp.mpf(10) ** -300)
    out = {"price": price}
    if base["expiry"] == 0:
        for g in ["delta", "gamma", "vega", "theta", "rho", "div_rho", "d_jump_rate", "d_jump_mean",
                  "d_jump_vol", "vanna", "volga"]:
            out[g] = mp.mpf(0)
        w = 1 if kind == "call" else -1
        x = w * (base["spot"] - base["strike"])
        out["delta"] = w if x > 0 else (0 if x < 0 else w / mp.mpf(2))
        return out

    def d(field, n=1, edge=False):
        kw = {"direction": 1} if edge else {}
        return mp.diff(lambda x: f(**{field: x}), base[field], n, **kw)

    out["delta"] = d("spot")
    out["gamma"] = d("spot", 2)
    out["vega"] = d("vol", edge=base["vol"] == 0)
    out["theta"] = -d("expiry")
    out["rho"] = d("rate")
    out["div_rho"] = d("div_yield")
    out["d_jump_rate"] = d("jump_rate", edge=base["jump_rate"] == 0)
    out["d_jump_mean"] = d("jump_mean")
    out["d_jump_vol"] = d("jump_vol", edge=base["jump_vol"] == 0)
    if base["vol"] > 0:
        out["vanna"] = mp.diff(lambda a, b: f(spot=a, vol=b), (base["spot"], base["vol"]), (1, 1))
        out["volga"] = d("vol", 2)
    else:
        out["vanna"] = mp.nan
        out["volga"] = mp.nan
    return out


def cases():
    c = []

    def add(name, kind, s, k, t, r, q, sig, lam, mu, dl):
        c.append(dict(case=name, kind=kind, spot=s, strike=k, expiry=t, rate=r, div_yield=q, vol=sig,
                      jump_rate=lam, jump_mean=mu, jump_vol=dl))

    for kind in ["call", "put"]:
        # d'Halluin, Forsyth & Vetzal (2005) European test case.
        add("dhfv2005", kind, "100", "100", "0.25", "0.05", "0", "0.15", "0.1", "-0.9", "0.45")
        # Ordinary equity-like rows across moneyness and expiry.
        for kk in ["60", "90", "100", "110", "150"]:
            for t in ["0.1", "1"]:
                add(f"sweep_K{kk}_T{t}", kind, "100", kk, t, "0.03", "0.01", "0.2", "0.5", "-0.1", "0.15")
        add("short_1day", kind, "100", "102", "0.00273972602739726", "0.02", "0", "0.3", "2", "-0.05", "0.1")
        add("long_10y", kind, "100", "120", "10", "0.04", "0.02", "0.18", "0.3", "-0.2", "0.25")
        add("deep_itm_K1", kind, "100", "1", "0.5", "0.03", "0", "0.25", "1", "-0.1", "0.2")
        add("deep_otm_K10000", kind, "100", "10000", "0.5", "0.03", "0", "0.25", "1", "-0.1", "0.2")
        add("lambda_zero", kind, "100", "95", "0.75", "0.02", "0.01", "0.25", "0", "-0.1", "0.2")
        add("jump_vol_zero", kind, "100", "100", "0.5", "0.02", "0", "0.2", "0.8", "-0.15", "0")
        add("vol_zero", kind, "100", "97", "0.5", "0.02", "0", "0", "0.8", "-0.15", "0.2")
        add("vol_and_jump_vol_zero", kind, "100", "97", "0.5", "0.02", "0", "0", "0.8", "-0.15", "0")
        add("huge_intensity", kind, "100", "100", "1", "0.02", "0", "0.2", "1000", "-0.01", "0.02")
        add("huge_intensity_big_jumps", kind, "100", "80", "1", "0.02", "0", "0.2", "1000", "-0.05", "0.05")
        add("positive_jumps", kind, "50", "55", "2", "0.01", "0.03", "0.3", "0.4", "0.2", "0.3")
        add("negative_rate", kind, "100", "100", "1", "-0.01", "0.02", "0.2", "0.5", "-0.1", "0.1")
        add("expiry_zero", kind, "100", "90", "0", "0.02", "0", "0.2", "0.5", "-0.1", "0.1")
    # Crash puts whose value comes from paths with several jumps.
    add("crash_put_K40", "put", "100", "40", "0.5", "0.03", "0", "0.15", "0.2", "-0.6", "0.1")
    add("crash_put_tiny", "put", "100", "30", "0.05", "0.03", "0", "0.1", "0.05", "-0.3", "0.05")
    add("crash_put_3jumps", "put", "100", "50", "0.25", "0.02", "0", "0.12", "0.1", "-0.25", "0.05")
    add("otm_call_short", "call", "100", "160", "0.05", "0.02", "0", "0.1", "0.02", "0.1", "0.05")
    return c


def main():
    os.makedirs(OUT, exist_ok=True)
    cols = ["case", "kind"] + FIELDS + ["price", "delta", "gamma", "vega", "theta", "rho", "div_rho",
                                        "d_jump_rate", "d_jump_mean", "d_jump_vol", "vanna", "volga"]
    with open(os.path.join(OUT, "merton_reference.csv"), "w", newline="") as fh:
        wr = csv.writer(fh)
        wr.writerow(cols)
        for row in cases():
            g = greeks(row)
            wr.writerow([row[c] for c in ["case", "kind"] + FIELDS] +
                        [mp.nstr(g[c], 25, min_fixed=1, max_fixed=0) for c in cols[11:]])
            print(row["case"], row["kind"], mp.nstr(g["price"], 20))
    # Normal distribution function at 40 digits, both tails.
    with open(os.path.join(OUT, "normal_reference.csv"), "w", newline="") as fh:
        wr = csv.writer(fh)
        wr.writerow(["x", "cdf"])
        x = mp.mpf(-38)
        while x <= 9:
            wr.writerow([mp.nstr(x, 17), mp.nstr(mp.ncdf(x), 25, min_fixed=1, max_fixed=0)])
            x += mp.mpf("0.137")
    # Poisson masses for large means.
    with open(os.path.join(OUT, "poisson_reference.csv"), "w", newline="") as fh:
        wr = csv.writer(fh)
        wr.writerow(["n", "mu", "pmf"])
        for mu in ["0.37", "12.5", "250", "1000", "20000"]:
            m = mp.mpf(mu)
            for n in sorted({0, 1, 5, int(m), int(m) + 1, int(m * 2) + 3, max(0, int(m / 2))}):
                p = mp.exp(-m + n * mp.log(m) - mp.loggamma(n + 1))
                wr.writerow([n, mu, mp.nstr(p, 25, min_fixed=1, max_fixed=0)])


if __name__ == "__main__":
    main()
