"""Cost of the centred pass for the log and power measures, against the one-pass sums they replaced.

    python bench/centred_cost.py [--rows 5000000] [--groups 100] [--threads 2] [--repeat 3]

Both sides run in one process on the same in-memory table (median of --repeat runs); the one-pass
SQL (Σ w·x·ln x / T − ln μ and friends) is written out here only as the baseline. It prints the
times and the ratio, and the relative error of both on a group with a spread of 1e-6 of the mean
against mpmath (60 digits): the reason the centred pass is used.
"""

from __future__ import annotations

import argparse
import statistics
import time

import duckdb
import mpmath as mp
import numpy as np

import uneven

ONE_PASS = """
SELECT g,
  SUM(w * x * ln(x)) / SUM(w * x) - ln(SUM(w * x) / SUM(w)) AS theil,
  ln(SUM(w * x) / SUM(w)) - SUM(w * ln(x)) / SUM(w) AS mld,
  1 - power(SUM(w * power(x, 0.5)) / SUM(w), 2) / (SUM(w * x) / SUM(w)) AS atkinson
FROM t WHERE x IS NOT NULL AND w > 0 GROUP BY g
"""
CENTRED = "SELECT g, theil(x, w) AS theil, mld(x, w) AS mld, atkinson(x, 0.5, w) AS atkinson FROM t GROUP BY g"


def timed(con, sql, repeat):
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        con.execute(sql).fetchall()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=5_000_000)
    ap.add_argument("--groups", type=int, default=100)
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args()
    con = duckdb.connect()
    con.execute(f"SET threads = {a.threads}")
    con.execute(f"CREATE TABLE t AS SELECT (i % {a.groups})::INTEGER AS g, exp(random() * 3) * 1000 AS x, "
                f"0.5 + random() * 2.5 AS w FROM range({a.rows}) r(i)")
    compiled = uneven.compile(CENTRED, pretty=False)
    one, cen = timed(con, ONE_PASS, a.repeat), timed(con, compiled, a.repeat)
    print(f"{a.rows} rows, {a.groups} groups, {a.threads} threads: one-pass {one:.2f} s, centred {cen:.2f} s, "
          f"ratio {cen / one:.2f}")

    # precision on a spread of 1e-6 of the mean (mpmath as the reference)
    rng = np.random.default_rng(5)
    x = 1e12 * (1 + 1e-6 * rng.standard_normal(5000))
    con.execute("CREATE OR REPLACE TABLE t AS SELECT 1 AS g, x, 1.0 AS w FROM (SELECT unnest(?) AS x)", [x.tolist()])
    mp.mp.dps = 60
    xs = [mp.mpf(float(v)) for v in x]
    mu = sum(xs) / len(xs)
    want = sum(v * mp.log(v / mu) for v in xs) / sum(xs)
    for label, sql in (("one-pass", ONE_PASS), ("centred", compiled)):
        got = con.execute(sql).fetchall()[0][1]
        print(f"theil, spread 1e-6: {label} relative error {float(abs((got - want) / want)):.1e}")


if __name__ == "__main__":
    main()
