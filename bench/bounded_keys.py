"""method="bounded" on DuckDB, in one process: its bin keys, its stages and its resolutions against
DuckDB's own sort of the same columns.

    python bench/bounded_keys.py --file /tmp/small/g1000.parquet --repeat 5
    python bench/bounded_keys.py --file ... --resolutions 0.01,0.0202,0.05 --skip-keys
    python bench/bounded_keys.py --file ... --before /tmp/before/src   # git archive REV src | tar -x -C /tmp/before

Cases, interleaved (a load that drifts touches them alike), the fastest of --repeat kept (``--median``: the
median, steadier on a machine shared with other work):

  scan         SELECT grp, sum(x), sum(w), count(*) FROM f GROUP BY grp
  sort         SELECT max(w) FROM (SELECT grp, x, w FROM f ORDER BY grp, x)
  keys         the bins GROUP BY alone (Σw, Σw·x, min, max per bin, what a Gini reads, all read by the
               outer query so that none is pruned) with each key:
               the (sign, FLOOR(ln|x|/ln(1+r))) pair a stored summary keeps, the same index as one
               BIGINT (bins.bin_key, the summary pass's), one LN and a CAST with no FLOOR (rounds on
               DuckDB and PostgreSQL, truncates on Spark and SQLite: different bins per engine), and
               the refine plan's ln|x|·50 (2 % bins, coarser than r = 0.01)
  bounded r    the compiled bounded Gini (uneven.compile, method="bounded") at each resolution r,
               and the bins CTE of that query alone (count of its rows); with --before, the same
               compiled by another copy of the package (before and after a change, in one run)

Each case reports its wall time and its CPU time (the process's, both DuckDB threads added): on a
machine shared with other work the CPU time moves much less than the wall time.

Files: bench/gen_data.py's (invented lognormal values, fixed seed). 2 threads.
"""

from __future__ import annotations

import argparse
import math
import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

import sqlglot


def key_cases(r: float) -> dict[str, str]:
    sc = repr(1.0 / math.log1p(r))
    aggs = "sum(w) AS a, sum(w * x) AS b, min(x) AS c, max(x) AS d"
    floor = f"CAST(FLOOR(LN({{v}}) * {sc}) AS BIGINT)"
    pair = (f"CASE WHEN x > 0 THEN 1 WHEN x < 0 THEN -1 ELSE 0 END AS s, CASE WHEN x > 0 THEN "
            f"{floor.format(v='x')} WHEN x < 0 THEN {floor.format(v='-x')} ELSE 0 END AS b")
    one = (f"CASE WHEN x > 0 THEN {floor.format(v='x')} + 2147483648 WHEN x < 0 THEN "
           f"-({floor.format(v='-x')} + 2147483648) ELSE 0 END AS b")
    cast = (f"CASE WHEN x > 0 THEN CAST(LN(x) * {sc} + 2147483648.0 AS BIGINT) WHEN x < 0 THEN "
            f"-CAST(LN(-x) * {sc} + 2147483648.0 AS BIGINT) ELSE 0 END AS b")
    refine = ("CASE WHEN x > 0 THEN 1048576 + CAST(LN(x) * 50.0 AS BIGINT) WHEN x < 0 THEN "
              "-(1048576 + CAST(LN(-x) * 50.0 AS BIGINT)) ELSE 0 END AS b")

    def q(key: str, group: str) -> str:
        # the outer query reads every aggregate: a bare count(*) would let DuckDB drop them
        return (f"SELECT count(*), sum(a), sum(b), min(c), max(d) FROM (SELECT grp, {aggs} "
                f"FROM (SELECT grp, x, w, {key} FROM f) GROUP BY {group})")

    return {"key: sign + FLOOR index (stored)": q(pair, "grp, s, b"),
            "key: one BIGINT, FLOOR (bin_key)": q(one, "grp, b"),
            "key: one BIGINT, CAST only": q(cast, "grp, b"),
            "key: refine's ln x * 50": q(refine, "grp, b")}


QUERY = "SELECT grp, gini(x, w) AS g FROM f GROUP BY grp"
COMPILE = "import sys, uneven; print(uneven.compile(sys.argv[1], method='bounded', resolution=float(sys.argv[2])))"


def bounded_cases(r: float, before: Path | None = None) -> dict[str, str]:
    if before is None:
        import uneven
        sql = uneven.compile(QUERY, method="bounded", resolution=r)
        label = "bounded Gini"
    else:
        env = dict(os.environ, PYTHONPATH=str(before))
        sql = subprocess.run([sys.executable, "-c", COMPILE, QUERY, repr(r)], env=env, capture_output=True,
                             text=True, check=True).stdout
        label = "bounded Gini (before)"
    tree = sqlglot.parse_one(sql, read="duckdb")
    with_ = tree.args["with_"]
    (bins,) = [c.alias for c in with_.expressions if c.alias.endswith("_bins")]
    reads = ", ".join(f'sum("{c}")' for c in ("uv_w", "uv_wx", "uv_min", "uv_max"))
    only_bins = f'{with_.sql("duckdb")} SELECT count(*), {reads} FROM "{bins}"'
    return {f"{label}, r = {r:g}": sql, f"  its bins CTE alone, r = {r:g}{' (before)' if before else ''}": only_bins}


def main(argv=None) -> int:
    import duckdb
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--file", type=Path, required=True, help="a Parquet file with columns grp, x, w")
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--resolutions", default="0.01", help="comma list of bounded resolutions")
    ap.add_argument("--skip-keys", action="store_true")
    ap.add_argument("--median", action="store_true", help="report the median of the runs, not the fastest")
    ap.add_argument("--before", type=Path, help="src folder of an earlier copy of the package: adds its bounded Gini")
    args = ap.parse_args(argv)
    con = duckdb.connect(config={"threads": 2})
    con.execute("SET enable_progress_bar = false")
    path = str(args.file.resolve()).replace("'", "''")
    con.execute(f"CREATE VIEW f AS SELECT * FROM read_parquet('{path}')")
    rs = [float(v) for v in args.resolutions.split(",")]
    cases = {"scan": "SELECT grp, sum(x), sum(w), count(*) FROM f GROUP BY grp",
             "sort": "SELECT max(w) FROM (SELECT grp, x, w FROM f ORDER BY grp, x)"}
    if not args.skip_keys:
        cases.update(key_cases(rs[0]))
    for r in rs:
        cases.update(bounded_cases(r))
        if args.before is not None:
            cases.update(bounded_cases(r, args.before))
    bins = {}
    for name, sql in cases.items():
        if "alone" in name or name.startswith("key"):
            bins[name] = con.execute(sql).fetchone()[0]
    load = os.getloadavg()
    walls: dict[str, list[float]] = {name: [] for name in cases}
    cpus: dict[str, list[float]] = {name: [] for name in cases}
    for _ in range(args.repeat):
        for name, sql in cases.items():
            t0, c0 = time.perf_counter(), time.process_time()
            con.execute(sql).fetchall()
            walls[name].append(time.perf_counter() - t0)
            cpus[name].append(time.process_time() - c0)
    pick = statistics.median if args.median else min
    best = {name: pick(v) for name, v in walls.items()}
    cpu = {name: pick(v) for name, v in cpus.items()}
    rows = con.execute("SELECT count(*), count(DISTINCT grp) FROM f").fetchone()
    stat = "median" if args.median else "best"
    print(f"{args.file.name}: {rows[0]:,} rows, {rows[1]:,} groups; {stat} of {args.repeat}; load average "
          f"{load[0]:.1f} at start, {os.getloadavg()[0]:.1f} at end")
    print(f"{'case':45s} {'wall':>7s}  {'/sort':>5s}  {'/scan':>5s}  {'CPU':>7s}  {'/sort':>5s}")
    for name, t in best.items():
        extra = f"  {bins[name]:>9,} bins" if name in bins else ""
        print(f"{name:45s} {t:6.3f}s  {t / best['sort']:5.2f}  {t / best['scan']:5.1f}  {cpu[name]:6.3f}s  "
              f"{cpu[name] / cpu['sort']:5.2f}{extra}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
