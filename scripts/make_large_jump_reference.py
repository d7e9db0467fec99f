#!/usr/bin/env python3
"""Independent high-precision reference values for Merton calls with a large
jump vol (tests/data/merton_large_jump_reference.csv).

With `delta` = 10 the mean jump factor is `1 + k = e^{mu_J + delta^2/2} = e^50`,
so the textbook call sum over `p(n; lambda (1+k) T)` would need terms around
`n = 5e21`: no program sums that. The put's textbook sum (Merton 1976),

    P = sum_n e^{-L'T} (L'T)^n / n! * BS_put(S, K, T, sigma_n, r_n, q),
    L' = lambda (1+k), sigma_n^2 = sigma^2 + n delta^2 / T,
    r_n = r - lambda k + n ln(1+k) / T,

has terms bounded by `K e^{-rT} p(n; lambda T)` (each is a discounted put
payoff's expectation), so it is summed here from n = 0 up to
`lambda T + 16 sqrt(lambda T) + 80` and checked by adding 200 more terms. The
call is then `C = P + S e^{-qT} - K e^{-rT}` (put-call parity, exact), and
every Greek is a central difference of that call price (step 1e-25 at 80
extra digits).
Nothing here shares algebra with the Rust series engine (which sums
`a_n N(d1_n)`, `b_n N(d2_n)` forms on its own walk).

The weights `e^{-L'T}` and the discount factors `e^{-r_n T}` are each of
size `e^{+-lambda k T}` (up to e^{1e22} here) and cancel in the product, so
the working precision is raised by the number of digits of `lambda k T`.

Run:  pip install mpmath==1.3.0 && python3 scripts/make_large_jump_reference.py
"""
import csv
import os

import mpmath as mp

HERE = os.path.dirname(os.path.abspath(__file__))
OUT = os.path.join(HERE, "..", "tests", "data", "merton_large_jump_reference.csv")
FIELDS = ["spot", "strike", "expiry", "rate", "div_yield", "vol", "jump_rate", "jump_mean", "jump_vol"]
GREEKS = ["delta", "gamma", "vega", "theta", "rho", "div_rho", "d_jump_rate", "d_jump_mean",
          "d_jump_vol", "vanna", "volga"]


def bs_put(s, k, t, sig, r, q):
    v = sig * mp.sqrt(t)
    fwd = s * mp.exp((r - q) * t)
    disc = mp.exp(-r * t)
    d1 = (mp.log(fwd / k) + v * v / 2) / v
    d2 = d1 - v
    return disc * (k * mp.ncdf(-d2) - fwd * mp.ncdf(-d1))


def put(s, k, t, r, q, sig, lam, mu, dl, extra=0):
    kk = mp.exp(mu + dl * dl / 2) - 1
    lp = lam * (1 + kk)
    lt = lam * t
    nmax = int(lt + 16 * mp.sqrt(lt) + 80) + extra
    total = mp.mpf(0)
    for n in range(nmax + 1):
        wgt = mp.exp(-lp * t) * (lp * t) ** n / mp.factorial(n)
        sig_n = mp.sqrt(sig * sig + n * dl * dl / t)
        r_n = r - lam * kk + n * mp.log(1 + kk) / t
        total += wgt * bs_put(s, k, t, sig_n, r_n, q)
    return total


def call(p, extra=0):
    args = [p[f] for f in FIELDS]
    s, k, t, r, q = args[:5]
    return put(*args, extra=extra) + s * mp.exp(-q * t) - k * mp.exp(-r * t)


def digits_needed(row):
    lam, mu, dl, t = (mp.mpf(row[f]) for f in ["jump_rate", "jump_mean", "jump_vol", "expiry"])
    lkt = lam * t * mp.exp(mu + dl * dl / 2)
    return 40 + int(mp.log10(lkt + 1)) + 80


def greeks(row):
    mp.mp.dps = digits_needed(row)
    base = {f: mp.mpf(row[f]) for f in FIELDS}

    def f(**over):
        p = dict(base)
        p.update(over)
        return call(p)

    price = f()
    check = call(base, extra=200)
    assert abs(price - check) <= mp.mpf(10) ** -45 * abs(price)

    # Central differences with a step of 1e-25 at 80 extra digits: the
    # truncation error (h^2 times the third derivative / 6) is below 1e-48
    # relative and the rounding (10^-dps / h^2) below 1e-100. (mpmath.diff's
    # own step choice did not survive the e^{+-lambda k T} cancellation of the
    # jump_vol 20 row.)
    h = mp.mpf(10) ** -25

    def d(field, n=1):
        x = base[field]

        def g(y):
            return f(**{field: y})

        if n == 1:
            return (g(x + h) - g(x - h)) / (2 * h)
        return (g(x + h) - 2 * g(x) + g(x - h)) / (h * h)

    def mixed():
        s0, v0 = base["spot"], base["vol"]
        return (f(spot=s0 + h, vol=v0 + h) - f(spot=s0 + h, vol=v0 - h)
                - f(spot=s0 - h, vol=v0 + h) + f(spot=s0 - h, vol=v0 - h)) / (4 * h * h)

    out = {"price": price}
    out["delta"] = d("spot")
    out["gamma"] = d("spot", 2)
    out["vega"] = d("vol")
    out["theta"] = -d("expiry")
    out["rho"] = d("rate")
    out["div_rho"] = d("div_yield")
    out["d_jump_rate"] = d("jump_rate")
    out["d_jump_mean"] = d("jump_mean")
    out["d_jump_vol"] = d("jump_vol")
    out["vanna"] = mixed()
    out["volga"] = d("vol", 2)
    return out


def cases():
    c = []

    def add(name, s, k, t, r, q, sig, lam, mu, dl):
        c.append(dict(case=name, kind="call", spot=s, strike=k, expiry=t, rate=r, div_yield=q,
                      vol=sig, jump_rate=lam, jump_mean=mu, jump_vol=dl))

    # jump_vol 3: 1 + k = e^4.5, the call's own walk (mean lambda' T = 90).
    add("jv3_atm", "100", "100", "1", "0.03", "0", "0.2", "1", "0", "3")
    # jump_vol 5: lambda' T = 2.7e5, summed on the put's walk.
    add("jv5_atm", "100", "100", "1", "0.03", "0.01", "0.2", "1", "0", "5")
    add("jv5_otm_short", "100", "130", "0.1", "0.02", "0", "0.25", "2", "-0.5", "5")
    # jump_vol 10 (the refused rows of the issue): lambda' T = 5e21.
    add("jv10_atm", "100", "100", "1", "0.03", "0", "0.2", "1", "0", "10")
    add("jv10_deep_otm", "100", "10000", "0.5", "0.01", "0.02", "0.3", "0.5", "-2", "10")
    add("jv10_deep_itm", "100", "1", "2", "0.05", "0.01", "0.15", "0.2", "1", "10")
    add("jv8_mu_minus20", "50", "60", "3", "-0.02", "0.03", "0.4", "0.7", "-20", "8")
    add("jv6_long", "100", "150", "30", "0.04", "0.02", "0.3", "0.2", "0.5", "6")
    add("jv20_mu20", "100", "120", "2", "0.01", "0", "0.2", "0.5", "20", "20")
    add("jv12_rates_at_edges", "100", "90", "1", "1", "-1", "1.5", "3", "-1", "12")
    return c


def main():
    cols = ["case", "kind"] + FIELDS + ["price"] + GREEKS
    with open(OUT, "w", newline="") as fh:
        wr = csv.writer(fh)
        wr.writerow(cols)
        for row in cases():
            g = greeks(row)
            wr.writerow([row[c] for c in ["case", "kind"] + FIELDS] +
                        [mp.nstr(g[c], 25, min_fixed=1, max_fixed=0) for c in ["price"] + GREEKS])
            fh.flush()
            print(row["case"], mp.nstr(g["price"], 20), flush=True)


if __name__ == "__main__":
    main()
