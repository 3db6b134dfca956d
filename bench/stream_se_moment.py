"""The moment measures' standard errors on the stream plan (docs/plans.md, "Moment measures' standard
errors on the stream") against the window plan and DuckDB's own sort of the same columns.

    python bench/stream_se_moment.py                                 # 2M rows x 100 groups, median of 3
    python bench/stream_se_moment.py --data entities --sizes 1200000x200000   # 200k groups of 6 rows

Data: bench/stream.py's (lognormal values, uniform float weights, fixed seed, one Parquet file per
size). Each case in a fresh subprocess, 2 threads, memory_limit 1GB:

  sort                     SELECT max(x) FROM (SELECT grp, x, w FROM f ORDER BY grp, x)
  window_mix, stream_mix   gini_se(x, w), theil_se(x, w), atkinson_se(x, 0.5, w)  (gini_se needs the sort)
  window_moment, stream_moment   theil_se(x, w) alone (its window plan sorts nothing)
  window_fgt, stream_fgt   fgt_se(x, 2, 25000, w) alone (not in the default cases)

Prints the median per case, the ratios to the sort and between the plans, the largest relative
difference between the plans' results, and the load average before and after.
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
from stream import TEMP, make_data  # noqa: E402  (bench/stream.py: the same data)

MEASURES = {
    "mix": "gini_se(x, w), theil_se(x, w), atkinson_se(x, 0.5, w)",
    "moment": "theil_se(x, w)",
    "fgt": "fgt_se(x, 2, 25000, w)",  # a fixed line near the data's median (--cases sort,window_fgt,stream_fgt)
}
CASES = ("sort", "window_mix", "stream_mix", "window_moment", "stream_moment")


def child(case: str, path: str) -> dict:
    import duckdb

    import uneven
    con = duckdb.connect()
    con.execute("SET threads = 2")
    con.execute("SET memory_limit = '1GB'")
    con.execute(f"SET temp_directory = '{TEMP}'")
    src = f"read_parquet('{path}')"
    t0 = time.perf_counter()
    rows = None
    if case == "sort":
        con.execute(f"SELECT max(x) FROM (SELECT grp, x, w FROM {src} ORDER BY grp, x)").fetchall()
    else:
        plan, what = case.split("_")
        df = uneven.query(f"SELECT grp, {MEASURES[what]} FROM {src} GROUP BY grp ORDER BY grp", con, ordered=plan)
        rows = df.drop(columns="grp").to_numpy().tolist()
    return {"seconds": time.perf_counter() - t0, "rows": rows}


def run_case(case: str, path: Path) -> dict:
    with tempfile.TemporaryDirectory() as td:
        out = Path(td) / "out.json"
        done = subprocess.run([sys.executable, __file__, "--child", case, "--file", str(path), "--out", str(out)],
                              capture_output=True, text=True)
        if done.returncode != 0 or not out.exists():
            raise SystemExit(f"{case} failed: {done.stderr[-2000:]}")
        return json.loads(out.read_text())


def max_rel(a, b) -> float:
    worst = 0.0
    for ra, rb in zip(a, b):
        for va, vb in zip(ra, rb):
            worst = max(worst, abs(va - vb) / max(abs(vb), 1e-300))
    return worst


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--sizes", default="2000000x100")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--cases", default=",".join(CASES))
    ap.add_argument("--data", choices=("uniform", "entities"), default="uniform")
    ap.add_argument("--child")
    ap.add_argument("--file")
    ap.add_argument("--out")
    a = ap.parse_args()
    if a.child:
        Path(a.out).write_text(json.dumps(child(a.child, a.file)))
        return
    print(f"load average before: {' '.join(f'{v:.2f}' for v in os.getloadavg())}; {os.cpu_count()} cores")
    for size in a.sizes.split(","):
        rows, groups = (int(v) for v in size.split("x"))
        path = make_data(rows, groups, a.data)
        res = {}
        for case in a.cases.split(","):
            runs = [run_case(case, path) for _ in range(a.repeat)]
            res[case] = {"seconds": statistics.median(r["seconds"] for r in runs), "rows": runs[0]["rows"]}
        print(f"\n{rows:,} rows x {groups:,} groups, {a.data} (median of {a.repeat})")
        sort = res.get("sort", {}).get("seconds")
        for case, r in res.items():
            print(f"  {case:<11} {r['seconds']:7.3f} s" + (f"  {r['seconds'] / sort:5.2f}x sort" if sort else ""))
        for what in MEASURES:
            for x, y in ((f"stream_{what}", f"window_{what}"), (f"stream_{what}", f"refine_{what}"),
                         (f"refine_{what}", f"window_{what}")):
                if x in res and y in res:
                    print(f"  {x} / {y}: {res[x]['seconds'] / res[y]['seconds']:.2f}  "
                          f"(max relative difference {max_rel(res[x]['rows'], res[y]['rows']):.1e})")
    print(f"\nload average after: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")


if __name__ == "__main__":
    main()
