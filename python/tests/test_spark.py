"""saltus.spark.price in Spark local mode: the same digits as the command
line on a 200,000-row invented book, whatever the partitioning (source: the
CLI's own output on the same CSV, compared value by value)."""

from __future__ import annotations

import csv
import math
import os
import random

import pytest

from conftest import run_cli, write_csv

if os.environ.get("SALTUS_SKIP_SPARK") == "1":
    pytest.skip("SALTUS_SKIP_SPARK=1", allow_module_level=True)
# scripts/test.sh installs PySpark; without it this module fails (no silent skip).
import pyspark  # noqa: E402,F401

from saltus import spark as saltus_spark  # noqa: E402
import saltus  # noqa: E402

ROWS = 200_000


@pytest.fixture(scope="module")
def spark():
    from pyspark.sql import SparkSession

    s = (SparkSession.builder.master("local[2]").appName("saltus-tests")
         .config("spark.ui.enabled", "false")
         .config("spark.sql.execution.arrow.pyspark.enabled", "true")
         .config("spark.sql.shuffle.partitions", "8")
         .getOrCreate())
    yield s
    s.stop()


def invented_book(n: int, seed: int):
    """Made-up underlyings and numbers; a few bad rows."""
    rng = random.Random(seed)
    header = ["id", "underlying", "kind", "spot", "strike", "expiry", "rate", "div_yield",
              "vol", "jump_rate", "jump_mean", "jump_vol"]
    rows = []
    for i in range(n):
        s = rng.choice([42.0, 180.0, 3100.0])
        rows.append([f"SP{i:06d}", rng.choice(["ORVAL", "KESTREL", "TAMBO"]),
                     rng.choice(["call", "put"]), repr(s), f"{s * rng.uniform(0.5, 1.8):.2f}",
                     f"{rng.uniform(0.0, 4.0):.4f}", f"{rng.uniform(-0.005, 0.06):.4f}",
                     f"{rng.uniform(0, 0.03):.4f}", f"{rng.uniform(0.0, 0.6):.3f}",
                     f"{rng.uniform(0, 3):.3f}", f"{rng.uniform(-0.4, 0.2):.3f}",
                     f"{rng.uniform(0, 0.4):.3f}"])
    rows[10][8] = "-0.1"
    rows[20][4] = "abc"
    return header, rows


@pytest.fixture(scope="module")
def book_and_cli(cli, tmp_path_factory):
    tmp = tmp_path_factory.mktemp("spark")
    header, rows = invented_book(ROWS, 5)
    path = write_csv(tmp / "book.csv", header, rows)
    h, got = run_cli(cli, ["price", str(path)], tmp)
    return path, {r[0]: dict(zip(h, r)) for r in got}


@pytest.mark.parametrize("parts", [1, 3, 8])
def test_bit_identical_to_the_cli_on_any_partitioning(spark, book_and_cli, parts):
    path, cli_rows = book_and_cli
    df = spark.read.csv(str(path), header=True).repartition(parts)
    assert df.rdd.getNumPartitions() == parts
    priced = saltus_spark.price(df)
    assert priced.schema == saltus_spark.output_schema(df.schema)
    out = priced.toPandas()
    assert len(out) == ROWS
    cols = saltus.RESULT_COLUMNS[:10] + ["terms"]
    for rec in out.itertuples(index=False):
        r = rec._asdict()
        want = cli_rows[r["id"]]
        for c in cols:
            if want[c] == "":
                assert math.isnan(r[c]), (r["id"], c)
            else:
                assert float(want[c]) == r[c], (r["id"], c, want[c], r[c])
        if want["status"] == "ok":
            assert r["status"] == "ok"
        else:
            # The CLI names the input line; Spark names the row's id.
            msg = want["status"].split(": ", 2)[2]
            assert r["status"] == f"error: id {r['id']}: {msg}", (r["status"], want["status"])


@pytest.mark.parametrize("parts", [1, 3])
def test_crosscheck_bit_identical_to_the_cli_on_any_partitioning(spark, cli, tmp_path, parts):
    """saltus.spark.crosscheck equals `saltus crosscheck` with the same paths
    and seed on every row and column (source: the command line; streams are
    keyed on seed and id, never on a row's partition or position)."""
    header, rows = invented_book(300, 9)
    path = write_csv(tmp_path / "xc.csv", header, rows)
    h, got = run_cli(cli, ["crosscheck", str(path), "--paths", "16384", "--seed", "3"], tmp_path)
    want = {r[0]: dict(zip(h, r)) for r in got}
    df = spark.read.csv(str(path), header=True).repartition(parts)
    out = saltus_spark.crosscheck(df, paths=16384, seed=3).toPandas()
    assert len(out) == len(rows)
    for rec in out.itertuples(index=False):
        r = rec._asdict()
        w = want[r["id"]]
        for c in saltus.CHECK_COLUMNS:
            if c == "status":
                if w[c] == "ok":
                    assert r[c] == "ok"
                else:
                    assert r[c] == f"error: id {r['id']}: {w[c].split(': ', 2)[2]}"
            elif c in ("mc_method", "verdict"):
                assert (r[c] or "") == w[c], (r["id"], c)
            elif w[c] == "":
                assert r[c] is None or math.isnan(r[c]), (r["id"], c, r[c])
            else:
                assert float(w[c]) == r[c], (r["id"], c, w[c], r[c])
