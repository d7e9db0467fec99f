#!/usr/bin/env python3
"""Writes data/demo_quotes.csv: an invented quote sheet for the demo book's
invented underlyings (ZEPHYRA-IDX, KORRIN-BIO, VALDEN-ENERGY).

Prices come from the Merton (1976) series, summed here independently of
saltus (standard library only), with invented "true" parameters; each
quote's implied vol is then moved by seeded noise of a few tenths of a vol
point and quoted three ways: bid/ask prices (ZEPHYRA-IDX), mid prices
(KORRIN-BIO) and implied vols with weights (VALDEN-ENERGY). Two
deliberately bad rows follow (two quote kinds in one row; a call priced
above the call at a lower strike), to show how the fit reports them.

Usage: python3 scripts/make_demo_quotes.py > data/demo_quotes.csv
"""
import math
import random
import sys

# Invented parameters: (spot, rate, div_yield, vol, jump_rate, jump_mean, jump_vol)
UNDERLYINGS = {
    "ZEPHYRA-IDX": (2450.0, 0.035, 0.018, 0.13, 0.3, -0.12, 0.1),
    "KORRIN-BIO": (84.5, 0.035, 0.0, 0.38, 0.5, -0.25, 0.3),
    "VALDEN-ENERGY": (61.2, 0.035, 0.04, 0.27, 0.8, 0.04, 0.15),
}
EXPIRIES = [0.0833, 0.25, 0.5, 1.0, 1.5, 2.0]
STRIKES_PER_EXPIRY = 11
NOISE_VOL = 0.002  # +-0.2 vol points, uniform
HALF_SPREAD_VOL = 0.003


def ncdf(x):
    return 0.5 * math.erfc(-x / math.sqrt(2.0))


def bs(kind, s, k, t, r, q, sigma):
    v = sigma * math.sqrt(t)
    d1 = (math.log(s / k) + (r - q) * t) / v + 0.5 * v
    d2 = d1 - v
    if kind == "call":
        return s * math.exp(-q * t) * ncdf(d1) - k * math.exp(-r * t) * ncdf(d2)
    return k * math.exp(-r * t) * ncdf(-d2) - s * math.exp(-q * t) * ncdf(-d1)


def merton(kind, s, k, t, r, q, sigma, lam, mu, delta):
    """sum_n p(n; lambda' T) BS(sigma_n, r_n), lambda' = lambda (1 + kappa)."""
    kappa = math.exp(mu + 0.5 * delta * delta) - 1.0
    lp = lam * (1.0 + kappa) * t
    total, n, weight = 0.0, 0, math.exp(-lp)
    while True:
        sn = math.sqrt(sigma * sigma + n * delta * delta / t)
        rn = r - lam * kappa + n * math.log(1.0 + kappa) / t
        total += weight * bs(kind, s, k, t, rn, q, sn)
        n += 1
        weight *= lp / n
        if n > lp + 10 and weight < 1e-17:
            return total


def implied_vol(kind, price, s, k, t, r, q):
    lo, hi = 1e-6, 5.0
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if bs(kind, s, k, t, r, q, mid) > price:
            hi = mid
        else:
            lo = mid
    return 0.5 * (lo + hi)


def main():
    rng = random.Random(20261202)
    out = sys.stdout
    out.write("id,underlying,kind,strike,expiry,spot,rate,div_yield,price,bid,ask,implied_vol,weight\n")
    for name, (s, r, q, sigma, lam, mu, delta) in UNDERLYINGS.items():
        tag = name[:3]
        i = 0
        for t in EXPIRIES:
            fwd = s * math.exp((r - q) * t)
            sd = 0.3 * math.sqrt(t)
            for j in range(STRIKES_PER_EXPIRY):
                z = -2.0 + 3.5 * j / (STRIKES_PER_EXPIRY - 1)
                k = round(fwd * math.exp(z * sd), 2 if s < 1000 else 0)
                kind = "put" if k < fwd else "call"
                p = merton(kind, s, k, t, r, q, sigma, lam, mu, delta)
                vol = implied_vol(kind, p, s, k, t, r, q) + rng.uniform(-NOISE_VOL, NOISE_VOL)
                i += 1
                row = f"{tag}-Q{i:03d},{name},{kind},{k},{t},{s},{r},{q}"
                if name == "ZEPHYRA-IDX":
                    bid = bs(kind, s, k, t, r, q, vol - HALF_SPREAD_VOL)
                    ask = bs(kind, s, k, t, r, q, vol + HALF_SPREAD_VOL)
                    out.write(f"{row},,{math.floor(bid * 1e4) / 1e4},{math.ceil(ask * 1e4) / 1e4},,\n")
                elif name == "KORRIN-BIO":
                    out.write(f"{row},{round(bs(kind, s, k, t, r, q, vol), 6)},,,,\n")
                else:
                    w = 2.0 if abs(z) < 1.0 else 1.0
                    out.write(f"{row},,,,{round(vol, 6)},{w}\n")
    # Deliberately bad rows.
    out.write("BAD-Q001,KORRIN-BIO,call,90,0.5,84.5,0.035,0,6.1,6.0,6.2,,\n")
    out.write("BAD-Q002,VALDEN-ENERGY,call,70,1.0,61.2,0.035,0.04,9.5,,,,\n")


if __name__ == "__main__":
    main()
