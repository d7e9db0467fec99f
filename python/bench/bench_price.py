"""Speed of saltus.price on a book held in numpy arrays, against a vectorised
numpy implementation of the same formula with the same Greeks, in the same
run (docs/performance.md, "Python").

    python3 python/bench/bench_price.py [ROWS]       # default 1,000,000

Prints rows per second for: saltus.price on a dict of numpy arrays (what a
user calls: column lookup, conversion, the result dict); the native call
alone (the library's compute plus the array hand-over); numpy (the Merton
series summed to a fixed number of terms, enough for every row of this
book, with scipy.special.ndtr for the normal cdf). It also checks that the
numpy prices and Greeks agree with saltus, so both compute the same thing.
The book is invented (made-up ranges, no market data).
"""

from __future__ import annotations

import sys
import time

import numpy as np
from scipy.special import ndtr, gammaln

import saltus


def book(n: int, seed: int = 2026):
    rng = np.random.default_rng(seed)
    return {
        "kind": np.where(rng.random(n) < 0.5, "call", "put").astype(object),
        "spot": np.full(n, 100.0),
        "strike": rng.uniform(60.0, 160.0, n),
        "expiry": rng.uniform(0.05, 3.0, n),
        "rate": np.full(n, 0.02),
        "div_yield": np.full(n, 0.01),
        "vol": rng.uniform(0.1, 0.4, n),
        "jump_rate": rng.uniform(0.1, 2.0, n),
        "jump_mean": rng.uniform(-0.3, 0.1, n),
        "jump_vol": rng.uniform(0.05, 0.4, n),
    }


def numpy_merton(b, terms: int):
    """Merton price and the ten Greeks of `saltus price`, vectorised over
    rows, summed over n = 0 .. terms-1: the Poisson(lambda T) mixture of
    discounted conditional Black-Scholes values, conditional forward
    S e^{(r-q)T} e^{-lambda k T + n ln(1+k)} and variance sigma^2 + n delta^2/T
    (docs/model.md), with every derivative taken term by term."""
    S, K, T = b["spot"], b["strike"], b["expiry"]
    r, q, sig = b["rate"], b["div_yield"], b["vol"]
    lam, mu, dl = b["jump_rate"], b["jump_mean"], b["jump_vol"]
    w = np.where(b["kind"] == "call", 1.0, -1.0)
    lk = mu + 0.5 * dl * dl            # ln(1 + k)
    k = np.expm1(lk)
    m = lam * T                        # Poisson mean of the jump count
    sqT = np.sqrt(T)
    dq = np.exp(-q * T)
    dr = np.exp(-r * T)
    out = {c: np.zeros_like(S) for c in saltus.RESULT_COLUMNS[:10]}
    logm = np.log(m)
    for n in range(terms):
        p = np.exp(n * logm - m - gammaln(n + 1.0))
        pm1 = np.exp((n - 1) * logm - m - gammaln(n)) if n > 0 else 0.0
        dp_dm = pm1 - p                              # d p_n / d m
        var = sig * sig + n * dl * dl / T
        sn = np.sqrt(var)
        # r_n - r = -lambda k + n ln(1+k)/T: the n-th term is
        # e^{-rT} E[payoff] with forward S e^{(r_n - q)T}; write its
        # growth g = e^{(r_n - r) T} = e^{-lambda k T + n ln(1+k)}.
        g = np.exp(-lam * k * T + n * lk)
        F = S * g                                     # discounted at r below
        d1 = (np.log(F / K) + (r - q + 0.5 * var) * T) / (sn * sqT)
        d2 = d1 - sn * sqT
        Nd1, Nd2 = ndtr(w * d1), ndtr(w * d2)
        phi = np.exp(-0.5 * d1 * d1) / np.sqrt(2.0 * np.pi)
        bs = w * (F * dq * Nd1 - K * dr * Nd2)        # e^{-rT}-discounted term value
        dbs_dF = w * dq * Nd1                         # d term / d F
        vega_n = F * dq * phi * sqT                   # d term / d sigma_n
        out["price"] += p * bs
        out["delta"] += p * dbs_dF * g
        out["gamma"] += p * g * g * dq * phi / (F * sn * sqT)
        out["vega"] += p * vega_n * sig / sn
        # theta = -dV/dT: p, g, sigma_n and the discounting all move with T.
        dg_dT = g * (-lam * k)
        dvar_dT = -n * dl * dl / (T * T)
        dbs_dT = (dbs_dF * S * dg_dT + vega_n * (dvar_dT / (2 * sn)) + vega_n * sn / (2 * T)
                  - q * F * dq * w * Nd1 + r * K * dr * w * Nd2)
        out["theta"] -= dp_dm * lam * bs + p * dbs_dT
        out["rho"] += p * w * K * T * dr * Nd2
        out["div_rho"] += -p * w * F * T * dq * Nd1
        # jump rate: m = lambda T, g = e^{-lambda k T + n ln(1+k)}
        out["d_jump_rate"] += dp_dm * T * bs + p * dbs_dF * S * g * (-k * T)
        # jump mean: dk/dmu = 1 + k, d ln(1+k)/dmu = 1
        dg_dmu = g * (-lam * (1 + k) * T + n)
        out["d_jump_mean"] += p * dbs_dF * S * dg_dmu
        # jump vol: dk/ddelta = delta (1+k), d ln(1+k)/ddelta = delta, d var/ddelta = 2 n delta / T
        dg_dd = g * (-lam * dl * (1 + k) * T + n * dl)
        out["d_jump_vol"] += p * dbs_dF * S * dg_dd + p * vega_n * (n * dl / T) / sn
    return out


def timed(f, repeat=3):
    best = float("inf")
    for _ in range(repeat):
        t = time.perf_counter()
        r = f()
        best = min(best, time.perf_counter() - t)
    return best, r


def main():
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000
    b = book(n)
    m_max = float(np.max(b["jump_rate"] * b["expiry"]))
    terms = int(np.ceil(m_max + 12 * np.sqrt(m_max) + 25))  # Poisson tail far below 1e-16
    native_args = {c: v for c, v in b.items() if c != "kind"}
    kinds = b["kind"].tolist()
    t_user, res = timed(lambda: saltus.price(b))
    t_native, _ = timed(lambda: saltus._saltus.price_columns(kinds, **native_args))
    t_numpy, ref = timed(lambda: numpy_merton(b, terms), repeat=1)
    worst = {c: float(np.max(np.abs(ref[c] - res[c]) / np.maximum(np.abs(res[c]), 1e-3)))
             for c in saltus.RESULT_COLUMNS[:10]}
    print(f"rows {n}, numpy terms {terms}, threads: rayon default")
    print(f"saltus.price (dict of numpy arrays)  {n / t_user / 1e6:8.3f} M rows/s  ({t_user:.3f} s)")
    print(f"native call alone                    {n / t_native / 1e6:8.3f} M rows/s  ({t_native:.3f} s)")
    print(f"numpy vectorised, same Greeks        {n / t_numpy / 1e6:8.3f} M rows/s  ({t_numpy:.3f} s)")
    print(f"saltus.price / numpy speed ratio     {t_numpy / t_user:8.2f}x")
    print("largest difference numpy vs saltus (relative, floor 1e-3): "
          + ", ".join(f"{c} {v:.1e}" for c, v in worst.items()))


if __name__ == "__main__":
    main()
