"""The median-line poverty measures on the stream plan against the window plan and DuckDB's sort.

    python bench/stream_line.py                         # 2M rows x 100 groups, weighted and not, median of 3
    python bench/stream_line.py --sizes 20000000x1000 --repeat 3
    python bench/stream_line.py --data entities --sizes 1200000x200000 --cases sort,window_all,stream_all

Data as bench/stream.py writes it (fixed seed, lognormal values, uniform float weights, one Parquet
file per size under the temp directory). Cases, each in a fresh subprocess, 2 threads, memory_limit
1GB; a case name ends in ``_u`` for the unweighted form:

  sort            SELECT max(x) FROM (SELECT grp, x, w FROM f ORDER BY grp, x)   (DuckDB's sort)
  window_<m>      SELECT grp, <m> … GROUP BY grp, ordered="window"
  stream_<m>      the same, ordered="stream" (compiler/passes/stream_line.py)

with <m> one of: ``h`` below_line_share(x, 0.6, w); ``g`` median_gap(x, 0.6, w); ``f``
fgt_relative(x, 2, 0.6, w); ``all`` the three beside gini(x, w). Prints the median of --repeat per
case, its ratio to the sort, the peak RSS of its process (VmHWM), stream / window per measure and
the largest relative difference between the two plans' results. The load average is printed before
and after: the machine may be shared.
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

sys.path.insert(0, str(Path(__file__).resolve().parent))
from stream import make_data  # noqa: E402  (bench/stream.py: the same data files)

MEASURES = {"h": "below_line_share(x, 0.6{w})", "g": "median_gap(x, 0.6{w})", "f": "fgt_relative(x, 2, 0.6{w})",
            "all": "gini(x{w}), below_line_share(x, 0.6{w}), median_gap(x, 0.6{w}), fgt_relative(x, 2, 0.6{w})"}
CASES = ["sort", "sort_u"] + [f"{plan}_{m}{u}" for u in ("", "_u") for m in MEASURES for plan in ("window", "stream")]


def child(case: str, path: str, memory_limit: str, threads: int) -> dict:
    import duckdb

    import uneven
    con = duckdb.connect()
    con.execute(f"SET threads = {threads}")
    con.execute(f"SET memory_limit = '{memory_limit}'")
    con.execute("SET preserve_insertion_order = false")
    src = f"read_parquet('{path}')"
    weighted = not case.endswith("_u")
    t0 = time.perf_counter()
    if case.startswith("sort"):
        cols = "grp, x, w" if weighted else "grp, x"
        con.execute(f"SELECT max(x) FROM (SELECT {cols} FROM {src} ORDER BY grp, x)").fetchall()
        return {"seconds": time.perf_counter() - t0, "rows": None, "peak_rss_mb": _peak_rss()}
    plan, m = case.split("_")[:2]
    measures = MEASURES[m].format(w=", w" if weighted else "")
    df = uneven.query(f"SELECT grp, {measures} FROM {src} GROUP BY grp ORDER BY grp", con, ordered=plan)
    seconds = time.perf_counter() - t0
    return {"seconds": seconds, "peak_rss_mb": _peak_rss(),
            "rows": [[None if v != v else float(v) for v in row] for row in df.drop(columns="grp").values]}


def _peak_rss() -> float | None:
    """This process's peak resident set (VmHWM), in MB."""
    for line in open("/proc/self/status"):
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024
    return None


def run_case(case: str, path: Path, a) -> dict:
    with tempfile.TemporaryDirectory() as td:
        out = Path(td) / "out.json"
        done = subprocess.run([sys.executable, __file__, "--child", case, "--file", str(path), "--out", str(out),
                               "--memory-limit", a.memory_limit, "--threads", str(a.threads)],
                              capture_output=True, text=True)
        if done.returncode != 0 or not out.exists():
            raise SystemExit(f"{case} failed: {done.stderr[-2000:]}")
        return json.loads(out.read_text())


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
    ap.add_argument("--sizes", default="2000000x100", help="ROWSxGROUPS, comma separated")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--cases", default=",".join(CASES))
    ap.add_argument("--memory-limit", default="1GB")
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--data", choices=("uniform", "entities"), default="uniform",
                    help="entities: every group ROWS/GROUPS rows (bench/stream.py)")
    ap.add_argument("--child")
    ap.add_argument("--file")
    ap.add_argument("--out")
    a = ap.parse_args()
    if a.child:
        Path(a.out).write_text(json.dumps(child(a.child, a.file, a.memory_limit, a.threads)))
        return
    print(f"load average before: {' '.join(f'{v:.2f}' for v in os.getloadavg())}; {os.cpu_count()} cores; "
          f"threads {a.threads}, memory_limit {a.memory_limit}")
    for size in a.sizes.split(","):
        rows, groups = (int(v) for v in size.split("x"))
        path = make_data(rows, groups, a.data)
        results: dict[str, dict] = {}
        cases = a.cases.split(",")
        for _ in range(a.repeat):  # interleaved: a change in the machine's load touches every case alike
            for case in cases:
                r = run_case(case, path, a)
                kept = results.setdefault(case, {"runs": [], "rows": r["rows"], "peak": 0.0})
                kept["runs"].append(r["seconds"])
                kept["peak"] = max(kept["peak"], r["peak_rss_mb"] or 0.0)
        print(f"\n{rows:,} rows x {groups:,} groups (median of {a.repeat}, interleaved)")
        print(f"  {'case':<14} {'seconds':>8} {'/ sort':>7} {'peak MB':>8}")
        for case in cases:
            r = results[case]
            r["seconds"] = statistics.median(r["runs"])
            sort = results.get("sort_u" if case.endswith("_u") else "sort")
            ratio = f"{r['seconds'] / sort['seconds']:7.2f}" if sort and "seconds" in sort else ""
            print(f"  {case:<14} {r['seconds']:8.3f} {ratio:>7} {r['peak']:8.0f}")
        for case in cases:
            if case.startswith("stream_") and case.replace("stream_", "window_") in results:
                other = results[case.replace("stream_", "window_")]
                print(f"  stream / window {case[7:]:<6} {results[case]['seconds'] / other['seconds']:.2f}  "
                      f"(max relative difference {_max_rel(results[case]['rows'], other['rows']):.1e})")
    print(f"\nload average after: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")


if __name__ == "__main__":
    main()
