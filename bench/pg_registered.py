"""PostgreSQL: the registered aggregates gini(x, w ORDER BY x) (uneven/pg_functions.py), the moment
aggregates theil(x, w), atkinson(x, 0.5, w), cv(x, w) (uneven/pg_moments.py) and the cut measures
(uneven/pg_cuts.py) against the compiled query on the same connection, on invented rows made inside
PostgreSQL (setseed + random(): lognormal values, uniform weights, G groups).

    python bench/pg_registered.py --rows 1000000 --groups 100
    python bench/pg_registered.py --cuts 50000,100000,200000 --groups 1 --repeat 3

--cuts times the cut measures (ordered-set aggregates of uneven/pg_cuts.py: top_share, palma,
quantile_w, weighted) at each row count, to check that the time grows linearly with the rows.

Uses UNEVEN_PG_DSN, else starts a throwaway server (tests/pg_server.py). Reports the median of
--repeat runs and the sort's or the aggregate's memory or disk from EXPLAIN (ANALYZE, BUFFERS); checks
that both give the same value per group (1e-9). Not part of CI.
"""

from __future__ import annotations

import argparse
import re
import statistics
import sys
import time
from pathlib import Path

import psycopg
from psycopg import sql

import uneven

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))


def timed(fn, repeat):
    times, out = [], None
    for _ in range(repeat):
        start = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times), out


def sort_space(con, sql) -> str:
    plan = "\n".join(r[0] for r in con.execute("EXPLAIN (ANALYZE, BUFFERS) " + sql).fetchall())
    found = re.findall(r"Sort Method: ([\w ]+?)\s+(Memory|Disk): (\d+)kB", plan)
    out = [f"sort {m.strip()} {kind.lower()} {int(kb) / 1024:.0f} MB" for m, kind, kb in found]
    out += [f"hash aggregate {int(kb)} kB" for kb in re.findall(r"Batches: \d+\s+Memory Usage: (\d+)kB", plan)]
    return "; ".join(out) or "no sort"


def make_table(con, rows: int, groups: int) -> None:
    con.execute("DROP TABLE IF EXISTS bench_pg")
    con.execute("SELECT setseed(0.2026)")
    con.execute(sql.SQL("CREATE TABLE bench_pg AS SELECT (i % {})::int AS grp, "
                        "exp(10 + sqrt(-2 * ln(1 - random())) * cos(2 * pi() * random())) AS x, "
                        "0.5 + 2.5 * random() AS w FROM generate_series(1, {}) i").format(
                            sql.Literal(int(groups)), sql.Literal(int(rows))))
    con.execute("ANALYZE bench_pg")


def cuts(con, sizes: list[int], groups: int, repeat: int) -> None:
    uneven.install(con, measures=["top_share", "palma", "quantile_w"])
    print(f"cut measures, weighted, {groups} group(s), work_mem {con.execute('SHOW work_mem').fetchone()[0]}, "
          f"median of {repeat}")
    for rows in sizes:
        make_table(con, rows, groups)
        for registered_call, call in (("top_share(0.1) WITHIN GROUP (ORDER BY (x, w))", "top_share(x, 0.1, w)"),
                                      ("palma() WITHIN GROUP (ORDER BY (x, w))", "palma(x, w)"),
                                      ("quantile_w(0.5) WITHIN GROUP (ORDER BY (x, w))", "quantile_w(x, 0.5, w)")):
            registered = f"SELECT grp, {registered_call} AS g FROM bench_pg GROUP BY grp"
            compiled = uneven.compile(f"SELECT grp, {call} AS g FROM bench_pg GROUP BY grp", dialect="postgres")
            t_reg, reg = timed(lambda: dict(con.execute(registered).fetchall()), repeat)
            t_cmp, cmp_ = timed(lambda: dict(con.execute(compiled).fetchall()), repeat)
            worst = max(abs(reg[k] - cmp_[k]) / abs(cmp_[k]) for k in cmp_)
            assert worst < 1e-9, worst
            print(f"  {rows:>8,} rows  registered {registered_call.split(' WITHIN')[0]:16s} {t_reg:6.2f} s  "
                  f"({t_reg / rows * 1e6:.1f} µs/row)   compiled {t_cmp:6.2f} s   largest difference {worst:.1e}",
                  flush=True)
    uneven.uninstall(con)
    con.execute("DROP TABLE bench_pg")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--groups", type=int, default=100)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--cuts", default="", help="comma-separated row counts: time the cut measures at each")
    ap.add_argument("--measures", default="", help="comma-separated subset of gini,theil,atkinson,cv (default: all)")
    args = ap.parse_args()
    import os
    dsn = os.environ.get("UNEVEN_PG_DSN")
    server = None
    if not dsn:
        from pg_server import PostgresServer
        server = PostgresServer()
        dsn = server.dsn
    try:
        con = psycopg.connect(dsn, autocommit=True)
        if args.cuts:
            cuts(con, [int(v) for v in args.cuts.split(",")], args.groups, args.repeat)
            return
        make_table(con, args.rows, args.groups)
        uneven.install(con, replace=False)
        work_mem = con.execute("SHOW work_mem").fetchone()[0]
        print(f"{args.rows:,} rows, {args.groups} groups, work_mem {work_mem}, PostgreSQL "
              f"{con.info.server_version // 10000}: median of {args.repeat}")
        for call, registered_call in (("gini(x, w)", "gini(x, w ORDER BY x)"), ("theil(x, w)", "theil(x, w)"),
                                      ("atkinson(x, 0.5, w)", "atkinson(x, 0.5, w)"), ("cv(x, w)", "cv(x, w)")):
            if args.measures and call.split("(")[0] not in args.measures.split(","):
                continue
            registered = f"SELECT grp, {registered_call} AS g FROM bench_pg GROUP BY grp"
            compiled = uneven.compile(f"SELECT grp, {call} AS g FROM bench_pg GROUP BY grp", dialect="postgres")
            t_reg, reg = timed(lambda: dict(con.execute(registered).fetchall()), args.repeat)
            t_cmp, cmp_ = timed(lambda: dict(con.execute(compiled).fetchall()), args.repeat)
            worst = max(abs(reg[k] - cmp_[k]) / abs(cmp_[k]) for k in cmp_)
            assert worst < 1e-9, worst
            print(f"  registered {registered_call:22s} {t_reg:7.2f} s   {sort_space(con, registered)}")
            print(f"  compiled   {call:22s} {t_cmp:7.2f} s   {sort_space(con, compiled)}")
            print(f"  largest relative difference between the two: {worst:.1e}", flush=True)
        uneven.uninstall(con)
        con.execute("DROP TABLE bench_pg")
        con.close()
    finally:
        if server is not None:
            server.stop()


if __name__ == "__main__":
    main()
