"""Benchmark exact Gini in uneven against plain baselines, in one run.

    python bench/run.py                                   # full size: 20M x 1000 groups, 100M x 1
    python bench/run.py --rows 2000000 --rows-one 5000000 # quick run
    python bench/run.py --skip-one --cases sort,scan,pandas,window_sql

Data come from bench/gen_data.py (generated on first use, reused while row counts and seed
match). Every measured case runs in a fresh Python subprocess, so its peak RSS (ru_maxrss of
that process alone, read with os.wait4) belongs to that case only. The time reported is the
wall-clock time of the work inside the subprocess (connect, query, fetch the result), without
interpreter start-up and imports; the peak RSS includes them, so the "startup" row shows what
an idle interpreter with duckdb, numpy, pandas and pyarrow imported costs.

Cases on g1000.parquet (f = the Parquet file):

  sort          SELECT max(w) FROM (SELECT grp, x, w FROM f ORDER BY grp, x)
  scan          SELECT grp, sum(x), sum(w), count(*) FROM f GROUP BY grp
  pandas        read_parquet, one sort_values(["grp", "x"]), grouped cumsum of w, grouped sums
  window_sql    textbook window SQL for the weighted Gini per group in DuckDB
  window_sql_u  textbook window SQL (row_number) for the unweighted Gini per group in DuckDB
  uneven_w     uneven.query("SELECT grp, gini(x, w) FROM read_parquet('f') GROUP BY grp")
  uneven_u     the same with gini(x)
  compile       median time of 20 uneven.compile() calls of a 10-measure query

On one.parquet (one group): sort, scan, window_sql and uneven_w at --memory-limit-one.
pandas is skipped there: it would hold the whole table (plus a sorted copy) in memory.

Weighted Gini per group, x sorted ascending, C_i = running sum of w, W = sum w, T = sum w*x:
    G = sum_i w_i x_i (2 C_i - w_i - W) / (W T)
      = (sum_i w_i x_i (2 C_i - w_i) - W T) / (W T)      (the form computed by the baselines)
"""

from __future__ import annotations

import argparse
import json
import math
import os
import platform
import signal
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

BENCH_DIR = Path(__file__).resolve().parent
RESULTS_DIR = BENCH_DIR / "results"
DATA_DIR = BENCH_DIR / "data"
TMP_DIR = DATA_DIR / "tmp"
GROUPS = 1000  # as in gen_data.py
GROUPS_OF = {"g1000": 1000, "one": 1, "g100k": 100_000, "ties": 1000}  # as in gen_data.py


def gen_groups(data: str) -> int:
    return GROUPS_OF[data]

G1000_CASES = ["startup", "sort", "scan", "pandas", "window_sql", "window_sql_u",
               "uneven_w", "uneven_u", "uneven_ten", "uneven_moment", "uneven_centred",
               "uneven_lorenz", "uneven_hhi", "compile"]
G100K_CASES = ["sort", "scan", "pandas", "window_sql", "window_sql_u", "uneven_w", "uneven_u",
               "uneven_ten", "uneven_moment"]
TIES_CASES = ["sort", "scan", "pandas", "window_sql", "window_sql_u", "uneven_w", "uneven_u",
              "uneven_w_rows", "uneven_u_rows", "uneven_ten"]
ONE_CASES = ["sort", "scan", "window_sql", "uneven_w", "uneven_u"]
# data kind -> cases run on it (the one-group file at --memory-limit-one, the others at --memory-limit)
DATASETS = {"g1000": G1000_CASES, "g100k": G100K_CASES, "ties": TIES_CASES, "one": ONE_CASES}
ALL_CASES = list(dict.fromkeys(G1000_CASES + G100K_CASES + TIES_CASES + ONE_CASES))
# Gini-computing cases compared pairwise (weighted; unweighted)
WEIGHTED_GINI = ["pandas", "window_sql", "uneven_w", "uneven_w_rows"]
UNWEIGHTED_GINI = ["window_sql_u", "uneven_u", "uneven_u_rows"]
REL_TOL = 1e-9


def _ensure_data(a, datasets: list[str]) -> dict[str, Path]:
    """Make sure the data files exist (bench/gen_data.py in a subprocess, so that this parent
    process stays small: on Linux a child's ru_maxrss starts from its parent's RSS at spawn)."""
    kinds = [d for d in datasets if d != "one"]
    cmd = [sys.executable, str(BENCH_DIR / "gen_data.py"), "--rows", str(a.rows),
           "--rows-one", str(a.rows_one), "--data-dir", str(DATA_DIR), "--kinds", ",".join(kinds)]
    if "one" not in datasets:
        cmd.append("--skip-one")
    if a.seed is not None:
        cmd += ["--seed", str(a.seed)]
    subprocess.run(cmd, check=True, stdin=subprocess.DEVNULL)
    return {d: DATA_DIR / f"{d}.parquet" for d in datasets}


# --------------------------------------------------------------------------------------------
# Fixed baseline SQL (our own constant text; the file path is always a bound parameter).

SQL_SORT = "SELECT max(w) FROM (SELECT grp, x, w FROM read_parquet(?) ORDER BY grp, x)"

SQL_SCAN = "SELECT grp, sum(x), sum(w), count(*) FROM read_parquet(?) GROUP BY grp"

SQL_WINDOW_W = """
WITH ranked AS (
    SELECT grp, x, w,
           sum(w) OVER (PARTITION BY grp ORDER BY x
                        ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW) AS c
    FROM read_parquet(?)
)
SELECT grp,
       -- sum w x (2C - w - W) / (W T)  with W = sum w, T = sum w x, W constant in the group
       (sum(w * x * (2 * c - w)) - sum(w) * sum(w * x)) / (sum(w) * sum(w * x)) AS gini
FROM ranked
GROUP BY grp
ORDER BY grp
"""

SQL_WINDOW_U = """
WITH ranked AS (
    SELECT grp, x, row_number() OVER (PARTITION BY grp ORDER BY x) AS i
    FROM read_parquet(?)
)
SELECT grp,
       -- sum (2i - n - 1) x_i / (n sum x)
       (2 * sum(i * x) - (count(*) + 1) * sum(x)) / (count(*) * sum(x)) AS gini
FROM ranked
GROUP BY grp
ORDER BY grp
"""

COMPILE_SQL = (
    "SELECT grp, gini(x), gini(x, w), palma(x), s80s20(x), theil(x), mld(x), "
    "atkinson(x, 0.5), cv(x), hoover(x), top_share(x, 0.1) "
    "FROM read_parquet('bench.parquet') GROUP BY grp"
)


def sql_string_literal(text: str) -> str:
    """Quote ``text`` as a SQL string literal (single quotes doubled)."""
    return "'" + text.replace("'", "''") + "'"


# --------------------------------------------------------------------------------------------
# Child side: one case, then report.

def _duckdb_connect(a):
    import duckdb
    return duckdb.connect(config={"threads": a.threads, "memory_limit": a.memory_limit,
                                  "temp_directory": a.temp_dir})


def _gini_rows(rows):
    return {"grp": [int(r[0]) for r in rows], "gini": [float(r[1]) for r in rows]}


def _case_startup(a):
    import duckdb  # noqa: F401
    import numpy  # noqa: F401
    import pandas  # noqa: F401
    import pyarrow  # noqa: F401
    return {}, 0.0


def _case_sql(sql, gini):
    def run(a):
        import duckdb  # noqa: F401  (imported before the clock starts)
        t0 = time.perf_counter()
        con = _duckdb_connect(a)
        rows = con.execute(sql, [a.file]).fetchall()
        elapsed = time.perf_counter() - t0
        con.close()
        return (_gini_rows(rows) if gini else {"result_rows": len(rows)}), elapsed
    return run


def _case_pandas(a):
    import pandas as pd
    import pyarrow.parquet  # noqa: F401  (pandas imports its Parquet engine lazily: not timed)
    steps = {}
    t0 = last = time.perf_counter()

    def step(name):
        nonlocal last
        now = time.perf_counter()
        steps[name] = now - last
        last = now

    df = pd.read_parquet(a.file, columns=["grp", "x", "w"])
    step("read")
    df = df.sort_values(["grp", "x"], ignore_index=True)
    step("sort")
    c = df.groupby("grp", sort=False)["w"].cumsum()
    step("cumsum")
    wx = df["w"] * df["x"]
    parts = pd.DataFrame({"grp": df["grp"], "a": wx * (2.0 * c - df["w"]), "w": df["w"], "wx": wx})
    del c, wx
    sums = parts.groupby("grp").sum()
    wt = sums["w"] * sums["wx"]
    gini = (sums["a"] - wt) / wt
    step("sums")
    elapsed = time.perf_counter() - t0
    return {"grp": [int(g) for g in gini.index], "gini": [float(v) for v in gini],
            "steps_seconds": steps}, elapsed


def _case_compile(a):
    try:
        import uneven
    except ImportError as e:
        return {"status": "n/a", "reason": f"uneven not importable: {e}"}, None
    fn = getattr(uneven, "compile", None)
    if fn is None:
        return {"status": "n/a", "reason": "uneven.compile does not exist yet"}, None
    t0 = time.perf_counter()
    fn(COMPILE_SQL)
    first = time.perf_counter() - t0
    times = []
    for _ in range(20):
        t0 = time.perf_counter()
        fn(COMPILE_SQL)
        times.append(time.perf_counter() - t0)
    med = statistics.median(times)
    return {"compile_median_ms": med * 1e3, "compile_first_ms": first * 1e3,
            "compile_runs": len(times)}, med


sys.path.insert(0, str(Path(__file__).resolve().parent))
from families import CASES as FAMILY_CASES  # noqa: E402  (bench/ is not a package)
from targets import print_targets, targets  # noqa: E402

CHILD_CASES = {
    "startup": _case_startup,
    "sort": _case_sql(SQL_SORT, gini=False),
    "scan": _case_sql(SQL_SCAN, gini=False),
    "pandas": _case_pandas,
    "window_sql": _case_sql(SQL_WINDOW_W, gini=True),
    "window_sql_u": _case_sql(SQL_WINDOW_U, gini=True),
    "compile": _case_compile,
    **FAMILY_CASES,
}


def _vm_hwm_kb() -> int | None:
    """Peak resident set of this process's own address space (Linux /proc, after exec)."""
    try:
        with open("/proc/self/status") as f:
            for line in f:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1])
    except OSError:
        pass
    return None


def child_main(a) -> int:
    out = {"case": a.child}
    try:
        payload, elapsed = CHILD_CASES[a.child](a)
        out.update({"status": "ok", "seconds": elapsed})
        out.update(payload)
    except Exception as e:  # reported to the parent, which prints it
        out.update({"status": "failed", "error": f"{type(e).__name__}: {e}"[:2000]})
    out["vm_hwm_kb"] = _vm_hwm_kb()
    Path(a.out).write_text(json.dumps(out))
    return 0


# --------------------------------------------------------------------------------------------
# Parent side.

def run_case(case: str, data_kind: str, path: Path, memory_limit: str, a) -> dict:
    """Run one case in a fresh subprocess; return its report with per-process peak RSS."""
    with tempfile.TemporaryDirectory(prefix="uneven-bench-") as td:
        out = Path(td) / "result.json"
        log = Path(td) / "log.txt"
        cmd = [sys.executable, str(Path(__file__).resolve()), "--child", case,
               "--file", str(path), "--threads", str(a.threads),
               "--memory-limit", memory_limit, "--temp-dir", str(TMP_DIR), "--out", str(out)]
        steal0 = _cpu_steal_seconds()
        started = time.perf_counter()
        with open(log, "wb") as logf:
            proc = subprocess.Popen(cmd, stdout=logf, stderr=subprocess.STDOUT,
                                    stdin=subprocess.DEVNULL)
            timed_out = False
            while True:
                pid, status, usage = os.wait4(proc.pid, os.WNOHANG)
                if pid:
                    break
                if a.timeout and time.perf_counter() - started > a.timeout:
                    os.kill(proc.pid, signal.SIGKILL)
                    _, status, usage = os.wait4(proc.pid, 0)
                    timed_out = True
                    break
                time.sleep(0.02)
            proc.returncode = os.waitstatus_to_exitcode(status)
        wall = time.perf_counter() - started
        steal1 = _cpu_steal_seconds()
        # Peak RSS: the child's own VmHWM when it could report it; else the kernel's ru_maxrss
        # for that one child (which on Linux also counts the parent's RSS at spawn time).
        report = {"data": data_kind, "case": case, "memory_limit": memory_limit,
                  "process_seconds": wall, "ru_maxrss_mb": usage.ru_maxrss / 1024,
                  "peak_rss_mb": usage.ru_maxrss / 1024}
        if steal0 is not None and steal1 is not None:
            # share of the machine's CPU time taken by the host while this case ran
            report["steal_share"] = (steal1 - steal0) / max(wall * (os.cpu_count() or 1), 1e-9)
        if out.exists():
            child = json.loads(out.read_text())
            hwm = child.pop("vm_hwm_kb", None)
            report.update(child)
            if hwm:
                report["peak_rss_mb"] = hwm / 1024
        elif timed_out:
            report.update({"status": "failed", "error": f"timed out after {a.timeout} s"})
        else:
            tail = log.read_text(errors="replace")[-1500:]
            report.update({"status": "failed",
                           "error": f"exit code {proc.returncode}: {tail.strip()}"})
        return report


def run_repeated(case, data_kind, path, memory_limit, a) -> dict:
    reports = [run_case(case, data_kind, path, memory_limit, a) for _ in range(a.repeat)]
    ok = [r for r in reports if r.get("status") == "ok"]
    if not ok or len(ok) < len(reports):
        return next(r for r in reports if r.get("status") != "ok")
    best = dict(ok[0])
    if len(ok) > 1:
        best["seconds_all"] = [r["seconds"] for r in ok]
        best["peak_rss_mb_all"] = [r["peak_rss_mb"] for r in ok]
        best["seconds"] = statistics.median(best["seconds_all"])
        best["peak_rss_mb"] = max(best["peak_rss_mb_all"])
        steals = [r["steal_share"] for r in ok if "steal_share" in r]
        if steals:
            best["steal_share"] = max(steals)
    return best


def compare(results: dict, names: list[str], data_kind: str) -> list[dict]:
    """Compare the Gini vectors of the named cases pairwise; return check records."""
    checks = []
    have = [n for n in names if results.get(n, {}).get("status") == "ok" and "gini" in results[n]]
    for i, x in enumerate(have):
        for y in have[i + 1:]:
            gx, gy = results[x], results[y]
            rec = {"data": data_kind, "a": x, "b": y}
            if gx["grp"] != gy["grp"]:
                rec.update({"ok": False, "detail": "different group keys"})
            else:
                worst = 0.0
                for u, v in zip(gx["gini"], gy["gini"]):
                    if not (math.isfinite(u) and math.isfinite(v)):
                        worst = math.inf
                        break
                    worst = max(worst, abs(u - v) / max(abs(v), 1e-300))
                rec.update({"ok": worst <= REL_TOL, "max_rel_diff": worst,
                            "groups": len(gx["gini"])})
            checks.append(rec)
    return checks


def _fmt(v, spec):
    if v is None:
        return "-".rjust(int(spec.split(".")[0] or 0))
    return format(v, spec)


def ratio(a, b):
    if a is None or b is None or b == 0:
        return None
    return a / b


def print_table(rows: list[dict], title: str) -> None:
    by_case = {r["case"]: r for r in rows}

    def ok_val(case, key):
        r = by_case.get(case)
        return r.get(key) if r and r.get("status") == "ok" else None

    t_sort, t_scan, t_pandas = ok_val("sort", "seconds"), ok_val("scan", "seconds"), \
        ok_val("pandas", "seconds")
    m_pandas = ok_val("pandas", "peak_rss_mb")
    print(f"\n{title}")
    head = (f"{'case':<13} {'status':<7} {'time s':>9} {'peak RSS MB':>12} {'x sort':>7} "
            f"{'x scan':>7} {'x pandas':>9} {'RSS/pandas':>11}")
    print(head)
    print("-" * len(head))
    for r in rows:
        st = r.get("status", "?")
        if st != "ok":
            why = r.get("reason") or r.get("error") or ""
            print(f"{r['case']:<13} {st:<7} {'':>9} {_fmt(r.get('peak_rss_mb'), '12.0f')}  "
                  f"{why.splitlines()[0][:90] if why else ''}")
            continue
        t, m = r.get("seconds"), r.get("peak_rss_mb")
        if r["case"] == "startup":
            print(f"{'startup':<13} {st:<7} {'':>9} {_fmt(m, '12.0f')}  "
                  "(interpreter + duckdb, numpy, pandas, pyarrow imported)")
            continue
        if r["case"] == "compile":
            print(f"{'compile':<13} {st:<7} {'':>9} {_fmt(m, '12.0f')}  median "
                  f"{r['compile_median_ms']:.3f} ms of {r['compile_runs']} compiles "
                  f"(first {r['compile_first_ms']:.1f} ms), 10-measure query")
            continue
        print(f"{r['case']:<13} {st:<7} {_fmt(t, '9.2f')} {_fmt(m, '12.0f')} "
              f"{_fmt(ratio(t, t_sort), '7.2f')} {_fmt(ratio(t, t_scan), '7.2f')} "
              f"{_fmt(ratio(t, t_pandas), '9.2f')} {_fmt(ratio(m, m_pandas), '11.2f')}"
              + (f"  (compile {1000 * r['compile_seconds']:.0f} ms)" if r.get("compile_seconds") else ""))


def _cpu_steal_seconds() -> float | None:
    """CPU time stolen from this (virtual) machine by its host so far, all cores (Linux)."""
    try:
        with open("/proc/stat") as f:
            fields = f.readline().split()
        return int(fields[8]) / os.sysconf("SC_CLK_TCK")
    except (OSError, ValueError, IndexError):
        return None


def _cpu_times() -> tuple[int, int] | None:
    try:
        with open("/proc/stat") as f:
            ticks = [int(v) for v in f.readline().split()[1:]]
        return sum(ticks), ticks[3] + ticks[4]  # total, idle + iowait
    except (OSError, ValueError, IndexError):
        return None


def _cpu_busy_share(seconds: float) -> float | None:
    """Share of all cores' time that was busy (or stolen) during the next ``seconds``."""
    a = _cpu_times()
    time.sleep(seconds)
    b = _cpu_times()
    if a is None or b is None or b[0] == a[0]:
        return None
    return 1.0 - (b[1] - a[1]) / (b[0] - a[0])


def _loadavg() -> float | None:
    try:
        with open("/proc/loadavg") as f:
            return float(f.read().split()[0])
    except (OSError, ValueError, IndexError):
        return None


def environment() -> dict:
    from importlib import metadata
    env = {"python": platform.python_version(), "platform": platform.platform(),
           "cpu_count": os.cpu_count()}
    for dist in ("duckdb", "numpy", "pandas", "pyarrow", "uneven"):
        try:
            env[dist] = metadata.version(dist)
        except metadata.PackageNotFoundError:
            env[dist] = None
    try:
        with open("/proc/meminfo") as f:
            env["mem_total_mb"] = int(f.readline().split()[1]) // 1024
    except OSError:
        pass
    return env


def parent_main(a) -> int:
    cases = [c.strip() for c in a.cases.split(",") if c.strip()] if a.cases else list(ALL_CASES)
    unknown = [c for c in cases if c not in CHILD_CASES]
    if unknown:
        print(f"unknown case(s): {', '.join(unknown)}; known: {', '.join(ALL_CASES)}",
              file=sys.stderr)
        return 2
    TMP_DIR.mkdir(parents=True, exist_ok=True)
    datasets = [d.strip() for d in a.datasets.split(",") if d.strip()]
    if a.skip_one:
        datasets = [d for d in datasets if d != "one"]
    bad = [d for d in datasets if d not in DATASETS]
    if bad:
        print(f"unknown data set(s): {', '.join(bad)}; known: {', '.join(DATASETS)}", file=sys.stderr)
        return 2
    paths = _ensure_data(a, datasets)
    load_before = _loadavg()
    busy_before = _cpu_busy_share(1.0)
    if busy_before is not None and busy_before > 0.25:
        print(f"warning: the CPUs were {busy_before:.0%} busy in the second before the cases "
              "start: other processes compete for the cores and the timings will be noisy.",
              file=sys.stderr)

    all_rows, checks, notes, by_data = [], [], [], {}
    for data in datasets:
        limit = a.memory_limit_one if data == "one" else a.memory_limit
        rows_n = a.rows_one if data == "one" else a.rows
        print(f"\n== {data}.parquet: {rows_n:,} rows x {gen_groups(data):,} groups, "
              f"threads={a.threads}, memory_limit={limit}", file=sys.stderr)
        results = {}
        for case in [c for c in DATASETS[data] if c in cases]:
            print(f"  running {case} ...", file=sys.stderr, flush=True)
            r = run_repeated(case, data, paths[data], limit, a)
            results[case] = r
            all_rows.append(r)
        by_data[data] = results
        checks += compare(results, WEIGHTED_GINI, data)
        checks += compare(results, UNWEIGHTED_GINI, data)
    if "one" in datasets and "pandas" in cases:
        notes.append("pandas skipped on one.parquet: it would hold the whole table and a "
                     "sorted copy in memory (about 2 x 20 bytes per row), far beyond the "
                     "memory limit of the other cases.")

    stolen = [r for r in all_rows if r.get("steal_share", 0) > 0.05]
    if stolen:
        notes.append("the host took more than 5% of the CPU time while these cases ran (steal): "
                     + ", ".join(f"{r['data']}/{r['case']} {r['steal_share']:.0%}"
                                 for r in stolen) + "; their timings are inflated.")
    for data in datasets:
        limit = a.memory_limit_one if data == "one" else a.memory_limit
        rows_n = a.rows_one if data == "one" else a.rows
        print_table([r for r in all_rows if r["data"] == data],
                    f"{data}.parquet: {rows_n:,} rows x {gen_groups(data):,} groups "
                    f"(threads={a.threads}, memory_limit={limit})")
    target_rows = targets(by_data)
    print_targets(target_rows)
    for n in notes:
        print(f"\nnote: {n}")
    print("\nagreement of Gini results (max relative difference over groups, tolerance "
          f"{REL_TOL:g}):")
    if not checks:
        print("  (fewer than two Gini-computing cases succeeded: nothing compared)")
    warnings = 0
    for c in checks:
        if "max_rel_diff" in c:
            flag = "ok" if c["ok"] else "WARNING: DISAGREE"
            print(f"  {c['data']:<6} {c['a']:>12} vs {c['b']:<12} {c['max_rel_diff']:.2e} "
                  f"over {c['groups']} groups  {flag}")
        else:
            print(f"  {c['data']:<6} {c['a']:>12} vs {c['b']:<12} WARNING: {c['detail']}")
        warnings += not c["ok"]
    if warnings:
        print(f"\nWARNING: {warnings} comparison(s) disagree: these timings compare different "
              "computations.", file=sys.stderr)

    for r in all_rows:  # keep the JSON small: drop per-group values, keep a summary
        g = r.pop("gini", None)
        r.pop("grp", None)
        if g:
            r["groups"] = len(g)
            r["gini_first"] = g[0]
    sys.path.insert(0, str(BENCH_DIR))
    import gen_data  # only now: the cases are done, this process's RSS no longer matters

    doc = {
        "created_unix": time.time(),
        "config": {"rows": a.rows, "rows_one": a.rows_one if "one" in datasets else None,
                   "datasets": datasets, "seed": gen_data.SEED if a.seed is None else a.seed, "threads": a.threads,
                   "memory_limit": a.memory_limit, "memory_limit_one": a.memory_limit_one,
                   "repeat": a.repeat, "cases": cases},
        "environment": {**environment(), "loadavg_1min_before": load_before,
                        "cpu_busy_share_before": busy_before,
                        "loadavg_1min_after": _loadavg()},
        "results": all_rows,
        "checks": checks,
        "targets": target_rows,
        "notes": notes,
    }
    a.json.parent.mkdir(parents=True, exist_ok=True)
    a.json.write_text(json.dumps(doc, indent=2))
    print(f"\nresults written to {a.json}")
    return 1 if warnings else 0


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description="Benchmark exact Gini in uneven against baselines.")
    p.add_argument("--rows", type=int, default=20_000_000, help="rows of g1000.parquet")
    p.add_argument("--rows-one", type=int, default=100_000_000, help="rows of one.parquet")
    p.add_argument("--skip-one", action="store_true", help="skip the one-group cases")
    p.add_argument("--datasets", default=",".join(DATASETS),
                   help=f"comma list of data sets (default all: {','.join(DATASETS)})")
    p.add_argument("--cases", default=None,
                   help=f"comma list of cases (default all: {','.join(ALL_CASES)})")
    p.add_argument("--memory-limit", default="4GB", help="DuckDB memory_limit on g1000")
    p.add_argument("--memory-limit-one", default="1GB", help="DuckDB memory_limit on one")
    p.add_argument("--threads", type=int, default=2, help="DuckDB threads")
    p.add_argument("--repeat", type=int, default=1,
                   help="runs per case (median time, max peak RSS)")
    p.add_argument("--timeout", type=float, default=3600.0, help="seconds per case (0: none)")
    p.add_argument("--seed", type=int, default=None,
                   help="data seed (default: the one in gen_data.py)")
    p.add_argument("--json", type=Path, default=RESULTS_DIR / "latest.json")
    # internal: run one case in this (child) process
    p.add_argument("--child", choices=sorted(CHILD_CASES), help=argparse.SUPPRESS)
    p.add_argument("--file", help=argparse.SUPPRESS)
    p.add_argument("--temp-dir", help=argparse.SUPPRESS)
    p.add_argument("--out", help=argparse.SUPPRESS)
    a = p.parse_args(argv)
    if a.repeat < 1:
        p.error("--repeat must be >= 1")
    if a.child:
        return child_main(a)
    return parent_main(a)


if __name__ == "__main__":
    sys.exit(main())
