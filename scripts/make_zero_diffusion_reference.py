#!/usr/bin/env python3
"""40-digit reference prices of Merton rows without (or with very little)
diffusion, for the Fourier engine's zero-jump-atom separation.

Uses mpmath (PyPI package `mpmath`) at 40 significant digits. The price is
the Merton (1976) series in its "sum over the jump count" form, written
here independently of the Rust engines and of scripts/make_reference.py:

    V = sum_{n>=0} e^{-lambda T} (lambda T)^n / n! * BS(S_n, K, T, r, q, sigma_n),
    S_n = S exp(-lambda k T + n (mu_J + delta^2 / 2)),
    sigma_n = sqrt(sigma^2 + n delta^2 / T),

where BS is Black-Scholes with a continuous yield; with sigma = 0 the
n = 0 term (the zero-jump atom) is the discounted payoff of its forward
S_0 e^{(r-q)T}. The sum runs to lambda T + 16 sqrt(lambda T) + 80 terms
and is checked against the same sum with 200 more terms, and each value is
checked against scripts/make_reference.py's textbook form (intensity
lambda (1 + k), drifts r_n), a different algebra, to 1e-35 relative.

Writes tests/data/zero_diffusion_reference.csv.
Run:  pip install mpmath==1.3.0 && python3 scripts/make_zero_diffusion_reference.py   (a few seconds)
"""
import csv
import os
import sys

import mpmath as mp

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)
import make_reference  # noqa: E402  (the textbook form, for the cross-check only)

mp.mp.dps = 40
OUT = os.path.join(HERE, "..", "tests", "data", "zero_diffusion_reference.csv")


def bs(kind, s, k, t, sig, r, q):
    w = 1 if kind == "call" else -1
    fwd = s * mp.exp((r - q) * t)
    disc = mp.exp(-r * t)
    v = sig * mp.sqrt(t)
    if v == 0:
        return disc * max(w * (fwd - k), 0)
    d1 = (mp.log(fwd / k) + v * v / 2) / v
    return disc * w * (fwd * mp.ncdf(w * d1) - k * mp.ncdf(w * (d1 - v)))


def by_jump_count(kind, s, k, t, r, q, sig, lam, mu, dl, extra=0):
    kk = mp.exp(mu + dl * dl / 2) - 1
    lt = lam * t
    nmax = int(lt + 16 * mp.sqrt(lt) + 80) + extra
    total = mp.mpf(0)
    for n in range(nmax + 1):
        wgt = mp.exp(-lt) * lt ** n / mp.factorial(n)
        s_n = s * mp.exp(-lam * kk * t + n * (mu + dl * dl / 2))
        sig_n = mp.sqrt(sig * sig + n * dl * dl / t)
        total += wgt * bs(kind, s_n, k, t, sig_n, r, q)
    return total


# case, spot, strike, expiry, rate, div_yield, vol, jump_rate, jump_mean, jump_vol
CASES = []
for kind in ["call", "put"]:
    for (name, t, lam, mu, dl) in [
        ("day_rare", 1 / 365, 0.5, -0.1, 0.15),
        ("week", 7 / 365, 12.0, -0.02, 0.05),
        ("quarter", 0.25, 1.0, -0.2, 0.3),
        ("dhfv_jumps", 0.25, 0.1, -0.9, 0.45),
        ("year_up", 1.0, 3.0, 0.05, 0.1),
        ("ten_years", 10.0, 0.4, -0.3, 0.25),
        ("many_jumps", 2.0, 60.0, -0.01, 0.04),
        ("tiny_jump_vol", 0.5, 2.0, -0.05, 0.01),
    ]:
        for strike in [40, 80, 100, 125, 250]:
            CASES.append((f"{name}_K{strike}", kind, 100, strike, t, "0.03", "0.01", 0, lam, mu, dl))
    # a little diffusion, well below one jump's vol (the separated branch with sigma > 0)
    for strike in [70, 100, 140]:
        CASES.append((f"small_sigma_K{strike}", kind, 100, strike, 0.5, "0.02", "0", "0.01", 1.5, -0.15, 0.3))


def main():
    rows = []
    for (case, kind, s, k, t, r, q, sig, lam, mu, dl) in CASES:
        a = [mp.mpf(x) if not isinstance(x, float) else mp.mpf(repr(x)) for x in (s, k, t, r, q, sig, lam, mu, dl)]
        price = by_jump_count(kind, *a)
        more = by_jump_count(kind, *a, extra=200)
        other = make_reference.merton(kind, *a)
        tiny = mp.mpf(10) ** -300
        assert abs(price - more) <= mp.mpf(10) ** -45 * max(abs(price), tiny), case
        assert abs(price - other) <= mp.mpf(10) ** -35 * max(abs(price), tiny), (case, price, other)
        rows.append([case, kind] + [repr(x) if isinstance(x, float) else str(x) for x in (s, k, t, r, q, sig, lam, mu, dl)]
                    + [mp.nstr(price, 25, min_fixed=-5, max_fixed=5)])
    with open(OUT, "w", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["case", "kind", "spot", "strike", "expiry", "rate", "div_yield", "vol",
                    "jump_rate", "jump_mean", "jump_vol", "price"])
        w.writerows(rows)
    print(f"wrote {len(rows)} rows to {OUT}")


if __name__ == "__main__":
    main()
