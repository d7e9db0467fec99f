#!/usr/bin/env python3
"""American option values without jumps (lambda = 0) for tests/pide.rs.

Independent of saltus: a Cox-Ross-Rubinstein (1979) binomial tree whose last
step is replaced by the Black-Scholes value (the "BBS" tree of Broadie &
Detemple 1996), at n and 2n steps, combined by Richardson extrapolation
2 V(2n) - V(n) (their "BBSR"). The spread between the extrapolations at
(n, 2n) and (2n, 4n) is written as the reference's own error estimate.

    pip install numpy==2.* scipy
    python3 scripts/make_american_reference.py > tests/data/american_reference.csv
"""
import numpy as np
from scipy.special import ndtr

CASES = [
    # kind, S, K, T, r, q, sigma
    ("put", 100.0, 100.0, 1.0, 0.05, 0.0, 0.3),
    ("put", 100.0, 110.0, 0.5, 0.04, 0.0, 0.2),
    ("put", 100.0, 90.0, 2.0, 0.06, 0.01, 0.25),
    ("put", 100.0, 100.0, 0.25, 0.03, 0.0, 0.4),
    ("call", 100.0, 100.0, 1.0, 0.03, 0.05, 0.25),
    ("call", 100.0, 95.0, 0.5, 0.02, 0.08, 0.3),
]


def bs(kind, s, k, t, r, q, sig):
    sd = sig * np.sqrt(t)
    d1 = (np.log(s / k) + (r - q + 0.5 * sig * sig) * t) / sd
    d2 = d1 - sd
    if kind == "call":
        return s * np.exp(-q * t) * ndtr(d1) - k * np.exp(-r * t) * ndtr(d2)
    return k * np.exp(-r * t) * ndtr(-d2) - s * np.exp(-q * t) * ndtr(-d1)


def bbs(kind, s0, k, t, r, q, sig, n):
    dt = t / n
    u = np.exp(sig * np.sqrt(dt))
    d = 1.0 / u
    p = (np.exp((r - q) * dt) - d) / (u - d)
    disc = np.exp(-r * dt)
    w = 1.0 if kind == "call" else -1.0
    # Nodes at step n-1: Black-Scholes value over the last step, then exercise.
    i = n - 1
    s = s0 * u ** (i - 2.0 * np.arange(i + 1))
    v = np.maximum(bs(kind, s, k, dt, r, q, sig), w * (s - k))
    for i in range(n - 2, -1, -1):
        s = s0 * u ** (i - 2.0 * np.arange(i + 1))
        v = np.maximum(disc * (p * v[:-1] + (1 - p) * v[1:]), w * (s - k))
    return v[0]


def main():
    n = 4000
    print("kind,spot,strike,expiry,rate,div_yield,vol,american,reference_error")
    for kind, s, k, t, r, q, sig in CASES:
        a, b, c = (bbs(kind, s, k, t, r, q, sig, m) for m in (n, 2 * n, 4 * n))
        r1, r2 = 2 * b - a, 2 * c - b
        print(f"{kind},{s},{k},{t},{r},{q},{sig},{r2:.10f},{abs(r2 - r1):.2e}")


if __name__ == "__main__":
    main()
