"""Spark's planning of the refine plan with and without the sub-bins (docs/refine.md, "Crowded bins").

    python bench/refine_spark.py                       # every variant, one run each
    python bench/refine_spark.py --variants whole,sub --timeout 300

The query is the engine matrix's (tests/test_refine.py): the 32 cut-based calls (16 cuts, weighted
and unweighted) on the invented groups of ``refine_data()``, GROUP BY g. Each variant runs in a
fresh Spark local[2] session with the test matrix's settings (driver memory 1g), in its own
process with a time limit, and reports the time to plan (analysis and optimization:
``queryExecution().executedPlan()``) and to run (``collect()``), or how it failed. Variants:

  whole         the plan Spark gets: every cut bin sorted whole
  sub           the sub-bins forced on Spark (with the row-count switch at its default)
  sub_noprop    the same with spark.sql.constraintPropagation.enabled=false (a setting a user's
                cluster would not have: a diagnosis, not a fix)
  sub_noinfer   the sub-bins with only the optimizer rule InferFiltersFromConstraints excluded
                (spark.sql.optimizer.excludedRules; a diagnosis too)
"""

from __future__ import annotations

import argparse
import json
import os
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
VARIANTS = ("whole", "sub", "sub_noprop", "sub_noinfer")


def child(variant: str) -> dict:
    sys.path.insert(0, str(ROOT / "tests"))
    from pyspark.sql import SparkSession

    import uneven
    from test_refine import CALLS, refine_data
    from uneven.compiler.passes import refine

    if variant != "whole":  # the sub-bins on Spark too (lower() keeps them off there)
        refine.lower = lambda source, main, plan, name, settings: refine.lower_refine_pass(  # type: ignore
            source, main, plan, name, sub_bins=True)
    folder = Path(tempfile.mkdtemp(prefix="uneven-refine-spark-"))
    builder = (SparkSession.builder.master("local[2]").appName("uneven-refine-spark")
               .config("spark.sql.shuffle.partitions", "2").config("spark.default.parallelism", "2")
               .config("spark.ui.enabled", "false").config("spark.ui.showConsoleProgress", "false")
               .config("spark.driver.memory", "1g").config("spark.local.dir", str(folder))
               .config("spark.driver.extraJavaOptions", "-XX:+UseSerialGC"))
    if variant == "sub_noprop":
        builder = builder.config("spark.sql.constraintPropagation.enabled", "false")
    if variant == "sub_noinfer":
        builder = builder.config("spark.sql.optimizer.excludedRules",
                                 "org.apache.spark.sql.catalyst.optimizer.InferFiltersFromConstraints")
    spark = builder.getOrCreate()
    spark.sparkContext.setLogLevel("FATAL")
    refine_data().to_parquet(folder / "t.parquet", index=False)
    spark.read.parquet(str(folder / "t.parquet")).createOrReplaceTempView("t")
    calls = ", ".join(f"{call} AS m{i}" for i, (call, _, _) in enumerate(CALLS))
    sql = uneven.compile(f"SELECT g, {calls} FROM t GROUP BY g", dialect="spark", ordered="refine")
    t0 = time.perf_counter()
    df = spark.sql(sql)
    df._jdf.queryExecution().executedPlan()  # analysis, optimization, physical planning
    plan = time.perf_counter() - t0
    t1 = time.perf_counter()
    rows = df.collect()
    run = time.perf_counter() - t1
    spark.stop()
    return {"plan_s": plan, "run_s": run, "rows": len(rows), "sql_chars": len(sql)}


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--variants", default=",".join(VARIANTS))
    p.add_argument("--timeout", type=float, default=600.0)
    p.add_argument("--child", help=argparse.SUPPRESS)
    p.add_argument("--out", help=argparse.SUPPRESS)
    a = p.parse_args(argv)
    if a.child:
        Path(a.out).write_text(json.dumps(child(a.child)))
        return 0
    for variant in a.variants.split(","):
        with tempfile.TemporaryDirectory() as td:
            out = Path(td) / "out.json"
            t0 = time.perf_counter()
            # its own process group, so the Spark JVM it starts is ended with it on a time-out
            proc = subprocess.Popen([sys.executable, __file__, "--child", variant, "--out", str(out)],
                                    stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, start_new_session=True)
            try:
                _, stderr = proc.communicate(timeout=a.timeout)
            except subprocess.TimeoutExpired:
                os.killpg(proc.pid, signal.SIGKILL)
                proc.communicate()
                print(f"{variant:11} no result within {a.timeout:.0f} s", flush=True)
                continue
            wall = time.perf_counter() - t0
            if out.exists():
                r = json.loads(out.read_text())
                print(f"{variant:11} plan {r['plan_s']:7.1f} s  run {r['run_s']:7.1f} s  rows {r['rows']}  "
                      f"SQL {r['sql_chars']} chars  (process {wall:.0f} s)", flush=True)
            else:
                tail = (stderr or "").strip().splitlines()[-3:]
                err = next((line for line in (stderr or "").splitlines() if "OutOfMemory" in line), "")
                print(f"{variant:11} failed after {wall:.0f} s: {err or ' | '.join(tail)}", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
