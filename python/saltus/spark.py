"""saltus on Apache Spark: a book held in a PySpark DataFrame priced by the
native library on every executor, partition by partition, through Arrow
(``mapInArrow``).

    from saltus import spark as saltus_spark
    priced = saltus_spark.price(df)            # df: a Spark DataFrame with the book's columns
    checked = saltus_spark.crosscheck(df, paths=200_000, seed=7)

The output keeps the input columns (as ``saltus price`` echoes them) followed
by the result columns, with a declared schema: doubles for ``price`` ...
``d_jump_vol``, ``implied_vol`` (when asked for) and ``terms``, a string
``status``. Every row is a pure function of its own fields, so the values do
not depend on how the DataFrame is partitioned; they are the command line's
digits for the same fields (numbers, or text parsed as the CSV reader parses
it). A status names a bad row by its ``id`` when the book has an ``id``
column (``error: id Q17: vol must not be negative, got -0.2``) and otherwise
says only the problem, since a row's position inside a partition means
nothing on a cluster.

Each executor needs the saltus wheel installed (docs/scale-out.md).
"""

from __future__ import annotations

import re
from typing import Any, Iterator, List

import saltus

_ROW_REF = re.compile(r"^(error|warning): row (\d+): ")


def _result_fields(implied_vol: bool) -> List[str]:
    cols = list(saltus.RESULT_COLUMNS[:10])
    if implied_vol:
        cols.append("implied_vol")
    return cols + ["terms"]


def output_schema(schema: Any, implied_vol: bool = False) -> Any:
    """The schema :func:`price` returns for an input ``schema``: the input
    fields (minus any that a result column replaces), then the results."""
    from pyspark.sql.types import DoubleType, StringType, StructField, StructType

    results = _result_fields(implied_vol) + ["status"]
    kept = [f for f in schema.fields if f.name not in results]
    return StructType(
        kept
        + [StructField(c, DoubleType(), True) for c in _result_fields(implied_vol)]
        + [StructField("status", StringType(), False)]
    )


def _relabel(status: List[str], ids: Any) -> List[str]:
    """Replace the batch-relative `row N` of a status by the row's id (or
    drop it): the same text whatever the partitioning."""
    out = []
    for s in status:
        m = _ROW_REF.match(s) if s != "ok" else None
        if m is None:
            out.append(s)
            continue
        i = int(m.group(2))
        ref = f"id {ids[i]}: " if ids is not None and ids[i] not in (None, "") else ""
        out.append(f"{m.group(1)}: {ref}{s[m.end():]}")
    return out


def _id_column(names: List[str]) -> Any:
    for n in names:
        if n.strip().lower() == "id":
            return n
    return None


def _run_in_arrow(df: Any, schema: Any, fn: Any) -> Any:
    """mapInArrow with `fn(table) -> table` per batch; statuses relabelled by id."""
    names = [f.name for f in schema.fields]
    id_col = _id_column(df.columns)

    def run(batches: Iterator[Any]) -> Iterator[Any]:
        import pyarrow as pa

        for batch in batches:
            table = pa.Table.from_batches([batch])
            out = fn(table)
            ids = table.column(id_col).to_pylist() if id_col is not None else None
            status = _relabel(out.column("status").to_pylist(), ids)
            out = out.set_column(out.column_names.index("status"), "status", pa.array(status))
            yield from out.select(names).to_batches()

    return df.mapInArrow(run, schema)


def crosscheck_schema(schema: Any) -> Any:
    """The schema :func:`crosscheck` returns for an input ``schema``."""
    from pyspark.sql.types import DoubleType, StringType, StructField, StructType

    results = saltus.CHECK_COLUMNS
    text = {"mc_method", "verdict", "status"}
    kept = [f for f in schema.fields if f.name not in results]
    return StructType(kept + [
        StructField(c, StringType() if c in text else DoubleType(), c != "status")
        for c in results
    ])


def crosscheck(df: Any, paths: int = 1_000_000, seed: int = 20_261_201, *,
               pide_tol: Any = None) -> Any:
    """Cross-checks every row of a PySpark DataFrame as
    ``saltus crosscheck --paths N --seed S`` does (:func:`saltus.crosscheck`):
    the input columns, then :data:`saltus.CHECK_COLUMNS`. Each row's Monte
    Carlo stream is keyed on the seed and its ``id``, so the results do not
    depend on the partitioning and equal the command line's for rows with an
    id.
    """
    schema = crosscheck_schema(df.schema)

    def fn(table: Any) -> Any:
        import saltus as s

        return s.crosscheck(table, paths=paths, seed=seed, pide_tol=pide_tol)

    return _run_in_arrow(df, schema, fn)


def price(df: Any, *, implied_vol: bool = False) -> Any:
    """Prices every row of a PySpark DataFrame (see the module docstring).

    Parameters
    ----------
    df:
        A ``pyspark.sql.DataFrame`` with the columns of a saltus book (found
        by name, any case), numeric or string typed.
    implied_vol:
        Also compute ``implied_vol`` (the model smile), as in :func:`saltus.price`.

    Returns
    -------
    A lazy DataFrame; nothing runs until an action (``write``, ``collect``).
    A missing required column raises :class:`saltus.BookError` on the
    executors when the job runs.
    """
    schema = output_schema(df.schema, implied_vol)

    def fn(table: Any) -> Any:
        import saltus as s

        return s.price(table, implied_vol=implied_vol)

    return _run_in_arrow(df, schema, fn)
