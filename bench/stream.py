"""The stream plan (docs/plans.md) against the window plan, DuckDB's own sort and a pandas baseline.

    python bench/stream.py                                  # 2M rows x 100 groups and 5M x 1
    python bench/stream.py --sizes 20000000x1000 --repeat 3
    python bench/stream.py --sizes 100000000x1 --cases sort,stream,window --repeat 1
    python bench/stream.py --data entities --sizes 1200000x200000   # 200k entities of 6 periods each

Data (fixed seed, written once to a Parquet file per size under the temp directory): lognormal
values, uniform float weights; ``--data uniform`` (default) draws group ids uniformly,
``--data entities`` gives every group exactly ROWS/GROUPS rows (the per-entity case: the Gini of
each entity across its periods), in shuffled order; ``--weights integer`` draws weights 1 to 4.
Cases, each in a fresh subprocess (peak RSS = its own VmHWM), 2 threads, memory_limit 1GB by
default; DuckDB's temp directory is checked for files left behind after each case:

  sort        SELECT max(w) FROM (SELECT grp, x, w FROM f ORDER BY grp, x)     (DuckDB's sort; sort_u:
              max(x) of grp, x)
  window      SELECT grp, gini(x, w) … GROUP BY grp, ordered="window"          (the window plan)
  stream      the same, ordered="stream", batches read in the caller's thread    (this plan; its direct
              form where it serves: the final SELECT reads the stream's table, compiler/direct.py)
  streamj     the same, the final SELECT joining the stream's table to the main GROUP BY (the joined
              form, plan.STREAM_DIRECT off)
  stream_p    the same, with the sorted batches read ahead on a thread (engine/stream.PREFETCH,
              off by default); every other stream case reads in the caller's thread (the default)
  pandas      read the file, sort_values, groupby cumsum, the same formula       (vectorized pandas)
  sort_u, window_u, stream_u, streamj_u      the unweighted gini(x)
  warm, warm_u  stream_p and stream_u after a first query of the same shape on 100 rows in the same
              process (imports, sqlglot's dialect, first-call set-up done): the per-row cost alone
  window10, stream10              ten order-based measures on one value (weighted)
  window_curve, stream_curve      lorenz_curve(x, 50, w)
  window_se, stream_se            gini(x, w), gini_se(x, w)
  window_rep, stream_rep          lorenz_curve(x, 50, w), theil(x, w) (the report's ordered pass)

A case named ``CASE@base`` runs CASE on the source tree given by ``--base-src`` (e.g. an earlier
revision exported with ``git archive REV src | tar -x -C DIR``, then ``--base-src DIR/src``), in the
same run, interleaved with the others: before and after a change, measured alike. A size may carry
its data kind, ``6000000x1000000:entities``, so one run holds every target's case.

Prints the median of --repeat per case, peak RSS, the ratios the targets are stated in (to the sort
of the same columns, measured in the same run) and the largest relative difference between the
stream and window results. The machine's load average is printed first: figures taken while others
share the cores are slower than on an idle machine, the ratios less so.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

TEN = ("gini(x, w), gini_corrected(x, w), lorenz(x, 0.3, w), top_share(x, 0.1, w), bottom_share(x, 0.5, w), "
       "palma(x, w), s80s20(x, w), quantile_w(x, 0.5, w), percentile_ratio(x, 0.9, 0.1, w), "
       "generalized_lorenz(x, 0.9, w)")
CASES = ("sort", "window", "stream", "streamj", "stream_p", "pandas", "sort_u", "window_u", "stream_u", "streamj_u",
         "window10", "stream10")
# further cases, window_<name> and stream_<name> (the stream in the caller's thread, as by default):
# curve  a Lorenz curve of 50 segments (today's auto: the window plan; refine takes k ≤ 20 only)
# se     the weighted Gini and its linearized standard error (the linearized pass)
# rep    the report's ordered pass: the curve beside theil, which fuses onto the window plan
# fus    a Gini beside theil (a centred measure that fuses onto the window plan)
MORE = {"curve": "lorenz_curve(x, 50, w)", "se": "gini(x, w), gini_se(x, w)",
        "rep": "lorenz_curve(x, 50, w), theil(x, w)", "fus": "gini(x, w), theil(x, w)"}


TEMP = Path(tempfile.gettempdir()) / "uneven-stream-bench-tmp"


def make_data(rows: int, groups: int, data: str = "uniform", weights: str = "float") -> Path:
    import numpy as np
    import pyarrow as pa
    import pyarrow.parquet as pq
    suffix = ("" if data == "uniform" else f"-{data}") + ("" if weights == "float" else f"-{weights}")
    path = Path(tempfile.gettempdir()) / f"uneven-stream-bench-{rows}x{groups}{suffix}.parquet"
    if not path.exists():
        rng = np.random.default_rng(20261204)
        if data == "entities":  # every entity has rows // groups periods, the rows in shuffled order
            grp = rng.permutation(np.arange(rows, dtype=np.int64) % groups)
        else:
            grp = rng.integers(0, groups, rows, dtype=np.int64)
        w = rng.integers(1, 5, rows).astype(np.float64) if weights == "integer" else rng.uniform(0.5, 3.0, rows)
        pq.write_table(pa.table({"grp": grp, "x": rng.lognormal(10.0, 1.0, rows), "w": w}), path)
    return path


def temp_files() -> tuple[int, int]:
    """Files and bytes in DuckDB's temp directory of the benchmark."""
    found = [p for p in TEMP.rglob("*") if p.is_file()] if TEMP.exists() else []
    return len(found), sum(p.stat().st_size for p in found)


def _pandas_gini(path: str):
    import pandas as pd
    df = pd.read_parquet(path).sort_values(["grp", "x"], kind="stable")
    g = df.groupby("grp", sort=False)
    c = g["w"].cumsum()
    wt = g["w"].transform("sum")
    df["t"] = df["w"] * df["x"] * (2.0 * c - df["w"] - wt)
    df["wx"] = df["w"] * df["x"]
    s = df.groupby("grp").agg(num=("t", "sum"), W=("w", "sum"), T=("wx", "sum"))
    return (s["num"] / s["W"] / s["T"]).tolist()


def child(case: str, path: str, memory_limit: str, threads: int) -> dict:
    import duckdb

    import uneven
    con = duckdb.connect()
    con.execute(f"SET threads = {threads}")
    con.execute(f"SET memory_limit = '{memory_limit}'")
    con.execute(f"SET temp_directory = '{TEMP}'")
    con.execute("SET preserve_insertion_order = false")
    src = f"read_parquet('{path}')"
    warm = case.startswith("warm")
    case = ("stream_p" if case == "warm" else "stream" + case[4:]) if warm else case
    weighted = not case.endswith("_u")
    more = next((m for key, m in MORE.items() if case.endswith("_" + key)), None)
    measures = more or (TEN if case.endswith("10") else ("gini(x, w)" if weighted else "gini(x)"))
    query = f"SELECT grp, {measures} FROM {src} GROUP BY grp ORDER BY grp"
    if warm:  # the one-time costs of a process's first query, paid before the timed one
        con.execute(f"CREATE TEMP TABLE _first AS SELECT * FROM {src} LIMIT 100")
        uneven.query(query.replace(src, "_first"), con, ordered="stream")
    t0 = time.perf_counter()
    rows = None
    if case.startswith("sort"):
        # max of the last column: DuckDB drops a column the outer SELECT does not read from the
        # sort (max(x) over grp, x, w sorted grp and x alone: EXPLAIN shows it), so read the weight
        cols, last = ("grp, x, w", "w") if weighted else ("grp, x", "x")
        con.execute(f"SELECT max({last}) FROM (SELECT {cols} FROM {src} ORDER BY grp, x)").fetchall()
        seconds = time.perf_counter() - t0
    elif case == "pandas":
        values = _pandas_gini(path)
        seconds = time.perf_counter() - t0
        rows = [[v] for v in values]
    else:
        import uneven.compiler.plan
        import uneven.engine.stream
        uneven.engine.stream.PREFETCH = case == "stream_p"
        uneven.compiler.plan.STREAM_DIRECT = not case.startswith("streamj")
        plan = "stream" if case.startswith("stream") else "window"
        df = uneven.query(query, con, ordered=plan)
        seconds = time.perf_counter() - t0  # the answer as a DataFrame; its conversion below is not timed
        rows = [[float(v) for cell in row for v in ([p["lorenz"] for p in cell] if hasattr(cell, "__len__")
                                                    else [cell])] for row in df.drop(columns="grp").values]
    hwm = None
    for line in open("/proc/self/status"):
        if line.startswith("VmHWM:"):
            hwm = int(line.split()[1]) / 1024
    return {"seconds": seconds, "peak_rss_mb": hwm, "rows": rows}


def run_case(case: str, path: Path, a) -> dict:
    """One case in a fresh process; a case that fails (out of memory …) is reported, not fatal."""
    env = dict(os.environ)
    if case.endswith("@base"):
        if not a.base_src:
            return {"failed": "no --base-src given", "temp_files": 0, "temp_bytes": 0}
        rest = [p for p in env.get("PYTHONPATH", "").split(os.pathsep) if p]
        env["PYTHONPATH"] = os.pathsep.join([a.base_src, *rest])
    with tempfile.TemporaryDirectory() as td:
        out = Path(td) / "out.json"
        done = subprocess.run([sys.executable, __file__, "--child", case.removesuffix("@base"), "--file", str(path),
                               "--out", str(out), "--memory-limit", a.memory_limit, "--threads", str(a.threads)],
                              capture_output=True, text=True, env=env)
        files, size = temp_files()
        if done.returncode != 0 or not out.exists():
            lines = [line for line in (done.stderr or "").strip().splitlines() if "Error" in line]
            return {"failed": lines[-1] if lines else f"exit code {done.returncode}", "temp_files": files,
                    "temp_bytes": size}
        return {**json.loads(out.read_text()), "temp_files": files, "temp_bytes": size}


def _max_rel(a, b) -> float:
    worst = 0.0
    for ra, rb in zip(a, b):
        for va, vb in zip(ra, rb):
            if va is None or vb is None:
                if va is not vb:
                    return float("inf")
                continue
            worst = max(worst, abs(va - vb) / max(abs(vb), 1e-300))
    return worst


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--sizes", default="2000000x100,5000000x1", help="ROWSxGROUPS, comma separated")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--cases", default=",".join(CASES))
    ap.add_argument("--memory-limit", default="1GB")
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--data", choices=("uniform", "entities"), default="uniform")
    ap.add_argument("--weights", choices=("float", "integer"), default="float")
    ap.add_argument("--base-src", help="the source tree of the CASE@base cases (its src/ folder)")
    ap.add_argument("--child")
    ap.add_argument("--file")
    ap.add_argument("--out")
    a = ap.parse_args()
    if a.child:
        Path(a.out).write_text(json.dumps(child(a.child, a.file, a.memory_limit, a.threads)))
        return
    print(f"load average before: {' '.join(f'{v:.2f}' for v in os.getloadavg())}; {os.cpu_count()} cores; "
          f"threads {a.threads}, memory_limit {a.memory_limit}; data {a.data}, {a.weights} weights")
    for size in a.sizes.split(","):
        size, _, kind = size.partition(":")
        data = kind or a.data
        rows, groups = (int(v) for v in size.split("x"))
        path = make_data(rows, groups, data, a.weights)
        results: dict[str, dict] = {}
        cases = a.cases.split(",")
        every: dict[str, list] = {case: [] for case in cases}
        for _ in range(a.repeat):  # interleaved: each repeat runs every case once
            for case in cases:
                every[case].append(run_case(case, path, a))
        for case in cases:
            runs = every[case]
            failed = [r["failed"] for r in runs if "failed" in r]
            left = max(r["temp_files"] for r in runs), max(r["temp_bytes"] for r in runs)
            if failed:
                results[case] = {"failed": failed[0], "left": left}
                continue
            results[case] = {"seconds": statistics.median(r["seconds"] for r in runs),
                             "peak_rss_mb": max(r["peak_rss_mb"] or 0 for r in runs), "rows": runs[0]["rows"],
                             "left": left}
        print(f"\n{rows:,} rows x {groups:,} groups, {data} (median of {a.repeat}, interleaved)")
        print(f"  {'case':<14} {'seconds':>8} {'peak MB':>8} {'/ sort':>7} {'temp files left':>16}")
        for case, r in results.items():
            left = f"{r['left'][0]} ({r['left'][1] / 1e6:.0f} MB)"
            if "failed" in r:
                print(f"  {case:<14} failed: {r['failed']}; temp files left {left}")
                continue
            sort = results.get("sort_u" if case.removesuffix("@base").endswith("_u") else "sort")  # (warm_u too)
            ratio = f"{r['seconds'] / sort['seconds']:7.2f}" if sort and "seconds" in sort else ""
            print(f"  {case:<14} {r['seconds']:8.3f} {r['peak_rss_mb']:8.0f} {ratio:>7} {left:>16}")
        ok = {case: r for case, r in results.items() if "seconds" in r}
        for x, y in (("stream", "window"), ("streamj", "stream"), ("streamj_u", "stream_u"),
                     ("stream_p", "stream"), ("stream_u", "window_u"), ("stream10", "window10"),
                     ("pandas", "window"), *((f"stream_{k}", f"window_{k}") for k in MORE)):
            if x in ok and y in ok:
                print(f"  max relative difference {x} vs {y}: {_max_rel(ok[x]['rows'], ok[y]['rows']):.2e}")
        for x, y, what in (("stream", "window", "stream / window, weighted"),
                           ("stream", "streamj", "direct / joined form (stream), weighted"),
                           ("stream_u", "streamj_u", "direct / joined form (stream), unweighted"),
                           ("stream_u", "window_u", "stream / window, unweighted"),
                           ("stream_p", "stream", "reader thread / serial (stream)"),
                           ("warm", "stream_p", "after a first query / first query (stream, reading ahead)"),
                           ("warm_u", "stream_u", "after a first query / first query (stream, unweighted)"),
                           ("pandas", "stream", "pandas / stream"),
                           ("stream10", "stream", "ten measures / one Gini (stream)"),
                           ("window10", "window", "ten measures / one Gini (window)"),
                           ("stream10@base", "stream@base", "ten measures / one Gini (stream, base)"),
                           *((f"{c}", f"{c}@base", f"{c} / {c}@base (after / before)")
                             for c in ("stream", "stream_p", "stream_u", "stream10", "streamj")),
                           *((f"stream_{k}", f"window_{k}", f"stream / window, {m}") for k, m in MORE.items())):
            if x in ok and y in ok:
                print(f"  {what}: {ok[x]['seconds'] / ok[y]['seconds']:.2f}")
    print(f"\nload average after: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")


if __name__ == "__main__":
    main()
