"""Standard errors of cut-based measures: the refine plan against the window plan (linearized pass).

    python bench/refine_se.py --rows 2000000 --groups 100

Query: ``SELECT grp, top_share(x, 0.1, w), top_share_se(x, 0.1, w), palma_se(x, w),
quantile_w_se(x, 0.5, w) FROM f GROUP BY grp``, on invented lognormal values with integer weights
made in DuckDB with a fixed seed, 2 threads, one process; best of --repeat runs per plan, and the
largest relative difference between the two plans' results.
"""

from __future__ import annotations

import argparse
import time

QUERY = ("SELECT grp, top_share(x, 0.1, w), top_share_se(x, 0.1, w), palma_se(x, w), quantile_w_se(x, 0.5, w) "
         "FROM f GROUP BY grp ORDER BY grp")


def main() -> None:
    import duckdb

    import uneven
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--rows", type=int, default=2_000_000)
    p.add_argument("--groups", type=int, default=100)
    p.add_argument("--repeat", type=int, default=2)
    a = p.parse_args()
    con = duckdb.connect()
    con.execute("SET threads = 2")
    con.execute("SELECT setseed(0.25)")
    con.execute(f"CREATE TABLE f AS SELECT (i % {a.groups}) AS grp, exp(3 + sqrt(-2 * ln(random())) * "
                f"cos(2 * pi() * random())) AS x, 1 + floor(random() * 5) AS w FROM range({a.rows}) t(i)")
    out = {}
    for plan in ("window", "refine"):
        sql = uneven.compile(QUERY, ordered=plan, pretty=False)
        best = float("inf")
        for _ in range(a.repeat):
            t0 = time.perf_counter()
            out[plan] = con.execute(sql).fetchall()
            best = min(best, time.perf_counter() - t0)
        print(f"{plan:7s} {best:7.2f} s")
    diff = max(abs(u - v) / abs(v) for ra, rb in zip(out["refine"], out["window"]) for u, v in zip(ra[1:], rb[1:])
               if v)
    print(f"max rel. diff {diff:.1e}")


if __name__ == "__main__":
    main()
