"""Peak memory of the installed DuckDB functions on one large group (not run in CI).

    python bench/installed_memory.py                              # 2M rows in one group, memory_limit 300MB
    python bench/installed_memory.py --rows 500000 --cases gini_w,collect_struct
    python bench/installed_memory.py --rows 1000000 --entities 10000,100000,1000000 --cases hhi_e,cr_e --no-guard

Each case runs in a fresh child process, one at a time: the child creates a table of N rows in one
group (lognormal-like values exp(2u), weights 1..3), sets ``memory_limit``, installs the macros and
reads its resident set (VmRSS) before the query and its peak (VmHWM) after it. Bytes per row is
(peak − RSS before the query) / N. ``--no-guard`` sets the installed functions' row budget off
(``SET VARIABLE uneven_list_rows = 0``), which measures the list forms themselves.

Cases: ``scan`` (count and sum), ``collect`` (``len(list(x ORDER BY x))``), ``collect_struct``
(the same over ``{x, w}`` structs, what the ordered macros collect), ``gini_u`` / ``gini_w`` (the
aggregate macros), ``cv_w``, ``ge_w``, ``atkinson_w`` (the centred list form), ``theil_w``, ``palma_w``,
``wolfson_w``, ``hhi_e`` / ``cr_e`` (entity totals; ``--entities`` sets how many entities the group
holds, a list runs each case once per count, default 100,000),
``gini_by`` (the table form: the window plan).
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

QUERIES = {
    "scan": "SELECT count(*), sum(x), sum(w) FROM t",
    "collect": "SELECT len(list(x ORDER BY x)) FROM t",
    "collect_struct": "SELECT len(list({'x': x, 'w': w} ORDER BY x)) FROM t",
    "gini_u": "SELECT gini(x) FROM t",
    "gini_w": "SELECT gini(x, w) FROM t",
    "cv_w": "SELECT cv(x, w) FROM t",
    "theil_w": "SELECT theil(x, w) FROM t",
    "ge_w": "SELECT ge(x, 0.3, w) FROM t",
    "atkinson_w": "SELECT atkinson(x, 0.7, w) FROM t",
    "palma_w": "SELECT palma(x, w) FROM t",
    "wolfson_w": "SELECT wolfson(x, w) FROM t",
    "hhi_e": "SELECT hhi(x, e) FROM t",
    "cr_e": "SELECT cr(x, 4, e) FROM t",
    "gini_by": "SELECT * FROM gini_by('t', 'x', 'w', ['grp'])",
}

CHILD = textwrap.dedent("""
    import json, sys, time
    sys.path.insert(0, {src!r})
    import duckdb, uneven
    n, limit, threads, query, guard, entities = {n!r}, {limit!r}, {threads!r}, {query!r}, {guard!r}, {entities!r}
    def status(key):
        line = [l for l in open("/proc/self/status") if l.startswith(key)][0]
        return int(line.split()[1]) * 1024
    con = duckdb.connect()
    con.execute("SET threads = " + str(threads))
    con.execute("SET enable_progress_bar = false")
    con.execute("CREATE TABLE t AS SELECT 0 AS grp, exp(random() * 2) AS x, CAST(1 + (i % 3) AS DOUBLE) AS w, "
                "i % " + str(entities) + " AS e FROM range(" + str(n) + ") r(i)")
    con.execute("SET memory_limit = '" + limit + "'")
    uneven.install(con)
    if not guard:
        con.execute("SET VARIABLE uneven_list_rows = 0")
    before = status("VmRSS")
    open("/proc/self/clear_refs", "w").write("5")  # the peak from here on (Linux: resets VmHWM)
    t = time.perf_counter()
    ok, error, value = True, None, None
    try:
        value = con.execute(query).fetchall()[0][-1]
    except Exception as e:
        ok, error = False, str(e).splitlines()[0][:240]
    seconds = time.perf_counter() - t
    peak = status("VmHWM")
    print(json.dumps(dict(ok=ok, error=error, value=value, seconds=round(seconds, 2),
                          rss_before_mb=round(before / 2**20), peak_mb=round(peak / 2**20),
                          bytes_per_row=round((peak - before) / n))))
""")


def run(case: str, n: int, limit: str, threads: int, guard: bool, timeout: float, entities: int = 100_000) -> dict:
    code = CHILD.format(src=SRC, n=n, limit=limit, threads=threads, query=QUERIES[case], guard=guard,
                        entities=entities)
    head = dict(case=case, rows=n, memory_limit=limit, guard=guard)
    if case.endswith("_e"):
        head["entities"] = entities
    try:
        out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return head | dict(ok=False, error=f"timeout after {timeout:.0f} s")
    if out.returncode != 0:
        return head | dict(ok=False, error=(out.stderr.strip().splitlines() or ["crashed"])[-1][:240])
    return head | json.loads(out.stdout.strip().splitlines()[-1])


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--rows", type=int, default=2_000_000)
    ap.add_argument("--memory-limit", default="300MB")
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--cases", default=",".join(QUERIES))
    ap.add_argument("--no-guard", action="store_true", help="turn the installed functions' row budget off")
    ap.add_argument("--timeout", type=float, default=600)
    ap.add_argument("--entities", default="100000", help="entities in the group for hhi_e/cr_e (a comma list)")
    args = ap.parse_args(argv)
    results = []
    for case in args.cases.split(","):
        counts = [int(e) for e in args.entities.split(",")] if case.endswith("_e") else [100_000]
        for entities in counts:
            r = run(case, args.rows, args.memory_limit, args.threads, not args.no_guard, args.timeout, entities)
            print(json.dumps(r), flush=True)
            results.append(r)
    out = HERE / "results" / "installed_memory.json"
    out.parent.mkdir(exist_ok=True)
    out.write_text(json.dumps(results, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
