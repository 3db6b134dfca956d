"""Bin keys of the refine plan's bin GROUP BY (compiler/passes/refine.py), measured alone on DuckDB.

    python bench/bin_keys.py --rows 2000000 --groups 100

Each key is the positive branch of the plan's key (the data are positive) grouped with the plan's
sums: SELECT grp, key, Σw, Σw·x, min x, max x … GROUP BY grp, key; plus a scan aggregate for scale.
Invented lognormal values made in DuckDB with a fixed seed, 2 threads, best of --repeat.
"""

from __future__ import annotations

import argparse
import time

KEYS = {
    "ln x 50 (the plan's)": "CAST(ln(x) * 50.0 AS BIGINT)",
    "log2 x 35 (same width)": "CAST(log2(x) * 35.0 AS BIGINT)",
    "ln x 10 (coarser)": "CAST(ln(x) * 10.0 AS BIGINT)",
    "ln x 200 (finer)": "CAST(ln(x) * 200.0 AS BIGINT)",
}


def main() -> None:
    import duckdb
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--rows", type=int, default=2_000_000)
    p.add_argument("--groups", type=int, default=100)
    p.add_argument("--repeat", type=int, default=3)
    a = p.parse_args()
    con = duckdb.connect()
    con.execute("SET threads = 2")
    con.execute("SELECT setseed(0.25)")
    con.execute(f"CREATE TABLE f AS SELECT (i % {a.groups}) AS grp, exp(3 + sqrt(-2 * ln(random())) * "
                f"cos(2 * pi() * random())) AS x, 1 + floor(random() * 5) AS w FROM range({a.rows}) t(i)")
    cases = {"scan aggregate": "SELECT count(*) FROM (SELECT grp, sum(x), sum(w), count(*) FROM f GROUP BY grp)"}
    for name, key in KEYS.items():
        cases[name] = (f"SELECT count(*), max(n) FROM (SELECT grp, b, sum(w), sum(w * x), min(x), max(x), "
                       f"count(*) AS n FROM (SELECT grp, x, w, {key} AS b FROM f) GROUP BY grp, b)")
    for name, sql in cases.items():
        best = float("inf")
        for _ in range(a.repeat):
            t0 = time.perf_counter()
            row = con.execute(sql).fetchone()
            best = min(best, time.perf_counter() - t0)
        print(f"{name:22s} {best:6.3f} s  bins {row[0]:>8,}  fullest {row[-1]:>8,}")


if __name__ == "__main__":
    main()
