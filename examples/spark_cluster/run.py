"""The same SQL on Spark: exact and bounded Gini of seller revenue in a fictional marketplace, and
bounded summaries made per month on Spark, merged, and measured without the rows.

    python examples/spark_cluster/run.py                        # Spark in this process (local[2])
    python examples/spark_cluster/run.py spark://master:7077    # a standalone cluster
    python examples/spark_cluster/run.py local[2] --rows 2000000

The data are invented (fixed seed): sellers in four categories over six months, revenue drawn from
a lognormal whose spread differs by category. On a cluster, write the Parquet folder where every
executor can read it (--data shared/path) and keep the driver close to the master.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

import uneven

CATEGORIES = ["lanterns", "teapots", "kites", "ink"]


def make_marketplace(rows: int, seed: int = 20261203) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    category = rng.integers(0, len(CATEGORIES), rows)
    spread = np.array([0.8, 1.0, 1.2, 1.5])[category]
    return pd.DataFrame({
        "category": np.array(CATEGORIES)[category],
        "month": rng.integers(1, 7, rows).astype(np.int32),
        "revenue": np.round(rng.lognormal(6.0, spread), 2),
        "orders": rng.integers(1, 40, rows).astype(float),  # the weight: orders behind the revenue
    })


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("master", nargs="?", default="local[2]", help="Spark master (default local[2])")
    ap.add_argument("--rows", type=int, default=200_000)
    ap.add_argument("--data", default="examples/spark_cluster/data/marketplace.parquet")
    args = ap.parse_args(argv)

    path = Path(args.data)
    if not path.exists():
        path.parent.mkdir(parents=True, exist_ok=True)
        make_marketplace(args.rows).to_parquet(path, index=False)

    from pyspark.sql import SparkSession
    spark = (SparkSession.builder.master(args.master).appName("uneven-marketplace")
             .config("spark.ui.showConsoleProgress", "false").getOrCreate())
    spark.sparkContext.setLogLevel("ERROR")
    spark.read.parquet(str(path.resolve())).createOrReplaceTempView("sales")

    sql = """SELECT category, gini(revenue, orders) AS gini, top_share(revenue, 0.1, orders) AS top10,
                    count(*) AS sellers
             FROM sales GROUP BY category ORDER BY category"""
    t0 = time.perf_counter()
    exact = uneven.query(sql, con=spark)                       # compiled for Spark, run there
    t1 = time.perf_counter()
    bounded = uneven.query(sql, con=spark, method="bounded")   # one GROUP BY into bins, no sort
    t2 = time.perf_counter()
    print(f"exact ({t1 - t0:.1f} s):\n{exact.to_string(index=False)}\n")
    print(f"bounded ({t2 - t1:.1f} s; resolution {bounded.attrs['uneven']['resolution']:g}):")
    print(bounded[["category", "gini_lo", "gini_hi", "top10_lo", "top10_hi"]].to_string(index=False), "\n")

    # summaries per month, made on Spark (each a few hundred rows per category, not the sales),
    # merged in DuckDB into the summary of the half year, then measured: the same intervals
    parts = []
    for month in range(1, 7):
        spark.sql(f"SELECT * FROM sales WHERE month = {month}").createOrReplaceTempView("one_month")
        parts.append(uneven.summarize("one_month", "revenue", "orders", by=["category"], con=spark))
    monthly = pd.concat(parts, ignore_index=True)  # noqa: F841  (read by name: merge_summaries("monthly"))
    half_year = uneven.merge_summaries("monthly")  # noqa: F841  bins of equal (category, bin) added up
    measured = uneven.from_summary("half_year", ["gini", "top_share(0.1) AS top10"])
    print("from six monthly summaries merged:")
    print(measured.sort_values("category").to_string(index=False))
    for _, row in exact.iterrows():
        m = measured[measured["category"] == row["category"]].iloc[0]
        assert m["gini_lo"] - 1e-12 <= row["gini"] <= m["gini_hi"] + 1e-12, row["category"]
    print("\nevery exact Gini lies in its interval from the merged summaries")
    spark.stop()
    return 0


if __name__ == "__main__":
    sys.exit(main())
