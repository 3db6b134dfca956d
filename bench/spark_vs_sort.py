"""Spark local: exact weighted Gini per group (SQL compiled by uneven for Spark), the same through
``uneven.query(sql, con=spark)``, the bounded Gini (method="bounded": one GROUP BY into bins,
no sort) and the cut-based measures (top_share, palma, s80s20, quantile_w) on the refine plan and
on the window plan against Spark's own ORDER BY of the same rows, in one Spark session, on invented
data (fixed seed).

    python bench/spark_vs_sort.py                       # 10,000,000 rows x 100 groups
    python bench/spark_vs_sort.py --rows 1000000 --groups 100 --repeat 1

Each case runs --repeat times (median reported). The sort is forced to completion by writing the
ordered rows to Spark's "noop" sink; the Gini query collects its 100 rows. The Gini of one group
is checked against the numpy reference on that group's rows (the run stops if they differ).
Not part of CI; the data go to bench/data/spark_<rows>_<groups>.parquet (git-ignored).
"""

from __future__ import annotations

import argparse
import statistics
import time
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

import uneven
from uneven import reference as R

HERE = Path(__file__).parent


def make_data(path: Path, rows: int, groups: int, seed: int = 20261202) -> None:
    if path.exists():
        return
    path.parent.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    chunk = 1_000_000
    writer = None
    for start in range(0, rows, chunk):
        n = min(chunk, rows - start)
        grp = rng.integers(0, groups, n).astype(np.int32)
        x = rng.lognormal(10.0, 1.0, n) * (1.0 + grp / groups)
        w = rng.uniform(0.5, 3.0, n)
        table = pa.table({"grp": grp, "x": x, "w": w})
        writer = writer or pq.ParquetWriter(path, table.schema)
        writer.write_table(table)
    writer.close()


def timed(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--rows", type=int, default=10_000_000)
    ap.add_argument("--groups", type=int, default=100)
    ap.add_argument("--repeat", type=int, default=1)
    ap.add_argument("--driver-memory", default="4g")
    args = ap.parse_args()

    path = HERE / "data" / f"spark_{args.rows}_{args.groups}.parquet"
    make_data(path, args.rows, args.groups)

    from pyspark.sql import SparkSession
    spark = (SparkSession.builder.master("local[2]").appName("uneven-bench")
             .config("spark.driver.memory", args.driver_memory).config("spark.ui.enabled", "false")
             .config("spark.ui.showConsoleProgress", "false").config("spark.sql.shuffle.partitions", "8")
             .getOrCreate())
    spark.sparkContext.setLogLevel("ERROR")
    spark.read.parquet(str(path)).createOrReplaceTempView("t")

    compiled = uneven.compile("SELECT grp, gini(x, w) AS g FROM t GROUP BY grp", dialect="spark")
    result: list = []
    t_gini = timed(lambda: result.__setitem__(slice(None), spark.sql(compiled).collect()), args.repeat)
    t_sort = timed(lambda: spark.sql("SELECT * FROM t ORDER BY grp, x").write.format("noop")
                   .mode("overwrite").save(), args.repeat)
    sql = "SELECT grp, gini(x, w) AS g FROM t GROUP BY grp"
    via_query: list = []
    t_query = timed(lambda: via_query.__setitem__(slice(None), [uneven.query(sql, con=spark)]), args.repeat)
    bounded: list = []
    t_bounded = timed(lambda: bounded.__setitem__(slice(None), [uneven.query(sql, con=spark, method="bounded")]),
                      args.repeat)

    cuts = ("SELECT grp, top_share(x, 0.1, w) AS t, palma(x, w) AS p, s80s20(x, w) AS s, quantile_w(x, 0.5, w) AS q "
            "FROM t GROUP BY grp")
    plans: dict = {}
    t_plan = {name: timed(lambda name=name: plans.__setitem__(name, spark.sql(
        uneven.compile(cuts, dialect="spark", ordered=name)).collect()), args.repeat) for name in ("refine", "window")}
    by = {name: {r["grp"]: r for r in rows} for name, rows in plans.items()}
    diff = max(abs(by["refine"][k][c] - by["window"][k][c]) / abs(by["window"][k][c])
               for k in by["window"] for c in ("t", "p", "s", "q") if by["window"][k][c])
    assert diff <= 1e-12, diff

    got = {r["grp"]: r["g"] for r in result}
    one = pq.read_table(path, filters=[("grp", "=", 0)]).to_pandas()
    want = R.gini(one["x"].to_numpy(), one["w"].to_numpy())
    assert len(got) == args.groups and abs(got[0] - want) <= 1e-9 * abs(want), (got[0], want)
    q = via_query[0].set_index("grp")["g"]
    assert all(abs(q[k] - got[k]) <= 1e-9 * abs(got[k]) for k in got)
    b = bounded[0].set_index("grp")
    inside = all(b.loc[k, "g_lo"] - 1e-12 <= got[k] <= b.loc[k, "g_hi"] + 1e-12 for k in got)
    assert inside, "an exact Gini outside its bounded interval"
    width = float((b["g_hi"] - b["g_lo"]).max())
    spark.stop()
    print(f"rows={args.rows:,} groups={args.groups} (Spark local[2], median of {args.repeat})")
    print(f"exact weighted Gini (compiled SQL): {t_gini:8.1f} s")
    print(f"ORDER BY grp, x (noop sink)       : {t_sort:8.1f} s")
    print(f"ratio Gini / sort                  : {t_gini / t_sort:8.2f}")
    print(f"exact, uneven.query(con=spark)     : {t_query:8.1f} s (probes + compile + the same query)")
    print(f"bounded, method='bounded'          : {t_bounded:8.1f} s (ratio to sort {t_bounded / t_sort:.2f}); "
          f"widest interval {width:.2e}, every exact Gini inside")
    print(f"group 0 Gini {got[0]:.12f} = numpy reference {want:.12f}")
    print(f"cut measures, refine plan          : {t_plan['refine']:8.1f} s (ratio to sort "
          f"{t_plan['refine'] / t_sort:.2f}, to the window plan {t_plan['refine'] / t_plan['window']:.2f})")
    print(f"cut measures, window plan          : {t_plan['window']:8.1f} s (ratio to sort "
          f"{t_plan['window'] / t_sort:.2f}); largest relative difference {diff:.1e}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
