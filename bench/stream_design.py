"""The Gini's standard error with a survey design on the stream plan against the window plan and
DuckDB's own sort of the same columns (docs/plans.md, "A survey design on the stream").

    python bench/stream_design.py                          # 2M rows x 100 groups, 50 strata x 20 PSUs
    python bench/stream_design.py --rows 20000000 --groups 1000 --repeat 3
    python bench/stream_design.py --measures cuts          # the cut-based errors instead of the Gini's
    python bench/stream_design.py --measures moments       # gini_se, theil_se, atkinson_se (docs/plans.md)
    python bench/stream_design.py --measures theil         # theil_se alone (auto keeps the window plan)

Data (fixed seed, written once to a Parquet file under the temp directory): lognormal values,
uniform float weights, group ids drawn uniformly, a stratum 0 … STRATA−1 and a PSU 0 … PSUS−1 within
it drawn per row (so every group holds rows of every PSU, spread all over its sorted order).
Cases, in one process, 2 threads, memory_limit 1GB, alternating, the median of --repeat each:

  sort       SELECT max(w) FROM (SELECT grp, x, w, h, c FROM f ORDER BY grp, x)     (DuckDB's sort)
  window     SELECT grp, gini(x, w), gini_se(x, w, strata := h, psu := c) … ordered="window"
             (--measures cuts: lorenz(x, 0.4, w), lorenz_se(x, 0.4, w, …), palma_se(x, w, …),
             quantile_w_se(x, 0.5, w, …): the cut-based errors, docs/plans.md; --measures moments:
             gini_se(x, w, …), theil_se(x, w, …), atkinson_se(x, 0.5, w, …), the moment measures' errors
             beside the Gini's; --measures theil: theil(x, w), theil_se(x, w, …) alone)
  stream     the same, ordered="stream"
  window_h, stream_h   strata only (every row its own unit)
  window_c, stream_c   PSUs only (one stratum)
  window_0, stream_0   no design (the stream's existing form), for scale

Prints the load average first (figures taken while others share the cores are slower; the ratios
less so) and the largest relative difference between the stream's and the window plan's results.
"""

from __future__ import annotations

import argparse
import os
import statistics
import tempfile
import time
from pathlib import Path

DESIGNS = {"": ", strata := h, psu := c", "_h": ", strata := h", "_c": ", psu := c", "_0": ""}
MEASURES = {"gini": "gini(x, w) AS g, gini_se(x, w{d}) AS se",
            "cuts": "lorenz(x, 0.4, w) AS g, lorenz_se(x, 0.4, w{d}) AS se, palma_se(x, w{d}) AS pa, "
                    "quantile_w_se(x, 0.5, w{d}) AS q",
            "moments": "gini(x, w) AS g, gini_se(x, w{d}) AS se, theil_se(x, w{d}) AS th, "
                       "atkinson_se(x, 0.5, w{d}) AS at",
            "theil": "theil(x, w) AS g, theil_se(x, w{d}) AS se"}


def make_data(rows: int, groups: int, strata: int, psus: int) -> Path:
    import numpy as np
    import pyarrow as pa
    import pyarrow.parquet as pq
    path = Path(tempfile.gettempdir()) / f"uneven-design-bench-{rows}x{groups}-{strata}x{psus}.parquet"
    if not path.exists():
        rng = np.random.default_rng(20261204)
        pq.write_table(pa.table({"grp": rng.integers(0, groups, rows, dtype=np.int64),
                                 "x": rng.lognormal(10.0, 1.0, rows), "w": rng.uniform(0.5, 3.0, rows),
                                 "h": rng.integers(0, strata, rows, dtype=np.int64),
                                 "c": rng.integers(0, psus, rows, dtype=np.int64)}), path)
    return path


def run(con, case: str, measures: str = "gini"):
    import uneven
    if case == "sort":
        return con.execute("SELECT max(w) FROM (SELECT grp, x, w, h, c FROM f ORDER BY grp, x)").fetchall()
    plan, _, suffix = case.partition("_")
    calls = MEASURES[measures].format(d=DESIGNS['_' + suffix if suffix else ''])
    sql = f"SELECT grp, {calls} FROM f GROUP BY grp ORDER BY grp"
    return uneven.query(sql, con, ordered=plan)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=2_000_000)
    ap.add_argument("--groups", type=int, default=100)
    ap.add_argument("--strata", type=int, default=50)
    ap.add_argument("--psus", type=int, default=20)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--measures", choices=sorted(MEASURES), default="gini")
    ap.add_argument("--cases", default="sort,window,stream,window_h,stream_h,window_c,stream_c,window_0,stream_0")
    a = ap.parse_args()
    import duckdb
    path = make_data(a.rows, a.groups, a.strata, a.psus)
    print(f"load average {os.getloadavg()[0]:.2f} {os.getloadavg()[1]:.2f}; {a.rows} rows x {a.groups} groups, "
          f"{a.strata} strata x {a.psus} PSUs; {MEASURES[a.measures].format(d=', <design>')}")
    con = duckdb.connect()
    con.execute("SET threads = 2")
    con.execute("SET memory_limit = '1GB'")
    con.execute(f"CREATE VIEW f AS SELECT * FROM read_parquet('{path}')")
    cases = a.cases.split(",")
    times: dict[str, list[float]] = {c: [] for c in cases}
    results = {}
    for _ in range(a.repeat):
        for case in cases:
            start = time.perf_counter()
            results[case] = run(con, case, a.measures)
            times[case].append(time.perf_counter() - start)
    med = {c: statistics.median(v) for c, v in times.items()}
    for case in cases:
        ratio = f"{med[case] / med['sort']:.2f}x sort" if "sort" in med else ""
        vs = ""
        if case.startswith("stream") and case.replace("stream", "window") in med:
            other = case.replace("stream", "window")
            vs = f", {med[case] / med[other]:.2f}x {other}, apart {_max_rel(results[case], results[other]):.1e}"
        print(f"{case:10s} {med[case]:7.2f} s  {ratio}{vs}")


def _max_rel(a, b) -> float:
    import numpy as np
    worst = 0.0
    for col in [c for c in b.columns if c != "grp"]:
        x, y = a[col].to_numpy(dtype=float), b[col].to_numpy(dtype=float)
        assert (np.isnan(x) == np.isnan(y)).all()
        ok = ~np.isnan(y)
        if ok.any():
            worst = max(worst, float(np.max(np.abs(x[ok] - y[ok]) / np.maximum(np.abs(y[ok]), 1e-300))))
    return worst


if __name__ == "__main__":
    main()
