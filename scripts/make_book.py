#!/usr/bin/env python3
"""Writes a synthetic book of N rows (invented parameters) for benchmarks.

Usage: python3 scripts/make_book.py N [SEED] > book.csv
Typical parameters: lambda*T below 5, expiries 1 week to 3 years.
"""
import random
import sys

n = int(sys.argv[1])
rng = random.Random(int(sys.argv[2]) if len(sys.argv) > 2 else 1)
out = sys.stdout
out.write("id,underlying,kind,spot,strike,expiry,rate,div_yield,vol,jump_rate,jump_mean,jump_vol,quantity\n")
names = ["ALPHA-SYN", "BRAVO-SYN", "CHARLIE-SYN", "DELTA-SYN"]
for i in range(n):
    s = round(rng.uniform(20, 500), 2)
    k = round(s * rng.uniform(0.6, 1.5), 2)
    t = round(rng.uniform(0.02, 3.0), 4)
    lam = round(rng.uniform(0.05, min(1.6, 4.9 / t)), 3)
    out.write(f"R{i},{names[i % 4]},{'call' if i % 2 else 'put'},{s},{k},{t},"
              f"{round(rng.uniform(0, 0.06), 4)},{round(rng.uniform(0, 0.03), 4)},"
              f"{round(rng.uniform(0.1, 0.5), 3)},{lam},{round(rng.uniform(-0.3, 0.1), 3)},"
              f"{round(rng.uniform(0.02, 0.4), 3)},{rng.randint(-100, 100)}\n")
