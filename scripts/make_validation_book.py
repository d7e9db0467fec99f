#!/usr/bin/env python3
"""Writes a broad invented validation book for `saltus crosscheck` (issue 10).

Usage: python3 scripts/make_validation_book.py [N] [SEED] > book.csv

Rows span one-day to ten-year expiries (log-uniform), strikes from 30% to
300% of spot (log-uniform, so deep in- and out-of-the-money rows are
common), calls and puts, and five jump regimes:
  ordinary  lambda 0-2, mu_J -0.3..0.1, delta 0.05-0.3
  crash     lambda 0.05-0.3, mu_J -0.9..-0.4, delta 0-0.45
  no-diff   zero diffusion vol, lambda 0.5-20, delta 0.05-0.5
  heavy     lambda*T 50-300, mu_J -0.1..0.1, log jump vol 0.3-0.6
  thin      delta 0 or near 0 (jump vol 0-0.01), diffusion tail drives the wings
plus the d'Halluin, Forsyth & Vetzal (2005) set (S = 100, T = 0.25,
r = 0.05, sigma = 0.15, lambda = 0.1, mu_J = -0.9, delta = 0.45) at
strikes 50 (put) and 150 (call). All numbers are invented; nothing is
market data.
"""
import math
import random
import sys

n = int(sys.argv[1]) if len(sys.argv) > 1 else 300
rng = random.Random(int(sys.argv[2]) if len(sys.argv) > 2 else 10)
out = sys.stdout
out.write("id,kind,spot,strike,expiry,rate,div_yield,vol,jump_rate,jump_mean,jump_vol\n")
out.write("dfv-put50,put,100,50,0.25,0.05,0,0.15,0.1,-0.9,0.45\n")
out.write("dfv-call150,call,100,150,0.25,0.05,0,0.15,0.1,-0.9,0.45\n")
regimes = ["ordinary", "crash", "no-diff", "heavy", "thin"]
for i in range(n):
    regime = regimes[i % len(regimes)]
    s = round(rng.uniform(20, 500), 2)
    k = round(s * math.exp(rng.uniform(math.log(0.3), math.log(3.0))), 4)
    t = round(math.exp(rng.uniform(math.log(1 / 365), math.log(10))), 6)
    r = round(rng.uniform(0, 0.06), 4)
    q = round(rng.uniform(0, 0.03), 4)
    vol = round(rng.uniform(0.05, 0.6), 3)
    if regime == "ordinary":
        lam, mu, dl = rng.uniform(0, 2), rng.uniform(-0.3, 0.1), rng.uniform(0.05, 0.3)
    elif regime == "crash":
        lam, mu, dl = rng.uniform(0.05, 0.3), rng.uniform(-0.9, -0.4), rng.uniform(0, 0.45)
    elif regime == "no-diff":
        vol = 0.0
        lam, mu, dl = rng.uniform(0.5, 20), rng.uniform(-0.3, 0.2), rng.uniform(0.05, 0.5)
    elif regime == "heavy":
        lam_t = rng.uniform(50, 300)
        lam, mu, dl = lam_t / t, rng.uniform(-0.1, 0.1), rng.uniform(0.3, 0.6)
        vol = round(rng.uniform(0.0, 0.3), 3)
    else:
        lam, mu, dl = rng.uniform(0.1, 3), rng.uniform(-0.2, 0.05), rng.choice([0.0, 0.005, 0.01])
    kind = "call" if rng.random() < 0.5 else "put"
    out.write(f"v{i}-{regime},{kind},{s},{k},{t},{r},{q},{vol},{round(lam, 6)},"
              f"{round(mu, 4)},{round(dl, 4)}\n")
