"""The ranked pass (concentration, Kakwani, Reynolds–Smolensky) on the stream plan against its window
plan and DuckDB's own sort of the same columns, all in one process, cases interleaved.

    python bench/stream_ranked.py                       # every shape below, median of 3
    python bench/stream_ranked.py --shapes 2000000x100 --repeat 5

Data (numpy, fixed seed, one Parquet file per shape under the temp directory): ``grp`` uniform group
ids (``ROWSxGROUPS``; the shape 1200000x200000 gives every group exactly 6 rows, shuffled), the
ranking value ``r`` lognormal (tie-free, DOUBLE), a BIGINT 0..19 (ties heavy: 20 distinct values per
group) or a BIGINT 0..k−1 with k a quarter of the rows per group (quarter: distinct pairs near the
tie probe's threshold, plan.TIE_SHARE), the outcome ``y`` = r·lognormal noise + 1, weights ``w``
uniform in [0.5, 3). Cases, 2 threads, memory_limit 1GB:

  sort     SELECT max(y) FROM (SELECT grp, r, y, w FROM f ORDER BY grp, r)      (DuckDB's sort)
  window   SELECT grp, concentration(y, r, w), kakwani(y, r, w), reynolds_smolensky(r, y, w) … GROUP BY grp,
           ordered="window"
  stream   the same, ordered="stream"

(unweighted: the same without w). Prints the median of --repeat per case, stream ÷ window, stream ÷ sort
and window ÷ sort, the largest relative difference between the two plans' concentration indices and
the largest absolute difference of Kakwani and Reynolds–Smolensky (differences of two indices of
similar size, whose relative digits both plans lose alike); the load average before and after (the
machine may be shared).
"""

from __future__ import annotations

import argparse
import os
import statistics
import tempfile
import time
from pathlib import Path

import duckdb
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

import uneven

SHAPES = ("2000000x100", "5000000x1", "1200000x200000")
MEASURES = "concentration(y, r{w}), kakwani(y, r{w}), reynolds_smolensky(r, y{w})"


RANKINGS = ("tie-free", "ties", "quarter")


def make_data(shape: str, ranking: str) -> Path:
    """``ranking``: tie-free (lognormal DOUBLE), ties (BIGINT 0..19) or quarter (BIGINT 0..k−1, k a
    quarter of the rows per group: distinct (group, value) pairs near plan.TIE_SHARE of the rows)."""
    rows, groups = (int(v) for v in shape.split("x"))
    path = Path(tempfile.gettempdir()) / f"uneven_ranked_{shape}_{ranking}.parquet"
    if path.exists():
        return path
    rng = np.random.default_rng(20261204)
    if rows % groups == 0 and rows // groups <= 10:  # entities: every group the same few rows, shuffled
        grp = rng.permutation(np.repeat(np.arange(groups), rows // groups))
    else:
        grp = rng.integers(0, groups, rows)
    if ranking == "tie-free":
        r = rng.lognormal(10.0, 1.0, rows)
    else:
        r = rng.integers(0, 20 if ranking == "ties" else max(2, rows // groups // 4), rows)
    y = r * rng.lognormal(0.0, 0.5, rows) + 1.0
    w = rng.uniform(0.5, 3.0, rows)
    pq.write_table(pa.table({"grp": grp.astype(np.int64), "r": r, "y": y, "w": w}), path)
    return path


def timed(run) -> tuple[float, object]:
    t0 = time.perf_counter()
    out = run()
    return time.perf_counter() - t0, out


def measure(con: duckdb.DuckDBPyConnection, path: Path, weighted: bool, repeat: int) -> dict:
    src = f"read_parquet('{path}')"
    w = ", w" if weighted else ""
    sql = f"SELECT grp, {MEASURES.format(w=w)} FROM {src} GROUP BY grp ORDER BY grp"
    cases = {
        "sort": lambda: con.execute(f"SELECT max(y) FROM (SELECT grp, r, y{w} FROM {src} ORDER BY grp, r)").fetchall(),
        "window": lambda: uneven.query(sql, con, ordered="window"),
        "stream": lambda: uneven.query(sql, con, ordered="stream"),
    }
    times: dict[str, list[float]] = {k: [] for k in cases}
    results = {}
    names = list(cases)
    for i in range(repeat):
        for name in names[i % 3:] + names[:i % 3]:  # a rotating order: no case always runs first
            seconds, out = timed(cases[name])
            times[name].append(seconds)
            results[name] = out
    a = results["stream"].iloc[:, 1:].to_numpy(dtype=float)
    b = results["window"].iloc[:, 1:].to_numpy(dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):  # C relative; K and R–S (differences) to 1 (C, G ≤ 1)
        diff = np.nanmax(np.abs(a[:, 0] - b[:, 0]) / np.abs(b[:, 0])) if a.size else 0.0
        absolute = np.nanmax(np.abs(a[:, 1:] - b[:, 1:])) if a.size else 0.0
    return {k: statistics.median(v) for k, v in times.items()} | {"diff": float(diff), "abs": float(absolute)}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--shapes", default=",".join(SHAPES))
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--rankings", default=",".join(RANKINGS))
    a = ap.parse_args()
    print(f"load average {os.getloadavg()}; {os.cpu_count()} cores; 2 threads, memory_limit 1GB; median of {a.repeat}")
    con = duckdb.connect()
    con.execute("SET threads = 2")
    con.execute("SET memory_limit = '1GB'")
    print(f"{'shape':<16} {'ranking':<9} {'weights':<10} {'sort s':>7} {'window s':>8} {'stream s':>8} "
          f"{'str/win':>7} {'str/sort':>8} {'win/sort':>8} {'C rel diff':>10} {'K abs diff':>10}")
    for shape in a.shapes.split(","):
        for ranking in a.rankings.split(","):
            path = make_data(shape, ranking)
            for weighted in (True, False):
                m = measure(con, path, weighted, a.repeat)
                print(f"{shape:<16} {ranking:<9} {'weighted' if weighted else 'none':<10} "
                      f"{m['sort']:7.2f} {m['window']:8.2f} {m['stream']:8.2f} {m['stream'] / m['window']:7.2f} "
                      f"{m['stream'] / m['sort']:8.2f} {m['window'] / m['sort']:8.2f} {m['diff']:10.1e} "
                      f"{m['abs']:10.1e}", flush=True)
    print(f"load average after {os.getloadavg()}")


if __name__ == "__main__":
    main()
