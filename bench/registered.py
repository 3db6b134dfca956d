"""Registered DuckDB macros against the compiled query (not run in CI).

    python bench/registered.py                       # 20M rows x 1000 groups (bench/gen_data.py data)
    python bench/registered.py --rows 2000000 --sizes 1000000,2000000

Part 1: weighted Gini per group on g1000.parquet, three ways, each in a fresh subprocess: the
compiled query (uneven.query), the aggregate macro gini(x, w) and the table macro gini_by(...).
Reports wall time and peak RSS (VmHWM) of each process.
Part 2: the largest single group the aggregate macro handles at memory_limit 1GB: one group of N
rows (generated in SQL), N increasing until DuckDB runs out of memory (or the timeout).
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import textwrap
from pathlib import Path

HERE = Path(__file__).resolve().parent
SRC = str(HERE.parent / "src")

CHILD = textwrap.dedent("""
    import json, sys, time
    sys.path.insert(0, {src!r})
    import duckdb, uneven
    case, source, limit, threads = {case!r}, {source!r}, {limit!r}, {threads!r}
    con = duckdb.connect()
    con.execute("SET memory_limit = '" + limit + "'")
    con.execute("SET threads = " + str(threads))
    con.execute("SET enable_progress_bar = false")
    con.execute("CREATE VIEW src AS " + source)
    if case != "compiled":
        uneven.install(con)
    t = time.perf_counter()
    ok, error = True, None
    try:
        if case == "compiled":
            rows = len(uneven.query("SELECT grp, gini(x, w) AS g FROM src GROUP BY grp", con=con))
        elif case == "aggregate":
            rows = len(con.execute("SELECT grp, gini(x, w) AS g FROM src GROUP BY grp").fetchall())
        else:
            rows = len(con.execute("SELECT * FROM gini_by('src', 'x', 'w', ['grp'])").fetchall())
    except Exception as e:
        ok, error, rows = False, str(e).splitlines()[0][:200], 0
    seconds = time.perf_counter() - t
    hwm = [l for l in open("/proc/self/status") if l.startswith("VmHWM")][0].split()[1]
    print(json.dumps(dict(case=case, ok=ok, error=error, rows=rows, seconds=round(seconds, 2),
                          peak_mb=round(int(hwm) / 1024))))
""")


def run(case: str, source: str, limit: str, threads: int, timeout: float) -> dict:
    code = CHILD.format(src=SRC, case=case, source=source, limit=limit, threads=threads)
    try:
        out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return dict(case=case, ok=False, error=f"timeout after {timeout:.0f} s")
    if out.returncode != 0:
        return dict(case=case, ok=False, error=(out.stderr.strip().splitlines() or ["crashed"])[-1][:200])
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--rows", type=int, default=20_000_000)
    ap.add_argument("--memory-limit", default="4GB")
    ap.add_argument("--threads", type=int, default=2)
    # the aggregate form holds the group and its intermediate lists outside DuckDB's memory_limit
    # (about 800 bytes per row at peak): keep sizes within the machine's free memory
    ap.add_argument("--sizes", default="1000000,2000000,5000000")
    ap.add_argument("--timeout", type=float, default=1800)
    ap.add_argument("--skip-groups", action="store_true")
    ap.add_argument("--skip-largest", action="store_true")
    args = ap.parse_args(argv)
    results = {"groups": [], "largest": []}
    if not args.skip_groups:
        sys.path.insert(0, str(HERE))
        import gen_data

        gen_data.main(["--rows", str(args.rows), "--skip-one"])
        path = HERE / "data" / "g1000.parquet"
        source = "SELECT * FROM read_parquet('" + str(path) + "')"
        for case in ("compiled", "aggregate", "table"):
            r = run(case, source, args.memory_limit, args.threads, args.timeout)
            print(json.dumps(r), flush=True)
            results["groups"].append(r)
    if not args.skip_largest:
        for n in map(int, args.sizes.split(",")):
            source = ("SELECT 0 AS grp, exp(random() * 2) AS x, 1 + (i % 3) AS w FROM range(" + str(n) + ") r(i)")
            r = run("aggregate", source, "1GB", args.threads, args.timeout) | {"group_rows": n}
            print(json.dumps(r), flush=True)
            results["largest"].append(r)
            if not r["ok"]:
                break
    out = HERE / "results" / "registered.json"
    out.parent.mkdir(exist_ok=True)
    out.write_text(json.dumps(results, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
