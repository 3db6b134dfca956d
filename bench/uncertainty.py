"""Benchmark: the cost of standard errors and of the in-database bootstrap.

Measured in one run, one after the other, on the same DuckDB connection (both sides of each ratio
see the same machine load):

* gini(x, w) alone, against gini(x, w) with gini_se(x, w) and gini_ci_lo/hi (target ≤ 1.5×);
* a scan aggregate (SUM(x) GROUP BY grp) and an R-replicate bootstrap gini_boot_se on a subset
  of the groups (target: one sort, ≤ R × the scan aggregate).

Usage: python bench/uncertainty.py [--data FILE] [--rows N] [--boot-groups G] [--replicates R]
(default data: bench/data/g1000.parquet from bench/gen_data.py, generated when absent).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import duckdb

sys.path.insert(0, str(Path(__file__).resolve().parent))
import uneven  # noqa: E402


def timed(con, sql: str, repeat: int = 1) -> float:
    best = float("inf")
    for _ in range(repeat):
        started = time.perf_counter()
        con.execute(uneven.compile(sql, pretty=False)).fetchall()
        best = min(best, time.perf_counter() - started)
    return best


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--data", help="Parquet file with grp, x, w (default: bench/data/g1000.parquet)")
    p.add_argument("--rows", type=int, default=20_000_000, help="rows when generating the data")
    p.add_argument("--boot-groups", type=int, default=50, help="groups (of 1000) the bootstrap runs on")
    p.add_argument("--replicates", type=int, default=200)
    p.add_argument("--threads", type=int)
    p.add_argument("--repeat", type=int, default=1)
    args = p.parse_args(argv)
    if args.data:
        path = Path(args.data)
    else:
        import gen_data
        path = gen_data.ensure("g1000", args.rows)
    con = duckdb.connect()
    if args.threads:
        con.execute(f"SET threads = {args.threads}")
    src = f"read_parquet('{path}')"
    n = con.execute(f"SELECT count(*) FROM {src}").fetchone()[0]
    print(f"data: {path} ({n:,} rows); machine shared with other jobs: compare ratios, not seconds")

    t_gini = timed(con, f"SELECT grp, gini(x, w) FROM {src} GROUP BY grp", args.repeat)
    t_se = timed(con, f"SELECT grp, gini(x, w), gini_se(x, w), gini_ci_lo(x, w), gini_ci_hi(x, w) "
                      f"FROM {src} GROUP BY grp", args.repeat)
    print(f"gini alone            {t_gini:8.2f} s")
    print(f"gini + SE + interval  {t_se:8.2f} s   ratio {t_se / t_gini:.2f} (target ≤ 1.5)")

    sub = f"(SELECT * FROM {src} WHERE grp < {args.boot_groups})"
    m = con.execute(f"SELECT count(*) FROM {sub}").fetchone()[0]
    t_scan = timed(con, f"SELECT grp, sum(x) FROM {sub} GROUP BY grp", args.repeat)
    t_gsub = timed(con, f"SELECT grp, gini(x, w) FROM {sub} GROUP BY grp", args.repeat)
    started = time.perf_counter()
    compiled = uneven.compile(f"SELECT grp, gini_boot_se(x, w, replicates := {args.replicates}, seed := 1) "
                               f"FROM {sub} GROUP BY grp", pretty=False)
    t_compile = time.perf_counter() - started
    started = time.perf_counter()
    con.execute(compiled).fetchall()
    t_boot = time.perf_counter() - started
    R = args.replicates
    print(f"bootstrap subset: {args.boot_groups} groups, {m:,} rows, R = {R} (no key: the fallback numbering)")
    print(f"scan aggregate        {t_scan:8.2f} s")
    print(f"gini alone            {t_gsub:8.2f} s")
    print(f"bootstrap (run)       {t_boot:8.2f} s   = {t_boot / t_scan:.1f} scan aggregates "
          f"(target ≤ R = {R}); {t_boot / t_gsub:.1f} × gini; compile {t_compile:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
