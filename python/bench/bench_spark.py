"""Throughput of saltus.spark.price in Spark local mode (docs/scale-out.md).

    python3 python/bench/bench_spark.py [ROWS]      # default 1,000,000

Writes an invented book of ROWS rows to a temporary CSV, then for local[1]
and local[2]: reads it (string columns), prices it with saltus.spark.price
and counts the priced rows (a full pass over every partition), best of two
runs; and the same book through the command line (`saltus price`) for the
per-row cost of the Spark path. Rates include Spark's CSV scan and the
Arrow hand-over, which is the cost a batch job pays.
"""

from __future__ import annotations

import csv
import os
import random
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def write_book(path: Path, n: int) -> None:
    rng = random.Random(11)
    with open(path, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["id", "underlying", "kind", "spot", "strike", "expiry", "rate", "div_yield",
                    "vol", "jump_rate", "jump_mean", "jump_vol"])
        for i in range(n):
            s = rng.choice([42.0, 180.0, 3100.0])
            w.writerow([f"B{i}", rng.choice(["ORVAL", "KESTREL"]), rng.choice(["call", "put"]),
                        s, f"{s * rng.uniform(0.6, 1.5):.2f}", f"{rng.uniform(0.02, 3):.4f}",
                        "0.02", "0.01", f"{rng.uniform(0.1, 0.5):.3f}",
                        f"{rng.uniform(0.1, 2):.3f}", f"{rng.uniform(-0.3, 0.1):.3f}",
                        f"{rng.uniform(0.05, 0.4):.3f}"])


def spark_rate(master: str, path: Path, n: int) -> float:
    from pyspark.sql import SparkSession

    from saltus import spark as ss

    s = (SparkSession.builder.master(master).appName("saltus-bench")
         .config("spark.ui.enabled", "false").getOrCreate())
    best = float("inf")
    for _ in range(2):
        t = time.perf_counter()
        df = s.read.csv(str(path), header=True)
        got = ss.price(df).filter("status = 'ok'").count()
        best = min(best, time.perf_counter() - t)
        assert got == n, got
    s.stop()
    return n / best


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "book.csv"
        write_book(path, n)
        exe = ROOT / "target" / "release" / "saltus"
        t = time.perf_counter()
        subprocess.run([str(exe), "price", str(path), "-o", os.devnull, "-q"], check=True)
        cli = n / (time.perf_counter() - t)
        print(f"rows {n}")
        print(f"saltus price (CLI, all cores)   {cli / 1e6:7.3f} M rows/s")
        for master in ("local[1]", "local[2]"):
            r = spark_rate(master, path, n)
            print(f"saltus.spark.price {master:9s}   {r / 1e6:7.3f} M rows/s")


if __name__ == "__main__":
    main()
