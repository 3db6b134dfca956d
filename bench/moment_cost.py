"""Moment measures against a scan aggregate, and hand-written variants of their SQL (not run in CI).

    python bench/moment_cost.py [--rows 2000000] [--groups 1000] [--threads 2] [--repeat 3]

One process, one in-memory table (lognormal values, weights in [0.5, 1.5)); every query runs
interleaved with the others, best of ``--repeat``. Cases: ``scan`` (sum(x), sum(w) per group), the
compiled query of theil, mld, ge(2), atkinson(1) (the adaptive centred variant: one-pass compensated
sums and error bounds, ``compiled4``) and with cv added (``compiled5``: cv has no one-pass bound, so
the whole pass is centred), and variants of ``compiled4``'s main aggregate written here to see what
each part costs: ``plain_sum`` (SUM for FSUM: not exact enough for the bounds, a cost probe only),
``one_ln`` (ln x computed once per row in a projection below the aggregate), ``no_case`` (the
validity CASE left out: this data has no NULL and no weight ≤ 0, so the sums are the same; a cost
probe of moving it to a WHERE, possible only when no other aggregate reads the invalid rows),
``cse_ln`` (each ln written as LN of a CASE outside the measure's CASE, for DuckDB's common
subexpression pass), ``one_ln_no_case`` (both probes at once), ``filter`` (the validity as each aggregate's FILTER
clause instead of a CASE inside it: the same rows), ``no_checks`` (W without the input checks;
this data has nothing for them to find), ``stripped`` (one ln, no validity CASE, no checks at once).
``floor_fsum`` / ``floor_sum`` are the bare sums the one-pass forms read (FSUM or SUM, two ln
per row, min and max; no validity, no checks): what any formulation on those sums pays.
Each variant's results are compared with the compiled query's (largest relative difference).
"""

from __future__ import annotations

import argparse
import re
import time

import duckdb
import numpy as np

import uneven

FOUR = "SELECT g, theil(x, w), mld(x, w), ge(x, 2, w), atkinson(x, 1, w) FROM t GROUP BY g ORDER BY g"
FIVE = "SELECT g, theil(x, w), mld(x, w), ge(x, 2, w), atkinson(x, 1, w), cv(x, w) FROM t GROUP BY g ORDER BY g"
SCAN = "SELECT g, sum(x), sum(w) FROM t GROUP BY g ORDER BY g"
# the sums the one-pass forms need and nothing else (no validity, no checks, no finishing): a floor
FLOOR = ("SELECT g, {f}(w * x), {f}(w), {f}(w * (x * ln(x))), {f}(w * ln(x)), {f}(w * (x * x)), min(x), max(x) "
         "FROM t GROUP BY g ORDER BY g")
VALID = "WHEN NOT CAST(x AS DOUBLE) IS NULL AND CAST(w AS DOUBLE) > CAST(0.0 AS DOUBLE) THEN "


def variants(sql: str) -> dict[str, str]:
    out = {"plain_sum": sql.replace("FSUM(", "SUM(")}
    # ln x once per row: the source becomes a projection that adds it (NULL where x ≤ 0)
    lx = ("(SELECT *, CASE WHEN CAST(x AS DOUBLE) > CAST(0.0 AS DOUBLE) THEN LN(CAST(x AS DOUBLE)) END AS _lx "
          "FROM t) AS t")
    one = sql.replace("LN(CAST(x AS DOUBLE))", "_lx")
    out["one_ln"] = one.replace("FROM t\n", f"FROM {lx}\n", 1).replace("FROM t ", f"FROM {lx} ", 1)
    # validity in WHERE: every sum but W's reads only valid rows; W's checks need the rows with w ≤ 0
    # too, so this variant drops rows W would check (a cost probe, not a replacement)
    out["no_case"] = re.sub(r"CASE\s+" + re.escape(VALID) + r"(.*?)\s+END\s*\)", r"\1)", sql, flags=re.S)
    # ln written outside the measures' CASE (LN of a CASE that is NULL where x ≤ 0: the same values),
    # so DuckDB's common subexpression pass may compute it once per row
    guarded = "LN(CASE WHEN CAST(x AS DOUBLE) > CAST(0.0 AS DOUBLE) THEN CAST(x AS DOUBLE) END)"
    cse = sql.replace("CASE WHEN CAST(x AS DOUBLE) > CAST(0.0 AS DOUBLE) THEN CAST(w AS DOUBLE) * "
                      "(CAST(x AS DOUBLE) * LN(CAST(x AS DOUBLE))) ELSE CAST(0.0 AS DOUBLE) END",
                      f"COALESCE(CAST(w AS DOUBLE) * (CAST(x AS DOUBLE) * {guarded}), CAST(0.0 AS DOUBLE))")
    out["cse_ln"] = cse.replace("CASE WHEN CAST(x AS DOUBLE) > CAST(0.0 AS DOUBLE) THEN CAST(w AS DOUBLE) * "
                                "LN(CAST(x AS DOUBLE)) END", f"CAST(w AS DOUBLE) * {guarded}")
    # the validity as each aggregate's FILTER instead of a CASE inside it (the same rows: a CASE
    # that gives NULL is skipped by the aggregate)
    out["filter"] = re.sub(r"(FSUM|SUM|MIN|MAX)\(CASE\s+" + re.escape(VALID) + r"(.*?)\s+END\s*\)",
                           lambda m: f"{m.group(1)}({m.group(2)}) FILTER (WHERE {VALID[5:-6]})", sql, flags=re.S)
    # W without its input checks (this data has none to find): what the checks cost per row
    checks = r"THEN CASE WHEN CAST\(x AS DOUBLE\) \* CAST\(0\.0 AS DOUBLE\).*?ELSE CAST\(w AS DOUBLE\) END"
    out["no_checks"] = re.sub(checks, "THEN CAST(w AS DOUBLE)", sql, flags=re.S)
    out["one_ln_no_case"] = re.sub(r"CASE\s+" + re.escape(VALID) + r"(.*?)\s+END\s*\)", r"\1)", out["one_ln"],
                                   flags=re.S)
    out["stripped"] = re.sub(checks, "THEN CAST(w AS DOUBLE)", out["one_ln_no_case"], flags=re.S)
    return out


def best(con, sql: str, repeat: int) -> tuple[float, list]:
    times, rows = [], []
    for _ in range(repeat):
        t0 = time.perf_counter()
        rows = con.execute(sql).fetchall()
        times.append(time.perf_counter() - t0)
    return min(times), rows


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=2_000_000)
    ap.add_argument("--groups", type=int, default=1000)
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args()
    con = duckdb.connect()
    con.execute(f"SET threads = {a.threads}")
    con.execute("SET enable_progress_bar = false")
    con.execute("SELECT setseed(0.18)")
    con.execute(f"CREATE TABLE t AS SELECT (i % {a.groups})::INTEGER AS g, exp(1.0 * sqrt(-2 * ln(random())) * "
                f"cos(2 * pi() * random())) * 1000 AS x, 0.5 + random() AS w FROM range({a.rows}) r(i)")
    four = uneven.compile(FOUR, pretty=False)
    cases = {"scan": SCAN, "floor_fsum": FLOOR.format(f="fsum"), "floor_sum": FLOOR.format(f="sum"),
             "compiled4": four, "compiled5": uneven.compile(FIVE, pretty=False), **variants(four)}
    times: dict[str, float] = {}
    results: dict[str, list] = {}
    for _ in range(a.repeat):  # interleaved: each round runs every case once
        for name, sql in cases.items():
            t, rows = best(con, sql, 1)
            times[name] = min(times.get(name, t), t)
            results[name] = rows
    ref = np.array([r[1:] for r in results["compiled4"]], dtype=float)
    for name, t in times.items():
        line = f"{name:10s} {t:7.3f} s  {t / times['scan']:5.2f}x scan"
        if name in cases and not name.startswith(("scan", "compiled5", "floor")):
            got = np.array([r[1:] for r in results[name]], dtype=float)
            line += f"  max rel diff {np.nanmax(np.abs(got - ref) / np.abs(ref)):.1e}"
        print(line, flush=True)


if __name__ == "__main__":
    main()
