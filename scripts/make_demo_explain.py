"""Writes the invented demo books of `saltus explain`:
data/demo_explain_before.csv (valuation date 2027-03-01) and
data/demo_explain_after.csv (2027-03-02).

Three made-up underlyings; every number is invented. Between the two days
each underlying's spot, vol and jump parameters move, the rate moves 5 bp;
position QUO-NEW is new today, TAR-EXP expired yesterday (its expiry was the
valuation date), and VEL-006 is a deliberately bad row in today's book
(a negative vol). Deterministic: run again and the files are the same.

    python3 scripts/make_demo_explain.py
"""

import csv

UNDERLYINGS = {
    # name: (spot, vol, jump_rate, jump_mean, jump_vol, div_yield) before; then after
    "QUOLL-IDX": ((1850.0, 0.16, 0.30, -0.10, 0.08, 0.015),
                  (1816.7, 0.175, 0.35, -0.11, 0.08, 0.015)),
    "TARN-MINING": ((42.50, 0.34, 0.80, -0.05, 0.15, 0.0),
                    (43.78, 0.33, 0.80, -0.05, 0.16, 0.0)),
    "VELLUM-BANK": ((118.0, 0.24, 0.20, -0.20, 0.12, 0.031),
                    (117.3, 0.248, 0.20, -0.20, 0.12, 0.031)),
}
RATE = (0.0310, 0.0315)
DATES = ("2027-03-01", "2027-03-02")

POSITIONS = [
    # id, underlying, kind, strike, expiry date, quantity, multiplier
    ("QUO-001", "QUOLL-IDX", "put", 1700, "2027-04-16", -40, 10),
    ("QUO-002", "QUOLL-IDX", "put", 1800, "2027-04-16", 25, 10),
    ("QUO-003", "QUOLL-IDX", "call", 1850, "2027-06-18", 15, 10),
    ("QUO-004", "QUOLL-IDX", "call", 1950, "2027-06-18", -30, 10),
    ("QUO-005", "QUOLL-IDX", "put", 1600, "2027-12-17", 10, 10),
    ("TAR-001", "TARN-MINING", "call", 40, "2027-03-19", 200, 100),
    ("TAR-002", "TARN-MINING", "call", 45, "2027-05-21", -150, 100),
    ("TAR-003", "TARN-MINING", "put", 38, "2027-05-21", 120, 100),
    ("TAR-004", "TARN-MINING", "put", 30, "2028-01-21", -80, 100),
    ("TAR-EXP", "TARN-MINING", "call", 42, "2027-03-01", 50, 100),
    ("VEL-001", "VELLUM-BANK", "call", 115, "2027-04-16", 60, 100),
    ("VEL-002", "VELLUM-BANK", "put", 110, "2027-04-16", -90, 100),
    ("VEL-003", "VELLUM-BANK", "put", 100, "2027-09-17", 70, 100),
    ("VEL-004", "VELLUM-BANK", "call", 130, "2027-09-17", -40, 100),
    ("VEL-005", "VELLUM-BANK", "call", 120, "2027-03-19", 35, 100),
    ("VEL-006", "VELLUM-BANK", "put", 105, "2027-06-18", 45, 100),
    ("QUO-NEW", "QUOLL-IDX", "put", 1750, "2027-05-21", 20, 10),
]

HEADER = ["id", "underlying", "kind", "spot", "strike", "expiry", "valuation_date", "rate",
          "div_yield", "vol", "jump_rate", "jump_mean", "jump_vol", "quantity", "multiplier"]


def write(path, day):
    with open(path, "w", newline="") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(HEADER)
        for pid, und, kind, strike, expiry, qty, mult in POSITIONS:
            if day == 0 and pid == "QUO-NEW":
                continue
            if day == 1 and pid == "TAR-EXP":
                continue
            spot, vol, lam, mu, delta, q = UNDERLYINGS[und][day]
            if day == 1 and pid == "VEL-006":
                vol = -0.25  # the deliberately bad row
            w.writerow([pid, und, kind, spot, strike, expiry, DATES[day], RATE[day], q, vol,
                        lam, mu, delta, qty, mult])


write("data/demo_explain_before.csv", 0)
write("data/demo_explain_after.csv", 1)
