"""The refine plan (docs/refine.md) against the window plan, DuckDB's own sort and a scan aggregate.

    python bench/refine.py                                   # g1000 (20M x 1000) and one (100M x 1)
    python bench/refine.py --datasets g1000 --repeat 3

Query: ``SELECT grp, top_share(x, 0.1, w), palma(x, w), s80s20(x, w), quantile_w(x, 0.5, w)
FROM f GROUP BY grp``. Cases, each in a fresh subprocess (peak RSS = its own VmHWM), 2 threads,
memory_limit 1GB by default:

  sort     SELECT max(w) FROM (SELECT grp, x, w FROM f ORDER BY grp, x)   (DuckDB's sort)
  scan     SELECT grp, sum(x), sum(w), count(*) FROM f GROUP BY grp        (a scan aggregate)
  bins     the refine plan's bin GROUP BY alone (the same bin key expression)
  window   the query, ordered="window" (a sort of every row)
  refine   the query, ordered="refine"

Prints times (median of --repeat), the query's CPU time (user + system, all threads: less moved by
other processes on a shared machine than the wall time), peak RSS, the ratios the targets are stated in, and the largest
relative difference between the refine and window results. Data: bench/gen_data.py (bench/data/).

    python bench/refine.py --crowded --rows 2000000 --cases window,refine
    python bench/refine.py --crowded --baseline /path/to/other/src --cases refine,refine_base

``--crowded`` makes its own small files instead (numpy, fixed seed, bench/data/crowd_*.parquet):
``lognormal`` (--rows rows x 100 groups, as g1000), ``crowded`` (--rows rows in one group, values
within 5e-5 relative of 1000: one 2 % bin holds every row) and ``flat`` (--rows rows in one group,
99 % exactly 1000 and 1 % within 1000 ± 0.01: a near-constant group). ``--baseline`` times the
refine plan compiled by another source tree of the package as the case ``refine_base`` (both in the
same run, to measure a change of the plan). ``--groups`` sets the lognormal file's group count.

    python bench/refine.py --crowded --rows 5000000 --groups 1000 --repeat 3 --cases refine,refine:0,refine:inf

``refine:N`` is the refine plan with the switch between a cut bin sorted whole and its sub-bins at N
rows (``refine_sub.WHOLE_BIN_ROWS``): ``refine:0`` gives every cut bin with min < max sub-bins,
``refine:inf`` sorts every cut bin whole. Cases run alternately (round r of every case, then round
r + 1), each in a fresh process.
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

BENCH = Path(__file__).resolve().parent
MEASURES = "top_share(x, 0.1, w), palma(x, w), s80s20(x, w), quantile_w(x, 0.5, w)"
CASES = ("sort", "scan", "bins", "window", "refine")
CROWDED = ("lognormal", "crowded", "flat")
CROWD_SEED = 20261204


def crowded_file(kind: str, rows: int, groups: int = 100) -> Path:
    """bench/data/crowd_<kind>_<rows>[_<groups>].parquet, written once (numpy, fixed seed)."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.parquet as pq
    tail = f"_{groups}" if kind == "lognormal" and groups != 100 else ""
    path = BENCH / "data" / f"crowd_{kind}_{rows}{tail}.parquet"
    if path.exists():
        return path
    rng = np.random.default_rng([CROWD_SEED, CROWDED.index(kind)])
    if kind == "lognormal":
        grp = rng.integers(0, groups, rows).astype(np.int32)
        x = np.exp(rng.uniform(-1.5, 1.5, groups))[grp] * 1000.0 * np.exp(rng.standard_normal(rows))
    elif kind == "crowded":
        grp = np.zeros(rows, np.int32)
        x = 1000.0 * (1.0 + 5e-5 * rng.random(rows))
    else:
        grp = np.zeros(rows, np.int32)
        x = np.where(rng.random(rows) < 0.01, 1000.0 + rng.uniform(-0.01, 0.01, rows), 1000.0)
    path.parent.mkdir(exist_ok=True)
    pq.write_table(pa.table({"grp": grp, "x": x, "w": rng.uniform(0.5, 3.0, rows)}), path)
    return path


def _bins_sql(path: str) -> str:
    from sqlglot import exp
    from uneven.compiler.passes.refine import bin_key
    key = bin_key(exp.column("x")).sql("duckdb")
    return (f"SELECT count(*) FROM (SELECT grp, b, sum(w), sum(w * x), min(x), max(x) FROM "
            f"(SELECT grp, x, w, {key} AS b FROM read_parquet('{path}')) GROUP BY grp, b)")


def child(case: str, path: str, memory_limit: str, threads: int) -> dict:
    import duckdb
    import uneven
    con = duckdb.connect()
    con.execute(f"SET threads = {threads}")
    con.execute(f"SET memory_limit = '{memory_limit}'")
    con.execute(f"SET temp_directory = '{Path(tempfile.gettempdir()) / 'uneven-refine-bench'}'")
    con.execute("SET preserve_insertion_order = false")
    query = f"SELECT grp, {MEASURES} FROM read_parquet('{path}') GROUP BY grp ORDER BY grp"
    sql = {"sort": f"SELECT max(w) FROM (SELECT grp, x, w FROM read_parquet('{path}') ORDER BY grp, x)",
           "scan": f"SELECT grp, sum(x), sum(w), count(*) FROM read_parquet('{path}') GROUP BY grp",
           "bins": _bins_sql(path)}.get(case)
    if sql is None and case.startswith("refine:"):  # the switch at another row count
        from uneven.compiler.passes import refine_sub
        limit = case.split(":", 1)[1]
        refine_sub.WHOLE_BIN_ROWS = 1 << 62 if limit == "inf" else int(limit)
        sql = uneven.compile(query, ordered="refine", pretty=False)
    if sql is None:
        sql = uneven.compile(query, ordered="refine" if case == "refine_base" else case, pretty=False)
    import resource
    r0, t0 = resource.getrusage(resource.RUSAGE_SELF), time.perf_counter()
    rows = con.execute(sql).fetchall()
    seconds, r1 = time.perf_counter() - t0, resource.getrusage(resource.RUSAGE_SELF)
    cpu = (r1.ru_utime - r0.ru_utime) + (r1.ru_stime - r0.ru_stime)  # the query's CPU time, all threads
    hwm = None
    for line in open("/proc/self/status"):
        if line.startswith("VmHWM:"):
            hwm = int(line.split()[1]) / 1024
    out = {"seconds": seconds, "cpu_seconds": cpu, "peak_rss_mb": hwm}
    if case in ("window", "refine", "refine_base") or case.startswith("refine:"):
        out["rows"] = [list(r) for r in rows]
    return out


def run_case(case: str, path: Path, a) -> dict:
    import os
    env = dict(os.environ)
    if case == "refine_base":
        env["PYTHONPATH"] = a.baseline
    with tempfile.TemporaryDirectory() as td:
        out = Path(td) / "out.json"
        subprocess.run([sys.executable, __file__, "--child", case, "--file", str(path), "--out", str(out),
                        "--memory-limit", a.memory_limit, "--threads", str(a.threads)], check=True, env=env)
        return json.loads(out.read_text())


def _max_rel(a: list, b: list) -> float:
    worst = 0.0
    for ra, rb in zip(a, b):
        for u, v in zip(ra[1:], rb[1:]):
            if u is None or v is None:
                if u is not v:
                    return float("inf")
                continue
            worst = max(worst, abs(u - v) / max(abs(v), 1e-300))
    return worst


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--datasets", default="g1000,one")
    p.add_argument("--repeat", type=int, default=1)
    p.add_argument("--memory-limit", default="1GB")
    p.add_argument("--threads", type=int, default=2)
    p.add_argument("--cases", default=",".join(CASES))
    p.add_argument("--crowded", action="store_true", help="the small crowded files (module docstring)")
    p.add_argument("--rows", type=int, default=2_000_000, help="rows of each --crowded file")
    p.add_argument("--groups", type=int, default=100, help="groups of the --crowded lognormal file")
    p.add_argument("--baseline", help="another source tree (its src/) timed as the case refine_base")
    p.add_argument("--child", help=argparse.SUPPRESS)
    p.add_argument("--file", help=argparse.SUPPRESS)
    p.add_argument("--out", help=argparse.SUPPRESS)
    a = p.parse_args(argv)
    if a.child:
        Path(a.out).write_text(json.dumps(child(a.child, a.file, a.memory_limit, a.threads)))
        return 0
    kinds = CROWDED if a.crowded and a.datasets == "g1000,one" else a.datasets.split(",")
    for kind in kinds:
        path = crowded_file(kind, a.rows, a.groups) if a.crowded else BENCH / "data" / f"{kind}.parquet"
        if not path.exists():
            print(f"{path} missing: python bench/gen_data.py --kinds {kind}", file=sys.stderr)
            return 1
        cases = a.cases.split(",")
        runs: dict[str, list[dict]] = {case: [] for case in cases}
        for _ in range(a.repeat):  # alternating: each round runs every case once
            for case in cases:
                runs[case].append(run_case(case, path, a))
        results = {}
        for case in cases:
            results[case] = {"seconds": statistics.median(r["seconds"] for r in runs[case]),
                             "cpu": statistics.median(r["cpu_seconds"] for r in runs[case]),
                             "peak_rss_mb": max(r["peak_rss_mb"] or 0 for r in runs[case]),
                             "rows": runs[case][-1].get("rows")}
            print(f"{kind:6} {case:11} {results[case]['seconds']:8.2f} s  CPU {results[case]['cpu']:6.2f} s  peak RSS "
                  f"{results[case]['peak_rss_mb']:6.0f} MB  runs "
                  + " ".join(f"{r['seconds']:.2f}" for r in runs[case]), flush=True)
        t = {c: r["seconds"] for c, r in results.items()}
        if "refine" in t and "refine_base" in t:
            print(f"{kind}: refine / refine_base {t['refine'] / t['refine_base']:.2f}; max relative difference "
                  f"{_max_rel(results['refine']['rows'], results['refine_base']['rows']):.1e}")
        if "refine" in t and "window" in t:
            print(f"{kind}: refine / window {t['refine'] / t['window']:.2f}; max relative difference "
                  f"{_max_rel(results['refine']['rows'], results['window']['rows']):.1e}")
        for c in t:
            if c.startswith("refine:") and "refine" in t:
                print(f"{kind}: {c} / refine {t[c] / t['refine']:.2f}; max relative difference "
                      f"{_max_rel(results[c]['rows'], results['refine']['rows']):.1e}")
        for c in ("refine", "window", "bins"):
            if c in t and "sort" in t:
                print(f"{kind}: {c} / sort {t[c] / t['sort']:.2f}")
        if "bins" in t and "scan" in t:
            print(f"{kind}: bins / scan {t['bins'] / t['scan']:.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
