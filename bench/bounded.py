"""Benchmark method="bounded" against exact weighted Gini and a plain scan, in one run.

    python bench/bounded.py                      # 20M x 1000 groups and 100M x 1 (bench/gen_data.py)
    python bench/bounded.py --rows 2000000 --rows-one 5000000 --skip-exact-one
    python bench/bounded.py --data-dir /tmp/small --rows 2000000 --skip-one --cases bounded,bounded_tol
    python bench/bounded.py --data-dir /tmp/small --rows 2000000 --groups 100 --skip-one --cases scan,sort,bounded

Each case runs in a fresh Python subprocess (peak RSS = that process's ru_maxrss, imports included;
``--repeat N``: N runs per case, interleaved, the fastest kept):

  scan        SELECT grp, sum(x), sum(w), count(*) FROM f GROUP BY grp         (plain DuckDB)
  sort        SELECT max(w) FROM (SELECT grp, x, w FROM f ORDER BY grp, x)    (DuckDB's own sort of the
              columns the exact Gini orders: what the bounded method must stay below)
  exact       uneven.query("SELECT grp, gini(x, w) FROM read_parquet(f) GROUP BY grp")
  bounded     the same with method="bounded" (default resolution 0.01)
  bounded_tol the same with tolerance=1e-6
  summary     uneven.summarize(f, "x", "w", by=["grp"]) to Parquet: rows and bytes per group

Checks printed with the timings: every group's exact Gini lies in its bounded interval; the widest
interval; the time ratios bounded/exact, bounded/sort and bounded/scan. ``--groups N`` reads a file of N
groups (gen_data's ``curve_N`` kind) instead of the 1000-group file. Results go to bench/results/bounded.json.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

BENCH_DIR = Path(__file__).resolve().parent
sys.path.insert(0, str(BENCH_DIR))

CHILD = r"""
import json, resource, sys, time
import duckdb
import uneven
case, path, tmp, limit = sys.argv[1:5]
q = "SELECT grp, gini(x, w) AS g FROM read_parquet('" + path + "') GROUP BY grp ORDER BY grp"
start = time.perf_counter()
out = {}
if case == "scan":
    con = duckdb.connect(config={"threads": 2, "memory_limit": limit, "temp_directory": tmp})
    con.execute("SET enable_progress_bar = false")
    con.execute("SELECT grp, sum(x), sum(w), count(*) FROM read_parquet(?) GROUP BY grp", [path]).fetchall()
elif case == "sort":
    con = duckdb.connect(config={"threads": 2, "memory_limit": limit, "temp_directory": tmp})
    con.execute("SET enable_progress_bar = false")
    con.execute("SELECT max(w) FROM (SELECT grp, x, w FROM read_parquet(?) ORDER BY grp, x)", [path]).fetchall()
elif case == "exact":
    df = uneven.query(q, threads=2, memory_limit=limit, temp_directory=tmp)
    out["values"] = df["g"].tolist()
elif case in ("bounded", "bounded_tol", "bounded_before"):
    kw = {"tolerance": 1e-6} if case == "bounded_tol" else {}
    df = uneven.query(q, method="bounded", threads=2, memory_limit=limit, temp_directory=tmp, **kw)
    out["lo"], out["hi"], out["point"] = df["g_lo"].tolist(), df["g_hi"].tolist(), df["g"].tolist()
    out["resolution"] = df.attrs["uneven"]["resolution"]
    out["runs"] = df.attrs["uneven"]["runs"]
elif case == "summary":
    import os
    target = tmp + "/summary.parquet"
    con = duckdb.connect(config={"threads": 2, "memory_limit": limit, "temp_directory": tmp})
    con.execute("SET enable_progress_bar = false")
    uneven.summarize("read_parquet('" + path + "')", "x", "w", by=["grp"], parquet=target, replace=True, con=con)
    rows, groups = con.execute("SELECT count(*), count(DISTINCT grp) FROM read_parquet(?)", [target]).fetchone()
    out.update(rows=rows, groups=groups, bytes=os.path.getsize(target))
out["seconds"] = time.perf_counter() - start
out["peak_rss_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
print(json.dumps(out))
"""


CASES = ("scan", "sort", "exact", "bounded", "bounded_tol", "summary")
# DuckDB's memory_limit for the bounded cases. The bins GROUP BY (about 1.8M (group, bin) pairs at
# tolerance 1e-6 on 20M x 1000) fills its hash partitions up to the limit before spilling, so the
# peak RSS is about limit + 170 MB (Python, pandas, sqlglot, uneven: ~130 MB): 400MB peaked at
# 572 MB, 300MB at 481 MB in one run, at the same speed (the spilled partitions are small).
BOUNDED_LIMIT = "300MB"


def run_case(case: str, path: Path, limit: str, before: Path | None = None) -> dict:
    with tempfile.TemporaryDirectory(dir=path.parent) as tmp:
        env = dict(os.environ)
        if case == "bounded_before":
            assert before is not None
            env["PYTHONPATH"] = str(before)  # the same query, with another copy of the package
        proc = subprocess.run([sys.executable, "-c", CHILD, case, str(path), tmp, limit], capture_output=True,
                              text=True, env=env)
    if proc.returncode != 0:
        raise SystemExit(f"case {case} failed:\n{proc.stderr}")
    text = proc.stdout  # a progress bar may share the line: the result is the last JSON object
    return json.loads(text[text.rindex('{"'):].strip())


def check(exact: dict, bounded: dict) -> dict:
    inside = sum(lo <= v <= hi for v, lo, hi in zip(exact["values"], bounded["lo"], bounded["hi"]))
    widths = [hi - lo for lo, hi in zip(bounded["lo"], bounded["hi"])]
    err = max(abs(p - v) for p, v in zip(bounded["point"], exact["values"]))
    return {"groups": len(widths), "exact_inside": inside, "max_width": max(widths),
            "max_point_error": err}


def bench_file(label: str, path: Path, cases: list[str], limits: dict[str, str], repeat: int = 1,
               before: Path | None = None) -> dict:
    """Each case ``repeat`` times, the cases interleaved (a load that drifts touches them alike); the
    fastest run of each case is kept."""
    results: dict[str, dict] = {}
    for _ in range(repeat):
        for case in cases:
            r = run_case(case, path, limits.get(case, limits["default"]), before)
            if case not in results or r["seconds"] < results[case]["seconds"]:
                results[case] = r
    for case, r in results.items():
        print(f"{label:6} {case:12} {r['seconds']:8.2f} s  peak RSS {r['peak_rss_mb']:7.0f} MB"
              + (f"  resolution {r['resolution']:.4g} (runs {r['runs']})" if "resolution" in r else ""), flush=True)
    if "summary" in results:
        s = results["summary"]
        print(f"{label:6} summary: {s['rows'] / s['groups']:.0f} bins and {s['bytes'] / s['groups'] / 1024:.1f} KiB "
              f"(Parquet) per group", flush=True)
    for case in ("bounded", "bounded_tol", "bounded_before"):
        if case in results and "exact" in results:
            c = check(results["exact"], results[case])
            results[case]["check"] = c
            print(f"{label:6} {case}: exact inside {c['exact_inside']}/{c['groups']}, widest {c['max_width']:.3g}, "
                  f"point error {c['max_point_error']:.3g}", flush=True)
        if case in results:
            for base in ("exact", "sort", "scan", "bounded_before"):
                if base in results and base != case:
                    ratio = results[case]["seconds"] / results[base]["seconds"]
                    results[case][f"ratio_{base}"] = ratio
                    print(f"{label:6} {case} / {base}: {ratio:.3f}", flush=True)
    for r in results.values():
        for k in ("values", "lo", "hi", "point"):
            r.pop(k, None)
    return results


def main(argv=None) -> int:
    import gen_data
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--rows", type=int, default=20_000_000)
    ap.add_argument("--groups", type=int, default=1000, help="groups of the many-group file (1000: g1000)")
    ap.add_argument("--rows-one", type=int, default=100_000_000)
    ap.add_argument("--skip-one", action="store_true")
    ap.add_argument("--skip-exact-one", action="store_true", help="skip the exact Gini on the one-group file")
    ap.add_argument("--data-dir", type=Path, default=gen_data.DATA_DIR,
                    help="folder of the data files (gen_data rewrites a file of another size: use a separate "
                         "folder for reduced runs)")
    ap.add_argument("--cases", default=",".join(CASES), help=f"comma list among {', '.join(CASES)}")
    ap.add_argument("--repeat", type=int, default=1, help="runs per case (interleaved), the fastest kept")
    ap.add_argument("--before", type=Path, help="the src folder of an earlier copy of the package (e.g. "
                    "git archive REV src | tar -x -C DIR; then DIR/src): adds the case bounded_before, the "
                    "bounded Gini run with that copy, to compare before and after in one run")
    args = ap.parse_args(argv)
    wanted = [c.strip() for c in args.cases.split(",") if c.strip()]
    if args.before is not None and "bounded_before" not in wanted:
        wanted.append("bounded_before")
    unknown = [c for c in wanted if c not in CASES and c != "bounded_before"]
    if unknown:
        ap.error(f"unknown case {', '.join(unknown)}; choose among {', '.join(CASES)}")
    started = time.time()
    out = {"load_average_start": os.getloadavg()}
    kind = "g1000" if args.groups == 1000 else f"curve_{args.groups}"
    g = gen_data.ensure(kind, args.rows, data_dir=args.data_dir)
    label = f"g{args.groups}"
    order = [c for c in (*CASES, "bounded_before") if c in wanted]
    out[label] = bench_file(label, g, order,
                            {"default": BOUNDED_LIMIT, "exact": "2GB", "scan": "2GB", "sort": "2GB"}, args.repeat,
                            args.before)
    if not args.skip_one:
        one = gen_data.ensure("one", args.rows_one, data_dir=args.data_dir)
        cases = [c for c in ("scan", "sort", "exact", "bounded", "bounded_tol", "bounded_before") if c in wanted
                 and not (c == "exact" and args.skip_exact_one)]
        out["one"] = bench_file("one", one, cases, {"default": BOUNDED_LIMIT, "exact": "1GB", "scan": "1GB",
                                                    "sort": "1GB"}, args.repeat, args.before)
    out["load_average_end"] = os.getloadavg()
    out["wall_seconds"] = time.time() - started
    (BENCH_DIR / "results").mkdir(exist_ok=True)
    (BENCH_DIR / "results" / "bounded.json").write_text(json.dumps(out, indent=2))
    print(f"load average at start {out['load_average_start']}, at end {out['load_average_end']}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
